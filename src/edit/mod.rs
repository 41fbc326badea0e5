//! Pure numerics of `posaudit extend`: the new values of an edited position table.
//! No I/O: functions over `ndarray` views that return new tables, plus the one correct
//! rounding from f64 to the stored element type ([`encode`]).
//!
//! - [`resample`]: 1-D tables along position (linear and cubic, the grid of
//!   `align_corners=True`), tiling, gap filling; 2-D grids (bilinear and bicubic, the
//!   grid of `align_corners=False`). The conventions are the ones of
//!   `torch.nn.functional.interpolate`, and `tests/edit_reference.rs` holds them to its
//!   values (computed by `tests/reference/edit_reference.py`).
//! - [`init`]: seeded normal draws for re-initialised rows.
//! - [`encode`]: f64 values to the stored element type, rounded once (ties to even).

pub mod encode;
pub mod init;
pub mod resample;
