//! `posaudit compare`: open each checkpoint in turn, find its position tables, match them
//! across checkpoints, and run the pure comparisons of this module on each pair.
//!
//! This is the only part of [`crate::compare`] that does I/O. Memory stays of the order of
//! the tables, never of the checkpoints or of the number of checkpoints: checkpoints are
//! visited one at a time (each is closed, and its memory map dropped, before the next is
//! opened), and per table at most the previous and the current version are held, plus
//! the first version for the first→last comparison (shared with "previous" while they
//! are the same). Per-step results are vectors of one number per position; the timeline
//! keeps a running summary.
//!
//! # Matching
//! A table of a later checkpoint belongs to a table already seen when it has the same
//! tensor name; otherwise when it is the only not-yet-matched table of the same kind and
//! the same squeezed shape (a renamed module, another format's naming). The report says
//! which rule matched (`matched_by`). A table found in no earlier checkpoint starts a
//! new entry, whose earlier checkpoints count as missing.

use std::path::{Path, PathBuf};
use std::rc::Rc;

use ndarray::{Array2, s};

use super::run::{find_run, labels as run_labels, steps_of};
use crate::analyze::stats::median;
use crate::checkpoint::{Checkpoint, Dtype, TensorInfo};
use crate::compare::{
    CompareError, DEFAULT_MEDIAN_FRACTION, StepOptions, Timeline, UnchangedBounds,
    common_leading_rows, compare_step, decay_unit_roundoff, estimate_noise, similarity,
};
use crate::detect::{self, Detected, Kind};
use crate::error::{Error, Result};
use crate::model::CheckpointSummary;
use crate::model::compare::{
    COMPARE_SCHEMA, CheckpointEntry, CompareFinding, CompareReport, MatchedBy, StepEntry,
    TableComparison, TableMatch,
};
use crate::verdicts::compare as verdicts;

/// What `compare` needs.
#[derive(Debug, Clone, Default)]
pub struct CompareOptions {
    /// The checkpoints, in order (at least two), or one run folder: its checkpoints
    /// (sub-folders and files with a step number in their names) are compared in step
    /// order ([`super::run::find_run`]).
    pub paths: Vec<PathBuf>,
    /// A weight file to read in each checkpoint folder that holds several (`--file`).
    pub file: Option<String>,
    /// Restrict the comparison to these tensor names (treated as tables even if the
    /// detector would not); each must exist in at least one checkpoint.
    pub tables: Vec<String>,
    /// Threads for the linear algebra; 0 leaves the current setting
    /// ([`crate::linalg::set_threads`], 1 unless it was called). Results do not depend on it.
    pub threads: usize,
}

/// One version of a table held in memory.
#[derive(Clone)]
struct Held {
    index: usize,
    table: Rc<Array2<f64>>,
    dtype: Dtype,
}

impl Held {
    fn shape(&self) -> [usize; 2] {
        [self.table.nrows(), self.table.ncols()]
    }
}

/// A table followed across checkpoints.
struct Tracked {
    entry: TableComparison,
    squeezed: Vec<usize>,
    first: Option<Held>,
    prev: Option<Held>,
    present: usize,
    timeline: Option<Timeline>,
    timeline_problem: Option<String>,
}

/// Explicit mantissa bits of a storage type; integers and F64 are exact in f64.
fn mantissa_bits(d: &Dtype) -> u32 {
    match d {
        Dtype::F32 => 23,
        Dtype::F16 => 10,
        Dtype::BF16 => 7,
        _ => 52,
    }
}

/// Compares the checkpoints of `options` in order.
pub fn run(options: &CompareOptions) -> Result<CompareReport> {
    let file = options.file.clone();
    run_with(options, &move |p| super::open(p, file.as_deref()))
}

/// [`run`] with checkpoints opened by `open` (called with each of the paths, possibly
/// more than once): the Python package passes checkpoints held in memory this way.
pub fn run_with(
    options: &CompareOptions,
    open: &dyn Fn(&Path) -> Result<Checkpoint>,
) -> Result<CompareReport> {
    run_with_progress(options, open, &mut |_, _, _| {})
}

/// [`run`] telling `progress` about each checkpoint as its tables are compared (its
/// path, its index, the number of checkpoints), for a progress bar.
pub fn run_progress(
    options: &CompareOptions,
    progress: &mut dyn FnMut(&str, usize, usize),
) -> Result<CompareReport> {
    let file = options.file.clone();
    run_with_progress(options, &move |p| super::open(p, file.as_deref()), progress)
}

