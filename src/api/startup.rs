//! Why the service did not start (or stopped), one variant per cause, each with its exit
//! status: the operator's own files and flags are bad input, the machine and the network are
//! failures. `plumbline serve` prints the message and exits with [`StartError::exit_code`].

use super::auth::KeyFileError;
use super::registry::ModelSetError;
use crate::records::StoreError;
use std::net::{IpAddr, SocketAddr};
use std::path::PathBuf;

#[derive(Debug, thiserror::Error)]
pub enum StartError {
    /// A limit flag outside its range (the message names the flag and the range).
    #[error("{0}")]
    Limit(&'static str),
    /// `--no-auth` on an address other machines can reach.
    #[error("--no-auth is only for a local trial: {0} is not a loopback address (use 127.0.0.1 or ::1, or give --keys)")]
    OpenOffLoopback(IpAddr),
    #[error(
        "no API keys: pass --keys FILE (or set PLUMBLINE_KEYS), or --no-auth for a local trial"
    )]
    NoKeys,
    #[error("cannot read key file {}: {source}", path.display())]
    KeyFileUnreadable {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error(transparent)]
    KeyFile(#[from] KeyFileError),
    #[error("the key file holds no keys")]
    EmptyKeyFile,
    /// A model file does not load, or two are the same model.
    #[error(transparent)]
    Model(#[from] ModelSetError),
    /// The certificate chain or key of `--tls-cert` / `--tls-key` (the message names the file).
    #[error("{0}")]
    Tls(String),
    /// The decision store could not be opened or migrated; `location` is redacted.
    #[error("decision store {location}: {source}")]
    Store {
        location: String,
        source: StoreError,
    },
    #[error("decision store {location}: opening it panicked")]
    StorePanicked { location: String },
    #[error("cannot listen on {addr}: {source}")]
    Listen {
        addr: SocketAddr,
        source: std::io::Error,
    },
    /// The running server failed (after it had started listening).
    #[error("the service stopped: {0}")]
    Run(std::io::Error),
}

impl StartError {
    /// The process exit status for this cause ([`crate::exit`]).
    pub fn exit_code(&self) -> i32 {
        match self {
            StartError::Limit(_)
            | StartError::OpenOffLoopback(_)
            | StartError::NoKeys
            | StartError::KeyFileUnreadable { .. }
            | StartError::KeyFile(_)
            | StartError::EmptyKeyFile
            | StartError::Model(_)
            | StartError::Tls(_) => crate::exit::BAD_INPUT,
            // The database itself refused (a wrong password, a schema newer than this binary):
            // the operator's to fix. Out of reach or too slow: a failure.
            StartError::Store {
                source: StoreError::Failed(_),
                ..
            } => crate::exit::BAD_INPUT,
            StartError::Store { .. }
            | StartError::StorePanicked { .. }
            | StartError::Listen { .. }
            | StartError::Run(_) => crate::exit::FAILURE,
        }
    }
}
