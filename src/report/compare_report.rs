//! The `compare` document and its renderings: the serde model (JSON), the Markdown
//! report, the SVG plots it links and the terminal summary.
//!
//! Everything here is pure: the orchestration in [`crate::compare::run`] fills a
//! [`CompareReport`], and the functions below only format what it holds.
//!
//! # Format
//! `posaudit compare --json` prints one [`CompareReport`] (contract fields first):
//!
//! ```text
//! {"schema": "posaudit/compare/v1",
//!  "checkpoints": [{"index", "path", "format", "files", "tensors", "bytes"}],
//!  "tables": [{"name", "kind", "matched_by": "name" | "kind and shape",
//!              "matches": [{"checkpoint", "name", "matched_by", "shape", "dtype"} | null],
//!              "missing_from": [...], "notes": [...],
//!              "steps": [{"from", "to", "change", "unchanged", "subspace_similarity",
//!                         "rows_compared", "per_row", "mean_change", ..., "similarity"}],
//!              "first_to_last": {...same as a step...} | null,
//!              "timeline": {...} | null, "timeline_unavailable": "..." | null,
//!              "findings": [{"code", "severity", "positions", "message", "evidence",
//!                            "limits", "step"}]}],
//!  "warnings": ["..."]}
//! ```

use std::fmt::Write;

use serde::Serialize;

use super::model::{CheckpointSummary, Finding};
use super::plots::{
    ColorScale, Colormap, Heatmap, LineChart, Matrix, RefLine, Scale, Series, XRange, heatmap,
    line_chart,
};
use super::terminal::{aligned, shape_str};
use crate::compare::{MovedRow, NoiseLevel, Similarity, TimelineSummary, UnchangedRange};
use crate::detect::Kind;

/// Schema tag of the compare document.
pub const COMPARE_SCHEMA: &str = "posaudit/compare/v1";

/// One checkpoint, in command-line order.
#[derive(Debug, Clone, Serialize)]
pub struct CheckpointEntry {
    /// Position on the command line (0-based); steps refer to it.
    pub index: usize,
    /// Path, format, files, tensors, bytes.
    #[serde(flatten)]
    pub summary: CheckpointSummary,
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
    /// Relative tolerance of the unchanged test.
    pub unchanged_tolerance: Option<f64>,
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
    /// The checkpoints, in command-line order.
    pub checkpoints: Vec<CheckpointEntry>,
    /// One entry per table found in any checkpoint.
    pub tables: Vec<TableComparison>,
    /// Non-fatal problems met while opening or comparing.
    pub warnings: Vec<String>,
}

/// One SVG the Markdown report links.
#[derive(Debug, Clone, PartialEq)]
pub struct PlannedPlot {
    /// Index into `tables`.
    pub table: usize,
    /// File name inside the output folder.
    pub file: String,
    /// What it shows.
    pub what: PlotKind,
}

/// The kinds of plot of a compare report.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum PlotKind {
    /// Change per position, one line per step.
    Change,
    /// Steps × positions heat map of change (three or more checkpoints).
    Heatmap,
}

/// A file-name-safe form of a table name.
fn slug(name: &str) -> String {
    let s: String = name
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .take(60)
        .collect();
    if s.is_empty() { "table".into() } else { s }
}

/// The plots a report has, in the order the Markdown shows them. Both
/// [`render_markdown`] and [`render_plots`] use this list, so the Markdown links exactly
/// the files that are written.
pub fn planned_plots(report: &CompareReport) -> Vec<PlannedPlot> {
    let mut out = Vec::new();
    for (i, t) in report.tables.iter().enumerate() {
        let stem = format!("t{i}-{}", slug(&t.name));
        if t.steps.iter().any(|s| s.per_row && !s.change.is_empty()) {
            out.push(PlannedPlot {
                table: i,
                file: format!("{stem}-change.svg"),
                what: PlotKind::Change,
            });
        }
        if let Some(tl) = &t.timeline
            && !tl.heatmap.mean.is_empty()
            && !tl.heatmap.bins.is_empty()
        {
            out.push(PlannedPlot {
                table: i,
                file: format!("{stem}-timeline.svg"),
                what: PlotKind::Heatmap,
            });
        }
    }
    out
}

