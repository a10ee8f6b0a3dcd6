//! Reason codes: the owner-defined table, and choosing the principal reasons of one decision.
//!
//! Rules followed (Regulation B, 12 CFR 1002.9(b)(2) and its Official Interpretation; FCRA
//! 15 U.S.C. 1681g(f)): reasons are specific (vague texts are refused at load), come only from
//! factors actually considered, at most four by default (15 U.S.C. 1681g(f)(1)(C)), and an
//! adverse inquiries factor is added beyond that limit (15 U.S.C. 1681g(f)(9)). Only codes whose
//! summed contribution pushes toward default are eligible.

use serde::Serialize;

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Reason {
    pub code: String,
    pub text: String,
    pub inquiry: bool,
}

#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ReasonTable {
    pub reasons: Vec<Reason>,
}

/// A reason's place in the reason table. Its own type, so that a field's or a rule's place
/// cannot be used where a reason's is meant.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct ReasonIndex(usize);

impl ReasonIndex {
    /// The reason at place `i` (tests; the table itself hands places out).
    #[cfg(test)]
    pub(crate) fn new(i: usize) -> Self {
        ReasonIndex(i)
    }

    /// The place as a number, for messages.
    pub fn get(self) -> usize {
        self.0
    }
}

impl std::ops::Index<ReasonIndex> for ReasonTable {
    type Output = Reason;
    fn index(&self, r: ReasonIndex) -> &Reason {
        &self.reasons[r.0]
    }
}

/// One sum per reason code (its fields' contributions), read by reason place.
#[derive(Debug, Clone, PartialEq)]
pub struct ReasonSums(Vec<f64>);

impl ReasonSums {
    /// Sums in table order (one per reason).
    pub fn from_table_order(sums: Vec<f64>) -> Self {
        ReasonSums(sums)
    }
}

impl std::ops::Index<ReasonIndex> for ReasonSums {
    type Output = f64;
    fn index(&self, r: ReasonIndex) -> &f64 {
        &self.0[r.0]
    }
}

impl std::ops::IndexMut<ReasonIndex> for ReasonSums {
    fn index_mut(&mut self, r: ReasonIndex) -> &mut f64 {
        &mut self.0[r.0]
    }
}

/// Why a reason is on the list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum ReasonSource {
    /// A policy rule check that referred or declined.
    Rule,
    /// The model: its fields' summed contributions pushed toward default.
    Model,
    /// The inquiries reason added beyond the limit, as FCRA 15 U.S.C. 1681g(f)(9) requires for credit-score disclosures.
    InquiryExtra,
}

#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct PrincipalReason {
    pub rank: usize,
    pub code: String,
    pub text: String,
    pub source: ReasonSource,
    /// Summed contribution of the code's fields, in the decision's contribution space
    /// (absent for rule reasons).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub contribution: Option<f64>,
}

/// Most key factors a credit-score disclosure lists before the inquiries factor (FCRA
/// 15 U.S.C. 1681g(f)(1)(C): "the total number of which shall not exceed 4").
pub const KEY_FACTORS: usize = 4;

/// How many reasons, and whether the inquiries reason may be an extra one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ReasonLimits {
    pub max_reasons: usize,
    pub inquiry_extra: bool,
}

impl ReasonTable {
    pub fn index(&self, code: &str) -> Option<ReasonIndex> {
        self.reasons
            .iter()
            .position(|r| r.code == code)
            .map(ReasonIndex)
    }

    /// Each reason with its place.
    pub fn indexed(&self) -> impl Iterator<Item = (ReasonIndex, &Reason)> {
        (self.reasons.iter().enumerate()).map(|(i, r)| (ReasonIndex(i), r))
    }

    /// A zero sum for every reason, to add contributions into.
    pub fn zero_sums(&self) -> ReasonSums {
        ReasonSums(vec![0.0; self.reasons.len()])
    }

