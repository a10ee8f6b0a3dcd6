//! Ongoing monitoring of a model in use, over the recorded decisions: population stability of
//! the score and of every field against the artifact's development bins, back-testing of the
//! recorded probabilities against observed outcomes, and reason trends. It reads records the
//! store streams to it and never reaches into the pipeline's stages.
//!
//! The bands (below 0.10 stable, 0.10 to 0.25 watch, above 0.25 act) are common practice in
//! credit-model monitoring, not a standard.

pub mod backtest;
pub mod backtest_html;
pub mod calibration;
pub mod html;
pub mod stability;
pub mod trends;

pub use backtest::{BackTest, BackTestTally};
pub use stability::{Stability, StabilityTally};
pub use trends::{Period, ReasonTrends, TrendTally};
