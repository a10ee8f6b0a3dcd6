//! plumbline: a self-hosted credit-decision engine.
//!
//! The pipeline, one module per stage, data flowing one way:
//!
//! ```text
//! artifact (load, validate) -> features (check, encode) -> model (score) -> explain (exact
//! contributions) -> reasons (rank) -> policy (cutoffs, scaling, rules) -> decide (one call)
//! ```
//!
//! Model output is decision support. Lenders remain responsible for complying with ECOA /
//! Regulation B, FCRA and local law, and for their own model-risk review.

pub mod api;
pub mod artifact;
pub mod cli;
pub mod decide;
pub mod evaluate;
pub mod exit;
pub mod explain;
pub mod fairness;
pub mod features;
pub mod import;
pub mod model;
pub mod monitor;
pub mod onnx;
pub mod outcomes;
pub mod policy;
pub mod progress;
pub mod reasons;
pub mod records;
pub mod replay;
pub mod rng;
pub mod tabular;
pub mod tls;
pub mod train;

pub use artifact::{ArtifactError, LoadedModel};
pub use decide::{decide, decide_request, Decision};
pub use features::InputError;

/// The version written into records and artifacts produced by this build.
pub const VERSION: &str = env!("CARGO_PKG_VERSION");
