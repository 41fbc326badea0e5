//! The `audit` document: one [`TableAudit`] per detected table, the settings derived
//! from the config when no tensor holds them, and the finding counts.
//!
//! Every finding is made by the verdict code ([`crate::verdicts`]) before anything is
//! rendered, including the ones about config-derived settings ([`ConfigRotary`]):
//! JSON, Markdown, terminal and `--fail-on` all read [`AuditReport::summary`] and the
//! same findings.

use serde::Serialize;

use super::{CheckpointSummary, Finding, FindingCounts, Severity};
use crate::analyze::grid::GridAnalysis;
use crate::analyze::hygiene::Hygiene;
use crate::analyze::neighbours::{CosineMatrix, LocalityProfile};
use crate::analyze::norms::NormProfile;
use crate::analyze::periodicity::{Autocorrelation, RepeatedBlock};
use crate::analyze::position_ids::PositionIdsCheck;
use crate::analyze::relative::RelativeAnalysis;
use crate::analyze::rotary::{LayerAgreement, RotaryAnalysis};
use crate::analyze::sinusoid::SinusoidFit;
use crate::analyze::spectrum::Spectrum;
use crate::analyze::untrained::UntrainedReport;
use crate::analyze::waves::Wave;
use crate::checkpoint::{Checkpoint, TensorInfo};
use crate::config::ConfigHints;
use crate::detect::{Detected, IndexBuffer, Kind, Skipped};

/// Schema tag of the audit document.
pub const AUDIT_SCHEMA: &str = "posaudit/audit/v1";

/// The numbers of a table's trained rows alone: the rows from the first indexed position
/// up to the untrained tail.
#[derive(Debug, Clone, Serialize)]
pub struct TrainedRowsProfile {
    /// The half-open table rows measured.
    pub rows: [usize; 2],
    /// Spectrum of those rows, mean-centred.
    pub spectrum: Option<Spectrum>,
    /// Mean cosine against distance over those rows.
    pub locality: crate::analyze::neighbours::LocalityProfile,
}

/// The shape of a 1-D table along position: norms, neighbourhood, waves, periodicity,
/// hygiene.
#[derive(Debug, Clone, Serialize)]
pub struct Profile {
    /// Rows analysed (all rows, or the finite ones when some hold NaN/inf).
    pub analysed_rows: usize,
    /// Row norms, drift and robust outliers.
    pub norms: NormProfile,
    /// Cosine of each analysed row with the next (null where a row is zero).
    pub neighbour_cosine: Vec<Option<f64>>,
    /// Mean cosine against distance.
    pub locality: LocalityProfile,
    /// Downsampled position-by-position cosines (for the heatmap; not in the JSON).
    #[serde(skip)]
    pub cosine_matrix: CosineMatrix,
    /// Dominant wave of each leading component, in component order.
    pub waves: Vec<Option<Wave>>,
    /// Autocorrelation along positions.
    pub autocorrelation: Option<Autocorrelation>,
    /// A block repeated along positions (a table extended by copying).
    pub repeated_block: Option<RepeatedBlock>,
    /// Zero, duplicate and non-finite rows.
    pub hygiene: Hygiene,
}

