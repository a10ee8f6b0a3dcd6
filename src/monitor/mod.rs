//! Ongoing monitoring of a model in use, over the recorded decisions: population stability of
//! the score and of every field against the artifact's development bins. It reads records the
//! store streams to it and never reaches into the pipeline's stages.
//!
//! The bands (below 0.10 stable, 0.10 to 0.25 watch, above 0.25 act) are common practice in
//! credit-model monitoring, not a standard.

pub mod html;
pub mod stability;
pub mod trends;

pub use stability::{Stability, StabilityTally};
pub use trends::{Period, ReasonTrends, TrendTally};