/// [`run_with`] with a `progress` callback (see [`run_progress`]).
pub fn run_with_progress(
    options: &CompareOptions,
    open: &dyn Fn(&Path) -> Result<Checkpoint>,
    progress: &mut dyn FnMut(&str, usize, usize),
) -> Result<CompareReport> {
    if options.threads > 0 {
        crate::linalg::set_threads(options.threads);
    }
    let forced = &options.tables[..];
    let (run_folder, paths) = match &options.paths[..] {
        [one] => match find_run(one) {
            Some(run) => {
                let paths = run.paths();
                (Some(run), paths)
            }
            None => {
                return Err(Error::Usage(format!(
                    "{}: compare needs two or more checkpoints, or one run folder holding them (sub-folders or files named with a step number, e.g. checkpoint-500/, step-2000/, global_step800/, epoch=3-step=1200.ckpt); this is neither",
                    crate::checkpoint::shown(&one.display().to_string())
                )));
            }
        },
        [] => {
            return Err(Error::Usage(
                "compare needs at least two checkpoints, got 0".into(),
            ));
        }
        many => (None, many.to_vec()),
    };
    let paths = &paths[..];
    let labels = match &run_folder {
        Some(run) => run.checkpoints.iter().map(|e| e.name.clone()).collect(),
        None => run_labels(paths),
    };
    // Training steps from the names: the run folder's, or those of the last path
    // components given, read together (see `run::steps_of`).
    let steps: Vec<Option<u64>> = match &run_folder {
        Some(run) => run.checkpoints.iter().map(|e| e.step).collect(),
        None => {
            let names: Vec<&str> = labels
                .iter()
                .map(|l| l.rsplit('/').next().unwrap_or_default())
                .collect();
            steps_of(&names)
        }
    };
    // Open every checkpoint once first (headers only), so a bad path fails before any
    // table is read; each is closed again right away.
    let mut checkpoints = Vec::with_capacity(paths.len());
    let mut seen_forced = vec![false; forced.len()];
    for (index, path) in paths.iter().enumerate() {
        let ckpt = open(path)?;
        for (f, seen) in forced.iter().zip(seen_forced.iter_mut()) {
            *seen |= ckpt.tensor(f).is_some();
        }
        checkpoints.push(CheckpointEntry {
            index,
            label: labels[index].clone(),
            step: steps[index],
            summary: CheckpointSummary::of(&ckpt),
        });
    }
    if let Some((f, _)) = forced.iter().zip(&seen_forced).find(|(_, s)| !**s) {
        let first = open(&paths[0])?;
        let close = detect::closest_names(f, first.tensors.iter().map(|t| t.name.as_str()), 3);
        let hint = if close.is_empty() {
            String::new()
        } else {
            format!("; closest in the first: `{}`", close.join("`, `"))
        };
        return Err(Error::Usage(format!(
            "{}: no tensor named `{f}` in any of the {} checkpoints{hint}",
            paths[0].display(),
            paths.len()
        )));
    }
    let n_ckpt = paths.len();
    let quiet_window = if n_ckpt >= 5 { 2 } else { 1 };
    let mut warnings = Vec::new();
    let mut tracked: Vec<Tracked> = Vec::new();
    let mut ignored_ids: Vec<String> = Vec::new();
    let step_options = StepOptions::default();
    for (index, path) in paths.iter().enumerate() {
        progress(&path.display().to_string(), index, n_ckpt);
        let ckpt = open(path)?;
        warnings.extend(
            ckpt.warnings
                .iter()
                .map(|w| format!("[{}] {w}", labels[index])),
        );
        let present: Vec<String> = forced
            .iter()
            .filter(|f| ckpt.tensor(f).is_some())
            .cloned()
            .collect();
        let detection = detect::detect(&ckpt, &present)?;
        let mut candidates: Vec<(&Detected, &TensorInfo)> = Vec::new();
        for d in &detection.tables {
            if d.kind == Kind::PositionIds {
                // Only worth saying when the user did not pick the tables explicitly.
                if forced.is_empty() && !ignored_ids.contains(&d.name) {
                    warnings.push(format!(
                        "`{}`: position-id buffers are not compared (integers, not a table)",
                        d.name
                    ));
                    ignored_ids.push(d.name.clone());
                }
                continue;
            }
            if let Some(t) = ckpt.tensor(&d.name) {
                candidates.push((d, t));
            }
        }
        let assigned = match_tables(&tracked, &candidates);
        let mut used = vec![false; candidates.len()];
        for (ti, slot) in assigned.iter().enumerate() {
            let Some((ci, how)) = *slot else {
                tracked[ti].entry.matches.push(None);
                tracked[ti].entry.missing_from.push(index);
                continue;
            };
            used[ci] = true;
            let (_, info) = candidates[ci];
            visit(
                &mut tracked[ti],
                &ckpt,
                info,
                index,
                how,
                (&step_options, &labels),
                &mut warnings,
            );
        }
        for (ci, &(d, info)) in candidates.iter().enumerate() {
            if used[ci] || (!forced.is_empty() && !forced.contains(&d.name)) {
                continue;
            }
            let mut t = Tracked {
                entry: TableComparison {
                    name: d.name.clone(),
                    kind: d.kind,
                    matched_by: MatchedBy::Name,
                    matches: vec![None; index],
                    missing_from: (0..index).collect(),
                    steps: Vec::new(),
                    first_to_last: None,
                    timeline: None,
                    timeline_unavailable: None,
                    findings: Vec::new(),
                    notes: Vec::new(),
                },
                squeezed: info.squeezed_shape(),
                first: None,
                prev: None,
                present: 0,
                timeline: (n_ckpt >= 3).then(|| Timeline::new(quiet_window)),
                timeline_problem: None,
            };
            visit(
                &mut t,
                &ckpt,
                info,
                index,
                MatchedBy::Name,
                (&step_options, &labels),
                &mut warnings,
            );
            tracked.push(t);
        }
        // `ckpt` (and its memory map) is dropped here, before the next one is opened.
    }
    let tables = tracked
        .into_iter()
        .map(|t| finish(t, n_ckpt, &step_options, &labels))
        .collect();
    Ok(CompareReport {
        schema: COMPARE_SCHEMA,
        checkpoints,
        run: run_folder,
        tables,
        warnings,
    })
}