    /// Ranks reasons for a decision that was not approved.
    ///
    /// `by_code[i]` is the summed contribution of reason `i`'s fields; `rule_codes` are the codes
    /// of rule checks that referred or declined, in rule order. Rule reasons come first; model
    /// reasons follow by contribution, largest first, ties broken by code so output is stable.
    pub fn principal(
        &self,
        by_code: &ReasonSums,
        rule_codes: &[ReasonIndex],
        limits: ReasonLimits,
    ) -> Vec<PrincipalReason> {
        let mut chosen: Vec<(ReasonIndex, ReasonSource)> = Vec::new();
        for &r in rule_codes {
            if chosen.len() < limits.max_reasons && !chosen.iter().any(|c| c.0 == r) {
                chosen.push((r, ReasonSource::Rule));
            }
        }
        let adverse = self.adverse(by_code);
        for &r in &adverse {
            if chosen.len() >= limits.max_reasons {
                break;
            }
            if !chosen.iter().any(|c| c.0 == r) {
                chosen.push((r, ReasonSource::Model));
            }
        }
        if limits.inquiry_extra {
            let extra = adverse
                .iter()
                .find(|&&r| self[r].inquiry && !chosen.iter().any(|c| c.0 == r));
            if let Some(&r) = extra {
                chosen.push((r, ReasonSource::InquiryExtra));
            }
        }
        self.listed(chosen, by_code)
    }

    /// The key factors that adversely affected the score, for a credit-score disclosure (FCRA
    /// 15 U.S.C. 1681g(f)(1)(C)): the model's adverse factors, most important first, at most
    /// [`KEY_FACTORS`], and the inquiries factor beyond them where it was adverse but not among
    /// them (1681g(f)(9)). Policy rules are not score factors and take no place here, unlike
    /// among the principal reasons.
    pub fn score_factors(&self, by_code: &ReasonSums) -> Vec<PrincipalReason> {
        let adverse = self.adverse(by_code);
        let mut chosen: Vec<(ReasonIndex, ReasonSource)> = (adverse.iter().take(KEY_FACTORS))
            .map(|&r| (r, ReasonSource::Model))
            .collect();
        if let Some(&r) = (adverse.iter().skip(KEY_FACTORS)).find(|&&r| self[r].inquiry) {
            chosen.push((r, ReasonSource::InquiryExtra));
        }
        self.listed(chosen, by_code)
    }

    /// Codes whose summed contribution pushes toward default, largest first, ties by code.
    fn adverse(&self, by_code: &ReasonSums) -> Vec<ReasonIndex> {
        let mut adverse: Vec<ReasonIndex> = (self.indexed())
            .map(|(i, _)| i)
            .filter(|&i| by_code[i] > 0.0)
            .collect();
        adverse.sort_by(|&a, &b| {
            by_code[b]
                .total_cmp(&by_code[a])
                .then_with(|| self[a].code.cmp(&self[b].code))
        });
        adverse
    }

    fn listed(
        &self,
        chosen: Vec<(ReasonIndex, ReasonSource)>,
        by_code: &ReasonSums,
    ) -> Vec<PrincipalReason> {
        chosen
            .into_iter()
            .enumerate()
            .map(|(i, (r, source))| PrincipalReason {
                rank: i + 1,
                code: self[r].code.clone(),
                text: self[r].text.clone(),
                source,
                contribution: (source != ReasonSource::Rule).then_some(by_code[r]),
            })
            .collect()
    }
}

/// Phrases Regulation B, 12 CFR 1002.9(b)(2), names as insufficient reasons, lower-cased.
const VAGUE_PHRASES: &[&str] = &[
    "internal standard",
    "internal polic",
    "qualifying score",
    "credit scoring system",
    "did not meet our criteria",
    "insufficient score",
    "low score",
];

