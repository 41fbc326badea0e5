//! The `compare` document. [`crate::commands::compare`] fills it (the numbers come from
//! [`crate::compare`], the findings from [`crate::verdicts::compare`]); the renderers
//! in [`crate::report`] only format it.
//!
//! # Format
//! `posaudit compare --json` prints one [`CompareReport`] (contract fields first):
//!
//! ```text
//! {"schema": "posaudit/compare/v1",
//!  "checkpoints": [{"index", "label", "step", "path", "format", "files", "tensors", "bytes", ...}],
//!  "run": {"path", "checkpoints": [{"name", "step", "folder"}], "skipped": [...]} | null,
//!  "tables": [{"name", "kind", "matched_by": "name" | "kind and shape",
//!              "matches": [{"checkpoint", "name", "matched_by", "shape", "dtype"} | null],
//!              "missing_from": [...], "notes": [...],
//!              "steps": [{"from", "to", "label", "change", "unchanged", "subspace_similarity",
//!                         "rows_compared", "per_row", "mean_change", ..., "similarity"}],
//!              "first_to_last": {...same as a step...} | null,
//!              "timeline": {...} | null, "timeline_unavailable": "..." | null,
//!              "findings": [{"code", "severity", "positions", "message", "evidence",
//!                            "limits", "step"}]}],
//!  "warnings": ["..."]}
//! ```

use std::path::{Path, PathBuf};

use serde::Serialize;

use super::{CheckpointSummary, Finding};
use crate::compare::{MovedRow, NoiseLevel, Similarity, TimelineSummary, UnchangedRange};
use crate::detect::Kind;

/// Schema tag of the compare document.
pub const COMPARE_SCHEMA: &str = "posaudit/compare/v1";

/// One checkpoint, in command-line order.
#[derive(Debug, Clone, Serialize)]
pub struct CheckpointEntry {
    /// Position on the command line (0-based); steps refer to it.
    pub index: usize,
    /// What the reports call it: its name (the last path component, with parents added
    /// until the labels are unique), or the run folder's entry name.
    pub label: String,
    /// The training step its name gives (`checkpoint-500` → 500), when it has one.
    pub step: Option<u64>,
    /// Path, format, files, tensors, bytes.
    #[serde(flatten)]
    pub summary: CheckpointSummary,
}

/// One entry of a run folder.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RunEntry {
    /// The entry's name inside the run folder.
    pub name: String,
    /// The step number its name gives (see `commands::run::steps_of`).
    pub step: Option<u64>,
    /// True for a sub-folder (holding weight files), false for a checkpoint file.
    pub folder: bool,
}

/// What `compare RUN_DIR` found in the run folder.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RunFolder {
    /// The run folder as given.
    pub path: String,
    /// The checkpoints compared, ordered by step number (ties by name).
    pub checkpoints: Vec<RunEntry>,
    /// Checkpoint-like entries left out because their names give no step number.
    pub skipped: Vec<RunEntry>,
}

impl RunFolder {
    /// The paths of the checkpoints, in order.
    pub fn paths(&self) -> Vec<PathBuf> {
        let dir = Path::new(&self.path);
        self.checkpoints.iter().map(|e| dir.join(&e.name)).collect()
    }

    /// One sentence: what was found and in which order.
    pub fn sentence(&self) -> String {
        let listed: Vec<String> = self.checkpoints.iter().map(|e| e.name.clone()).collect();
        let mut s = format!(
            "run folder {}: {} checkpoints found, ordered by step number: {}",
            self.path,
            self.checkpoints.len(),
            listed.join(", ")
        );
        if !self.skipped.is_empty() {
            let names: Vec<&str> = self.skipped.iter().map(|e| e.name.as_str()).collect();
            s.push_str(&format!(
                "; left out (no step number in the name): {}",
                names.join(", ")
            ));
        }
        s
    }
}

/// How a table was found in a checkpoint.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum MatchedBy {
    /// The same tensor name.
    #[serde(rename = "name")]
    Name,
    /// Another name, but the only unmatched table of the same kind and (squeezed) shape.
    #[serde(rename = "kind and shape")]
    KindAndShape,
}

impl MatchedBy {
    /// The JSON string.
    pub fn as_str(self) -> &'static str {
        match self {
            MatchedBy::Name => "name",
            MatchedBy::KindAndShape => "kind and shape",
        }
    }
}

/// Where one table was found in one checkpoint.
#[derive(Debug, Clone, Serialize)]
pub struct TableMatch {
    /// Checkpoint index.
    pub checkpoint: usize,
    /// The tensor name in that checkpoint.
    pub name: String,
    /// How it was matched to the table.
    pub matched_by: MatchedBy,
    /// Stored shape.
    pub shape: Vec<usize>,
    /// Stored element type.
    pub dtype: String,
}

