//! The document model: the plain serde data behind every output.
//!
//! Everything a report says is in these structs before any renderer runs: the JSON
//! documents are these structs serialised, and the terminal summary, the Markdown
//! reports and the SVG plots only format what they hold (contract: design.md "JSON
//! documents"). This layer sits below both the verdict code that fills it
//! ([`crate::verdicts`]) and the renderers ([`crate::report`]); it imports only the
//! result structs of the analyses and the checkpoint index.
//!
//! - [`scan`]: the `posaudit/scan/v1` document.
//! - [`audit`]: the `posaudit/audit/v1` document, one [`audit::TableAudit`] per table.
//! - [`compare`]: the `posaudit/compare/v1` document.
//! - [`finding`]: [`Finding`], its [`FindingCode`]s and [`Severity`].

pub mod audit;
pub mod compare;
pub mod finding;
pub mod scan;

use serde::Serialize;

use crate::checkpoint::{Checkpoint, Format};

pub use finding::{Finding, FindingCode, FindingCounts, Severity};

/// The checkpoint a report is about.
#[derive(Debug, Clone, Serialize)]
pub struct CheckpointSummary {
    /// The path as given.
    pub path: String,
    /// The format.
    pub format: Format,
    /// Number of files (1, or the shards).
    pub files: usize,
    /// Number of tensors.
    pub tensors: usize,
    /// Total bytes of the files.
    pub bytes: u64,
}

impl CheckpointSummary {
    /// Summarises an opened checkpoint.
    pub fn of(ckpt: &Checkpoint) -> Self {
        CheckpointSummary {
            path: ckpt.path.display().to_string(),
            format: ckpt.format,
            files: ckpt.files.len(),
            tensors: ckpt.tensors.len(),
            bytes: ckpt.total_bytes(),
        }
    }
}
