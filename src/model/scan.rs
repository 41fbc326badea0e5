//! The `scan` document.
//!
//! # Format
//! `posaudit scan --json` prints one [`ScanReport`]:
//!
//! ```text
//! {"schema": "posaudit/scan/v1",
//!  "checkpoint": {"path", "format", "files", "tensors", "bytes"},
//!  "config": {...hints, each with the key it came from...} | null,
//!  "tables": [{"name", "kind", "shape", "dtype", "file", "why"}],
//!  "skipped": [{"name", "dtype", "reason"}],
//!  "warnings": ["..."]}
//! ```

use serde::Serialize;

use super::CheckpointSummary;
use crate::checkpoint::{Checkpoint, TensorInfo};
use crate::config::ConfigHints;
use crate::detect::{Detected, IndexBuffer, Kind, Skipped};

/// Schema tag of the scan document.
pub const SCAN_SCHEMA: &str = "posaudit/scan/v1";

/// One detected table, as scan lists it.
#[derive(Debug, Clone, Serialize)]
pub struct TableEntry {
    /// Tensor name.
    pub name: String,
    /// Kind (contract string).
    pub kind: Kind,
    /// Stored shape.
    pub shape: Vec<usize>,
    /// Stored element type.
    pub dtype: String,
    /// The file holding it.
    pub file: String,
    /// The name, shape and content evidence that decided the kind.
    pub why: String,
}

impl TableEntry {
    /// Builds the entry of a detected table.
    pub fn of(ckpt: &Checkpoint, t: &TensorInfo, d: &Detected) -> Self {
        TableEntry {
            name: d.name.clone(),
            kind: d.kind,
            shape: t.shape.clone(),
            dtype: t.dtype.to_string(),
            file: ckpt.file_name(t),
            why: d.why.clone(),
        }
    }
}

/// The `scan` document.
#[derive(Debug, Clone, Serialize)]
pub struct ScanReport {
    /// Always [`SCAN_SCHEMA`].
    pub schema: &'static str,
    /// The checkpoint.
    pub checkpoint: CheckpointSummary,
    /// Hints read from `config.json` (and format metadata), or null.
    pub config: Option<ConfigHints>,
    /// The detected position tables.
    pub tables: Vec<TableEntry>,
    /// Tensors of types the analyses cannot read.
    pub skipped: Vec<Skipped>,
    /// Integer index buffers that point into position tables (not tables themselves).
    pub index_buffers: Vec<IndexBuffer>,
    /// Non-fatal problems met while opening.
    pub warnings: Vec<String>,
}
