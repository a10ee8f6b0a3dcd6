//! Evaluating default models: discrimination (AUC, KS, Gini), calibration and the cost of cutoffs
//! ([`report`]). The metric functions:
//! area under the ROC curve (AUC), the Kolmogorov-Smirnov statistic and Gini.

pub mod curves;
pub mod html;
pub mod report;
pub mod stability;

pub use report::{report, Report};

/// AUC by the Mann-Whitney statistic: the probability that a random defaulter scores above a
/// random non-defaulter, ties counting half. `None` when either class is empty.
pub fn auc(scores: &[f64], defaulted: &[bool]) -> Option<f64> {
    let mut order: Vec<usize> = (0..scores.len()).collect();
    order.sort_by(|&a, &b| scores[a].total_cmp(&scores[b]));
    let (mut rank_sum, mut positives) = (0.0, 0usize);
    let mut i = 0;
    while i < order.len() {
        let mut j = i;
        while j + 1 < order.len() && scores[order[j + 1]].total_cmp(&scores[order[i]]).is_eq() {
            j += 1;
        }
        let mid_rank = (i + j) as f64 / 2.0 + 1.0; // average rank of a tied run, 1-based
        for &k in &order[i..=j] {
            if defaulted[k] {
                rank_sum += mid_rank;
                positives += 1;
            }
        }
        i = j + 1;
    }
    let negatives = scores.len() - positives;
    if positives == 0 || negatives == 0 {
        return None;
    }
    let u = rank_sum - (positives * (positives + 1)) as f64 / 2.0;
    Some(u / (positives as f64 * negatives as f64))
}

/// KS = max |F_default(s) - F_good(s)| over thresholds s.
pub fn ks(scores: &[f64], defaulted: &[bool]) -> Option<f64> {
    let positives = defaulted.iter().filter(|&&d| d).count();
    let negatives = defaulted.len() - positives;
    if positives == 0 || negatives == 0 {
        return None;
    }
    let mut order: Vec<usize> = (0..scores.len()).collect();
    order.sort_by(|&a, &b| scores[a].total_cmp(&scores[b]));
    let (mut fp, mut fn_, mut best) = (0.0, 0.0, 0.0f64);
    let mut i = 0;
    while i < order.len() {
        let mut j = i;
        while j < order.len() && scores[order[j]].total_cmp(&scores[order[i]]).is_eq() {
            if defaulted[order[j]] {
                fp += 1.0 / positives as f64;
            } else {
                fn_ += 1.0 / negatives as f64;
            }
            j += 1;
        }
        best = best.max((fp - fn_).abs());
        i = j;
    }
    Some(best)
}

/// Gini = 2 AUC - 1.
pub fn gini(auc: f64) -> f64 {
    2.0 * auc - 1.0
}

#[cfg(test)]
mod tests {
    use super::*;

    // Hand-worked: defaulters score 0.9, 0.4; goods 0.8, 0.3, 0.4. Pairs (d > g): 0.9 beats all
    // three goods (3), 0.4 beats 0.3 (1) and ties 0.4 (0.5): 4.5 of 6 -> AUC 0.75.
    #[test]
    fn auc_counts_pairs_with_ties_as_half() {
        let s = [0.9, 0.4, 0.8, 0.3, 0.4];
        let d = [true, true, false, false, false];
        assert!((auc(&s, &d).unwrap() - 0.75).abs() < 1e-15);
        assert_eq!(auc(&s, &[true; 5]), None);
        assert!((gini(0.75) - 0.5).abs() < 1e-15);
    }

    // Same data: after 0.3 the goods' CDF is 1/3, defaulters' 0; after 0.4, 2/3 vs 1/2;
    // after 0.8, 1 vs 1/2 -> KS = 1/2.
    #[test]
    fn ks_is_the_largest_cdf_gap() {
        let s = [0.9, 0.4, 0.8, 0.3, 0.4];
        let d = [true, true, false, false, false];
        assert!((ks(&s, &d).unwrap() - 0.5).abs() < 1e-15);
    }
}
