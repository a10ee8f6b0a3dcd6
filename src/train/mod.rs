//! Model building: the demo lender's generated applications, reading training CSVs against a
//! spec, logistic fitting with standard errors, stratified cross-validation, and writing a
//! validated artifact, with both reference populations and development-sample stability bins.

pub mod build;
pub mod dataset;
pub mod demo_data;
pub mod draft;
pub mod forest;
pub mod logistic;
pub mod monotone;
pub mod reference;
pub mod spec;

pub use crate::rng::Rng;
