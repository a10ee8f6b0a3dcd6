//! Decision policy: probability cutoffs, score scaling and rule checks -> outcome.

use crate::artifact::spec::{RuleAction, RuleTest};
use crate::features::{FieldIndex, FieldValue};
use crate::reasons::ReasonIndex;
use serde::Serialize;

/// Outcome of one application, ordered by severity (approve < refer < decline).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum Outcome {
    Approve,
    Refer,
    Decline,
}

impl Outcome {
    pub fn name(self) -> &'static str {
        match self {
            Outcome::Approve => "approve",
            Outcome::Refer => "refer",
            Outcome::Decline => "decline",
        }
    }

    /// The outcome a recorded or queried name stands for.
    pub fn from_name(name: &str) -> Option<Outcome> {
        match name {
            "approve" => Some(Outcome::Approve),
            "refer" => Some(Outcome::Refer),
            "decline" => Some(Outcome::Decline),
            _ => None,
        }
    }
}

impl From<RuleAction> for Outcome {
    fn from(a: RuleAction) -> Self {
        match a {
            RuleAction::Refer => Outcome::Refer,
            RuleAction::Decline => Outcome::Decline,
        }
    }
}

/// score = offset + factor * ln(good:bad odds), factor = PDO / ln 2,
/// offset = points - factor * ln(odds): `points` at `odds`, doubling the odds adds `pdo`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Scaling {
    pub points: f64,
    pub odds: f64,
    pub pdo: f64,
    pub factor: f64,
    pub offset: f64,
    pub min_score: Option<f64>,
    pub max_score: Option<f64>,
}

impl Scaling {
    pub fn new(
        points: f64,
        odds: f64,
        pdo: f64,
        min_score: Option<f64>,
        max_score: Option<f64>,
    ) -> Self {
        let factor = pdo / std::f64::consts::LN_2;
        Scaling {
            points,
            odds,
            pdo,
            factor,
            offset: points - factor * odds.ln(),
            min_score,
            max_score,
        }
    }

    /// Unrounded score for log-odds of *default* (good:bad log-odds is its negative), clamped
    /// to the stated range.
    pub fn exact_score(&self, log_odds_default: f64) -> f64 {
        let s = self.offset - self.factor * log_odds_default;
        let s = self.min_score.map_or(s, |m| s.max(m));
        self.max_score.map_or(s, |m| s.min(m))
    }

    /// The reported score: [`Self::exact_score`] rounded half away from zero to a whole point.
    pub fn score(&self, log_odds_default: f64) -> i64 {
        self.exact_score(log_odds_default).round() as i64
    }
}

/// A compiled rule check.
#[derive(Debug, Clone, PartialEq)]
pub struct Rule {
    /// Its code in the reason table.
    pub reason: ReasonIndex,
    /// The field it reads.
    pub field: FieldIndex,
    pub test: RuleTest,
    /// The compared value, checked against the field's type at load.
    pub value: FieldValue,
    /// The compared value as the artifact wrote it (for display).
    pub given: Option<serde_json::Value>,
    pub action: RuleAction,
}

