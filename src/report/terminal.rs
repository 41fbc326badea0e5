//! Plain-text renderings for the terminal: a one-line summary and aligned tables.

use std::fmt::Write;

use super::model::ScanReport;

/// Human-readable byte count (binary units).
pub fn human_bytes(b: u64) -> String {
    const UNITS: [&str; 5] = ["B", "KiB", "MiB", "GiB", "TiB"];
    let mut v = b as f64;
    let mut u = 0;
    while v >= 1024.0 && u + 1 < UNITS.len() {
        v /= 1024.0;
        u += 1;
    }
    if u == 0 {
        format!("{b} B")
    } else {
        format!("{v:.1} {}", UNITS[u])
    }
}

/// Formats a shape as `512x768`.
pub fn shape_str(shape: &[usize]) -> String {
    if shape.is_empty() {
        return "scalar".to_string();
    }
    shape
        .iter()
        .map(usize::to_string)
        .collect::<Vec<_>>()
        .join("x")
}

/// Renders rows as left-aligned columns separated by two spaces; the last column is not
/// padded (it holds free text).
pub fn aligned(header: &[&str], rows: &[Vec<String>]) -> String {
    let n = header.len();
    let mut width = vec![0usize; n];
    for (i, h) in header.iter().enumerate() {
        width[i] = h.chars().count();
    }
    for r in rows {
        for (i, c) in r.iter().enumerate().take(n) {
            width[i] = width[i].max(c.chars().count());
        }
    }
    let mut out = String::new();
    let line = |cells: Vec<&str>, out: &mut String| {
        let mut s = String::new();
        for (i, c) in cells.iter().enumerate() {
            if i + 1 == n {
                s.push_str(c);
            } else {
                let _ = write!(s, "{c:<w$}  ", w = width[i]);
            }
        }
        out.push_str(s.trim_end());
        out.push('\n');
    };
    line(header.to_vec(), &mut out);
    for r in rows {
        line(r.iter().map(String::as_str).collect(), &mut out);
    }
    out
}

/// The scan summary: one line about the checkpoint, the config hints, then the tables.
pub fn scan(report: &ScanReport) -> String {
    let c = &report.checkpoint;
    let mut out = format!(
        "{}: {} checkpoint, {} file{}, {} tensors, {}; {} position table{}\n",
        c.path,
        c.format,
        c.files,
        if c.files == 1 { "" } else { "s" },
        c.tensors,
        human_bytes(c.bytes),
        report.tables.len(),
        if report.tables.len() == 1 { "" } else { "s" }
    );
    if let Some(cfg) = &report.config {
        let _ = writeln!(out, "config ({}): {}", cfg.source, cfg.summary());
    }
    for w in &report.warnings {
        let _ = writeln!(out, "warning: {w}");
    }
    if !report.tables.is_empty() {
        out.push('\n');
        let rows: Vec<Vec<String>> = report
            .tables
            .iter()
            .map(|t| {
                vec![
                    t.name.clone(),
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
            "\n{} tensor{} skipped (type not analysable), e.g. `{}` ({}): {}",
            report.skipped.len(),
            if report.skipped.len() == 1 { "" } else { "s" },
            report.skipped[0].name,
            report.skipped[0].dtype,
            report.skipped[0].reason
        );
    }
    out
}

/// The audit summary for the terminal: one line about the checkpoint, one row per table,
/// then every warning and error finding.
pub fn audit(report: &super::model::AuditReport) -> String {
    let c = &report.checkpoint;
    let s = &report.summary;
    let mut out = format!(
        "{}: {} checkpoint, {} table{}; findings: {} error, {} warning, {} info\n",
        c.path,
        c.format,
        report.tables.len(),
        if report.tables.len() == 1 { "" } else { "s" },
        s.error,
        s.warning,
        s.info
    );
    for w in &report.warnings {
        let _ = writeln!(out, "warning: {w}");
    }
    if !report.tables.is_empty() {
        out.push('\n');
        let rows: Vec<Vec<String>> = report
            .tables
            .iter()
            .map(|t| {
                vec![
                    t.name.clone(),
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
    let serious: Vec<String> = report
        .tables
        .iter()
        .flat_map(|t| {
            t.findings
                .iter()
                .filter(|f| f.severity >= super::model::Severity::Warning)
                .map(move |f| {
                    let at = f
                        .positions
                        .map(|[a, b]| format!(" rows {a}..{b}"))
                        .unwrap_or_default();
                    format!(
                        "{} {}{at} [{}]: {}",
                        f.severity.as_str(),
                        f.code,
                        t.name,
                        f.message
                    )
                })
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_align_and_the_last_is_free_text() {
        let s = aligned(
            &["a", "bb", "why"],
            &[vec!["xxx".into(), "y".into(), "long text".into()]],
        );
        assert_eq!(s, "a    bb  why\nxxx  y   long text\n");
        assert_eq!(human_bytes(1536), "1.5 KiB");
        assert_eq!(shape_str(&[512, 768]), "512x768");
    }
}
