//! The report model and its renderings.
//!
//! [`model`] holds the serde structs that are the single source of truth of every output:
//! the JSON documents are these structs serialised; the terminal summary, the Markdown
//! report and the SVG plots are renderings of the same structs.

pub mod compare_report;
pub mod figures;
pub mod markdown;
pub mod model;
pub mod output;
pub mod plots;
pub mod terminal;
