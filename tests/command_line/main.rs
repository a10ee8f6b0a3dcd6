//! Test binary `command_line`: the `plumbline` binary driven as a user drives it — exit codes
//! and messages, `import` and `inspect`, `replay` against model files and a running service
//! (`cargo test --test command_line`; one file with e.g. `cargo test --test command_line replay::`).
//!
//! Grouped into one binary so that the link of plumbline's heavy dependencies (actix-web,
//! rusqlite, tokio-postgres, smartcore, tract) is paid once for the area, not once per file; see
//! `tests/service/main.rs`. Temporary folders are named per test (a distinct prefix and the
//! process id, or `common::stores::TempDir`).

#[path = "../common/mod.rs"]
mod common;

mod cli;
mod import_cli;
mod replay;
