//! Plain-text renderings for the terminal: a one-line summary and aligned tables, for
//! each of the three documents. Long tensor names are shortened here (and only here:
//! the JSON and the reports keep them whole).

use std::fmt::Write;

use crate::model::Severity;
use crate::model::audit::AuditReport;
use crate::model::compare::CompareReport;
use crate::model::scan::ScanReport;
use crate::report::markdown::compare::step_label;
use crate::text::{
    NAME_WIDTH, aligned, count, fixed, human_bytes, rows as rows_text, sci, shape_str, short_name,
};

/// The scan summary: one line about the checkpoint, the config hints, then the tables.
pub fn scan(report: &ScanReport) -> String {
    let c = &report.checkpoint;
    let mut out = format!(
        "{}: {} checkpoint, {}, {}, {}; {}\n",
        c.path,
        c.format,
        count(c.files, "file"),
        count(c.tensors, "tensor"),
        human_bytes(c.bytes),
        count(report.tables.len(), "position table")
    );
    if let Some(cfg) = &report.config {
        let _ = writeln!(out, "config ({}): {}", cfg.source, cfg.summary());
    }
    for line in c.note_lines(&report.warnings) {
        let _ = writeln!(out, "{line}");
    }
    if !report.tables.is_empty() {
        out.push('\n');
        let rows: Vec<Vec<String>> = report
            .tables
            .iter()
            .map(|t| {
                vec![
                    short_name(&t.name, NAME_WIDTH),
                    t.kind.as_str().to_string(),
                    shape_str(&t.shape),
                    t.dtype.clone(),
                    t.file.clone(),
                    t.why.clone(),
                ]
            })
            .collect();
        out.push_str(&aligned(
            &["name", "kind", "shape", "dtype", "file", "why"],
            &rows,
        ));
    }
    for b in &report.index_buffers {
        let _ = writeln!(
            out,
            "\nindex buffer `{}` ({}): {}",
            b.name,
            shape_str(&b.shape),
            b.what
        );
    }
    if !report.skipped.is_empty() {
        let _ = writeln!(
            out,
            "\n{} skipped (type not analysable), e.g. `{}` ({}): {}",
            count(report.skipped.len(), "tensor"),
            report.skipped[0].name,
            report.skipped[0].dtype,
            report.skipped[0].reason
        );
    }
    out
}

/// The audit summary for the terminal: one line about the checkpoint, one row per table,
/// then every warning and error finding.
pub fn audit(report: &AuditReport) -> String {
    let c = &report.checkpoint;
    let s = &report.summary;
    let mut out = format!(
        "{}: {} checkpoint, {}; findings: {} error, {} warning, {} info\n",
        c.path,
        c.format,
        count(report.tables.len(), "table"),
        s.error,
        s.warning,
        s.info
    );
    for line in c.note_lines(&report.warnings) {
        let _ = writeln!(out, "{line}");
    }
    if !report.tables.is_empty() {
        out.push('\n');
        let rows: Vec<Vec<String>> = report
            .tables
            .iter()
            .map(|t| {
                vec![
                    short_name(&t.name, NAME_WIDTH),
                    t.kind.as_str().to_string(),
                    shape_str(&t.shape),
                    t.worst()
                        .map(|w| w.as_str().to_string())
                        .unwrap_or_else(|| "ok".into()),
                    t.verdict.clone(),
                ]
            })
            .collect();
        out.push_str(&aligned(
            &["name", "kind", "shape", "worst", "verdict"],
            &rows,
        ));
    }
    if let Some(r) = &report.config_rotary {
        let worst = r
            .findings
            .iter()
            .map(|f| f.severity)
            .max()
            .map(|w| w.as_str())
            .unwrap_or("ok");
        let _ = writeln!(
            out,
            "\nrotary settings from the config (no frequency tensor stored): {worst}  {}",
            r.verdict
        );
    }
    let config_findings = report
        .config_rotary
        .iter()
        .flat_map(|r| r.findings.iter().map(|f| ("config", f)));
    let serious: Vec<String> = report
        .tables
        .iter()
        .flat_map(|t| t.findings.iter().map(move |f| (t.name.as_str(), f)))
        .chain(config_findings)
        .filter(|(_, f)| f.severity >= Severity::Warning)
        .map(|(name, f)| {
            let at = f
                .positions
                .map(|r| format!(" {}", rows_text(r)))
                .unwrap_or_default();
            format!(
                "{} {}{at} [{name}]: {}",
                f.severity.as_str(),
                f.code,
                f.message
            )
        })
        .collect();
    if !serious.is_empty() {
        out.push('\n');
        for line in serious {
            let _ = writeln!(out, "{line}");
        }
    }
    out
}

/// The terminal summary: the checkpoints, then one line per table and step.
pub fn compare(report: &CompareReport) -> String {
    let mut out = String::new();
    if let Some(run) = &report.run {
        let _ = writeln!(out, "{}", run.sentence());
    }
    for c in &report.checkpoints {
        let step = c.step.map(|s| format!(", step {s}")).unwrap_or_default();
        let _ = writeln!(
            out,
            "[{}] {}: {} ({}, {} tensors{step})",
            c.index, c.label, c.summary.path, c.summary.format, c.summary.tensors
        );
        if let Some(line) = c.summary.stand_ins_line() {
            let _ = writeln!(out, "    {line}");
        }
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
                short_name(&t.name, NAME_WIDTH),
                step_label(s),
                s.rows_compared.to_string(),
                sci(s.mean_change),
                if s.per_row {
                    s.unchanged_rows.to_string()
                } else {
                    "-".into()
                },
                fixed(s.subspace_similarity, 4),
                s.note.clone().unwrap_or_default(),
            ]);
        }
        if t.steps.is_empty() {
            rows.push(vec![
                short_name(&t.name, NAME_WIDTH),
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
            "\n{} (see --json or --out for details)",
            count(findings, "finding")
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
