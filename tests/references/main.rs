//! Test binary `references`: results checked against outside references — published tables
//! (ISLR's logistic fits), reference libraries' outputs recorded in fixtures (LightGBM, shap,
//! scikit-learn, scipy, statsmodels; the fixtures and their scripts are in `tests/reference/`),
//! and brute-force Shapley values (`cargo test --test references`; one file with e.g.
//! `cargo test --test references treeshap_bruteforce::`).
//!
//! Grouped into one binary so that the link of plumbline's heavy dependencies (actix-web,
//! rusqlite, tokio-postgres, smartcore, tract) is paid once for the area, not once per file; see
//! `tests/service/main.rs`.

#[path = "../common/mod.rs"]
mod common;

mod islp_logistic;
mod reference_backtest;
mod reference_fairness;
mod reference_libraries;
mod reference_metrics;
mod treeshap_bruteforce;