/// One comparison of a table between two checkpoints (contract fields first).
#[derive(Debug, Clone, Serialize)]
pub struct StepEntry {
    /// Index of the earlier checkpoint.
    pub from: usize,
    /// Index of the later checkpoint.
    pub to: usize,
    /// The two checkpoints' labels, `earlier → later` (e.g. `step-1000 → step-2000`).
    pub label: String,
    /// L2 norm of the change of each compared row, ‖b_i − a_i‖ (table units); empty when
    /// the widths differ (no per-row comparison is possible).
    pub change: Vec<f64>,
    /// Half-open ranges `[start, end)` of rows that are bit-identical or identical up to
    /// one common scale factor.
    pub unchanged: Vec<[usize; 2]>,
    /// Mean cos² of the principal angles between the leading subspaces of the centred
    /// tables, in [0, 1]; null when it cannot be computed (`similarity_unavailable`).
    pub subspace_similarity: Option<f64>,
    /// Rows compared: the common leading rows of the two tables.
    pub rows_compared: usize,
    /// Shapes of the two tables read as tables (rows × width).
    pub shapes: [[usize; 2]; 2],
    /// True when per-row measures were computed (equal widths, finite values).
    pub per_row: bool,
    /// Why per-row measures are missing, or what was compared when the row counts differ.
    pub note: Option<String>,
    /// Mean of `change` over the compared rows.
    pub mean_change: Option<f64>,
    /// Median of the relative change over rows that have one.
    pub median_relative_change: Option<f64>,
    /// Rows in `unchanged` ranges.
    pub unchanged_rows: usize,
    /// ‖b_i − a_i‖ / ‖a_i‖ per row (null for a zero row that became non-zero).
    pub relative_change: Vec<Option<f64>>,
    /// Cosine between a_i and b_i per row (null when either is zero).
    pub cosine: Vec<Option<f64>>,
    /// The rows that moved most, largest first.
    pub most_moved: Vec<MovedRow>,
    /// Each unchanged range with its scale factor and residual.
    pub unchanged_detail: Vec<UnchangedRange>,
    /// Relative elementwise tolerance of the unchanged test: storage rounding plus
    /// 512 rounding steps of the weight-decay arithmetic.
    pub unchanged_tolerance: Option<f64>,
    /// Absolute part of the elementwise bound (smallest subnormal of the storage type).
    pub unchanged_absolute: Option<f64>,
    /// Unit roundoff of the arithmetic that applied weight decay (2^-24 for float32):
    /// the unit of the "rounding steps" the findings quote.
    pub decay_unit_roundoff: Option<f64>,
    /// The storage type the tolerance comes from (the coarser of the two).
    pub tolerance_dtype: Option<String>,
    /// Change below which a row counts as not having moved in this step.
    pub noise: Option<NoiseLevel>,
    /// The full rotation-invariant comparison (angles, k and why, CKA, Procrustes,
    /// chance levels).
    pub similarity: Option<Similarity>,
    /// Why `similarity` is null.
    pub similarity_unavailable: Option<String>,
}

/// A finding of the comparison, with the step it is about.
#[derive(Debug, Clone, Serialize)]
pub struct CompareFinding {
    /// Code, severity, positions, message, evidence, limits.
    #[serde(flatten)]
    pub finding: Finding,
    /// `[from, to]` checkpoint indices of the step, when it is about one step.
    pub step: Option<[usize; 2]>,
}

/// Everything the comparison says about one table.
#[derive(Debug, Clone, Serialize)]
pub struct TableComparison {
    /// Name in the first checkpoint that holds it.
    pub name: String,
    /// Kind (contract string) in that checkpoint.
    pub kind: Kind,
    /// `name` when every match is by name, otherwise `kind and shape`.
    pub matched_by: MatchedBy,
    /// Per checkpoint: where the table was found, or null when it is missing.
    pub matches: Vec<Option<TableMatch>>,
    /// Checkpoints that do not hold the table.
    pub missing_from: Vec<usize>,
    /// Consecutive steps between the checkpoints that hold the table.
    pub steps: Vec<StepEntry>,
    /// First against last checkpoint holding it, when it is held by three or more.
    pub first_to_last: Option<StepEntry>,
    /// Per position the first step at which it moved beyond noise, convergence and a
    /// heat map; null with fewer than three checkpoints.
    pub timeline: Option<TimelineSummary>,
    /// Why `timeline` is null when three or more checkpoints hold the table.
    pub timeline_unavailable: Option<String>,
    /// Findings, most severe first.
    pub findings: Vec<CompareFinding>,
    /// Plain remarks (shape changes, skipped kinds).
    pub notes: Vec<String>,
}

/// The whole compare document.
#[derive(Debug, Clone, Serialize)]
pub struct CompareReport {
    /// Always [`COMPARE_SCHEMA`].
    pub schema: &'static str,
    /// The checkpoints, in command-line order (or the run folder's step order).
    pub checkpoints: Vec<CheckpointEntry>,
    /// What a single run folder given as PATH held; null when the checkpoints were
    /// given one by one.
    pub run: Option<RunFolder>,
    /// One entry per table found in any checkpoint.
    pub tables: Vec<TableComparison>,
    /// Non-fatal problems met while opening or comparing.
    pub warnings: Vec<String>,
}

impl CompareReport {
    /// The label of checkpoint `index` (its index as text if out of range).
    pub fn label(&self, index: usize) -> String {
        self.checkpoints
            .get(index)
            .map_or_else(|| index.to_string(), |c| c.label.clone())
    }

    /// True when every checkpoint has a training step number.
    pub fn steps_known(&self) -> bool {
        !self.checkpoints.is_empty() && self.checkpoints.iter().all(|c| c.step.is_some())
    }

    /// True when a finding of any table is at or above `level` (`--fail-on`).
    pub fn reaches(&self, level: crate::model::Severity) -> bool {
        self.tables
            .iter()
            .flat_map(|t| &t.findings)
            .any(|f| f.finding.severity >= level)
    }
}
