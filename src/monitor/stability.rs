//! Population stability over recorded decisions, counted as the records stream past: memory
//! holds one count per development bin, whatever the range.
//!
//! Each record's applicant is read as given in the request (before any imputation: a missing
//! value is the missing bin, as in the development bins) and its score as recorded. The PSI and
//! its floor are those of [`crate::evaluate::stability`], so the same data gives the same index
//! at training, on the command line and here.

use crate::artifact::spec::{BinnedSpec, StabilitySpec};
use crate::evaluate::stability::{labels, psi, Shift};
use crate::records::Record;
use serde::Serialize;
use serde_json::{Map, Value};

/// The monitoring bands (common practice): where a PSI value falls.
pub fn watch_band(psi: f64) -> &'static str {
    if psi < 0.10 {
        "stable"
    } else if psi <= 0.25 {
        "watch"
    } else {
        "act"
    }
}

/// The band in words (the same cut points as [`watch_band`]).
fn reading(psi: f64) -> &'static str {
    match watch_band(psi) {
        "stable" => "stable",
        "watch" => "moderate shift: investigate",
        _ => "major shift: review the model",
    }
}

/// Counts for one binned distribution.
#[derive(Debug, Clone)]
struct Counts {
    dev: BinnedSpec,
    /// One count per bin (numeric bins or levels in their order), then the missing bin.
    counts: Vec<u64>,
}

impl Counts {
    fn new(dev: &BinnedSpec) -> Self {
        let bins = if dev.levels.is_empty() {
            dev.edges.len() + 1
        } else {
            dev.levels.len()
        };
        Counts {
            dev: dev.clone(),
            counts: vec![0; bins + 1],
        }
    }

    fn missing_bin(&self) -> usize {
        self.counts.len() - 1
    }

    fn add_number(&mut self, v: Option<f64>) {
        let bin = match v {
            // Bin i holds edges[i-1] <= v < edges[i].
            Some(x) if x.is_finite() => self.dev.edges.partition_point(|&e| e <= x),
            _ => self.missing_bin(),
        };
        self.counts[bin] += 1;
    }

    fn add_level(&mut self, v: Option<&str>) {
        let bin = (v.and_then(|l| self.dev.levels.keys().position(|k| k == l)))
            .unwrap_or(self.missing_bin());
        self.counts[bin] += 1;
    }

    fn shift(&self, name: &str) -> FieldStability {
        let n = self.counts.iter().sum::<u64>().max(1) as f64;
        let now: Vec<f64> = self.counts.iter().map(|&c| c as f64 / n).collect();
        let mut expected: Vec<f64> = if self.dev.levels.is_empty() {
            self.dev.shares.clone()
        } else {
            self.dev.levels.values().copied().collect()
        };
        expected.push(self.dev.missing);
        let index = psi(&expected, &now);
        let labels = labels(&self.dev);
        FieldStability {
            name: name.to_string(),
            psi: index,
            band: watch_band(index),
            reading: reading(index),
            missing_development: self.dev.missing,
            missing_now: now[self.missing_bin()],
            bins: (labels.into_iter().zip(expected.iter().zip(&now)))
                .zip(&self.counts)
                .map(|((label, (&e, &a)), &count)| Bin {
                    label,
                    development: e,
                    now: a,
                    count,
                })
                .collect(),
        }
    }
}

/// One bin: development and current shares, and the current count.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Bin {
    pub label: String,
    pub development: f64,
    pub now: f64,
    pub count: u64,
}

/// The stability of one field (or of the score).
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct FieldStability {
    /// The field's name, or `score`.
    pub name: String,
    pub psi: f64,
    /// `stable` (below 0.10), `watch` (0.10 to 0.25) or `act` (above 0.25): common practice.
    pub band: &'static str,
    /// The same in words.
    pub reading: &'static str,
    /// Share missing in the development sample, and now: the missing-share shift.
    pub missing_development: f64,
    pub missing_now: f64,
    pub bins: Vec<Bin>,
}

/// The stability report over a range of decisions.
#[derive(Debug, Clone, PartialEq, Serialize, utoipa::ToSchema)]
pub struct Stability {
    pub model_id: String,
    pub model_version: String,
    /// The development sample the bins describe, and its size.
    pub development: String,
    pub development_rows: u64,
    /// Decisions counted (those of this model id and version in the range).
    pub decisions: u64,
    /// Records whose request could not be read (counted, never silently dropped).
    pub unreadable: u64,
    pub from: Option<String>,
    pub to: Option<String>,
    /// The score first, then each field in name order.
    pub distributions: Vec<FieldStability>,
    pub caution: &'static str,
}

/// What every stability report says of itself.
pub const CAUTION: &str = "Population stability compares who applies now with the development sample; it does not say whether the model still ranks or predicts well (back-testing on observed outcomes does). The bands are common practice, not a standard. Review shifts with model-risk management.";

/// Counts records against the development bins as they stream past.
pub struct StabilityTally {
    spec_label: String,
    spec_rows: u64,
    score: Counts,
    fields: Vec<(String, Counts)>,
    decisions: u64,
    unreadable: u64,
}

impl StabilityTally {
    pub fn new(dev: &StabilitySpec) -> Self {
        StabilityTally {
            spec_label: dev.label.clone(),
            spec_rows: dev.rows,
            score: Counts::new(&dev.score),
            fields: (dev.fields.iter())
                .map(|(name, b)| (name.clone(), Counts::new(b)))
                .collect(),
            decisions: 0,
            unreadable: 0,
        }
    }

