//! Back-testing: do the recorded probabilities of default come true? Over the decisions of one
//! model version in a range that have an observed outcome: discrimination (AUC, Gini, KS),
//! the Brier score, calibration by score band and by probability decile, the default rate by
//! decision outcome (a referral by its final action), and the same by months from decision to
//! observation.
//!
//! Counts by band stream past; the area and deciles need every (probability, outcome) pair, so
//! memory holds 9 bytes per decision with an outcome (9 MB per million), nothing per decision
//! without one, and about 50 bytes each while they are sorted at the end. AUC, KS and the curve are [`crate::evaluate`]'s, so the same pairs give the
//! same figures as `plumbline evaluate`.

use super::calibration::{BandCheck, BandCounts, MIN_DEFAULTS};
use crate::evaluate::curves::{roc, thinned, CurvePoint};
use crate::records::{DecisionWithOutcome, Outcome};
use serde::Serialize;
use std::collections::BTreeMap;

const CAUTION: &str = "Back-testing compares what the model predicted with what was later observed, for the decisions that have an observed outcome. Declined applicants are mostly unobserved, so the figures describe the approved book, not all applicants. Model output is decision support: these figures inform, and do not replace, the lender's model-risk review; comply with ECOA/Regulation B, FCRA and local law, and defer to compliance counsel.";

/// Widths of the months-from-decision groups of the vintage view.
const VINTAGE_MONTHS: u32 = 6;
/// Vintage groups: 0-5, 6-11, 12-17, 18-23 months, then 24 and more.
const VINTAGE_GROUPS: u32 = 5;

/// How well the probabilities rank defaulters above non-defaulters.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Discrimination {
    pub auc: f64,
    pub gini: f64,
    pub ks: f64,
    /// The probability at which the KS gap is largest.
    pub ks_threshold: f64,
}

/// The default rate among one decision outcome's observed decisions.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct OutcomeRate {
    /// `approve`, `refer, approved`, `refer, declined`, `refer, withdrawn`, `refer, pending`
    /// or `decline`.
    pub outcome: String,
    pub decisions: u64,
    pub with_outcome: u64,
    pub defaults: u64,
    /// Mean recorded probability among those with an outcome.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub expected_rate: Option<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub observed_rate: Option<f64>,
}

/// The rules the report applies, stated with it.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Rules {
    /// A band is rated only with at least this many defaults observed or expected; AUC, Gini
    /// and KS only with this many defaulters and as many non-defaulters (common practice).
    pub min_defaults: f64,
    /// Level of the one-sided binomial test; the Jeffreys interval covers 1 - alpha.
    pub alpha: f64,
    pub score_bands: String,
    pub deciles: String,
    pub matching: String,
}

#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct BackTest {
    pub model_id: String,
    pub model_version: String,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub from: Option<String>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub to: Option<String>,
    pub caution: &'static str,
    /// Decisions in the range (each its application's latest under the model).
    pub decisions: u64,
    /// Of those, with an observed outcome the figures rest on.
    pub with_outcome: u64,
    /// Outcomes observed before their decision: left out (a loading mistake to look into).
    pub observed_before_decision: u64,
    pub defaults: u64,
    /// Absent when there are fewer than `rules.min_defaults` defaulters or non-defaulters.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub discrimination: Option<Discrimination>,
    /// Mean squared difference between probability and outcome (0 or 1).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub brier: Option<f64>,
    pub by_score_band: Vec<BandCheck>,
    pub by_decile: Vec<BandCheck>,
    pub by_months_since_decision: Vec<BandCheck>,
    pub by_outcome: Vec<OutcomeRate>,
    pub rules: Rules,
}

#[derive(Debug, Clone, Copy, Default)]
struct OutcomeCounts {
    decisions: u64,
    observed: BandCounts,
}

