//! `posaudit audit`: open, detect, read each table, run the analyses that fit its kind,
//! and gather verdicts and findings into the report model.
//!
//! This module orchestrates; the numbers come from the pure functions in
//! [`crate::analyze`]. Each kind has one function that turns its analysis into a verdict
//! and findings ([`one_d`] for learned and fixed 1-D tables, [`kinds`] for the others).

pub mod kinds;
pub mod one_d;

use std::path::Path;

use ndarray::Array2;
use serde::Serialize;

use crate::analyze::grid::GridAnalysis;
use crate::analyze::position_ids::PositionIdsCheck;
use crate::analyze::relative::RelativeAnalysis;
use crate::analyze::rotary::{LayerAgreement, RotaryAnalysis};
use crate::analyze::sinusoid::SinusoidFit;
use crate::analyze::spectrum::Spectrum;
use crate::analyze::untrained::UntrainedReport;
use crate::checkpoint::{Checkpoint, TensorInfo};
use crate::detect::{self, Detected, Kind};
use crate::report::model::{
    AUDIT_SCHEMA, AuditReport, CheckpointSummary, Finding, FindingCounts, Severity,
};

pub use one_d::Profile;

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
}

impl TableAudit {
    fn new(ckpt: &Checkpoint, t: &TensorInfo, d: &Detected) -> Self {
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
        }
    }

    /// The most severe finding's level, if any.
    pub fn worst(&self) -> Option<Severity> {
        self.findings.iter().map(|f| f.severity).max()
    }
}

/// Runs the audit of the checkpoint at `path`. `progress` is told about each table as
/// it starts (name, index, total), for a progress bar.
pub fn audit(
    path: &Path,
    forced: &[String],
    progress: &mut dyn FnMut(&str, usize, usize),
) -> Result<AuditReport, String> {
    let ckpt = Checkpoint::open(path).map_err(|e| e.to_string())?;
    audit_opened(&ckpt, forced, progress)
}