/// For each tracked table, the candidate it matches in this checkpoint: first by name,
/// then (for the rest) by kind and squeezed shape when exactly one unused candidate fits.
fn match_tables(
    tracked: &[Tracked],
    candidates: &[(&Detected, &TensorInfo)],
) -> Vec<Option<(usize, MatchedBy)>> {
    let mut used = vec![false; candidates.len()];
    let mut out = vec![None; tracked.len()];
    for (ti, t) in tracked.iter().enumerate() {
        if let Some(ci) = candidates
            .iter()
            .position(|(d, _)| d.name == t.entry.name)
            .filter(|&ci| !used[ci])
        {
            used[ci] = true;
            out[ti] = Some((ci, MatchedBy::Name));
        }
    }
    for (ti, t) in tracked.iter().enumerate() {
        if out[ti].is_some() {
            continue;
        }
        let fits: Vec<usize> = (0..candidates.len())
            .filter(|&ci| {
                !used[ci]
                    && candidates[ci].0.kind == t.entry.kind
                    && candidates[ci].1.squeezed_shape() == t.squeezed
                    // A name that another tracked table will claim is not up for grabs.
                    && !tracked.iter().any(|o| o.entry.name == candidates[ci].0.name)
            })
            .collect();
        if let [ci] = fits[..] {
            used[ci] = true;
            out[ti] = Some((ci, MatchedBy::KindAndShape));
        }
    }
    out
}

