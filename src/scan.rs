//! `posaudit scan`: open, detect, list.

use std::path::Path;

use crate::checkpoint::Checkpoint;
use crate::detect;
use crate::report::model::{CheckpointSummary, SCAN_SCHEMA, ScanReport, TableEntry};

/// Opens the checkpoint at `path`, detects its position tables (plus `forced` names) and
/// builds the scan document. Errors are one line naming the file and the problem.
pub fn scan(path: &Path, forced: &[String]) -> Result<ScanReport, String> {
    let ckpt = Checkpoint::open(path).map_err(|e| e.to_string())?;
    scan_opened(&ckpt, forced)
}

/// [`scan`] for a checkpoint that is already open.
pub fn scan_opened(ckpt: &Checkpoint, forced: &[String]) -> Result<ScanReport, String> {
    detect::check_forced(ckpt, forced)?;
    let detection = detect::detect(ckpt, forced).map_err(|e| e.to_string())?;
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
