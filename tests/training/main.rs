//! Test binary `training`: `plumbline train` and `evaluate`, and what training leaves for
//! reviewers (reference populations, stability bins and PSI, risk directions, draft specs)
//! (`cargo test --test training`; one file with e.g. `cargo test --test training train_review::`).
//!
//! Grouped into one binary so that the link of plumbline's heavy dependencies (actix-web,
//! rusqlite, tokio-postgres, smartcore, tract) is paid once for the area, not once per file; see
//! `tests/service/main.rs`. Temporary folders are named per test (a distinct prefix and the
//! process id).

mod train;
mod train_review;
