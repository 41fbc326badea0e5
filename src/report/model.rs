//! The serde structs behind every output (contract: design.md "JSON documents").
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

use crate::checkpoint::{Checkpoint, Format, TensorInfo};
use crate::config::ConfigHints;
use crate::detect::{Detected, IndexBuffer, Kind, Skipped};

/// Schema tag of the scan document.
pub const SCAN_SCHEMA: &str = "posaudit/scan/v1";

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

/// Schema tag of the audit document.
pub const AUDIT_SCHEMA: &str = "posaudit/audit/v1";

/// How serious a finding is. Ordered: `info < warning < error`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, clap::ValueEnum)]
#[serde(rename_all = "lowercase")]
pub enum Severity {
    /// Worth knowing; nothing to act on by itself.
    Info,
    /// Probably needs attention before relying on the table.
    Warning,
    /// The table is not what it claims, or cannot be trusted as stored.
    Error,
}

impl Severity {
    /// The lowercase name.
    pub fn as_str(self) -> &'static str {
        match self {
            Severity::Info => "info",
            Severity::Warning => "warning",
            Severity::Error => "error",
        }
    }
}

/// One finding about one table (contract: `code`, `severity`, `positions`, `message`).
#[derive(Debug, Clone, Serialize)]
pub struct Finding {
    /// Stable code, e.g. `untrained-tail` (design.md lists the codes).
    pub code: &'static str,
    /// How serious it is.
    pub severity: Severity,
    /// Half-open row range [start, end) the finding is about, when it is about rows.
    pub positions: Option<[usize; 2]>,
    /// One or two sentences: what was found.
    pub message: String,
    /// The numbers behind it.
    pub evidence: String,
    /// What the evidence cannot tell, and what to check before acting on it.
    pub limits: String,
}

/// The whole audit document.
#[derive(Debug, Clone, Serialize)]
pub struct AuditReport {
    /// Always [`AUDIT_SCHEMA`].
    pub schema: &'static str,
    /// The checkpoint.
    pub checkpoint: CheckpointSummary,
    /// Hints read from `config.json` (and format metadata), or null.
    pub config: Option<ConfigHints>,
    /// One entry per detected table, in scan order.
    pub tables: Vec<crate::audit::TableAudit>,
    /// Rotary settings derived from the config when no frequency tensor is stored.
    pub config_rotary: Option<crate::analyze::rotary::RotaryAnalysis>,
    /// Tensors of types the analyses cannot read.
    pub skipped: Vec<Skipped>,
    /// Integer index buffers that point into position tables (not tables themselves).
    pub index_buffers: Vec<IndexBuffer>,
    /// ALiBi slopes, when the config says positions are encoded by linear biases.
    pub config_alibi: Option<AlibiSlopes>,
    /// Non-fatal problems met while opening or analysing.
    pub warnings: Vec<String>,
    /// Counts of findings by severity.
    pub summary: FindingCounts,
}

/// Number of findings at each severity.
#[derive(Debug, Clone, Copy, Default, Serialize, PartialEq, Eq)]
pub struct FindingCounts {
    /// `error` findings.
    pub error: usize,
    /// `warning` findings.
    pub warning: usize,
    /// `info` findings.
    pub info: usize,
}

impl FindingCounts {
    /// Counts the findings of every table.
    pub fn of(tables: &[crate::audit::TableAudit]) -> Self {
        let mut c = FindingCounts::default();
        for f in tables.iter().flat_map(|t| &t.findings) {
            match f.severity {
                Severity::Error => c.error += 1,
                Severity::Warning => c.warning += 1,
                Severity::Info => c.info += 1,
            }
        }
        c
    }

    /// True when a finding at or above `level` exists.
    pub fn reaches(&self, level: Severity) -> bool {
        match level {
            Severity::Info => self.error + self.warning + self.info > 0,
            Severity::Warning => self.error + self.warning > 0,
            Severity::Error => self.error > 0,
        }
    }
}

/// ALiBi slopes implied by the config (no tensor is stored: they are computed at run time).
#[derive(Debug, Clone, Serialize)]
pub struct AlibiSlopes {
    /// Number of attention heads.
    pub heads: usize,
    /// Slope of each head, in head order (check-values §6.9).
    pub slopes: Vec<f64>,
}
