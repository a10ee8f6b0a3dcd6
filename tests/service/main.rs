//! Test binary `service`: the HTTP service and the decision-record stores, on SQLite and
//! PostgreSQL, in process and as the real binary (`cargo test --test service`; one file's tests
//! with a module filter, e.g. `cargo test --test service api_records::`).
//!
//! Integration tests are grouped into a few binaries by area (as in *Zero To Production in Rust*,
//! `tests/api/main.rs`) rather than one binary per file: every binary links plumbline with all of
//! its heavy dependencies (actix-web, rusqlite with its bundled SQLite, tokio-postgres, smartcore,
//! tract), so each area pays for that link once. The files below share one process: temporary
//! folders and databases are named per test (`common::stores`), servers listen on port 0, and
//! nothing here sets environment variables or changes the current folder.

#[path = "../common/mod.rs"]
mod common;

mod api;
mod api_fairness;
mod api_recorded;
mod api_records;
mod console;
mod edges;
mod monitoring;
mod outcomes;
mod recorder;
mod records;
mod records_durability;
mod store_stalls;
