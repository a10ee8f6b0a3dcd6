//! Model building. So far: the demo lender's generated applications; fitting and
//! cross-validation follow (see the model-building issue).

pub mod demo_data;
pub mod logistic;
mod rng;

pub use rng::Rng;
