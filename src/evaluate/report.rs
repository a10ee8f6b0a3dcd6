//! The evaluation report: how well a model separates and calibrates, what its cutoffs cost, and
//! the accuracy of approving everyone beside its own, so a low base rate cannot flatter it.

use serde::Serialize;

/// Outcomes at one approve cutoff: approve when probability of default < cutoff.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AtCutoff {
    pub cutoff: f64,
    /// Not approved and defaulted.
    pub caught_defaults: usize,
    /// Not approved but would have repaid.
    pub lost_goods: usize,
    /// Approved and defaulted.
    pub missed_defaults: usize,
    /// Approved and repaid.
    pub approved_goods: usize,
    pub approval_rate: f64,
    pub accuracy: f64,
    /// missed_defaults x cost_missed_default + lost_goods x cost_lost_good, per application.
    pub expected_cost_per_application: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CalibrationBin {
    pub rows: usize,
    pub mean_predicted: f64,
    pub observed_rate: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Report {
    pub rows: usize,
    pub base_rate: f64,
    pub auc: f64,
    pub gini: f64,
    pub ks: f64,
    pub brier: f64,
    pub log_loss: f64,
    /// Ten bins of (nearly) equal size by predicted probability, lowest first.
    pub calibration: Vec<CalibrationBin>,
    pub at_approve_cutoff: AtCutoff,
    pub at_decline_cutoff: AtCutoff,
    pub cost_optimal: AtCutoff,
    pub cost_missed_default: f64,
    pub cost_lost_good: f64,
    /// Accuracy of approving every application: 1 - base rate.
    pub accuracy_approve_everyone: f64,
}

fn at_cutoff(p: &[f64], y: &[bool], cutoff: f64, costs: (f64, f64)) -> AtCutoff {
    let (mut caught, mut lost, mut missed, mut good) = (0, 0, 0, 0);
    for (&pi, &yi) in p.iter().zip(y) {
        match (pi < cutoff, yi) {
            (false, true) => caught += 1,
            (false, false) => lost += 1,
            (true, true) => missed += 1,
            (true, false) => good += 1,
        }
    }
    let n = p.len() as f64;
    AtCutoff {
        cutoff,
        caught_defaults: caught,
        lost_goods: lost,
        missed_defaults: missed,
        approved_goods: good,
        approval_rate: (missed + good) as f64 / n,
        accuracy: (caught + good) as f64 / n,
        expected_cost_per_application: (missed as f64 * costs.0 + lost as f64 * costs.1) / n,
    }
}

/// The cutoff with the least expected cost, among every distinct predicted probability (and
/// approving everyone); ties keep the lower cutoff.
fn cost_optimal(p: &[f64], y: &[bool], costs: (f64, f64)) -> AtCutoff {
    let mut order: Vec<usize> = (0..p.len()).collect();
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]));
    let (total_bad, n) = (y.iter().filter(|&&v| v).count(), p.len());
    // Cutoff c approves every row with p < c; sweep c over sorted values.
    let (mut missed, mut good) = (0usize, 0usize);
    let mut best = (f64::INFINITY, f64::NEG_INFINITY);
    let mut i = 0;
    loop {
        let cutoff = if i < n { p[order[i]] } else { f64::INFINITY };
        let lost = (n - total_bad) - good;
        let cost = missed as f64 * costs.0 + lost as f64 * costs.1;
        if cost < best.0 {
            best = (cost, cutoff);
        }
        if i >= n {
            break;
        }
        let mut j = i;
        while j < n && p[order[j]] == cutoff {
            if y[order[j]] {
                missed += 1;
            } else {
                good += 1;
            }
            j += 1;
        }
        i = j;
    }
    let cutoff = if best.1.is_finite() {
        best.1
    } else {
        1.0 + f64::EPSILON
    };
    at_cutoff(p, y, cutoff, costs)
}

/// Builds the report; `None` when either outcome class is absent.
pub fn report(
    p: &[f64],
    y: &[bool],
    approve_below: f64,
    decline_at_or_above: f64,
    cost_missed_default: f64,
    cost_lost_good: f64,
) -> Option<Report> {
    let auc = super::auc(p, y)?;
    let ks = super::ks(p, y)?;
    let n = p.len();
    let costs = (cost_missed_default, cost_lost_good);
    let base_rate = y.iter().filter(|&&v| v).count() as f64 / n as f64;
    let brier = p
        .iter()
        .zip(y)
        .map(|(&pi, &yi)| (pi - f64::from(u8::from(yi))).powi(2))
        .sum::<f64>()
        / n as f64;
    let log_loss = -p
        .iter()
        .zip(y)
        .map(|(&pi, &yi)| {
            let q = pi.clamp(1e-15, 1.0 - 1e-15);
            if yi {
                q.ln()
            } else {
                (1.0 - q).ln()
            }
        })
        .sum::<f64>()
        / n as f64;
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]));
    let calibration = (0..10)
        .filter_map(|b| {
            let (lo, hi) = (b * n / 10, (b + 1) * n / 10);
            (hi > lo).then(|| {
                let idx = &order[lo..hi];
                CalibrationBin {
                    rows: idx.len(),
                    mean_predicted: idx.iter().map(|&i| p[i]).sum::<f64>() / idx.len() as f64,
                    observed_rate: idx.iter().filter(|&&i| y[i]).count() as f64 / idx.len() as f64,
                }
            })
        })
        .collect();
    Some(Report {
        rows: n,
        base_rate,
        auc,
        gini: super::gini(auc),
        ks,
        brier,
        log_loss,
        calibration,
        at_approve_cutoff: at_cutoff(p, y, approve_below, costs),
        at_decline_cutoff: at_cutoff(p, y, decline_at_or_above, costs),
        cost_optimal: cost_optimal(p, y, costs),
        cost_missed_default,
        cost_lost_good,
        accuracy_approve_everyone: 1.0 - base_rate,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-worked: p = 0.1, 0.2, 0.6, 0.8 with outcomes good, bad, good, bad.
    #[test]
    fn metrics_by_hand() {
        let p = [0.1, 0.2, 0.6, 0.8];
        let y = [false, true, false, true];
        let r = report(&p, &y, 0.5, 0.7, 5.0, 1.0).unwrap();
        // Brier: (0.01 + 0.64 + 0.36 + 0.04) / 4 = 0.2625.
        assert!((r.brier - 0.2625).abs() < 1e-15);
        // AUC: pairs (bad > good): 0.2>0.1 yes, 0.8>0.1 yes, 0.8>0.6 yes, 0.2>0.6 no -> 3/4.
        assert!((r.auc - 0.75).abs() < 1e-15);
        // Approve below 0.5: approves 0.1 (good) and 0.2 (bad): one missed default, one lost good
        // (0.6) -> cost (5 + 1) / 4 = 1.5; accuracy 2/4.
        let a = &r.at_approve_cutoff;
        assert_eq!(
            (
                a.missed_defaults,
                a.lost_goods,
                a.caught_defaults,
                a.approved_goods
            ),
            (1, 1, 1, 1)
        );
        assert!((a.expected_cost_per_application - 1.5).abs() < 1e-15);
        // Approving everyone is "accurate" half the time here; the report always says so.
        assert!((r.accuracy_approve_everyone - 0.5).abs() < 1e-15);
        // Cheapest: approve below 0.2 (only 0.1): no missed default, lost goods 0.6 -> 1/4.
        assert!((r.cost_optimal.cutoff - 0.2).abs() < 1e-15);
        assert!((r.cost_optimal.expected_cost_per_application - 0.25).abs() < 1e-15);
    }
}
