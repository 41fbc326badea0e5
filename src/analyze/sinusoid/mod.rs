//! Is a stored table really the fixed sine/cosine formula, and which variant of it?
//!
//! Checkpoints store sinusoid tables in several published variants: interleaved
//! sin/cos columns with Vaswani's `2i/d` exponent, split halves with the `i/(d/2-1)`
//! log-timescale exponent, a zeroed padding row, a zero last column for odd widths,
//! and sometimes angles computed in a low-precision dtype. This module recovers the
//! variant from the numbers alone (nothing is assumed about base, layout or offset),
//! measures how far the table is from the recomputed formula, and says whether that
//! distance looks like angles computed in bf16/f16.
//!
//! # The formula family
//! ```text
//! h          = number of (sin, cos) column pairs = floor(d/2)
//! ω_i        = frequency_scale · base^(−i/D),   i = 0..h−1
//!              D = h      for exponent "2i/d"       (Vaswani 2017 §3.5, Marian, RoFormer)
//!              D = h − 1  for exponent "i/(d/2-1)"  (tensor2tensor, fairseq, Whisper)
//! angle(r,i) = (r − offset) · ω_i                    r = table row
//! interleaved: column 2i = A·sin(angle), column 2i+1 = A·cos(angle)   (sin_first)
//! split:       column i  = A·sin(angle), column h+i  = A·cos(angle)   (sin_first)
//! odd d:       the last column is zero (tensor2tensor / fairseq padding)
//! ```
//! `sin_first = false` swaps the sine and cosine columns of each pair. Zero rows (a
//! padding row, e.g. fairseq's `padding_idx`) are reported and left out of the error.
//!
//! - [`formula`]: the family itself ([`SinusoidSpec`], [`generate`]).
//! - [`fit`]: recovering the variant from a table ([`fit_sinusoid`]).
//! - [`precision`]: whether the angles were computed in bf16/f16.

mod fit;
mod formula;
mod precision;
#[cfg(test)]
mod tests;

pub use fit::{ErrorBin, SinusoidFit, fit_sinusoid};
pub use formula::{Exponent, Layout, SinusoidSpec, generate};
pub use precision::{PrecisionEvidence, SimulatedDtype};