/// Most step lines drawn in one change plot; with more steps only the first→last
/// comparison and the last step are drawn (the heat map shows every step).
const MAX_LINES: usize = 8;

fn change_chart(t: &TableComparison) -> String {
    let mut chart = LineChart::new(
        format!("{}: change per position", t.name),
        "position (row index)",
        "L2 change of the row (table units)",
    );
    let drawable: Vec<&StepEntry> = t.steps.iter().filter(|s| s.per_row).collect();
    let shown: Vec<&StepEntry> = if drawable.len() <= MAX_LINES {
        drawable.clone()
    } else {
        t.first_to_last
            .iter()
            .filter(|s| s.per_row)
            .chain(drawable.last().copied())
            .collect()
    };
    for s in &shown {
        chart.series.push(Series::from_values(
            format!("{} → {}", s.from, s.to),
            0.0,
            &s.change,
        ));
    }
    if shown.len() == 1 {
        for r in &shown[0].unchanged_detail {
            chart.shaded.push(XRange {
                start: r.start as f64,
                end: r.end as f64,
                label: if r.bit_identical {
                    "identical".into()
                } else {
                    format!("scaled ×{:.6}", r.scale)
                },
            });
        }
        if let Some(n) = &shown[0].noise
            && n.value > 0.0
        {
            chart.h_lines.push(RefLine::new(n.value, "noise level"));
        }
    }
    chart.y_scale = Scale::Linear;
    line_chart(&chart)
}

fn timeline_heatmap(t: &TableComparison) -> Option<String> {
    let tl = t.timeline.as_ref()?;
    let rows = tl.heatmap.mean.len();
    let cols = tl.heatmap.bins.len();
    let values: Vec<f64> = tl.heatmap.mean.iter().flatten().copied().collect();
    let matrix = Matrix::new(rows, cols, values).ok()?;
    Some(heatmap(&Heatmap {
        title: format!("Mean change per step and position — {}", t.name),
        x_label: "position (row index)".into(),
        y_label: "step (row k: checkpoint pair k)".into(),
        matrix,
        x_range: (0.0, tl.positions as f64),
        y_range: (-0.5, rows as f64 - 0.5),
        color: ColorScale {
            colormap: Colormap::Sequential,
            range: None,
            label: "mean L2 row change (table units)".into(),
        },
        width: 800,
        height: (120 + 24 * rows as u32).clamp(260, 600),
    }))
}

/// Renders every planned plot: `(file name, SVG document)`.
pub fn render_plots(report: &CompareReport) -> Vec<(String, String)> {
    planned_plots(report)
        .into_iter()
        .filter_map(|p| {
            let t = &report.tables[p.table];
            let svg = match p.what {
                PlotKind::Change => Some(change_chart(t)),
                PlotKind::Heatmap => timeline_heatmap(t),
            }?;
            Some((p.file, svg))
        })
        .collect()
}

fn fmt_opt(v: Option<f64>, prec: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.prec$}"),
        _ => "–".into(),
    }
}

fn fmt_sci(v: Option<f64>) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.3e}"),
        _ => "–".into(),
    }
}

fn ranges_str(r: &[[usize; 2]]) -> String {
    if r.is_empty() {
        return "none".into();
    }
    let mut parts: Vec<String> = r.iter().take(6).map(|[s, e]| format!("{s}–{e}")).collect();
    if r.len() > 6 {
        parts.push(format!("and {} more", r.len() - 6));
    }
    parts.join(", ")
}

fn step_label(s: &StepEntry) -> String {
    format!("{} → {}", s.from, s.to)
}

