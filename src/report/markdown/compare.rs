//! The Markdown report of a comparison: the checkpoints, then per table its steps,
//! timeline, plots and findings.

use std::fmt::Write;

use super::finding;
use crate::model::compare::{CompareReport, MatchedBy, StepEntry};
use crate::report::figures::compare::{PlotKind, planned_plots};
use crate::text::{escape as md_escape, grouped_ranges, range, sci as fmt_sci, shape_str};

/// Ranges listed in running text before "and N more".
const LISTED: usize = 6;

pub(crate) fn step_label(s: &StepEntry) -> String {
    s.label.clone()
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
pub fn render(report: &CompareReport) -> String {
    let plots = planned_plots(report);
    let mut md = String::from("# Position tables compared\n\n");
    if let Some(run) = &report.run {
        let _ = writeln!(md, "{}.\n", md_escape(&run.sentence()));
    }
    md.push_str("| # | checkpoint | step | path | format | tensors |\n|---|---|---|---|---|---|\n");
    for c in &report.checkpoints {
        let _ = writeln!(
            md,
            "| {} | {} | {} | `{}` | {} | {} |",
            c.index,
            md_escape(&c.label),
            c.step.map_or_else(|| "–".into(), |s| s.to_string()),
            md_escape(&c.summary.path),
            c.summary.format,
            c.summary.tensors
        );
    }
    md.push('\n');
    for c in &report.checkpoints {
        if let Some(line) = c.summary.stand_ins_line() {
            let _ = writeln!(md, "- {}: {}", md_escape(&c.label), md_escape(&line));
        }
    }
    if report
        .checkpoints
        .iter()
        .any(|c| !c.summary.stand_ins.is_empty())
    {
        md.push('\n');
    }
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
                    "In {} it is `{}` (matched by {}).",
                    md_escape(&report.label(m.checkpoint)),
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
                let _ = write!(md, "**{}**: ", step_label(s));
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
                        grouped_ranges(&s.unchanged, LISTED)
                    );
                    if let (Some(tol), Some(dt)) = (s.unchanged_tolerance, &s.tolerance_dtype) {
                        let _ = write!(
                            md,
                            " (elementwise tolerance {tol:.2e}: {dt} storage rounding plus accumulated weight-decay rounding)"
                        );
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
            md.push_str("| positions | first moved by |\n|---|---|\n");
            for r in tl.first_moved_ranges.iter().take(20) {
                let _ = writeln!(
                    md,
                    "| {} | {} |",
                    range([r.start, r.end]),
                    r.first_moved
                        .map(|v| md_escape(&report.label(v)))
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
                grouped_ranges(&tl.converged, LISTED),
                grouped_ranges(&tl.still_moving, LISTED),
                grouped_ranges(&tl.never_moved, LISTED)
            );
            if !tl.unchanged_throughout.is_empty() {
                let _ = writeln!(
                    md,
                    "Unchanged in every step (bit-identical or only shrunk by weight decay, so no gradient reached them between the first and the last checkpoint): {}.\n",
                    grouped_ranges(&tl.unchanged_throughout, LISTED)
                );
            }
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
                finding(&mut md, &f.finding);
            }
            md.push('\n');
        }
    }
    md
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::checkpoint::Format;
    use crate::detect::Kind;
    use crate::model::CheckpointSummary;
    use crate::model::compare::{COMPARE_SCHEMA, CheckpointEntry, TableComparison};
    use crate::report::figures::compare::render_plots;

    fn step(from: usize, to: usize, per_row: bool) -> StepEntry {
        StepEntry {
            from,
            to,
            label: format!("step{from} → step{to}"),
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
            unchanged_absolute: None,
            decay_unit_roundoff: None,
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
                    label: format!("step{index}"),
                    step: Some(index as u64),
                    summary: CheckpointSummary {
                        path: format!("run/step{index}.safetensors"),
                        format: Format::Safetensors,
                        files: 1,
                        tensors: 2,
                        bytes: 100,
                        stand_ins: vec![],
                        folder: None,
                    },
                })
                .collect(),
            run: None,
            tables: vec![table("a/b.weight", true), table("wide", false)],
            warnings: vec![],
        };
        let plots = render_plots(&report);
        let names: Vec<&str> = plots.iter().map(|(n, _)| n.as_str()).collect();
        assert_eq!(names, vec!["t0-a_b_weight-change.svg"]);
        let md = render(&report);
        let links: Vec<&str> = md
            .split("](")
            .skip(1)
            .map(|p| &p[..p.find(')').unwrap()])
            .collect();
        assert_eq!(links, names);
        assert!(md.contains("widths differ (2 vs 4 columns)"));
        let text = crate::report::terminal::compare(&report);
        assert_eq!(
            text.lines().filter(|l| l.contains("step0 → step1")).count(),
            2
        );
        let json = serde_json::to_value(&report).unwrap();
        assert_eq!(json["checkpoints"][1]["path"], "run/step1.safetensors");
        assert_eq!(json["tables"][0]["matched_by"], "name");
    }
}
