//! The terminal summary of `posaudit extend`: the plan, what was written, the config
//! changes, the table's verdict before and after, and the cautions. Formats what the
//! document holds.

use crate::model::extend::ExtendReport;
use crate::model::{Finding, Severity};
use crate::text::{rows, shape_str};

fn findings_line(findings: &[Finding]) -> String {
    let shown: Vec<String> = findings
        .iter()
        .filter(|f| f.severity >= Severity::Warning)
        .map(|f| match f.positions {
            Some(p) => format!("{} {}", f.code.as_str(), rows(p)),
            None => f.code.as_str().to_string(),
        })
        .collect();
    if shown.is_empty() {
        "no warning or error finding".into()
    } else {
        shown.join("; ")
    }
}

/// The summary text.
pub fn terminal(r: &ExtendReport) -> String {
    let p = &r.plan;
    let mut s = String::new();
    let verb = if r.dry_run {
        "plan (dry run, nothing written)"
    } else {
        "extended"
    };
    s.push_str(&format!("{}: {verb}\n", r.input.path));
    s.push_str(&format!(
        "table   {} ({}, {})\nshape   {} -> {}\nmethod  {} (rows: {})\nhow     {}\n",
        p.table,
        p.kind.as_str(),
        p.dtype,
        shape_str(&p.old_shape),
        shape_str(&p.new_shape),
        p.method,
        p.rows,
        p.how
    ));
    if p.reserved_rows > 0 {
        s.push_str(&format!(
            "reserved rows before position 0: {} (kept)\n",
            p.reserved_rows
        ));
    }
    for k in &p.kept {
        s.push_str(&format!(
            "kept         {} -> {}\n",
            rows(k.from),
            rows(k.to)
        ));
    }
    for r in &p.synthesised {
        s.push_str(&format!("synthesised  {}\n", rows(*r)));
    }
    if let Some(std) = &p.init_std {
        s.push_str(&format!(
            "init std     {} ({}), seed {}\n",
            std.value,
            std.from,
            p.seed.unwrap_or(0)
        ));
    }
    for a in &p.also {
        s.push_str(&format!(
            "also         {} {} -> {}: {}\n",
            a.name,
            shape_str(&a.old_shape),
            shape_str(&a.new_shape),
            a.what
        ));
    }
    for c in &p.config_changes {
        s.push_str(&format!("config.json  {}: {} -> {}\n", c.key, c.from, c.to));
    }
    for n in &p.config_notes {
        s.push_str(&format!("config.json  {n}\n"));
    }
    if !r.dry_run {
        s.push_str(&format!("\nwritten to {}\n", r.output));
        for f in &r.written {
            let what = if f.replaced.is_empty() {
                "byte copies".to_string()
            } else {
                format!(
                    "new values: {}; the other tensors byte copies",
                    f.replaced.join(", ")
                )
            };
            s.push_str(&format!(
                "  {} ({} tensors, {} bytes; {what})\n",
                f.name, f.tensors, f.bytes
            ));
        }
        if !r.copied.is_empty() {
            s.push_str(&format!("  also copied: {}\n", r.copied.join(", ")));
        }
    } else {
        s.push_str(&format!("\nwould write to {}\n", r.output));
    }
    s.push_str(&format!(
        "\nbefore  {}: {}\n        {}\n",
        r.before.path,
        r.before.verdict,
        findings_line(&r.before.findings)
    ));
    if let Some(a) = &r.after {
        s.push_str(&format!(
            "after   {}: {}\n        {}\n",
            a.path,
            a.verdict,
            findings_line(&a.findings)
        ));
    }
    if !r.cautions.is_empty() {
        s.push_str("\ncaution:\n");
        for c in &r.cautions {
            s.push_str(&format!("  - {c}\n"));
        }
    }
    for w in &r.warnings {
        s.push_str(&format!("warning: {w}\n"));
    }
    s
}
