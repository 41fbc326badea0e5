//! The `extend` document: what `posaudit extend` plans (or did) to one position table,
//! the files it wrote, the config keys it changed, and the table's audit verdict before
//! and after, with the cautions that go with a synthesised table.

use serde::Serialize;
use serde_json::Value;

use super::{CheckpointSummary, Finding};
use crate::checkpoint::write::WrittenFile;
use crate::detect::Kind;

/// Schema tag of the extend document.
pub const EXTEND_SCHEMA: &str = "posaudit/extend/v1";

/// Rows copied unchanged from the input table into the new one.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RowMove {
    /// Rows of the input table, half-open.
    pub from: [usize; 2],
    /// Rows of the new table, half-open.
    pub to: [usize; 2],
}

/// One changed key of `config.json`.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ConfigChange {
    /// The key (dotted for nested objects, e.g. `vision_config.image_size`).
    pub key: String,
    /// The value before.
    pub from: Value,
    /// The value written.
    pub to: Value,
}

/// The standard deviation of re-initialised rows and where it came from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct InitStd {
    /// The value.
    pub value: f64,
    /// `--std`, the config key, or the estimate of the audit.
    pub from: String,
}

/// A patch grid before and after.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct GridChange {
    /// Height and width before.
    pub from: [usize; 2],
    /// Height and width after.
    pub to: [usize; 2],
    /// Rows before the grid (class, register tokens), copied unchanged.
    pub extra_rows: usize,
}

/// Another tensor rewritten to match the edited table (a position-id buffer).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AlsoRewritten {
    /// Tensor name.
    pub name: String,
    /// Shape before.
    pub old_shape: Vec<usize>,
    /// Shape after.
    pub new_shape: Vec<usize>,
    /// What it now holds.
    pub what: String,
}

/// What is done to the table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EditPlan {
    /// Tensor name.
    pub table: String,
    /// Its kind (as in scan).
    pub kind: Kind,
    /// `interpolate`, `cubic`, `copy`, `reinit`, `bilinear`, `bicubic` or `regenerate`.
    pub method: String,
    /// `all` (every position row rebuilt from the trained rows) or `untrained`.
    pub rows: String,
    /// Stored element type (kept).
    pub dtype: String,
    /// Shape before.
    pub old_shape: Vec<usize>,
    /// Shape after.
    pub new_shape: Vec<usize>,
    /// Rows before position 0 that the family reserves (offset, padding), kept.
    pub reserved_rows: usize,
    /// Input rows the new values are computed from, half-open (null for a formula).
    pub source_rows: Option<[usize; 2]>,
    /// Rows copied unchanged.
    pub kept: Vec<RowMove>,
    /// Rows of the new table that hold computed values, half-open.
    pub synthesised: Vec<[usize; 2]>,
    /// How the new values are computed, in one or two sentences.
    pub how: String,
    /// Std of drawn rows (`reinit`).
    pub init_std: Option<InitStd>,
    /// Seed of drawn rows (`reinit`).
    pub seed: Option<u64>,
    /// Grid sizes (`bilinear`, `bicubic`).
    pub grid: Option<GridChange>,
    /// Other tensors rewritten to match.
    pub also: Vec<AlsoRewritten>,
    /// `config.json` keys changed.
    pub config_changes: Vec<ConfigChange>,
    /// Config keys that could not be updated, and why.
    pub config_notes: Vec<String>,
}

/// The audit of the edited table in one checkpoint.
#[derive(Debug, Clone, Serialize)]
pub struct TableState {
    /// The checkpoint.
    pub path: String,
    /// The table's shape there.
    pub shape: Vec<usize>,
    /// The audit's verdict line.
    pub verdict: String,
    /// The audit's findings on the table.
    pub findings: Vec<Finding>,
}

/// The whole extend document.
#[derive(Debug, Clone, Serialize)]
pub struct ExtendReport {
    /// Always [`EXTEND_SCHEMA`].
    pub schema: &'static str,
    /// The input checkpoint (read only).
    pub input: CheckpointSummary,
    /// The new checkpoint folder.
    pub output: String,
    /// True when only the plan was made (`--dry-run`): nothing written, no `after`.
    pub dry_run: bool,
    /// What is done.
    pub plan: EditPlan,
    /// Weight files written (replaced tensors named; the others are byte copies).
    pub written: Vec<WrittenFile>,
    /// Other files of the input folder copied unchanged (tokenizer, generation config).
    pub copied: Vec<String>,
    /// The table's audit in the input.
    pub before: TableState,
    /// The table's audit in the new checkpoint (null for `--dry-run`).
    pub after: Option<TableState>,
    /// What the new table is and is not.
    pub cautions: Vec<String>,
    /// Non-fatal problems.
    pub warnings: Vec<String>,
}
