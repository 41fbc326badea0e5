//! The sine/cosine formula family: its parameters and the table they generate.

use ndarray::Array2;
use serde::Serialize;

/// How the sine and cosine columns are arranged.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Layout {
    /// Pairs sit in adjacent columns (2i, 2i+1).
    Interleaved,
    /// One half of the columns holds sines, the other half cosines (i, h+i).
    Split,
}

/// Which exponent convention turns the base into frequencies.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Exponent {
    /// ω_i = base^(−2i/d) (Vaswani 2017 §3.5; HF Marian/RoFormer).
    #[serde(rename = "2i/d")]
    TwoIOverD,
    /// ω_i = base^(−i/(d/2−1)) (tensor2tensor `get_timing_signal_1d`, fairseq, Whisper).
    #[serde(rename = "i/(d/2-1)")]
    IOverHalfMinusOne,
}

/// All parameters of one member of the formula family (see the module docs).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SinusoidSpec {
    /// Base of the geometric frequency progression (10000 in most code).
    pub base: f64,
    /// Column layout.
    pub layout: Layout,
    /// Whether the sine column comes first in each pair.
    pub sin_first: bool,
    /// Exponent convention.
    pub exponent: Exponent,
    /// Number of rows before the row whose angle is zero (may be negative).
    pub offset: i64,
    /// Amplitude A of every sine and cosine (1 for all published variants).
    pub scale: f64,
    /// Highest frequency ω_0 in radians per row (1 for all published variants).
    pub frequency_scale: f64,
}

impl SinusoidSpec {
    /// The frequencies ω_i (radians per row) for a table of width `d`.
    pub fn frequencies(&self, d: usize) -> Vec<f64> {
        let h = d / 2;
        let denom = match self.exponent {
            Exponent::TwoIOverD => h as f64,
            Exponent::IOverHalfMinusOne => (h.max(2) - 1) as f64,
        };
        (0..h)
            .map(|i| self.frequency_scale * self.base.powf(-(i as f64) / denom))
            .collect()
    }

    /// Column indices (sine column, cosine column) of pair `i` in a width-`d` table.
    pub(super) fn columns(&self, d: usize, i: usize) -> (usize, usize) {
        pair_columns(self.layout, self.sin_first, d / 2, i)
    }
}

pub(super) fn pair_columns(layout: Layout, sin_first: bool, h: usize, i: usize) -> (usize, usize) {
    let (first, second) = match layout {
        Layout::Interleaved => (2 * i, 2 * i + 1),
        Layout::Split => (i, h + i),
    };
    if sin_first {
        (first, second)
    } else {
        (second, first)
    }
}

/// Build the table `rows × d` of a formula variant, in f64.
///
/// This is the one place the formula is evaluated: the fit measures its error against
/// this, and the tests check it against published reference rows.
///
/// ```text
/// table[r, sin col of pair i] = A·sin((r − offset)·ω_i)
/// table[r, cos col of pair i] = A·cos((r − offset)·ω_i)
/// odd d: table[r, d−1] = 0
/// ```
pub fn generate(spec: &SinusoidSpec, rows: usize, d: usize) -> Array2<f64> {
    let freqs = spec.frequencies(d);
    let mut out = Array2::zeros((rows, d));
    for r in 0..rows {
        let p = r as f64 - spec.offset as f64;
        for (i, w) in freqs.iter().enumerate() {
            let (cs, cc) = spec.columns(d, i);
            let (s, c) = (p * w).sin_cos();
            out[[r, cs]] = spec.scale * s;
            out[[r, cc]] = spec.scale * c;
        }
    }
    out
}
