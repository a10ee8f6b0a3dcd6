//! Progress of long work (training, generating, importing): the library counts, the command line
//! draws (`cli::progress`), and a caller that wants neither passes [`Quiet`].

/// Receives the stages and steps of long work.
pub trait Progress {
    /// A new stage: what it does, and how many steps it has if known.
    fn stage(&self, what: &str, total: Option<u64>) {
        let _ = (what, total);
    }
    /// `steps` more steps of the current stage are done.
    fn advance(&self, steps: u64) {
        let _ = steps;
    }
}

/// Progress nobody watches.
pub struct Quiet;

impl Progress for Quiet {}