/// The back-test counted as decisions stream past.
pub struct BackTestTally {
    /// The score scale's anchor and points to double the odds: the bands' origin and width.
    points: f64,
    pdo: f64,
    decisions: u64,
    observed_before_decision: u64,
    probabilities: Vec<f64>,
    defaulted: Vec<bool>,
    sum_squared: f64,
    bands: BTreeMap<i64, BandCounts>,
    vintages: [BandCounts; VINTAGE_GROUPS as usize],
    outcomes: BTreeMap<u8, (String, OutcomeCounts)>,
}

/// Whole months from `from` to `to`, both in the stored form (`YYYY-MM-DDT...`).
fn months_between(from: &str, to: &str) -> Option<u32> {
    let part = |s: &str, r: std::ops::Range<usize>| s.get(r)?.parse::<i64>().ok();
    let (y1, m1, d1) = (part(from, 0..4)?, part(from, 5..7)?, from.get(8..)?);
    let (y2, m2, d2) = (part(to, 0..4)?, part(to, 5..7)?, to.get(8..)?);
    let months = (y2 - y1) * 12 + (m2 - m1) - i64::from(d2 < d1);
    u32::try_from(months).ok()
}

/// The row of `by_outcome` a decision counts in, in display order.
fn outcome_row(d: &DecisionWithOutcome) -> (u8, &'static str) {
    match (d.outcome, d.final_action.as_deref()) {
        (Outcome::Approve, _) => (0, "approve"),
        (Outcome::Refer, Some("approve")) => (1, "refer, approved"),
        (Outcome::Refer, Some("decline")) => (2, "refer, declined"),
        (Outcome::Refer, Some(_)) => (3, "refer, withdrawn"),
        (Outcome::Refer, None) => (4, "refer, pending"),
        (Outcome::Decline, _) => (5, "decline"),
    }
}

impl BackTestTally {
    /// Score bands are one PDO wide from the scale's anchor, so each band doubles the odds.
    pub fn new(points: f64, pdo: f64) -> Self {
        BackTestTally {
            points,
            pdo,
            decisions: 0,
            observed_before_decision: 0,
            probabilities: Vec::new(),
            defaulted: Vec::new(),
            sum_squared: 0.0,
            bands: BTreeMap::new(),
            vintages: Default::default(),
            outcomes: BTreeMap::new(),
        }
    }

    fn band_of(&self, score: i64) -> i64 {
        ((score as f64 - self.points) / self.pdo).floor() as i64
    }

    pub fn add(&mut self, d: &DecisionWithOutcome) {
        self.decisions += 1;
        let (order, name) = outcome_row(d);
        let row = &mut (self.outcomes.entry(order))
            .or_insert_with(|| (name.to_string(), OutcomeCounts::default()))
            .1;
        row.decisions += 1;
        let Some((defaulted, observed_at)) = &d.observed else {
            return;
        };
        let Some(months) = months_between(&d.decided_at, observed_at) else {
            self.observed_before_decision += 1;
            return;
        };
        let p = d.probability;
        row.observed.add(p, *defaulted);
        self.probabilities.push(p);
        self.defaulted.push(*defaulted);
        self.sum_squared += (p - f64::from(u8::from(*defaulted))).powi(2);
        let band = self.band_of(d.score);
        self.bands.entry(band).or_default().add(p, *defaulted);
        let group = (months / VINTAGE_MONTHS).min(VINTAGE_GROUPS - 1);
        self.vintages[group as usize].add(p, *defaulted);
    }

