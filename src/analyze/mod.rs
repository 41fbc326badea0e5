//! Pure numerical analyses of position tables: functions over `ndarray` views, no I/O,
//! no printing. Each submodule is one idea; each returns a serialisable result struct
//! that goes straight into the report model.
pub mod sinusoid;
pub mod untrained;
