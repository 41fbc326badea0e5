//! `posaudit audit`: open, detect, read each table, run the analyses that fit its kind,
//! and gather verdicts and findings into the audit document.
//!
//! This module orchestrates and reads; the numbers come from the pure functions in
//! [`crate::analyze`], the verdicts and findings from [`crate::verdicts`]. Every
//! finding, the config-derived ones included, is in the returned document.

use std::path::PathBuf;

use ndarray::Array2;

use crate::checkpoint::{Checkpoint, TensorInfo};
use crate::detect::{self, Kind};
use crate::error::Result;
use crate::model::CheckpointSummary;
use crate::model::FindingCounts;
use crate::model::audit::{AUDIT_SCHEMA, AlibiSlopes, AuditReport, TableAudit};
use crate::verdicts::{kinds, one_d};

/// What `audit` needs.
#[derive(Debug, Clone)]
pub struct AuditOptions {
    /// The checkpoint file or folder.
    pub path: PathBuf,
    /// Tensor names to analyse even if the detector passes them over.
    pub tables: Vec<String>,
    /// Threads for the linear algebra of large tables (at least 1).
    pub threads: usize,
    /// The weight file to read when `path` is a folder holding several (`--file`).
    pub file: Option<String>,
}

impl Default for AuditOptions {
    fn default() -> Self {
        AuditOptions {
            path: PathBuf::new(),
            tables: Vec::new(),
            threads: 1,
            file: None,
        }
    }
}

/// Runs the audit of the checkpoint at `options.path`. `progress` is told about each table as
/// it starts (name, index, total), for a progress bar.
pub fn run(
    options: &AuditOptions,
    progress: &mut dyn FnMut(&str, usize, usize),
) -> Result<AuditReport> {
    crate::linalg::set_threads(options.threads.max(1));
    let ckpt = super::open_for_audit(&options.path, options.file.as_deref())?;
    audit_opened(&ckpt, &options.tables, progress)
}

/// [`run`] for a checkpoint that is already open.
pub fn audit_opened(
    ckpt: &Checkpoint,
    forced: &[String],
    progress: &mut dyn FnMut(&str, usize, usize),
) -> Result<AuditReport> {
    detect::check_forced(ckpt, forced)?;
    let detection = detect::detect(ckpt, forced)?;
    // Tensors that are tables only because `--table` named them: they are audited, but
    // never change the verdicts on the others (a position-id buffer is not matched to a
    // forced token embedding, a forced 1-D weight is not a rotary layer).
    let forced_only: std::collections::HashSet<String> = if forced.is_empty() {
        Default::default()
    } else {
        let natural = detect::detect(ckpt, &[])?;
        forced
            .iter()
            .filter(|f| !natural.tables.iter().any(|d| &d.name == *f))
            .cloned()
            .collect()
    };
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
            .filter(|d| !forced_only.contains(&d.name))
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
                let values = ckpt.read_i64(t)?;
                kinds::position_ids(
                    &mut audit,
                    values.as_slice().unwrap_or(&[]),
                    table_rows_for(&d.name),
                );
            }
            Kind::RotaryFrequencies => {
                let values = ckpt.read_f64(t)?;
                let flat: ndarray::Array1<f64> = values.iter().copied().collect();
                if !forced_only.contains(&d.name) {
                    rotary_vectors.push((d.name.clone(), flat.clone()));
                }
                match &first_rotary {
                    Some((idx, first)) if *first == flat => {
                        let first_audit: &TableAudit = &tables[*idx];
                        audit.verdict = first_audit.verdict.clone();
                        audit.rotary = first_audit.rotary.clone();
                        audit.dim = first_audit.dim;
                        // The same values carry the same findings: a pipeline that reads
                        // one layer's entry sees them there, not only on the first layer.
                        audit.findings = first_audit
                            .findings
                            .iter()
                            .cloned()
                            .map(|mut f| {
                                f.evidence = format!(
                                    "{} (the same values as `{}`, whose analysis this is)",
                                    f.evidence, first_audit.name
                                );
                                f
                            })
                            .collect();
                        audit.same_as = Some(first_audit.name.clone());
                    }
                    _ => {
                        kinds::rotary(&mut audit, flat.view(), config);
                        if first_rotary.is_none() && !forced_only.contains(&d.name) {
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
                // A training checkpoint's optimizer state: the table's second moment.
                if d.kind == Kind::LearnedAbsolute
                    && let Some(name) = crate::analyze::moments::second_moment_for(
                        &t.shape,
                        ckpt.tensors
                            .iter()
                            .filter(|x| detect::names::optimizer_state(&x.name).is_some())
                            .map(|x| (x.name.as_str(), x.shape.as_slice())),
                    )
                    && let Some(m) = ckpt.tensor(name)
                {
                    let moments = read_2d(ckpt, m)?;
                    if moments.dim() == table.dim() {
                        one_d::optimizer_moments(&mut audit, name, &moments);
                    }
                }
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
        tables[idx]
            .findings
            .extend(kinds::rotary_layers(&agreement));
        tables[idx].layers = Some(agreement);
    }
    let config_rotary = if tables.iter().any(|t| t.kind == Kind::RotaryFrequencies) {
        None
    } else {
        kinds::config_rotary(config)
    };
    let config_alibi = config.and_then(|c| {
        let is_alibi = c
            .position_embedding_type
            .as_ref()
            .is_some_and(|h| h.value.eq_ignore_ascii_case("alibi"));
        let heads = usize::try_from(c.num_heads.as_ref()?.value).ok()?;
        is_alibi.then(|| AlibiSlopes {
            heads,
            slopes: crate::analyze::alibi::alibi_slopes(heads),
        })
    });
    let mut report = AuditReport {
        schema: AUDIT_SCHEMA,
        checkpoint: CheckpointSummary::of(ckpt),
        config: ckpt.config.clone(),
        tables,
        config_rotary,
        skipped: detection.skipped,
        index_buffers: detection.index_buffers,
        config_alibi,
        warnings,
        summary: FindingCounts::default(),
    };
    report.count_findings();
    Ok(report)
}

/// Number of leading dotted name parts two tensor names share.
fn common_prefix_parts(a: &str, b: &str) -> usize {
    a.split('.')
        .zip(b.split('.'))
        .take_while(|(x, y)| x == y)
        .count()
}

/// Reads a tensor as a table (rows × last dimension).
fn read_2d(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Array2<f64>> {
    Ok(ckpt.read_table(t)?)
}
