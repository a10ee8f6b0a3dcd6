//! The process's exit statuses, one meaning each, shared by every command (README, "Exit
//! statuses"). A supervisor restarts on [`FAILURE`] and pages someone on [`BAD_INPUT`].

/// Something outside the caller's input failed: a port taken, a store out of reach, a write.
pub const FAILURE: i32 = 1;
/// The input is wrong: a flag, a model, a key file, a data file; the message names it.
pub const BAD_INPUT: i32 = 2;
/// `plumbline replay`: a decision moved beyond the tolerance.
pub const CHANGED: i32 = 3;
