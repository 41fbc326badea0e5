//! The one error type of the crate. Every variant prints as one line that names the
//! file and the problem; the binary prints it on stderr and exits with code 2.

use std::path::PathBuf;

use crate::checkpoint::CheckpointError;
use crate::compare::CompareError;
use crate::linalg::LinalgError;

/// Why a command could not produce its document (design.md: exit code 2).
#[derive(Debug, thiserror::Error)]
pub enum Error {
    /// A checkpoint (or a file it names) cannot be used.
    #[error(transparent)]
    Checkpoint(#[from] CheckpointError),
    /// A numerical comparison could not run.
    #[error(transparent)]
    Compare(#[from] CompareError),
    /// A linear-algebra routine failed.
    #[error(transparent)]
    Linalg(#[from] LinalgError),
    /// The arguments cannot be used with this input (the message names the file).
    #[error("{0}")]
    Usage(String),
    /// The `--out` folder or one of its files cannot be written.
    #[error("{}: {problem}", path.display())]
    Output {
        /// The folder or file.
        path: PathBuf,
        /// What went wrong, in words.
        problem: String,
    },
    /// The document could not be turned into JSON (a bug, never the input's fault).
    #[error("cannot serialise the report: {0}")]
    Json(#[from] serde_json::Error),
}

impl From<String> for Error {
    /// A one-line message that already names the file (as lower modules return them).
    fn from(message: String) -> Self {
        Error::Usage(message)
    }
}

/// The crate's result type.
pub type Result<T, E = Error> = std::result::Result<T, E>;

impl Error {
    /// The message as one line (line breaks of nested messages replaced by spaces).
    pub fn one_line(&self) -> String {
        self.to_string().replace(['\n', '\r'], " ")
    }
}
