//! Progress bars on stderr for long commands, drawn only when stderr is a terminal (indicatif
//! hides them otherwise), so logs and pipes stay clean.

use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};

/// A bar (known length) or a spinner (unknown length, with a count once steps arrive); cleared
/// when dropped. Nothing is drawn before the first stage.
pub struct Bar {
    bar: ProgressBar,
    /// A spinner whose count is shown (steps have arrived in this stage).
    counted: std::sync::atomic::AtomicBool,
}

const BAR: &str = "{msg} [{bar:30}] {pos}/{len} ({eta} left)";
const SPINNER: &str = "{spinner} {msg}";
const COUNTING_SPINNER: &str = "{spinner} {msg} {pos}";

fn style(template: &str) -> Option<ProgressStyle> {
    ProgressStyle::with_template(template)
        .ok()
        .map(|s| s.progress_chars("=> "))
}

impl Bar {
    /// A bar drawing on stderr when it is a terminal.
    pub fn new() -> Self {
        Bar {
            bar: ProgressBar::with_draw_target(None, ProgressDrawTarget::hidden()),
            counted: std::sync::atomic::AtomicBool::new(false),
        }
    }

    /// A bar for `total` steps of `what`.
    pub fn counting(what: &str, total: u64) -> Self {
        let b = Bar::new();
        crate::progress::Progress::stage(&b, what, Some(total));
        b
    }

    /// `steps` more steps done.
    pub fn inc(&self, steps: u64) {
        crate::progress::Progress::advance(self, steps);
    }
}

impl Default for Bar {
    fn default() -> Self {
        Bar::new()
    }
}

impl crate::progress::Progress for Bar {
    fn stage(&self, what: &str, total: Option<u64>) {
        use std::sync::atomic::Ordering;
        // Style first, so that no step of the change is drawn in the old one.
        let template = if total.is_some() { BAR } else { SPINNER };
        if let Some(s) = style(template) {
            self.bar.set_style(s);
        }
        self.counted.store(false, Ordering::Relaxed);
        match total {
            Some(n) => {
                self.bar.disable_steady_tick();
                self.bar.set_length(n);
            }
            None => {
                self.bar.unset_length();
                self.bar
                    .enable_steady_tick(std::time::Duration::from_millis(120));
            }
        }
        self.bar.set_position(0);
        self.bar.set_message(what.to_string());
        if self.bar.is_hidden() {
            self.bar.set_draw_target(ProgressDrawTarget::stderr());
        }
        self.bar.tick();
    }

    fn advance(&self, steps: u64) {
        use std::sync::atomic::Ordering;
        if self.bar.length().is_none() && !self.counted.swap(true, Ordering::Relaxed) {
            if let Some(s) = style(COUNTING_SPINNER) {
                self.bar.set_style(s);
            }
        }
        self.bar.inc(steps);
    }
}

impl Drop for Bar {
    fn drop(&mut self) {
        self.bar.finish_and_clear();
    }
}
