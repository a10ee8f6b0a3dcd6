//! Test binary `pipeline`: deciding and explaining in the library — the demo model end to end,
//! the shipped trained demo models, the bad-artifact corpus, ONNX import, the fair-lending
//! report, the property tests and fuzzers, and the code map checked against the imports (`cargo test --test pipeline`; one file with e.g.
//! `cargo test --test pipeline onnx_import::`, the fuzzers with `properties::fuzz::`).
//!
//! Grouped into one binary so that the link of plumbline's heavy dependencies (actix-web,
//! rusqlite, tokio-postgres, smartcore, tract) is paid once for the area, not once per file; see
//! `tests/service/main.rs`.

#[path = "../common/mod.rs"]
mod common;

mod architecture;
mod bad_artifacts;
mod decide_demo;
mod demo_models;
mod fairness;
mod onnx_import;
mod properties;