impl Rule {
    /// Whether the rule fires on a field value as given (missing values fire only `missing`).
    pub fn fires(&self, v: FieldValue) -> bool {
        use FieldValue as V;
        match (self.test, v, self.value) {
            (RuleTest::Missing, V::Missing, _) => true,
            (_, V::Missing, _) | (RuleTest::Missing, _, _) => false,
            (t, V::Number(x), V::Number(y)) => match t {
                RuleTest::Greater => x > y,
                RuleTest::GreaterOrEqual => x >= y,
                RuleTest::Less => x < y,
                RuleTest::LessOrEqual => x <= y,
                RuleTest::Equal => x == y,
                RuleTest::NotEqual => x != y,
                RuleTest::Missing => false,
            },
            (RuleTest::Equal, a, b) => a == b,
            (RuleTest::NotEqual, a, b) => a != b,
            _ => false,
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Policy {
    pub approve_below: f64,
    pub decline_at_or_above: f64,
    pub scaling: Scaling,
    pub max_reasons: usize,
    pub inquiry_extra: bool,
    pub rules: Vec<Rule>,
}

/// A rule's place in the policy (artifact order). Its own type, like a field's and a reason's.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct RuleIndex(usize);

impl std::ops::Index<RuleIndex> for Policy {
    type Output = Rule;
    fn index(&self, r: RuleIndex) -> &Rule {
        &self.rules[r.0]
    }
}

impl Policy {
    /// The model's own outcome from the probability of default.
    pub fn model_outcome(&self, p: f64) -> Outcome {
        if p < self.approve_below {
            Outcome::Approve
        } else if p >= self.decline_at_or_above {
            Outcome::Decline
        } else {
            Outcome::Refer
        }
    }

    /// The rules that fire on these field values (one per schema field), in rule order.
    pub fn fired(&self, values: &[FieldValue]) -> Vec<RuleIndex> {
        (self.rules.iter().enumerate())
            .filter(|(_, rule)| rule.fires(values[rule.field]))
            .map(|(i, _)| RuleIndex(i))
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Siddiqi, Credit Risk Scorecards (Wiley, 2006), ch. 6 scaling example: 600 points at 50:1
    // good:bad odds, PDO 20 -> factor 28.8539, offset 487.123 (figures as recalled from the
    // book; recomputed exactly here).
    #[test]
    fn scaling_matches_published_example() {
        let s = Scaling::new(600.0, 50.0, 20.0, None, None);
        assert!((s.factor - 28.8539).abs() < 5e-5, "factor {}", s.factor);
        assert!((s.offset - 487.123).abs() < 5e-4, "offset {}", s.offset);
        // 50:1 good:bad is default log-odds ln(1/50).
        assert!((s.exact_score((1.0f64 / 50.0).ln()) - 600.0).abs() < 1e-9);
        // Doubling the odds to 100:1 adds exactly PDO.
        assert!((s.exact_score((1.0f64 / 100.0).ln()) - 620.0).abs() < 1e-9);
    }

    #[test]
    fn scores_clamp_and_round() {
        let s = Scaling::new(600.0, 50.0, 20.0, Some(200.0), Some(900.0));
        assert_eq!(s.score(50.0), 200);
        assert_eq!(s.score(-50.0), 900);
        assert_eq!(s.score((1.0f64 / 50.0).ln()), 600);
    }

    fn policy() -> Policy {
        Policy {
            approve_below: 0.1,
            decline_at_or_above: 0.3,
            scaling: Scaling::new(600.0, 50.0, 20.0, None, None),
            max_reasons: 4,
            inquiry_extra: false,
            rules: vec![],
        }
    }

    #[test]
    fn cutoff_boundaries() {
        let p = policy();
        assert_eq!(p.model_outcome(0.0999), Outcome::Approve);
        assert_eq!(p.model_outcome(0.1), Outcome::Refer);
        assert_eq!(p.model_outcome(0.2999), Outcome::Refer);
        assert_eq!(p.model_outcome(0.3), Outcome::Decline);
    }

    #[test]
    fn rules_fire_as_written() {
        let r = Rule {
            reason: ReasonIndex::new(0),
            field: FieldIndex::new(0),
            test: RuleTest::Greater,
            value: FieldValue::Number(40000.0),
            given: None,
            action: RuleAction::Refer,
        };
        assert!(r.fires(FieldValue::Number(40000.5)));
        assert!(!r.fires(FieldValue::Number(40000.0)));
        assert!(!r.fires(FieldValue::Missing));
        let m = Rule {
            test: RuleTest::Missing,
            value: FieldValue::Missing,
            ..r.clone()
        };
        assert!(m.fires(FieldValue::Missing));
        assert!(!m.fires(FieldValue::Number(1.0)));
        let eq = Rule {
            test: RuleTest::Equal,
            value: FieldValue::Level(2),
            ..r
        };
        assert!(eq.fires(FieldValue::Level(2)));
        assert!(!eq.fires(FieldValue::Level(1)));
    }
}
