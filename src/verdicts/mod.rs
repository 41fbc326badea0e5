//! Verdicts: turn the numbers of the analyses into a one-line verdict per table and
//! findings with evidence and limits, written into the document model. Pure: no I/O.
//!
//! - [`one_d`]: learned and fixed 1-D tables.
//! - [`kinds`]: patch grids, relative-bias tables, rotary frequencies (stored, or
//!   derived from the config), position-id buffers.
//! - [`compare`]: the findings of a comparison.

pub mod compare;
pub mod kinds;
pub mod one_d;