fn similarity_cell(s: &StepEntry) -> String {
    match &s.similarity {
        Some(sim) => format!(
            "{:.4} (k={}, chance {:.3})",
            sim.subspace_similarity, sim.k, sim.chance_level.subspace_similarity
        ),
        None => "–".into(),
    }
}

fn md_escape(s: &str) -> String {
    s.replace('|', "\\|").replace('\n', " ")
}

fn step_row(s: &StepEntry, label: &str) -> String {
    let (cka, procrustes) = match &s.similarity {
        Some(sim) => (
            format!("{:.4} (chance {:.3})", sim.cka, sim.chance_level.cka),
            fmt_sci(sim.procrustes_residual),
        ),
        None => ("–".into(), "–".into()),
    };
    format!(
        "| {label} | {} | {} | {} | {} | {} | {cka} | {procrustes} |\n",
        s.rows_compared,
        fmt_sci(s.mean_change),
        fmt_sci(s.median_relative_change),
        if s.per_row {
            s.unchanged_rows.to_string()
        } else {
            "–".into()
        },
        similarity_cell(s),
    )
}

/// The Markdown report. Links only the plots of [`planned_plots`] (relative paths).
pub fn render_markdown(report: &CompareReport) -> String {
    let plots = planned_plots(report);
    let mut md = String::from("# Position tables compared\n\n");
    md.push_str("| # | path | format | tensors |\n|---|---|---|---|\n");
    for c in &report.checkpoints {
        let _ = writeln!(
            md,
            "| {} | `{}` | {} | {} |",
            c.index,
            md_escape(&c.summary.path),
            c.summary.format,
            c.summary.tensors
        );
    }
    md.push('\n');
    for w in &report.warnings {
        let _ = writeln!(md, "- warning: {}", md_escape(w));
    }
    if report.tables.is_empty() {
        md.push_str("No position table was found in any checkpoint.\n");
    }
    for (i, t) in report.tables.iter().enumerate() {
        let _ = writeln!(md, "## `{}` ({})\n", md_escape(&t.name), t.kind.as_str());
        let _ = writeln!(md, "Matched by {}.", t.matched_by.as_str());
        for m in t.matches.iter().flatten() {
            if m.matched_by == MatchedBy::KindAndShape || m.name != t.name {
                let _ = writeln!(
                    md,
                    "In checkpoint {} it is `{}` (matched by {}).",
                    m.checkpoint,
                    md_escape(&m.name),
                    m.matched_by.as_str()
                );
            }
        }
        let shapes: Vec<String> = t
            .matches
            .iter()
            .map(|m| match m {
                Some(m) => format!("{} {}", shape_str(&m.shape), m.dtype),
                None => "missing".into(),
            })
            .collect();
        let _ = writeln!(md, "Shapes by checkpoint: {}.\n", shapes.join("; "));
        for n in &t.notes {
            let _ = writeln!(md, "- {}", md_escape(n));
        }
        if !t.notes.is_empty() {
            md.push('\n');
        }
        if !t.steps.is_empty() {
            md.push_str("| step | rows | mean change | median relative change | unchanged rows | subspace similarity | CKA | Procrustes residual |\n|---|---|---|---|---|---|---|---|\n");
            for s in &t.steps {
                md.push_str(&step_row(s, &step_label(s)));
            }
            if let Some(s) = &t.first_to_last {
                md.push_str(&step_row(s, &format!("{} (first → last)", step_label(s))));
            }
            md.push('\n');
            for s in t.steps.iter().chain(t.first_to_last.iter()) {
                let _ = write!(md, "**Step {}**: ", step_label(s));
                if let Some(n) = &s.note {
                    let _ = write!(md, "{} ", md_escape(n));
                }
                if s.per_row {
                    let moved: Vec<String> = s
                        .most_moved
                        .iter()
                        .take(5)
                        .map(|m| format!("{} ({:.3e})", m.position, m.change))
                        .collect();
                    let _ = write!(
                        md,
                        "most moved rows: {}; unchanged rows: {}",
                        if moved.is_empty() {
                            "none".into()
                        } else {
                            moved.join(", ")
                        },
                        ranges_str(&s.unchanged)
                    );
                    if let (Some(tol), Some(dt)) = (s.unchanged_tolerance, &s.tolerance_dtype) {
                        let _ = write!(md, " (tolerance {tol:.2e}, from {dt} storage)");
                    }
                    md.push_str(". ");
                }
                if let Some(sim) = &s.similarity {
                    let _ = write!(md, "Similarity: {}. ", md_escape(&sim.k_reason));
                }
                if let Some(why) = &s.similarity_unavailable {
                    let _ = write!(md, "Similarity unavailable: {}. ", md_escape(why));
                }
                md.push_str("\n\n");
            }
        }
        if let Some(tl) = &t.timeline {
            md.push_str("### Timeline\n\n");
            md.push_str("| positions | first moved at checkpoint |\n|---|---|\n");
            for r in tl.first_moved_ranges.iter().take(20) {
                let _ = writeln!(
                    md,
                    "| {}–{} | {} |",
                    r.start,
                    r.end,
                    r.first_moved
                        .map(|v| v.to_string())
                        .unwrap_or_else(|| "never".into())
                );
            }
            if tl.first_moved_ranges.len() > 20 {
                let _ = writeln!(
                    md,
                    "| … | {} more ranges in report.json |",
                    tl.first_moved_ranges.len() - 20
                );
            }
            let _ = writeln!(
                md,
                "\nConverged (quiet for the last {} step{}): {}. Still moving in the last step: {}. Never moved: {}.\n",
                tl.quiet_window,
                if tl.quiet_window == 1 { "" } else { "s" },
                ranges_str(&tl.converged),
                ranges_str(&tl.still_moving),
                ranges_str(&tl.never_moved)
            );
        }
        if let Some(why) = &t.timeline_unavailable {
            let _ = writeln!(md, "Timeline unavailable: {}.\n", md_escape(why));
        }
        for p in plots.iter().filter(|p| p.table == i) {
            let alt = match p.what {
                PlotKind::Change => "change per position",
                PlotKind::Heatmap => "change per step and position",
            };
            let _ = writeln!(md, "![{alt}]({})\n", p.file);
        }
        if !t.findings.is_empty() {
            md.push_str("### Findings\n\n");
            for f in &t.findings {
                let pos = f
                    .finding
                    .positions
                    .map(|[s, e]| format!(" rows {s}–{e}"))
                    .unwrap_or_default();
                let _ = writeln!(
                    md,
                    "- **{}** `{}`{pos}: {}\n  - evidence: {}\n  - limits: {}",
                    f.finding.severity.as_str(),
                    f.finding.code,
                    md_escape(&f.finding.message),
                    md_escape(&f.finding.evidence),
                    md_escape(&f.finding.limits)
                );
            }
            md.push('\n');
        }
    }
    md
}

