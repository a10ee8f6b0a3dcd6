//! `plumbline import`: an ONNX model built elsewhere, read against a training spec and a
//! reference CSV into a validated artifact.

use super::{EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::import::{import_with, Covers, ImportOptions};
use std::path::Path;

/// Where the import reads from and writes to, and how.
pub struct Args<'a> {
    pub model: &'a Path,
    pub spec: &'a Path,
    pub reference: &'a Path,
    pub out: &'a Path,
    pub covers: Covers,
    pub background: Option<&'a Path>,
    pub approximate: bool,
}

pub fn run(args: Args) -> i32 {
    let Args {
        model,
        spec,
        reference,
        out,
        covers,
        background,
        approximate,
    } = args;
    let read = |p: &Path| std::fs::read(p).map_err(|e| format!("cannot read {}: {e}", p.display()));
    let text = |p: &Path| {
        read(p).and_then(|b| {
            String::from_utf8(b).map_err(|_| format!("{} is not UTF-8 text", p.display()))
        })
    };
    let background = match background.map(text).transpose() {
        Ok(b) => b,
        Err(e) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    let (onnx, spec_text, csv) = match (read(model), text(spec), text(reference)) {
        (Ok(a), Ok(b), Ok(c)) => (a, b, c),
        (Err(e), _, _) | (_, Err(e), _) | (_, _, Err(e)) => {
            eprintln!("error: {e}");
            return EXIT_BAD_INPUT;
        }
    };
    let options = ImportOptions {
        covers,
        background,
        approximate,
    };
    let bar = super::progress::Bar::new();
    let imported = import_with(&onnx, &spec_text, &csv, &options, &bar);
    drop(bar);
    match imported {
        Ok((artifact, report)) => {
            if let Err(e) = std::fs::write(out, artifact) {
                eprintln!("error: cannot write {}: {e}", out.display());
                return EXIT_FAILURE;
            }
            let s = &report.source;
            eprintln!(
                "read {} from {} (written by {} {}, graph \"{}\", sha256 {})",
                report.operator,
                model.display(),
                s.producer_name,
                s.producer_version,
                s.graph_name,
                s.sha256
            );
            let metric =
                |m: Option<f64>| m.map_or("n/a (one class)".to_string(), |v| format!("{v:.4}"));
            eprintln!(
                "on the {} reference rows (base rate {:.4}): AUC {}, KS {}, Brier {:.5}",
                report.rows,
                report.base_rate,
                metric(report.auc),
                metric(report.ks),
                report.brier
            );
            for note in &report.notes {
                eprintln!("note: {note}");
            }
            eprintln!("wrote {}", out.display());
            eprintln!(
                "caution: an imported model needs its own validation and model-risk review before it decides anything"
            );
            0
        }
        Err(e) => {
            eprintln!("error: {e}\nnothing was written");
            EXIT_BAD_INPUT
        }
    }
}