    /// The report, and the ROC curve (thinned for drawing) when both classes are present.
    pub fn finish(
        self,
        (model_id, model_version): (&str, &str),
        (from, to): (Option<String>, Option<String>),
    ) -> (BackTest, Vec<CurvePoint>) {
        let n = self.probabilities.len() as u64;
        let defaults = self.defaulted.iter().filter(|&&d| d).count() as u64;
        let min = MIN_DEFAULTS as u64;
        let curve = roc(&self.probabilities, &self.defaulted).unwrap_or_default();
        let discrimination = (defaults >= min && n - defaults >= min)
            .then(|| {
                let auc = crate::evaluate::auc(&self.probabilities, &self.defaulted)?;
                let ks = crate::evaluate::ks(&self.probabilities, &self.defaulted)?;
                let gap = crate::evaluate::curves::largest_gap(&curve)?;
                Some(Discrimination {
                    auc,
                    gini: crate::evaluate::gini(auc),
                    ks,
                    ks_threshold: gap.threshold,
                })
            })
            .flatten();
        let (pdo, points) = (self.pdo, self.points);
        let by_score_band = (self.bands.iter())
            .map(|(&k, c)| {
                let lo = points + k as f64 * pdo;
                c.check(format!("{} to {}", lo, lo + pdo))
            })
            .collect();
        let by_months_since_decision = (self.vintages.iter().enumerate())
            .filter(|(_, c)| c.decisions > 0)
            .map(|(g, c)| {
                let lo = g as u32 * VINTAGE_MONTHS;
                let label = if g as u32 == VINTAGE_GROUPS - 1 {
                    format!("{lo} months and more")
                } else {
                    format!("{lo} to {} months", lo + VINTAGE_MONTHS - 1)
                };
                c.check(label)
            })
            .collect();
        let by_outcome = (self.outcomes.into_values())
            .map(|(name, c)| {
                let o = c.observed;
                let seen = o.decisions > 0;
                OutcomeRate {
                    outcome: name,
                    decisions: c.decisions,
                    with_outcome: o.decisions,
                    defaults: o.defaults,
                    expected_rate: seen.then(|| o.sum_predicted / o.decisions as f64),
                    observed_rate: seen.then(|| o.defaults as f64 / o.decisions as f64),
                }
            })
            .collect();
        let report = BackTest {
            model_id: model_id.into(),
            model_version: model_version.into(),
            from,
            to,
            caution: CAUTION,
            decisions: self.decisions,
            with_outcome: n,
            observed_before_decision: self.observed_before_decision,
            defaults,
            discrimination,
            brier: (n > 0).then(|| self.sum_squared / n as f64),
            by_score_band,
            by_decile: deciles(&self.probabilities, &self.defaulted),
            by_months_since_decision,
            by_outcome,
            rules: Rules {
                min_defaults: MIN_DEFAULTS,
                alpha: super::calibration::ALPHA,
                score_bands: format!("one PDO ({pdo} points) wide from the scale's anchor at {points}: each band doubles the odds"),
                deciles: "ten groups of (nearly) equal size by recorded probability, lowest first; ties split by recording order".into(),
                matching: "an outcome belongs to its application's latest decision under the model; earlier decisions of the application are not counted".into(),
            },
        };
        // The drawn curve keeps the point of the largest gap, so the page marks KS where it is.
        let mut drawn = thinned(&curve, 400);
        if let Some(g) = crate::evaluate::curves::largest_gap(&curve) {
            if !drawn.contains(&g) {
                let at = drawn.partition_point(|p| p.threshold > g.threshold);
                drawn.insert(at, g);
            }
        }
        (report, drawn)
    }
}

/// Ten groups by rank of probability (fewer than ten observed decisions: none).
fn deciles(p: &[f64], defaulted: &[bool]) -> Vec<BandCheck> {
    let n = p.len();
    if n < 10 {
        return Vec::new();
    }
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]).then(a.cmp(&b)));
    let mut groups = [BandCounts::default(); 10];
    for (rank, &i) in order.iter().enumerate() {
        groups[rank * 10 / n].add(p[i], defaulted[i]);
    }
    (groups.iter().enumerate())
        .map(|(k, c)| c.check(format!("decile {}", k + 1)))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn months_count_whole_months_only() {
        let t = |d: &str| format!("{d}T00:00:00.000000Z");
        assert_eq!(months_between(&t("2026-01-31"), &t("2026-02-28")), Some(0));
        assert_eq!(months_between(&t("2026-01-31"), &t("2026-03-01")), Some(1));
        assert_eq!(months_between(&t("2026-01-15"), &t("2027-01-15")), Some(12));
        assert_eq!(months_between(&t("2026-05-15"), &t("2026-05-14")), None);
    }
}
