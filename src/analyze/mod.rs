//! Pure numerical analyses of position tables: functions over `ndarray` views, no I/O,
//! no printing. Each submodule is one idea; each returns a serialisable result struct
//! that goes straight into the report model.

pub mod alibi;
pub mod decay;
pub mod grid;
pub mod hygiene;
mod lagged;
pub mod moments;
pub mod neighbours;
pub mod norms;
pub mod periodicity;
pub mod position_ids;
pub mod precision;
pub mod ranges;
pub mod relative;
pub mod rotary;
pub mod sinusoid;
pub mod spectrum;
pub mod stats;
pub mod untrained;
pub mod waves;
