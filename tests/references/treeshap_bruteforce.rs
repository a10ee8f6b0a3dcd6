//! Ground truth for TreeSHAP: Shapley values by enumerating every coalition of columns.
//!
//! * Path-dependent: the coalition's value is the conditional expectation through node covers,
//!   Algorithm 1 (EXPVALUE) of Lundberg, Erion, Lee, "Consistent Individualized Feature
//!   Attribution for Tree Ensembles", arXiv:1802.03888 (2018).
//! * Interventional: the coalition's value is the mean over the background of the model on the
//!   hybrid row (row's values on the coalition, background's elsewhere), Lundberg et al., "From
//!   local explanations to global understanding with explainable AI for trees", Nature Machine
//!   Intelligence 2:56-67 (2020).
//!
//! Shapley's formula (Shapley 1953) then gives each column's value; TreeSHAP must agree to 1e-12.

use crate::common::{random_ensemble, random_row, Rng};
use plumbline::artifact::spec::Aggregation;
use plumbline::explain::{InterventionalExplainer, Kernel, PathExplainer};
use plumbline::model::{Ensemble, Node};

fn cond_expectation(nodes: &[Node], id: usize, x: &[f64], known: u32) -> f64 {
    let n = &nodes[id];
    if n.is_leaf() {
        return n.value;
    }
    if known & (1 << n.column) != 0 {
        return cond_expectation(nodes, n.child(x[n.column as usize]) as usize, x, known);
    }
    if n.cover == 0.0 {
        return 0.0; // same convention as the explainer: a zero-cover node passes no weight on
    }
    let (l, r) = (&nodes[n.left as usize], &nodes[n.right as usize]);
    (l.cover * cond_expectation(nodes, n.left as usize, x, known)
        + r.cover * cond_expectation(nodes, n.right as usize, x, known))
        / n.cover
}

fn path_value(e: &Ensemble, x: &[f64], known: u32) -> f64 {
    let sum: f64 = e
        .trees
        .iter()
        .map(|t| cond_expectation(&t.nodes, 0, x, known))
        .sum();
    e.finish(sum)
}

fn interventional_value(e: &Ensemble, x: &[f64], background: &[Vec<f64>], known: u32) -> f64 {
    let total: f64 = background
        .iter()
        .map(|b| {
            let hybrid: Vec<f64> = (0..x.len())
                .map(|c| if known & (1 << c) != 0 { x[c] } else { b[c] })
                .collect();
            e.raw(&hybrid)
        })
        .sum();
    total / background.len() as f64
}

fn factorial(n: usize) -> f64 {
    (1..=n).map(|i| i as f64).product()
}

/// Shapley values of the game `v` over `m` players, by enumeration.
fn shapley(m: usize, v: impl Fn(u32) -> f64) -> Vec<f64> {
    let values: Vec<f64> = (0..(1u32 << m)).map(&v).collect();
    (0..m)
        .map(|i| {
            let mut phi = 0.0;
            for s in 0..(1u32 << m) {
                if s & (1 << i) != 0 {
                    continue;
                }
                let size = s.count_ones() as usize;
                let w = factorial(size) * factorial(m - size - 1) / factorial(m);
                phi += w * (values[(s | (1 << i)) as usize] - values[s as usize]);
            }
            phi
        })
        .collect()
}

fn assert_close(got: &[f64], want: &[f64], tol: f64, what: &str) {
    for (c, (g, w)) in got.iter().zip(want).enumerate() {
        assert!(
            (g - w).abs() <= tol,
            "{what}: column {c}: TreeSHAP {g} vs enumeration {w}"
        );
    }
}

fn check_path_dependent(seed: u64, columns: usize, depth: usize, trees: usize, agg: Aggregation) {
    let mut rng = Rng::new(seed);
    let e = random_ensemble(&mut rng, trees, columns, depth, agg);
    // Quadrature by both kernels (the level-order default and the recursive reference) and the
    // per-leaf closed form (forced with limit 0): all exact.
    for (quadrature, kernel) in [
        (true, Kernel::Levels),
        (true, Kernel::Recursive),
        (false, Kernel::Levels),
    ] {
        let limit = if quadrature { 16 } else { 0 };
        let explainer = PathExplainer::with_options(&e, limit, kernel);
        let (by_quadrature, per_leaf) = explainer.algorithm_counts();
        assert_eq!(by_quadrature > 0, quadrature);
        assert_eq!(per_leaf > 0, !quadrature);
        let base = path_value(&e, &[f64::NAN; 16][..columns], 0);
        assert!(
            (explainer.base_value() - base).abs() < 1e-12,
            "base {} vs {base}",
            explainer.base_value()
        );
        for _ in 0..6 {
            let x = random_row(&mut rng, columns);
            let want = shapley(columns, |s| path_value(&e, &x, s));
            let mut got = vec![0.0; columns];
            explainer.explain_into(&x, &mut got);
            assert_close(
                &got,
                &want,
                1e-12,
                &format!("path-dependent seed {seed}, quadrature {quadrature}, {kernel:?}"),
            );
        }
    }
}

#[test]
fn path_dependent_matches_enumeration_boosted() {
    for seed in 0..40 {
        check_path_dependent(seed, 5, 5, 4, Aggregation::SumLogOdds);
    }
}

#[test]
fn path_dependent_matches_enumeration_forest() {
    for seed in 100..140 {
        check_path_dependent(seed, 6, 6, 3, Aggregation::MeanProbability);
    }
}

/// Depth 12 needs six quadrature points.
#[test]
fn path_dependent_matches_enumeration_deep_paths() {
    for seed in 200..206 {
        check_path_dependent(seed, 11, 12, 2, Aggregation::SumLogOdds);
    }
}

/// Deep trees that split on the same columns again and again (positions shared along a path).
#[test]
fn path_dependent_matches_enumeration_deep_repeated_columns() {
    for seed in 400..403 {
        check_path_dependent(seed, 12, 18, 1, Aggregation::SumLogOdds);
    }
}

#[test]
fn interventional_matches_enumeration() {
    for seed in 300..340 {
        let mut rng = Rng::new(seed);
        let columns = 6;
        let agg = if seed % 2 == 0 {
            Aggregation::SumLogOdds
        } else {
            Aggregation::MeanProbability
        };
        let e = random_ensemble(&mut rng, 3, columns, 6, agg);
        let background: Vec<Vec<f64>> = (0..7).map(|_| random_row(&mut rng, columns)).collect();
        let explainer = InterventionalExplainer::new(&e, &background);
        for _ in 0..5 {
            let x = random_row(&mut rng, columns);
            let want = shapley(columns, |s| interventional_value(&e, &x, &background, s));
            let mut got = vec![0.0; columns];
            explainer.explain_into(&x, &mut got);
            assert_close(&got, &want, 1e-12, &format!("interventional seed {seed}"));
            let base = interventional_value(&e, &x, &background, 0);
            assert!((explainer.base_value() - base).abs() < 1e-12);
        }
    }
}