/// The terminal summary: the checkpoints, then one line per table and step.
pub fn render_terminal(report: &CompareReport) -> String {
    let mut out = String::new();
    for c in &report.checkpoints {
        let _ = writeln!(
            out,
            "[{}] {} ({}, {} tensors)",
            c.index, c.summary.path, c.summary.format, c.summary.tensors
        );
    }
    for w in &report.warnings {
        let _ = writeln!(out, "warning: {w}");
    }
    out.push('\n');
    if report.tables.is_empty() {
        out.push_str("no position table found in any checkpoint\n");
        return out;
    }
    let mut rows = Vec::new();
    for t in &report.tables {
        for s in t.steps.iter().chain(t.first_to_last.iter()) {
            rows.push(vec![
                t.name.clone(),
                step_label(s),
                s.rows_compared.to_string(),
                fmt_sci(s.mean_change),
                if s.per_row {
                    s.unchanged_rows.to_string()
                } else {
                    "-".into()
                },
                fmt_opt(s.subspace_similarity, 4),
                s.note.clone().unwrap_or_default(),
            ]);
        }
        if t.steps.is_empty() {
            rows.push(vec![
                t.name.clone(),
                "-".into(),
                "-".into(),
                "-".into(),
                "-".into(),
                "-".into(),
                t.notes.first().cloned().unwrap_or_default(),
            ]);
        }
    }
    out.push_str(&aligned(
        &[
            "table",
            "step",
            "rows",
            "mean change",
            "unchanged rows",
            "subspace sim",
            "note",
        ],
        &rows,
    ));
    let findings: usize = report.tables.iter().map(|t| t.findings.len()).sum();
    if findings > 0 {
        let _ = writeln!(
            out,
            "\n{findings} finding{} (see --json or --out for details)",
            if findings == 1 { "" } else { "s" }
        );
        for t in &report.tables {
            for f in t.findings.iter().take(5) {
                let _ = writeln!(
                    out,
                    "  {} {} {}: {}",
                    f.finding.severity.as_str(),
                    f.finding.code,
                    t.name,
                    f.finding.message
                );
            }
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::checkpoint::Format;

    fn step(from: usize, to: usize, per_row: bool) -> StepEntry {
        StepEntry {
            from,
            to,
            change: if per_row { vec![0.0, 1.0, 2.0] } else { vec![] },
            unchanged: if per_row { vec![[0, 1]] } else { vec![] },
            subspace_similarity: Some(0.5),
            rows_compared: 3,
            shapes: [[3, 2], [3, if per_row { 2 } else { 4 }]],
            per_row,
            note: (!per_row).then(|| "widths differ (2 vs 4 columns)".into()),
            mean_change: per_row.then_some(1.0),
            median_relative_change: None,
            unchanged_rows: usize::from(per_row),
            relative_change: vec![],
            cosine: vec![],
            most_moved: vec![],
            unchanged_detail: vec![],
            unchanged_tolerance: None,
            tolerance_dtype: None,
            noise: None,
            similarity: None,
            similarity_unavailable: None,
        }
    }

    fn table(name: &str, per_row: bool) -> TableComparison {
        TableComparison {
            name: name.into(),
            kind: Kind::LearnedAbsolute,
            matched_by: MatchedBy::Name,
            matches: vec![None, None],
            missing_from: vec![],
            steps: vec![step(0, 1, per_row)],
            first_to_last: None,
            timeline: None,
            timeline_unavailable: None,
            findings: vec![],
            notes: vec![],
        }
    }

    #[test]
    fn markdown_links_exactly_the_rendered_plots() {
        // Invented report: one table with a per-row step, one whose widths differ (no
        // per-row change, so no change plot).
        let report = CompareReport {
            schema: COMPARE_SCHEMA,
            checkpoints: (0..2)
                .map(|index| CheckpointEntry {
                    index,
                    summary: CheckpointSummary {
                        path: format!("run/step{index}.safetensors"),
                        format: Format::Safetensors,
                        files: 1,
                        tensors: 2,
                        bytes: 100,
                    },
                })
                .collect(),
            tables: vec![table("a/b.weight", true), table("wide", false)],
            warnings: vec![],
        };
        let plots = render_plots(&report);
        let names: Vec<&str> = plots.iter().map(|(n, _)| n.as_str()).collect();
        assert_eq!(names, vec!["t0-a_b_weight-change.svg"]);
        let md = render_markdown(&report);
        let links: Vec<&str> = md
            .split("](")
            .skip(1)
            .map(|p| &p[..p.find(')').unwrap()])
            .collect();
        assert_eq!(links, names);
        assert!(md.contains("widths differ (2 vs 4 columns)"));
        let text = render_terminal(&report);
        assert_eq!(text.lines().filter(|l| l.contains("0 → 1")).count(), 2);
        let json = serde_json::to_value(&report).unwrap();
        assert_eq!(json["checkpoints"][1]["path"], "run/step1.safetensors");
        assert_eq!(json["tables"][0]["matched_by"], "name");
    }
}
