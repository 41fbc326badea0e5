//! The renderers: each turns a document of [`crate::model`] into text or SVG, and
//! computes nothing the document does not hold.
//!
//! - [`terminal`]: the summaries printed on stdout (scan, audit, compare); [`extend`]:
//!   the summary of `posaudit extend`.
//! - [`markdown`]: `report.md` of an audit or a comparison.
//! - [`figures`]: which plots a report has and how each is drawn, with [`plots`]
//!   (the hand-written SVG renderer) doing the drawing.
//! - [`output`]: the JSON text, and atomic writing of the `--out` folder (called by
//!   `main.rs` only).
//!
//! The wording pieces they share (ranges, plurals, escaping, short names) are in
//! [`crate::text`], which the verdict messages use too.

pub mod extend;
pub mod figures;
pub mod markdown;
pub mod output;
pub mod plots;
pub mod terminal;

use crate::model::audit::AuditReport;
use crate::model::compare::CompareReport;

/// The files of an audit's `--out` folder except `report.json`: the SVG plots that
/// `report.md` links, then `report.md` itself (written last, so it never links a plot
/// that is not there yet).
pub fn audit_files(report: &AuditReport) -> Vec<(String, Vec<u8>)> {
    let (md, figures) = markdown::audit::render(report);
    let mut files: Vec<(String, Vec<u8>)> = figures
        .into_iter()
        .map(|f| (f.file, f.svg.into_bytes()))
        .collect();
    files.push(("report.md".into(), md.into_bytes()));
    files
}

/// The files of a comparison's `--out` folder except `report.json` (see [`audit_files`]).
pub fn compare_files(report: &CompareReport) -> Vec<(String, Vec<u8>)> {
    let mut files: Vec<(String, Vec<u8>)> = figures::compare::render_plots(report)
        .into_iter()
        .map(|(name, svg)| (name, svg.into_bytes()))
        .collect();
    files.push((
        "report.md".into(),
        markdown::compare::render(report).into_bytes(),
    ));
    files
}
