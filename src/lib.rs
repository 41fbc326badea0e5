//! posaudit: finds the position tables of a transformer checkpoint and analyses them.
//!
//! The pipeline: [`checkpoint`] (one module per format, an index of tensors read lazily
//! from a memory map) → [`detect`] (which tensors are position tables, of which kind) →
//! [`analyze`] (pure numerical functions) → [`report`] (one serde model, rendered as
//! JSON, Markdown, SVG and terminal text).
#![deny(missing_docs)]

pub mod analyze;
pub mod audit;
pub mod checkpoint;
pub mod cli;
pub mod compare;
pub mod config;
pub mod detect;
pub mod linalg;
pub mod report;
pub mod scan;