/// Reads a tensor as a table: rows × last dimension, a 1-D vector as a column.
fn read_as_table(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Array2<f64>, String> {
    let table = ckpt.read_table(t).map_err(|e| e.to_string())?;
    if t.squeezed_shape().len() <= 1 {
        let n = table.len();
        return Array2::from_shape_vec((n, 1), table.into_iter().collect())
            .map_err(|e| e.to_string());
    }
    Ok(table)
}

fn visit(
    t: &mut Tracked,
    ckpt: &Checkpoint,
    info: &TensorInfo,
    index: usize,
    how: MatchedBy,
    (options, labels): (&StepOptions, &[String]),
    warnings: &mut Vec<String>,
) {
    t.entry.matches.push(Some(TableMatch {
        checkpoint: index,
        name: info.name.clone(),
        matched_by: how,
        shape: info.shape.clone(),
        dtype: info.dtype.to_string(),
    }));
    if how == MatchedBy::KindAndShape {
        t.entry.matched_by = MatchedBy::KindAndShape;
    }
    let table = match read_as_table(ckpt, info) {
        Ok(table) => table,
        Err(e) => {
            warnings.push(format!(
                "[{}] `{}`: not compared: {e}",
                labels[index], info.name
            ));
            t.entry.missing_from.push(index);
            return;
        }
    };
    let cur = Held {
        index,
        table: Rc::new(table),
        dtype: info.dtype.clone(),
    };
    t.present += 1;
    if let Some(prev) = t.prev.take() {
        let (step, findings) = make_step(&prev, &cur, options, labels);
        t.entry.findings.extend(findings);
        if let Some(tl) = &mut t.timeline {
            let pushed = match (&step.noise, step.per_row) {
                (Some(noise), true) => tl
                    .push_step_with_unchanged(
                        step.from,
                        step.to,
                        &step.change,
                        noise.value,
                        &step.unchanged,
                    )
                    .map_err(|e| e.to_string()),
                _ => Err(format!("step {} has no per-row change", step.label)),
            };
            if let Err(e) = pushed {
                t.timeline_problem = Some(e);
                t.timeline = None;
            }
        }
        t.entry.steps.push(step);
    }
    if t.first.is_none() {
        t.first = Some(cur.clone());
    }
    // The old `prev` is dropped here unless it is also `first` (shared Rc).
    t.prev = Some(cur);
}

fn finish(
    mut t: Tracked,
    n_ckpt: usize,
    options: &StepOptions,
    labels: &[String],
) -> TableComparison {
    if t.present >= 3
        && let (Some(first), Some(last)) = (&t.first, &t.prev)
    {
        let (step, findings) = make_step(first, last, options, labels);
        t.entry.findings.extend(findings);
        t.entry.first_to_last = Some(step);
    }
    if n_ckpt >= 3 && t.present >= 3 {
        match &t.timeline {
            Some(tl) if !tl.is_empty() => t.entry.timeline = Some(tl.summary()),
            _ => {
                t.entry.timeline_unavailable = Some(
                    t.timeline_problem
                        .take()
                        .unwrap_or_else(|| "no step could be recorded".into()),
                )
            }
        }
    }
    if !t.entry.missing_from.is_empty() {
        let held: Vec<usize> = (0..n_ckpt)
            .filter(|i| !t.entry.missing_from.contains(i))
            .collect();
        t.entry.findings.push(verdicts::table_missing(
            &t.entry.name,
            &t.entry.missing_from,
            &held,
            labels,
        ));
        if held.len() < 2 {
            t.entry
                .notes
                .push("held by fewer than two checkpoints: nothing to compare".into());
        }
    }
    t.entry
        .findings
        .sort_by_key(|f| std::cmp::Reverse(f.finding.severity));
    t.entry
}

/// The unchanged test's bounds for the coarser storage type of two tables.
struct Tolerance {
    bounds: UnchangedBounds,
    unit: f64,
    dtype: String,
}

/// The coarser storage type of two tables and the unchanged tolerance it implies
/// (storage rounding plus accumulated weight-decay rounding, see
/// [`crate::compare::unchanged`]).
fn tolerance(a: &Dtype, b: &Dtype) -> Tolerance {
    let coarser = if mantissa_bits(a) <= mantissa_bits(b) {
        a
    } else {
        b
    };
    let m = mantissa_bits(coarser);
    Tolerance {
        bounds: UnchangedBounds::storage(m),
        unit: decay_unit_roundoff(m),
        dtype: coarser.to_string(),
    }
}

fn empty_step(a: &Held, b: &Held, rows: usize, labels: &[String]) -> StepEntry {
    StepEntry {
        from: a.index,
        to: b.index,
        label: format!("{} → {}", labels[a.index], labels[b.index]),
        change: Vec::new(),
        unchanged: Vec::new(),
        subspace_similarity: None,
        rows_compared: rows,
        shapes: [
            [a.table.nrows(), a.table.ncols()],
            [b.table.nrows(), b.table.ncols()],
        ],
        per_row: false,
        note: None,
        mean_change: None,
        median_relative_change: None,
        unchanged_rows: 0,
        relative_change: Vec::new(),
        cosine: Vec::new(),
        most_moved: Vec::new(),
        unchanged_detail: Vec::new(),
        unchanged_tolerance: None,
        unchanged_absolute: None,
        decay_unit_roundoff: None,
        tolerance_dtype: None,
        noise: None,
        similarity: None,
        similarity_unavailable: None,
    }
}

/// Compares two versions of a table; returns the step and its findings.
fn make_step(
    a: &Held,
    b: &Held,
    options: &StepOptions,
    labels: &[String],
) -> (StepEntry, Vec<CompareFinding>) {
    let (ta, tb) = (a.table.view(), b.table.view());
    let rows = ta.nrows().min(tb.nrows());
    let mut step = empty_step(a, b, rows, labels);
    let mut findings = Vec::new();
    // "step-1000 and step-2000": how messages say between which checkpoints.
    let where_ = format!("{} and {}", labels[a.index], labels[b.index]);
    if ta.ncols() != tb.ncols() {
        step.note = Some(format!(
            "widths differ ({} vs {} columns): per-row change cannot be computed; similarity of the first {rows} rows only",
            ta.ncols(),
            tb.ncols()
        ));
        findings.push(verdicts::shape_changed(
            &a.shape(),
            &b.shape(),
            &step,
            &where_,
        ));
        let (x, y) = (ta.slice(s![..rows, ..]), tb.slice(s![..rows, ..]));
        match similarity(x, y, &options.similarity) {
            Ok(sim) => {
                step.subspace_similarity = Some(sim.subspace_similarity);
                step.similarity = Some(sim);
            }
            Err(e) => step.similarity_unavailable = Some(e.to_string()),
        }
        return (step, findings);
    }
    if ta.nrows() != tb.nrows() {
        step.note = Some(format!(
            "row counts differ ({} vs {}): the first {rows} rows compared",
            ta.nrows(),
            tb.nrows()
        ));
        findings.push(verdicts::shape_changed(
            &a.shape(),
            &b.shape(),
            &step,
            &where_,
        ));
    }
    let tol = tolerance(&a.dtype, &b.dtype);
    let step_options = StepOptions {
        unchanged: tol.bounds,
        ..options.clone()
    };
    // Widths are equal here, so this cannot fail.
    let Ok((x, y)) = common_leading_rows(ta, tb) else {
        return (step, findings);
    };
    match compare_step(a.index, b.index, x, y, &step_options) {
        Ok(sc) => {
            step.per_row = true;
            step.mean_change = (!sc.change.is_empty())
                .then(|| sc.change.iter().sum::<f64>() / sc.change.len() as f64);
            step.median_relative_change = median(
                &sc.relative_change
                    .iter()
                    .flatten()
                    .copied()
                    .collect::<Vec<f64>>(),
            );
            step.unchanged_rows = sc.unchanged.iter().map(|[s, e]| e - s).sum();
            step.noise = estimate_noise(&sc.change, &sc.unchanged, DEFAULT_MEDIAN_FRACTION).ok();
            step.change = sc.change;
            step.unchanged = sc.unchanged;
            step.subspace_similarity = sc.subspace_similarity;
            step.relative_change = sc.relative_change;
            step.cosine = sc.cosine;
            step.most_moved = sc.most_moved;
            step.unchanged_detail = sc.unchanged_detail;
            step.unchanged_tolerance = Some(tol.bounds.relative);
            step.unchanged_absolute = Some(tol.bounds.absolute);
            step.decay_unit_roundoff = Some(tol.unit);
            step.tolerance_dtype = Some(tol.dtype.clone());
            step.similarity = sc.similarity;
            step.similarity_unavailable = sc.similarity_unavailable;
            findings.extend(verdicts::unchanged(&step, &tol.dtype, &where_));
        }
        Err(e) => {
            let reason = e.to_string();
            if let CompareError::NonFinite { which, count } = e {
                let idx = if which == "first" { a.index } else { b.index };
                findings.push(verdicts::non_finite(
                    (idx, &labels[idx]),
                    count,
                    &where_,
                    &reason,
                    [a.index, b.index],
                ));
            }
            step.note = Some(match step.note.take() {
                Some(n) => format!("{n}; not compared: {reason}"),
                None => format!("not compared: {reason}"),
            });
        }
    }
    (step, findings)
}
