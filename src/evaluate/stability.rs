//! Population stability: development-sample bins (written into the artifact at training) and
//! the population stability index (PSI) of later data against them.
//!
//! PSI = sum over bins of (actual - expected) * ln(actual / expected), shares as fractions,
//! missing values as a bin of their own (Siddiqi, Credit Risk Scorecards, 2006, ch. 11; formula
//! as recalled from that chapter). The bands below are common practice, not a standard.

use crate::artifact::spec::{BinnedSpec, FieldKind, FieldSpec, StabilitySpec};
use serde::Serialize;
use serde_json::{Map, Value};
use std::collections::BTreeMap;

/// Numeric fields and the score are cut into at most this many bins (deciles).
pub const BINS: usize = 10;
/// Shares below this are raised to it before taking logs, so an empty bin gives a large but
/// finite index (common practice).
pub const SHARE_FLOOR: f64 = 1e-4;

/// Edges for `edges[i-1] <= v < edges[i]` bins near the deciles of `values`. Each edge is the
/// next distinct value above a decile, so tied values stay in one bin and no bin is empty.
pub fn decile_edges(values: &[f64]) -> Vec<f64> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    let mut edges: Vec<f64> = Vec::new();
    for k in 1..BINS {
        let q = v.get((k * n).div_ceil(BINS).saturating_sub(1)).copied();
        let next = q.and_then(|q| v[v.partition_point(|&x| x <= q)..].first().copied());
        if let Some(e) = next {
            if edges.last().is_none_or(|&last| e > last) {
                edges.push(e);
            }
        }
    }
    edges
}

/// Bin of `v`: the number of edges at or below it.
fn bin_of(edges: &[f64], v: f64) -> usize {
    edges.partition_point(|&e| e <= v)
}

/// Shares of `values` (None = missing) in the bins of `edges`.
pub fn binned(edges: Vec<f64>, values: &[Option<f64>]) -> BinnedSpec {
    let mut counts = vec![0u64; edges.len() + 1];
    let mut missing = 0u64;
    for v in values {
        match v {
            Some(x) => counts[bin_of(&edges, *x)] += 1,
            None => missing += 1,
        }
    }
    let n = values.len().max(1) as f64;
    BinnedSpec {
        edges,
        shares: counts.iter().map(|&c| c as f64 / n).collect(),
        levels: BTreeMap::new(),
        missing: missing as f64 / n,
    }
}

fn numeric(applicant: &Map<String, Value>, name: &str) -> Option<f64> {
    match applicant.get(name) {
        Some(Value::Number(x)) => x.as_f64(),
        Some(Value::Bool(b)) => Some(f64::from(u8::from(*b))),
        _ => None,
    }
}

/// Development bins of every field (raw values, before imputation) and of the scores.
pub fn develop(
    label: &str,
    fields: &[FieldSpec],
    applicants: &[Map<String, Value>],
    scores: &[f64],
) -> StabilitySpec {
    let fields = fields
        .iter()
        .map(|f| {
            let b = match f.kind {
                FieldKind::Category => levels_of(&f.name, &f.levels, applicants),
                _ => {
                    let values: Vec<Option<f64>> =
                        applicants.iter().map(|a| numeric(a, &f.name)).collect();
                    let present: Vec<f64> = values.iter().flatten().copied().collect();
                    binned(decile_edges(&present), &values)
                }
            };
            (f.name.clone(), b)
        })
        .collect();
    let score_values: Vec<Option<f64>> = scores.iter().map(|&s| Some(s)).collect();
    StabilitySpec {
        label: label.to_string(),
        rows: applicants.len() as u64,
        fields,
        score: binned(decile_edges(scores), &score_values),
    }
}

/// Level shares of field `name` over `levels`; any other value counts as missing.
fn levels_of<'a>(
    name: &str,
    levels: impl IntoIterator<Item = &'a String>,
    applicants: &[Map<String, Value>],
) -> BinnedSpec {
    let mut counts: BTreeMap<String, u64> = levels.into_iter().map(|l| (l.clone(), 0)).collect();
    let mut missing = 0u64;
    for a in applicants {
        match (a.get(name).and_then(Value::as_str)).and_then(|l| counts.get_mut(l)) {
            Some(c) => *c += 1,
            None => missing += 1,
        }
    }
    let n = applicants.len().max(1) as f64;
    BinnedSpec {
        levels: counts.into_iter().map(|(l, c)| (l, c as f64 / n)).collect(),
        missing: missing as f64 / n,
        ..BinnedSpec::default()
    }
}

