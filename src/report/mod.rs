//! Rendering of audit and compare results for people and pipelines. The report
//! layer turns the serialisable result structs into JSON, Markdown and SVG; this
//! module tree holds those renderers, starting with the SVG plots the Markdown
//! report links to.

pub mod plots;
