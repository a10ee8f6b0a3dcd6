//! Explains every row of a rows file with a model, for profiling (`valgrind`, `perf`):
//! `cargo run --release --example explain_rows -- MODEL ROWS.json [REPEAT] [rows]`; with `rows`,
//! all rows at once through the many-rows path (rows in vector lanes), else one at a time.

use plumbline::LoadedModel;
use std::path::Path;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let model = LoadedModel::from_path(Path::new(&args[1])).expect("model loads");
    let rows: Vec<serde_json::Value> =
        serde_json::from_slice(&std::fs::read(&args[2]).expect("rows")).expect("rows parse");
    let repeat: usize = args.get(3).and_then(|r| r.parse().ok()).unwrap_or(1);
    let encoded: Vec<Vec<f64>> = rows
        .iter()
        .map(|r| {
            model
                .schema
                .check_and_encode(r, "row")
                .expect("row")
                .columns
        })
        .collect();
    let together = args.get(4).is_some_and(|a| a == "rows");
    let width = model.width();
    let mut out = vec![0.0; width];
    let mut total = 0.0;
    let flat: Vec<f64> = encoded.iter().flatten().copied().collect();
    let mut outs = vec![0.0; flat.len()];
    let start = std::time::Instant::now();
    for _ in 0..repeat {
        if together {
            (model.explainer).explain_rows_scored(&flat, width, &mut outs, &mut Vec::new());
            total += outs.iter().step_by(width).sum::<f64>();
            continue;
        }
        for x in &encoded {
            model.explainer.explain_into(x, &mut out);
            total += out[0];
        }
    }
    let per_row = start.elapsed().as_secs_f64() / (repeat * encoded.len()) as f64;
    println!(
        "{} rows x {repeat}: {:.1} us per row (checksum {total:.6})",
        encoded.len(),
        per_row * 1e6
    );
}
