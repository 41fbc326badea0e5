//! The renderers: each turns a document of [`crate::model`] into text or SVG, and
//! computes nothing the document does not hold.
//!
//! - [`terminal`]: the summaries printed on stdout (scan, audit, compare).
//! - [`markdown`]: `report.md` of an audit or a comparison.
//! - [`figures`]: which plots a report has and how each is drawn, with [`plots`]
//!   (the hand-written SVG renderer) doing the drawing.
//! - [`output`]: the JSON text, and atomic writing of the `--out` folder (called by
//!   `main.rs` only).
//!
//! The wording pieces they share (ranges, plurals, escaping, short names) are in
//! [`crate::text`], which the verdict messages use too.

pub mod figures;
pub mod markdown;
pub mod output;
pub mod plots;
pub mod terminal;
