//! Explain time per row (criterion). With `PLUMBLINE_BENCH_MODELS=DIR` it measures the models
//! that `bench/explain_compare.sh` trains and exports (`boosted500.json`, `forest100.json`,
//! `rows.json`), so the figures sit beside LightGBM's and shap's on the same models and rows;
//! without it, random ensembles of the same shape. One row per call, then 256 rows together
//! (the many-rows path). One thread. Results: docs/PERFORMANCE.md.

#[path = "../tests/common/mod.rs"]
mod common;

use criterion::{black_box, criterion_group, criterion_main, Criterion};
use plumbline::artifact::spec::Aggregation;
use plumbline::explain::{Explainer, PathExplainer};
use plumbline::LoadedModel;
use std::path::PathBuf;

struct Case {
    name: String,
    explainer: Explainer,
    rows: Vec<Vec<f64>>,
}

fn from_dir(dir: &std::path::Path) -> Vec<Case> {
    let rows: Vec<serde_json::Value> =
        serde_json::from_slice(&std::fs::read(dir.join("rows.json")).expect("rows.json"))
            .expect("rows parse");
    ["boosted500", "forest100"]
        .iter()
        .map(|name| {
            let model =
                LoadedModel::from_path(&dir.join(format!("{name}.json"))).expect("model loads");
            let rows = rows
                .iter()
                .map(|r| {
                    model
                        .schema
                        .check_and_encode(r, "row")
                        .expect("row valid")
                        .columns
                })
                .collect();
            Case {
                name: name.to_string(),
                explainer: model.explainer.clone(),
                rows,
            }
        })
        .collect()
}

fn synthetic() -> Vec<Case> {
    let mut rng = common::Rng::new(7);
    let shapes = [
        (
            "synthetic_boosted500_depth6",
            500,
            6,
            Aggregation::SumLogOdds,
        ),
        (
            "synthetic_forest100_depth12",
            100,
            12,
            Aggregation::MeanProbability,
        ),
    ];
    shapes
        .iter()
        .map(|&(name, trees, depth, agg)| {
            let e = common::random_ensemble(&mut rng, trees, 10, depth, agg);
            let rows = (0..256).map(|_| common::random_row(&mut rng, 10)).collect();
            Case {
                name: name.to_string(),
                explainer: Explainer::PathDependent(PathExplainer::new(&e)),
                rows,
            }
        })
        .collect()
}

fn bench(c: &mut Criterion) {
    let cases = match std::env::var_os("PLUMBLINE_BENCH_MODELS") {
        Some(dir) => from_dir(&PathBuf::from(dir)),
        None => synthetic(),
    };
    let mut group = c.benchmark_group("explain_per_row");
    for case in &cases {
        let width = case.rows[0].len();
        let mut out = vec![0.0; width];
        let mut i = 0;
        group.bench_function(&case.name, |b| {
            b.iter(|| {
                let x = &case.rows[i % case.rows.len()];
                i += 1;
                case.explainer.explain_into(black_box(x), &mut out);
                black_box(&out);
            })
        });
    }
    group.finish();
    // Many rows per pass over the trees (what `plumbline score` and replay use): the time per
    // row, from 256 rows explained together.
    let mut group = c.benchmark_group("explain_per_row_together");
    for case in &cases {
        let width = case.rows[0].len();
        let rows: Vec<f64> = case
            .rows
            .iter()
            .cycle()
            .take(256)
            .flatten()
            .copied()
            .collect();
        let mut out = vec![0.0; rows.len()];
        group.throughput(criterion::Throughput::Elements(256));
        group.bench_function(&case.name, |b| {
            b.iter(|| {
                let raws = (case.explainer).explain_rows_scored(
                    black_box(&rows),
                    width,
                    &mut out,
                    &mut Vec::new(),
                );
                black_box((&out, raws));
            })
        });
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