/// PSI between two share vectors of the same bins.
pub fn psi(expected: &[f64], actual: &[f64]) -> f64 {
    expected
        .iter()
        .zip(actual)
        .map(|(&e, &a)| {
            let (e, a) = (e.max(SHARE_FLOOR), a.max(SHARE_FLOOR));
            (a - e) * (a / e).ln()
        })
        .sum()
}

/// Reading of a PSI value (common practice bands).
pub fn band(psi: f64) -> &'static str {
    if psi < 0.10 {
        "stable"
    } else if psi < 0.25 {
        "moderate shift: investigate"
    } else {
        "major shift: review the model"
    }
}

/// One compared distribution.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Shift {
    /// Field name, or `score`.
    pub name: String,
    pub psi: f64,
    pub reading: &'static str,
    /// (bin label, development share, current share), the missing bin last.
    pub bins: Vec<(String, f64, f64)>,
}

fn shares_with_missing(b: &BinnedSpec) -> Vec<f64> {
    let mut v = if b.levels.is_empty() {
        b.shares.clone()
    } else {
        b.levels.values().copied().collect()
    };
    v.push(b.missing);
    v
}

/// Each bin's label (`< 10`, `[10, 20)`, `>= 20`, or the level), the missing bin last.
pub fn labels(b: &BinnedSpec) -> Vec<String> {
    let mut v: Vec<String> = if b.levels.is_empty() {
        (0..=b.edges.len())
            .map(
                |i| match (i.checked_sub(1).map(|j| b.edges[j]), b.edges.get(i)) {
                    (None, Some(hi)) => format!("< {hi}"),
                    (Some(lo), Some(hi)) => format!("[{lo}, {hi})"),
                    (Some(lo), None) => format!(">= {lo}"),
                    (None, None) => "all".to_string(),
                },
            )
            .collect()
    } else {
        b.levels.keys().cloned().collect()
    };
    v.push("missing".to_string());
    v
}

fn compare(name: &str, dev: &BinnedSpec, now: &BinnedSpec) -> Shift {
    let (e, a) = (shares_with_missing(dev), shares_with_missing(now));
    Shift {
        name: name.to_string(),
        psi: psi(&e, &a),
        reading: band(psi(&e, &a)),
        bins: labels(dev)
            .into_iter()
            .zip(e.into_iter().zip(a))
            .map(|(l, (e, a))| (l, e, a))
            .collect(),
    }
}

/// Every binned field and the score of `applicants` against the development bins (a field
/// binned by levels is a category; by edges, a number).
pub fn compare_all(
    dev: &StabilitySpec,
    applicants: &[Map<String, Value>],
    scores: &[f64],
) -> Vec<Shift> {
    let mut out: Vec<Shift> = (dev.fields.iter())
        .map(|(name, d)| {
            let now = if d.levels.is_empty() {
                let values: Vec<Option<f64>> =
                    applicants.iter().map(|a| numeric(a, name)).collect();
                binned(d.edges.clone(), &values)
            } else {
                levels_of(name, d.levels.keys(), applicants)
            };
            compare(name, d, &now)
        })
        .collect();
    let score_values: Vec<Option<f64>> = scores.iter().map(|&s| Some(s)).collect();
    out.push(compare(
        "score",
        &dev.score,
        &binned(dev.score.edges.clone(), &score_values),
    ));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ties_stay_in_one_bin_and_no_bin_is_empty() {
        // 80% zeros, as with delinquency counts.
        let v: Vec<f64> = (0..100)
            .map(|i| if i < 80 { 0.0 } else { i as f64 })
            .collect();
        let e = decile_edges(&v);
        assert_eq!(e[0], 80.0, "the first edge lies above every zero");
        let b = binned(e, &v.iter().map(|&x| Some(x)).collect::<Vec<_>>());
        assert!(b.shares.iter().all(|&s| s > 0.0), "{:?}", b.shares);
        assert_eq!(b.shares[0], 0.8);
    }

    #[test]
    fn psi_of_a_hand_worked_shift() {
        // Worked by hand: bins 0.5/0.5 -> 0.4/0.6:
        // (0.4-0.5) ln(0.8) + (0.6-0.5) ln(1.2) = 0.0223144 + 0.0182322 = 0.0405465.
        let v = psi(&[0.5, 0.5], &[0.4, 0.6]);
        assert!((v - 0.040_546_5).abs() < 1e-7, "{v}");
        assert_eq!(psi(&[0.3, 0.7], &[0.3, 0.7]), 0.0);
        assert_eq!(band(0.05), "stable");
        assert_eq!(band(0.30), "major shift: review the model");
    }
}
