//! Progress bars on stderr for long commands, drawn only when stderr is a terminal (indicatif
//! hides them otherwise), so logs and pipes stay clean.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A bar (known length) or a spinner with a count (unknown length); cleared when dropped.
pub struct Bar(ProgressBar);

impl Bar {
    pub fn new() -> Self {
        Bar(ProgressBar::with_draw_target(
            None,
            ProgressDrawTarget::stderr(),
        ))
    }

    /// A bar for `total` steps of `what`.
    pub fn counting(what: &str, total: u64) -> Self {
        let b = Bar::new();
        crate::progress::Progress::stage(&b, what, Some(total));
        b
    }

    pub fn inc(&self, steps: u64) {
        self.0.inc(steps);
    }
}

impl Default for Bar {
    fn default() -> Self {
        Bar::new()
    }
}

impl crate::progress::Progress for Bar {
    fn stage(&self, what: &str, total: Option<u64>) {
        let style = match total {
            Some(n) => {
                self.0.set_length(n);
                ProgressStyle::with_template("{msg} [{bar:30}] {pos}/{len} ({eta} left)")
            }
            None => {
                self.0.unset_length();
                ProgressStyle::with_template("{spinner} {msg} {pos}")
            }
        };
        if let Ok(style) = style {
            self.0.set_style(style.progress_chars("=> "));
        }
        self.0.set_position(0);
        self.0.set_message(what.to_string());
        self.0.tick();
    }

    fn advance(&self, steps: u64) {
        self.0.inc(steps);
    }
}

impl Drop for Bar {
    fn drop(&mut self) {
        self.0.finish_and_clear();
    }
}
