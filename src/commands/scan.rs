//! `posaudit scan`: open, detect, list.

use std::path::PathBuf;

use crate::checkpoint::Checkpoint;
use crate::detect;
use crate::error::Result;
use crate::model::CheckpointSummary;
use crate::model::scan::{SCAN_SCHEMA, ScanReport, TableEntry};

/// What `scan` needs.
#[derive(Debug, Clone, Default)]
pub struct ScanOptions {
    /// The checkpoint file or folder.
    pub path: PathBuf,
    /// Tensor names to classify even if the detector passes them over.
    pub tables: Vec<String>,
    /// The weight file to read when `path` is a folder holding several (`--file`).
    pub file: Option<String>,
}

/// Opens the checkpoint, detects its position tables (plus the forced names) and builds
/// the scan document. Errors are one line naming the file and the problem.
pub fn run(options: &ScanOptions) -> Result<ScanReport> {
    let ckpt = super::open(&options.path, options.file.as_deref())?;
    scan_opened(&ckpt, &options.tables)
}

/// [`run`] for a checkpoint that is already open.
pub fn scan_opened(ckpt: &Checkpoint, forced: &[String]) -> Result<ScanReport> {
    detect::check_forced(ckpt, forced)?;
    let detection = detect::detect(ckpt, forced)?;
    let tables = detection
        .tables
        .iter()
        .filter_map(|d| ckpt.tensor(&d.name).map(|t| TableEntry::of(ckpt, t, d)))
        .collect();
    Ok(ScanReport {
        schema: SCAN_SCHEMA,
        checkpoint: CheckpointSummary::of(ckpt),
        config: ckpt.config.clone(),
        tables,
        skipped: detection.skipped,
        index_buffers: detection.index_buffers,
        warnings: ckpt.warnings.clone(),
    })
}
