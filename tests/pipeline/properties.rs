//! Property tests (proptest): on random ensembles and rows, contributions are additive
//! (base + sum = model output within 1e-9) and deterministic (same input, same bits); and the
//! fuzzing of every parser that takes outside input (`fuzz`).

use crate::common::{random_ensemble, random_row, Rng};
use plumbline::artifact::spec::Aggregation;
use plumbline::explain::{is_additive, InterventionalExplainer, Kernel, PathExplainer};
use proptest::prelude::*;

proptest! {
    #![proptest_config(ProptestConfig { cases: 64, ..ProptestConfig::default() })]

    #[test]
    fn path_dependent_is_additive_and_deterministic(seed in any::<u64>(), trees in 1usize..12, depth in 1usize..10, forest in any::<bool>()) {
        let mut rng = Rng::new(seed);
        let agg = if forest { Aggregation::MeanProbability } else { Aggregation::SumLogOdds };
        let columns = 9;
        let e = random_ensemble(&mut rng, trees, columns, depth, agg);
        let explainer = PathExplainer::new(&e);
        let x = random_row(&mut rng, columns);
        let mut a = vec![0.0; columns];
        let mut b = vec![0.0; columns];
        explainer.explain_into(&x, &mut a);
        explainer.explain_into(&x, &mut b);
        prop_assert!(is_additive(explainer.base_value(), &a, e.raw(&x)));
        prop_assert_eq!(a.iter().map(|v| v.to_bits()).collect::<Vec<_>>(), b.iter().map(|v| v.to_bits()).collect::<Vec<_>>());
    }

    /// The level-order kernel (what decisions use) against the recursive reference kernel, on
    /// trees with zero-cover leaves, repeated columns, strict and non-strict splits, values on
    /// thresholds and missing values; and the raw output every kernel finds on the way equal to
    /// the model's own walk, bit for bit (decisions take it from there).
    #[test]
    fn level_kernel_matches_recursive_kernel(seed in any::<u64>(), trees in 1usize..12, depth in 1usize..14, forest in any::<bool>()) {
        let mut rng = Rng::new(seed);
        let agg = if forest { Aggregation::MeanProbability } else { Aggregation::SumLogOdds };
        let columns = 9;
        let e = random_ensemble(&mut rng, trees, columns, depth, agg);
        let levels = PathExplainer::with_options(&e, 16, Kernel::Levels);
        let recursive = PathExplainer::with_options(&e, 16, Kernel::Recursive);
        prop_assert_eq!(levels.base_value().to_bits(), recursive.base_value().to_bits());
        for _ in 0..4 {
            let x = random_row(&mut rng, columns);
            let mut a = vec![0.0; columns];
            let mut b = vec![0.0; columns];
            // The raw output each finds on the way is the model's own, bit for bit.
            let raw = e.raw(&x).to_bits();
            prop_assert_eq!(levels.explain_and_score(&x, &mut a).to_bits(), raw);
            prop_assert_eq!(recursive.explain_and_score(&x, &mut b).to_bits(), raw);
            let per_leaf = PathExplainer::with_options(&e, 0, Kernel::Levels);
            prop_assert_eq!(per_leaf.explain_and_score(&x, &mut vec![0.0; columns]).to_bits(), raw);
            for (c, (a, b)) in a.iter().zip(&b).enumerate() {
                prop_assert!((a - b).abs() <= 1e-12 * (1.0 + b.abs()), "column {}: {} vs {}", c, a, b);
            }
        }
    }

    /// Many rows explained together (rows in blocks per pass over each tree) get, row by row, the
    /// bits each gets alone: contributions and raw output, on every kernel, with more rows than
    /// one block and a partial last block.
    #[test]
    fn rows_together_equal_rows_alone(seed in any::<u64>(), trees in 1usize..8, depth in 1usize..13, rows in 1usize..140, limit in prop_oneof![Just(0usize), Just(16)]) {
        let mut rng = Rng::new(seed);
        let agg = if seed % 2 == 0 { Aggregation::MeanProbability } else { Aggregation::SumLogOdds };
        let columns = 7;
        let e = random_ensemble(&mut rng, trees, columns, depth, agg);
        let explainer = PathExplainer::with_options(&e, limit, Kernel::Levels);
        let xs: Vec<Vec<f64>> = (0..rows).map(|_| random_row(&mut rng, columns)).collect();
        let flat: Vec<f64> = xs.iter().flatten().copied().collect();
        let mut together = vec![0.0; flat.len()];
        let raws = explainer.explain_rows_and_score(&flat, columns, &mut together);
        prop_assert_eq!(raws.len(), rows);
        let bits = |v: &[f64]| v.iter().map(|f| f.to_bits()).collect::<Vec<_>>();
        for (i, x) in xs.iter().enumerate() {
            let mut alone = vec![0.0; columns];
            let raw = explainer.explain_and_score(x, &mut alone);
            prop_assert_eq!(raws[i].to_bits(), raw.to_bits(), "row {}", i);
            prop_assert_eq!(bits(&together[i * columns..(i + 1) * columns]), bits(&alone), "row {}", i);
        }
    }

    #[test]
    fn interventional_is_additive_and_deterministic(seed in any::<u64>(), trees in 1usize..8, depth in 1usize..9, rows in 1usize..20) {
        let mut rng = Rng::new(seed);
        let columns = 7;
        let e = random_ensemble(&mut rng, trees, columns, depth, Aggregation::SumLogOdds);
        let background: Vec<Vec<f64>> = (0..rows).map(|_| random_row(&mut rng, columns)).collect();
        let explainer = InterventionalExplainer::new(&e, &background);
        let x = random_row(&mut rng, columns);
        let mut a = vec![0.0; columns];
        let mut b = vec![0.0; columns];
        explainer.explain_into(&x, &mut a);
        explainer.explain_into(&x, &mut b);
        prop_assert!(is_additive(explainer.base_value(), &a, e.raw(&x)));
        prop_assert_eq!(a, b);
    }
}

mod fuzz;
