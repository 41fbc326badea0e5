//! The plots of a compare report: which ones a report has ([`planned_plots`], the one
//! list both the Markdown links and the written SVGs come from) and how each is drawn.

use crate::model::compare::{CompareReport, StepEntry, TableComparison};
use crate::report::plots::{
    ColorScale, Colormap, Heatmap, LineChart, Matrix, RefLine, Scale, Series, XRange, heatmap,
    line_chart,
};

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
/// [`crate::report::markdown::compare::render`] and [`render_plots`] use this list, so the Markdown links exactly
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
        chart
            .series
            .push(Series::from_values(s.label.clone(), 0.0, &s.change));
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

fn timeline_heatmap(report: &CompareReport, t: &TableComparison) -> Option<String> {
    let tl = t.timeline.as_ref()?;
    // Rows are the recorded steps: labelled by the later checkpoint's training step when
    // every checkpoint has one (the change from the previous checkpoint up to that step),
    // else by the two checkpoints' labels.
    let by_step = report.steps_known();
    let row_labels: Vec<String> = tl
        .steps
        .iter()
        .map(
            |s| match report.checkpoints.get(s.to).and_then(|c| c.step) {
                Some(step) if by_step => step.to_string(),
                _ => format!("{} → {}", report.label(s.from), report.label(s.to)),
            },
        )
        .collect();
    let y_label = if by_step {
        "step reached"
    } else {
        "compared step"
    };
    let rows = tl.heatmap.mean.len();
    let cols = tl.heatmap.bins.len();
    let values: Vec<f64> = tl.heatmap.mean.iter().flatten().copied().collect();
    let matrix = Matrix::new(rows, cols, values).ok()?;
    Some(heatmap(&Heatmap {
        title: format!("Mean change per step and position — {}", t.name),
        x_label: "position (row index)".into(),
        y_label: y_label.into(),
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
        row_labels,
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
                PlotKind::Heatmap => timeline_heatmap(report, t),
            }?;
            Some((p.file, svg))
        })
        .collect()
}