/// Everything the audit says about one table (contract fields first).
#[derive(Debug, Clone, Serialize)]
pub struct TableAudit {
    /// Tensor name (as in scan).
    pub name: String,
    /// Kind (as in scan).
    pub kind: Kind,
    /// Stored shape (as in scan).
    pub shape: Vec<usize>,
    /// Stored element type (as in scan).
    pub dtype: String,
    /// The file holding it.
    pub file: String,
    /// Why the detector classified it so.
    pub why: String,
    /// Number of positions (rows of a 1-D table, cells of a grid, buckets of a bias table).
    pub positions: Option<usize>,
    /// Width of each position's vector (heads for bias tables, rotary dim for frequencies).
    pub dim: Option<usize>,
    /// One line: what this table is, in plain words.
    pub verdict: String,
    /// Untrained rows of a learned 1-D table (null for other kinds).
    pub untrained: Option<UntrainedReport>,
    /// The fitted formula of a fixed sinusoidal table (null unless fixed-sinusoidal).
    pub sinusoid: Option<SinusoidFit>,
    /// Rotary base and scaling (null unless rotary-frequencies).
    pub rotary: Option<RotaryAnalysis>,
    /// Grid layout and 2-D analysis (null unless learned-grid-2d).
    pub grid: Option<GridAnalysis>,
    /// Bucket decoding and per-head analysis (null unless relative-bias).
    pub relative: Option<RelativeAnalysis>,
    /// Spectrum of the mean-centred table (1-D tables).
    pub spectrum: Option<Spectrum>,
    /// Findings, most severe first.
    pub findings: Vec<Finding>,
    /// Norms, neighbourhood, waves, periodicity and hygiene of a 1-D table.
    pub profile: Option<Profile>,
    /// Check of an integer position-id buffer.
    pub position_ids: Option<PositionIdsCheck>,
    /// Agreement of per-layer rotary vectors (on the first of them).
    pub layers: Option<LayerAgreement>,
    /// When this table repeats another one's analysis (per-layer rotary vectors), its name.
    pub same_as: Option<String>,
    /// The optimizer's second moment of this table, when the checkpoint holds it.
    pub optimizer: Option<crate::analyze::moments::MomentEvidence>,
    /// Spectrum and locality of the trained rows alone, when the table has an untrained
    /// tail (whole-table numbers mix trained rows with noise).
    pub trained_rows_profile: Option<TrainedRowsProfile>,
}

impl TableAudit {
    /// The entry of a detected table, before any analysis.
    pub fn new(ckpt: &Checkpoint, t: &TensorInfo, d: &Detected) -> Self {
        TableAudit {
            name: d.name.clone(),
            kind: d.kind,
            shape: t.shape.clone(),
            dtype: t.dtype.to_string(),
            file: ckpt.file_name(t),
            why: d.why.clone(),
            positions: None,
            dim: None,
            verdict: String::new(),
            untrained: None,
            sinusoid: None,
            rotary: None,
            grid: None,
            relative: None,
            spectrum: None,
            findings: Vec::new(),
            profile: None,
            position_ids: None,
            layers: None,
            same_as: None,
            optimizer: None,
            trained_rows_profile: None,
        }
    }

    /// The most severe finding's level, if any.
    pub fn worst(&self) -> Option<Severity> {
        self.findings.iter().map(|f| f.severity).max()
    }
}

/// Rotary settings derived from the config when no frequency tensor is stored: the
/// analysis (flattened, as before), its verdict and its findings.
#[derive(Debug, Clone, Serialize)]
pub struct ConfigRotary {
    /// Base, scaling, factor and wavelengths implied by `rope_theta` / `rope_scaling`.
    #[serde(flatten)]
    pub analysis: RotaryAnalysis,
    /// One line: what the settings are, in plain words.
    pub verdict: String,
    /// Findings about the settings (e.g. `rotary-scaled`), most severe first.
    pub findings: Vec<Finding>,
}

/// ALiBi slopes implied by the config (no tensor is stored: they are computed at run time).
#[derive(Debug, Clone, Serialize)]
pub struct AlibiSlopes {
    /// Number of attention heads.
    pub heads: usize,
    /// Slope of each head, in head order (check-values §6.9).
    pub slopes: Vec<f64>,
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
    pub tables: Vec<TableAudit>,
    /// Rotary settings derived from the config when no frequency tensor is stored.
    pub config_rotary: Option<ConfigRotary>,
    /// Tensors of types the analyses cannot read.
    pub skipped: Vec<Skipped>,
    /// Integer index buffers that point into position tables (not tables themselves).
    pub index_buffers: Vec<IndexBuffer>,
    /// ALiBi slopes, when the config says positions are encoded by linear biases.
    pub config_alibi: Option<AlibiSlopes>,
    /// Non-fatal problems met while opening or analysing.
    pub warnings: Vec<String>,
    /// Counts of findings by severity: every table's and the config-derived ones.
    pub summary: FindingCounts,
}

impl AuditReport {
    /// Every finding of the document: the tables' in table order, then the
    /// config-derived ones.
    pub fn findings(&self) -> impl Iterator<Item = &Finding> {
        self.tables
            .iter()
            .flat_map(|t| &t.findings)
            .chain(self.config_rotary.iter().flat_map(|r| &r.findings))
    }

    /// Recounts [`AuditReport::summary`] from the findings.
    pub fn count_findings(&mut self) {
        self.summary = FindingCounts::of(self.findings());
    }
}
