//! Model building: the demo lender's generated applications, reading training CSVs against a
//! spec, logistic fitting with standard errors, stratified cross-validation, and writing a
//! validated artifact. Forests follow (see the model-building issue).

pub mod build;
pub mod dataset;
pub mod demo_data;
pub mod forest;
pub mod logistic;
mod rng;

pub use rng::Rng;