/// Why a reason text is too vague to give an applicant, if it is.
pub fn vague_text(text: &str) -> Option<String> {
    let lower = text.to_lowercase();
    if text.trim().chars().count() < 12 {
        return Some("is too short to state a specific reason (at least 12 characters)".into());
    }
    VAGUE_PHRASES.iter().find(|p| lower.contains(*p)).map(|p| {
        format!(
            "contains \"{p}\", which 12 CFR 1002.9(b)(2) treats as insufficient; state the specific factor"
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn table() -> ReasonTable {
        let r = |code: &str, inquiry| Reason {
            code: code.into(),
            text: format!("specific text for {code}"),
            inquiry,
        };
        ReasonTable {
            reasons: vec![
                r("A", false),
                r("B", false),
                r("C", false),
                r("D", false),
                r("E", false),
                r("INQ", true),
                r("RULE", false),
            ],
        }
    }

    const FOUR: ReasonLimits = ReasonLimits {
        max_reasons: 4,
        inquiry_extra: false,
    };

    fn codes(v: &[PrincipalReason]) -> Vec<&str> {
        v.iter().map(|r| r.code.as_str()).collect()
    }

    // Regulation B comment 9(b)(2)-1: more than four reasons are not likely helpful.
    #[test]
    fn at_most_four_adverse_only_ranked() {
        let by = ReasonSums(vec![0.5, -0.3, 0.9, 0.1, 0.2, 0.05, 0.0]);
        let got = table().principal(&by, &[], FOUR);
        assert_eq!(codes(&got), ["C", "A", "E", "D"]);
        assert!(got.iter().all(|r| r.contribution.unwrap() > 0.0));
        assert_eq!(got.iter().map(|r| r.rank).collect::<Vec<_>>(), [1, 2, 3, 4]);
    }

    // FCRA 15 U.S.C. 1681g(f)(1)(C): "the total number of which shall not exceed 4", subject to
    // (9) for inquiries; a rule reason is not a factor of the score and takes no place.
    #[test]
    fn score_factors_are_four_model_factors_then_inquiries() {
        let by = ReasonSums(vec![0.5, 0.4, 0.9, 0.3, 0.2, 0.01, 0.0]);
        let got = table().score_factors(&by);
        assert_eq!(codes(&got), ["C", "A", "B", "D", "INQ"]);
        assert_eq!(got[4].source, ReasonSource::InquiryExtra);
        // Inquiries among the four: no extra; fewer than four adverse: fewer listed.
        let by = ReasonSums(vec![0.5, -0.4, 0.0, 0.0, 0.0, 0.7, 0.0]);
        let got = table().score_factors(&by);
        assert_eq!(codes(&got), ["INQ", "A"]);
        assert!(got.iter().all(|r| r.source == ReasonSource::Model));
    }

    #[test]
    fn ties_break_by_code() {
        let by = ReasonSums(vec![0.2, 0.2, 0.2, 0.0, 0.0, 0.0, 0.0]);
        assert_eq!(codes(&table().principal(&by, &[], FOUR)), ["A", "B", "C"]);
    }

    #[test]
    fn rule_reason_comes_first_and_counts_toward_limit() {
        let by = ReasonSums(vec![0.5, 0.4, 0.9, 0.1, 0.2, 0.0, 0.0]);
        let got = table().principal(&by, &[ReasonIndex(6)], FOUR);
        assert_eq!(codes(&got), ["RULE", "C", "A", "B"]);
        assert_eq!(got[0].source, ReasonSource::Rule);
        assert_eq!(got[0].contribution, None);
    }

    // FCRA 15 U.S.C. 1681g(f)(9): an adverse inquiries factor is listed beyond the four key factors.
    #[test]
    fn inquiry_extra_only_when_adverse_and_left_out() {
        let limits = ReasonLimits {
            max_reasons: 4,
            inquiry_extra: true,
        };
        let by = ReasonSums(vec![0.5, 0.4, 0.9, 0.3, 0.2, 0.01, 0.0]);
        let got = table().principal(&by, &[], limits);
        assert_eq!(codes(&got), ["C", "A", "B", "D", "INQ"]);
        assert_eq!(got[4].source, ReasonSource::InquiryExtra);
        let by = ReasonSums(vec![0.5, 0.4, 0.9, 0.3, 0.2, -0.01, 0.0]);
        assert_eq!(table().principal(&by, &[], limits).len(), 4);
    }

    #[test]
    fn nothing_adverse_gives_nothing() {
        let by = ReasonSums(vec![-0.5, -0.4, 0.0, 0.0, 0.0, 0.0, 0.0]);
        assert!(table().principal(&by, &[], FOUR).is_empty());
    }

    // 12 CFR 1002.9(b)(2): "internal standards" or "failed to achieve a qualifying score" is not enough.
    #[test]
    fn vague_texts_are_refused() {
        assert!(vague_text("Applicant did not meet internal standards").is_some());
        assert!(vague_text("Failed to achieve a qualifying score").is_some());
        assert!(vague_text("Bad").is_some());
        assert!(vague_text("Too many delinquent payments in the last 24 months").is_none());
    }
}