    /// One applicant as given, and its score.
    pub fn add(&mut self, applicant: &Map<String, Value>, score: f64) {
        self.decisions += 1;
        self.score.add_number(Some(score));
        for (name, counts) in &mut self.fields {
            let value = applicant.get(name.as_str());
            if counts.dev.levels.is_empty() {
                let x = match value {
                    Some(Value::Number(n)) => n.as_f64(),
                    Some(Value::Bool(b)) => Some(f64::from(u8::from(*b))),
                    _ => None,
                };
                counts.add_number(x);
            } else {
                counts.add_level(value.and_then(Value::as_str));
            }
        }
    }

    /// One recorded decision: its request's applicant and its recorded score.
    pub fn add_record(&mut self, record: &Record) {
        #[derive(serde::Deserialize)]
        struct Request {
            applicant: Map<String, Value>,
        }
        match serde_json::from_str::<Request>(&record.request) {
            Ok(r) => self.add(&r.applicant, record.score as f64),
            Err(_) => self.unreadable += 1,
        }
    }

    pub fn finish(self, model: (&str, &str), range: (Option<String>, Option<String>)) -> Stability {
        let mut distributions = vec![self.score.shift("score")];
        distributions.extend(self.fields.iter().map(|(name, c)| c.shift(name)));
        Stability {
            model_id: model.0.to_string(),
            model_version: model.1.to_string(),
            development: self.spec_label,
            development_rows: self.spec_rows,
            decisions: self.decisions,
            unreadable: self.unreadable,
            from: range.0,
            to: range.1,
            distributions,
            caution: CAUTION,
        }
    }
}

/// Shifts as the training-time comparison computes them, for checking that both agree.
pub fn as_shifts(s: &Stability) -> Vec<Shift> {
    (s.distributions.iter())
        .map(|d| Shift {
            name: d.name.clone(),
            psi: d.psi,
            reading: d.reading,
            bins: (d.bins.iter())
                .map(|b| (b.label.clone(), b.development, b.now))
                .collect(),
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeMap;

    fn dev() -> StabilitySpec {
        let mut fields = BTreeMap::new();
        fields.insert(
            "income".to_string(),
            BinnedSpec {
                edges: vec![10.0, 20.0],
                shares: vec![0.25, 0.5, 0.25],
                missing: 0.0,
                ..BinnedSpec::default()
            },
        );
        fields.insert(
            "housing".to_string(),
            BinnedSpec {
                levels: [("own".to_string(), 0.5), ("rent".to_string(), 0.5)].into(),
                missing: 0.0,
                ..BinnedSpec::default()
            },
        );
        StabilitySpec {
            label: "hand-made".into(),
            rows: 4,
            fields,
            score: BinnedSpec {
                edges: vec![600.0],
                shares: vec![0.5, 0.5],
                missing: 0.0,
                ..BinnedSpec::default()
            },
        }
    }

    // Worked by hand: income bins [<10, [10,20), >=20, missing] development 0.25/0.5/0.25/0,
    // now 0.5/0.25/0/0.25 (values 5, 5, 15 and one absent). With the 1e-4 floor on empty bins:
    // (0.5-0.25) ln 2 + (0.25-0.5) ln 0.5 + (0.0001-0.25) ln(0.0004) + (0.25-0.0001) ln 2500.
    #[test]
    fn a_hand_worked_tally() {
        let mut t = StabilityTally::new(&dev());
        let rows = [
            (serde_json::json!({"income": 5, "housing": "own"}), 590.0),
            (serde_json::json!({"income": 5, "housing": "own"}), 650.0),
            (serde_json::json!({"income": 15, "housing": "own"}), 600.0),
            (serde_json::json!({"housing": "other"}), 700.0),
        ];
        for (a, s) in &rows {
            t.add(a.as_object().unwrap(), *s);
        }
        let r = t.finish(("m", "1"), (None, None));
        let income = r.distributions.iter().find(|d| d.name == "income").unwrap();
        let by_hand = 0.25 * 2f64.ln() - 0.25 * 0.5f64.ln()
            + (0.0001 - 0.25) * 0.0004f64.ln()
            + (0.25 - 0.0001) * 2500f64.ln();
        assert!(
            (income.psi - by_hand).abs() < 1e-12,
            "{} vs {by_hand}",
            income.psi
        );
        assert_eq!(income.missing_now, 0.25);
        assert_eq!(income.band, "act");
        let counts: Vec<u64> = income.bins.iter().map(|b| b.count).collect();
        assert_eq!(counts, [2, 1, 0, 1]);
        // An unknown level counts as missing; the score 600 falls in the upper bin.
        let housing = r
            .distributions
            .iter()
            .find(|d| d.name == "housing")
            .unwrap();
        assert_eq!(housing.missing_now, 0.25);
        let score = &r.distributions[0];
        assert_eq!(score.name, "score");
        let counts: Vec<u64> = score.bins.iter().map(|b| b.count).collect();
        assert_eq!(counts, [1, 3, 0]);
        // (0.25 - 0.5) ln(0.5) + (0.75 - 0.5) ln(1.5); the empty missing bin adds 0.
        let by_hand = -0.25 * 0.5f64.ln() + 0.25 * 1.5f64.ln();
        assert!((score.psi - by_hand).abs() < 1e-12, "{}", score.psi);
        assert_eq!(watch_band(0.10), "watch");
        assert_eq!(watch_band(0.25), "watch");
        assert_eq!(watch_band(0.2501), "act");
    }
}