/// [`audit`] for a checkpoint that is already open.
pub fn audit_opened(
    ckpt: &Checkpoint,
    forced: &[String],
    progress: &mut dyn FnMut(&str, usize, usize),
) -> Result<AuditReport, String> {
    detect::check_forced(ckpt, forced)?;
    let detection = detect::detect(ckpt, forced).map_err(|e| e.to_string())?;
    let config = ckpt.config.as_ref();
    let mut tables = Vec::with_capacity(detection.tables.len());
    let mut warnings = ckpt.warnings.clone();
    // Rows of the 1-D table that shares the longest name prefix with a position-id
    // buffer (`bert.embeddings.position_ids` ↔ `bert.embeddings.position_embeddings`).
    let table_rows_for = |ids: &str| -> Option<usize> {
        detection
            .tables
            .iter()
            .filter(|d| matches!(d.kind, Kind::LearnedAbsolute | Kind::FixedSinusoidal))
            .max_by_key(|d| common_prefix_parts(ids, &d.name))
            .filter(|d| common_prefix_parts(ids, &d.name) > 0)
            .and_then(|d| ckpt.tensor(&d.name)?.as_table_dims().map(|x| x.0))
    };
    let mut first_rotary: Option<(usize, ndarray::Array1<f64>)> = None;
    let mut rotary_vectors: Vec<(String, ndarray::Array1<f64>)> = Vec::new();
    let total = detection.tables.len();
    for (i, d) in detection.tables.iter().enumerate() {
        progress(&d.name, i, total);
        let Some(t) = ckpt.tensor(&d.name) else {
            continue;
        };
        let mut audit = TableAudit::new(ckpt, t, d);
        match d.kind {
            Kind::PositionIds => {
                let values = ckpt.read_i64(t).map_err(|e| e.to_string())?;
                kinds::position_ids(
                    &mut audit,
                    values.as_slice().unwrap_or(&[]),
                    table_rows_for(&d.name),
                );
            }
            Kind::RotaryFrequencies => {
                let values = ckpt.read_f64(t).map_err(|e| e.to_string())?;
                let flat: ndarray::Array1<f64> = values.iter().copied().collect();
                rotary_vectors.push((d.name.clone(), flat.clone()));
                match &first_rotary {
                    Some((idx, first)) if *first == flat => {
                        let first_audit: &TableAudit = &tables[*idx];
                        audit.verdict = first_audit.verdict.clone();
                        audit.rotary = first_audit.rotary.clone();
                        audit.dim = first_audit.dim;
                        audit.same_as = Some(first_audit.name.clone());
                    }
                    _ => {
                        kinds::rotary(&mut audit, flat.view(), config);
                        if first_rotary.is_none() {
                            first_rotary = Some((tables.len(), flat));
                        }
                    }
                }
            }
            Kind::RelativeBias => {
                let table = read_2d(ckpt, t)?;
                kinds::relative(&mut audit, &table, config);
            }
            Kind::LearnedGrid2d => {
                let table = read_2d(ckpt, t)?;
                kinds::grid(&mut audit, &table, config);
            }
            Kind::LearnedAbsolute | Kind::FixedSinusoidal => {
                let table = read_2d(ckpt, t)?;
                one_d::audit_table(&mut audit, &table, &t.dtype, config, &mut warnings);
            }
        }
        audit
            .findings
            .sort_by_key(|f| std::cmp::Reverse(f.severity));
        tables.push(audit);
    }
    if rotary_vectors.len() > 1
        && let Some((idx, _)) = first_rotary
    {
        let views: Vec<(String, ndarray::ArrayView1<f64>)> = rotary_vectors
            .iter()
            .map(|(n, v)| (n.clone(), v.view()))
            .collect();
        let agreement = crate::analyze::rotary::compare_layers(&views);
        if !agreement.identical {
            tables[idx].findings.push(Finding {
                code: "rotary-layers-differ",
                severity: Severity::Warning,
                positions: None,
                message: format!(
                    "{} of {} stored rotary vectors differ from the first one.",
                    agreement.differing.len(),
                    agreement.count
                ),
                evidence: agreement
                    .differing
                    .iter()
                    .take(3)
                    .map(|d| format!("{}: max rel diff {:.2e}", d.name, d.max_rel_diff))
                    .collect::<Vec<_>>()
                    .join("; "),
                limits: "Layers may legitimately use different bases (e.g. local and global attention layers).".into(),
            });
        }
        tables[idx].layers = Some(agreement);
    }
    let config_rotary = if tables.iter().any(|t| t.kind == Kind::RotaryFrequencies) {
        None
    } else {
        kinds::rotary_from_config(config)
    };
    let config_alibi = config.and_then(|c| {
        let is_alibi = c
            .position_embedding_type
            .as_ref()
            .is_some_and(|h| h.value.eq_ignore_ascii_case("alibi"));
        let heads = usize::try_from(c.num_heads.as_ref()?.value).ok()?;
        is_alibi.then(|| crate::report::model::AlibiSlopes {
            heads,
            slopes: crate::analyze::rotary::alibi_slopes(heads),
        })
    });
    let summary = FindingCounts::of(&tables);
    Ok(AuditReport {
        schema: AUDIT_SCHEMA,
        checkpoint: CheckpointSummary::of(ckpt),
        config: ckpt.config.clone(),
        tables,
        config_rotary,
        skipped: detection.skipped,
        index_buffers: detection.index_buffers,
        config_alibi,
        warnings,
        summary,
    })
}

/// Number of leading dotted name parts two tensor names share.
fn common_prefix_parts(a: &str, b: &str) -> usize {
    a.split('.')
        .zip(b.split('.'))
        .take_while(|(x, y)| x == y)
        .count()
}

/// Reads a tensor as a table (rows × last dimension).
fn read_2d(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Array2<f64>, String> {
    ckpt.read_table(t).map_err(|e| e.to_string())
}
