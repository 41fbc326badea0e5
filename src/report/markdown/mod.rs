//! The Markdown reports: [`audit`] and [`compare`], with the pieces both use (a finding
//! with its evidence and limits) written once here.

pub mod audit;
pub mod compare;

use std::fmt::Write;

use crate::model::{Finding, Severity};
use crate::text::{escape, row_list};

/// One finding as a list item, with its evidence and limits as sub-items. A finding
/// about several row ranges names the first four and counts the others.
pub(crate) fn finding(md: &mut String, f: &Finding) {
    let marker = match f.severity {
        Severity::Error => "**error**",
        Severity::Warning => "**warning**",
        Severity::Info => "info",
    };
    let at = f
        .positions
        .map(|_| format!(" — {}", row_list(&f.ranges, 4)))
        .unwrap_or_default();
    let _ = writeln!(md, "- {marker} `{}`{at}: {}", f.code, escape(&f.message));
    if !f.evidence.is_empty() {
        let _ = writeln!(md, "  - Evidence: {}", escape(&f.evidence));
    }
    if !f.limits.is_empty() {
        let _ = writeln!(md, "  - Limits: {}", escape(&f.limits));
    }
}

/// The distinct `severity code` pairs of a list of findings, or `none`.
pub(crate) fn finding_badges<'a>(findings: impl IntoIterator<Item = &'a Finding>) -> String {
    let mut codes: Vec<String> = Vec::new();
    for x in findings {
        let s = format!("{} `{}`", x.severity.as_str(), x.code);
        if !codes.contains(&s) {
            codes.push(s);
        }
    }
    if codes.is_empty() {
        "none".into()
    } else {
        codes.join(", ")
    }
}
