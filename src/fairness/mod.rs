//! Fair-lending screening: approval-rate ratios across protected groups, joined to the recorded
//! decisions by application id, with significance and a cutoff sweep. The result is a
//! screening statistic for the people who decide, not a legal finding: every report says so.

pub mod html;
pub mod membership;
pub mod report;
pub mod stats;

pub use membership::{Dimension, Kind, UploadError};
pub use report::{Aggregator, DecisionRow, Refer, Report, Settings};
