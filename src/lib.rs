//! posaudit: finds the position tables of a transformer checkpoint and analyses them.
//!
//! Data flows one way, each layer importing only the layers below it:
//!
//! ```text
//! main.rs (CLI: parses, renders, the only writer of stdout and --out)
//!   └─ commands      scan, audit, compare: plain options in, a document out
//!        ├─ verdicts  numbers → verdicts and findings (per kind, compare)
//!        ├─ report    renderers: terminal, Markdown, SVG, JSON text
//!        └─ model     the documents: plain serde data
//!             ├─ analyze, compare (numerics), detect
//!             └─ checkpoint, config, linalg, text, error
//! ```
//!
//! The command line (clap) lives in the binary (`src/cli.rs`); the library has no clap
//! types.
#![deny(missing_docs)]

pub mod analyze;
pub mod checkpoint;
pub mod commands;
pub mod compare;
pub mod config;
pub mod detect;
pub mod edit;
pub mod error;
pub mod kind;
pub mod linalg;
pub mod model;
pub mod report;
pub mod text;
pub mod verdicts;

pub use error::{Error, Result};

#[cfg(test)]
pub(crate) mod testutil;
