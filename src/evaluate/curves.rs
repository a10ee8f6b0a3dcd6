//! The ROC and KS curves of a set of predictions, one point per distinct predicted value (tied
//! predictions move together, as the Mann-Whitney AUC counts ties half), so the trapezoid area
//! under the ROC is exactly [`super::auc`] and the largest gap is exactly [`super::ks`].

use serde::Serialize;

/// One threshold: predictions at or above it are called defaults.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct CurvePoint {
    pub threshold: f64,
    /// Share of defaulters at or above the threshold (true-positive rate).
    pub defaults_caught: f64,
    /// Share of non-defaulters at or above it (false-positive rate).
    pub goods_flagged: f64,
}

/// The curve from (0, 0) (no one flagged) to (1, 1) (everyone), highest threshold first;
/// `None` when either class is empty.
pub fn roc(p: &[f64], defaulted: &[bool]) -> Option<Vec<CurvePoint>> {
    let positives = defaulted.iter().filter(|&&d| d).count();
    let negatives = defaulted.len() - positives;
    if positives == 0 || negatives == 0 {
        return None;
    }
    let mut order: Vec<usize> = (0..p.len()).collect();
    order.sort_by(|&a, &b| p[b].total_cmp(&p[a]));
    let mut points = vec![CurvePoint {
        threshold: f64::INFINITY,
        defaults_caught: 0.0,
        goods_flagged: 0.0,
    }];
    let (mut tp, mut fp) = (0usize, 0usize);
    let mut i = 0;
    while i < order.len() {
        let t = p[order[i]];
        // total_cmp: a NaN prediction is one value among others, never an endless loop.
        while i < order.len() && p[order[i]].total_cmp(&t).is_eq() {
            if defaulted[order[i]] {
                tp += 1;
            } else {
                fp += 1;
            }
            i += 1;
        }
        points.push(CurvePoint {
            threshold: t,
            defaults_caught: tp as f64 / positives as f64,
            goods_flagged: fp as f64 / negatives as f64,
        });
    }
    Some(points)
}

/// Area under the curve by trapezoids.
pub fn area(points: &[CurvePoint]) -> f64 {
    (points.windows(2))
        .map(|w| {
            (w[1].goods_flagged - w[0].goods_flagged)
                * (w[1].defaults_caught + w[0].defaults_caught)
                / 2.0
        })
        .sum()
}

/// The largest gap between the two cumulative shares, and the point where it is.
pub fn largest_gap(points: &[CurvePoint]) -> Option<CurvePoint> {
    (points.iter().copied()).max_by(|a, b| {
        (a.defaults_caught - a.goods_flagged)
            .abs()
            .total_cmp(&(b.defaults_caught - b.goods_flagged).abs())
    })
}

/// At most `most` points, evenly spread, the first and last kept (for drawing).
pub fn thinned(points: &[CurvePoint], most: usize) -> Vec<CurvePoint> {
    if points.len() <= most || most < 2 {
        return points.to_vec();
    }
    let step = (points.len() - 1) as f64 / (most - 1) as f64;
    (0..most)
        .map(|k| points[((k as f64 * step).round() as usize).min(points.len() - 1)])
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_curve_agrees_with_auc_and_ks_ties_included() {
        // Seeded, with many ties (predictions on a coarse grid).
        let mut rng = crate::rng::Rng::new(5);
        let p: Vec<f64> = (0..2_000)
            .map(|_| (rng.unit() * 20.0).floor() / 20.0)
            .collect();
        let d: Vec<bool> = p.iter().map(|&x| rng.unit() < 0.1 + 0.6 * x).collect();
        let curve = roc(&p, &d).unwrap();
        let auc = crate::evaluate::auc(&p, &d).unwrap();
        assert!(
            (area(&curve) - auc).abs() < 1e-12,
            "{} vs {auc}",
            area(&curve)
        );
        let ks = crate::evaluate::ks(&p, &d).unwrap();
        let gap = largest_gap(&curve).unwrap();
        assert!(((gap.defaults_caught - gap.goods_flagged).abs() - ks).abs() < 1e-12);
        let last = curve.last().unwrap();
        assert_eq!((last.defaults_caught, last.goods_flagged), (1.0, 1.0));
        assert_eq!(thinned(&curve, 5).len(), 5.min(curve.len()));
    }
}
