//! posaudit: finds the position tables of a transformer checkpoint and analyses them.
#![deny(missing_docs)]

pub mod analyze;
pub mod linalg;
pub mod report;
