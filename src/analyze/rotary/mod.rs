//! Rotary (RoPE) frequencies: what base they follow, whether and how they were rescaled
//! for a longer context, and whether they were rounded to a low-precision type.
//!
//! Rotary encoding stores no table: at most a vector of inverse frequencies
//! (`…rotary_emb.inv_freq`, length dim/2), per-dimension divisors (GGUF `rope_freqs`),
//! or only config values. Every context-extension recipe leaves a signature in that
//! vector — one common divisor (linear interpolation), a larger base (NTK-aware), or a
//! ramp between two wavelength bounds (Llama 3.1, YaRN) — and a model-wide cast to
//! bf16/f16 leaves the rounding of the exact values. This module reads those
//! signatures back from the numbers.
//!
//! - [`fit`]: base and recipe from a stored vector ([`analyze_inv_freq`],
//!   [`analyze_rope_factors`]).
//! - [`recipes`]: the published recipes forward, from config values
//!   ([`frequencies_from_config`], [`rotary_from_config`]).
//! - [`precision`]: was the vector rounded to bf16/f16, and the phase error it causes.
//! - [`layers`]: agreement of the vectors stored for several layers.
//!
//! ALiBi (linear biases, no rotation) is in [`crate::analyze::alibi`].

mod fit;
mod layers;
mod precision;
mod recipes;
#[cfg(test)]
mod tests;

pub use fit::{analyze_inv_freq, analyze_rope_factors};
pub use layers::{LayerAgreement, LayerDifference, compare_layers};
pub use recipes::{frequencies_from_config, rotary_from_config};

use ndarray::ArrayView1;
use serde::Serialize;
use std::f64::consts::PI;

/// The context-extension recipe the frequencies follow (contract strings: design.md
/// "Rotary `scaling`").
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scaling {
    /// The plain formula `base^(-2i/d)`.
    None,
    /// Every frequency divided by one factor (position interpolation).
    Linear,
    /// A larger base (NTK-aware scaling).
    Ntk,
    /// A per-dimension ramp between two wavelength bounds (Llama 3.1, YaRN).
    WavelengthRamp,
    /// None of the above, or not decidable.
    Unknown,
}

impl Scaling {
    /// The contract string.
    pub fn as_str(self) -> &'static str {
        match self {
            Scaling::None => "none",
            Scaling::Linear => "linear",
            Scaling::Ntk => "ntk",
            Scaling::WavelengthRamp => "wavelength-ramp",
            Scaling::Unknown => "unknown",
        }
    }
}

impl std::fmt::Display for Scaling {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Hints from the model config and the caller, all optional.
#[derive(Debug, Clone, Default)]
pub struct RotaryHints {
    /// Context length the config declares (`max_position_embeddings`), in tokens.
    pub declared_context: Option<usize>,
    /// Context length before an extension (`original_max_position_embeddings`), in tokens.
    pub original_context: Option<usize>,
    /// Base the config names (`rope_theta`).
    pub config_theta: Option<f64>,
    /// Number of rotated dimensions d (`head_dim × partial_rotary_factor`); 2·len when absent.
    pub rotary_dim: Option<usize>,
}

/// The three index groups of a wavelength ramp and the parameters they imply.
#[derive(Debug, Clone, Serialize)]
pub struct WavelengthRamp {
    /// Half-open index range [start, end) of frequencies left unchanged (high frequencies).
    pub unchanged: (usize, usize),
    /// Half-open index range of frequencies blended between kept and divided.
    pub smoothed: (usize, usize),
    /// Half-open index range of frequencies divided by the full factor (low frequencies).
    pub divided: (usize, usize),
    /// Divisor applied to each smoothed frequency (original / stored), in index order.
    pub smoothed_divisors: Vec<f64>,
    /// How the kept fraction varies across the smoothed group: `linear-in-frequency`
    /// (Llama 3.1 style: linear in 1/wavelength), `linear-in-index` (YaRN style), or
    /// `undetermined` (fewer than three smoothed frequencies).
    pub shape: String,
    /// Largest deviation of the kept fractions from the chosen shape's straight line.
    pub shape_fit_max_error: Option<f64>,
    /// Wavelength (tokens) at which the ramp starts dividing: shorter ones are kept.
    pub high_freq_wavelength: Option<f64>,
    /// Wavelength (tokens) beyond which frequencies are fully divided.
    pub low_freq_wavelength: Option<f64>,
    /// Original context implied, `low_freq_factor × low_freq_wavelength` (tokens).
    pub original_context: Option<f64>,
    /// `original_context / low_freq_wavelength`.
    pub low_freq_factor: Option<f64>,
    /// `original_context / high_freq_wavelength`.
    pub high_freq_factor: Option<f64>,
    /// Fractional rotary index where the YaRN ramp starts (kept fraction 1), linear-in-index only.
    pub ramp_start_index: Option<f64>,
    /// Fractional rotary index where the YaRN ramp ends (kept fraction 0), linear-in-index only.
    pub ramp_end_index: Option<f64>,
    /// Which assumption fixed the original context.
    pub context_assumption: Option<String>,
}

/// YaRN parameters as the config states them (check-values §6.5).
#[derive(Debug, Clone, Serialize)]
pub struct YarnParameters {
    /// `beta_fast` (rotations within the original context above which dims are kept).
    pub beta_fast: f64,
    /// `beta_slow`.
    pub beta_slow: f64,
    /// Ramp start dimension index `low` (floor of the correction dimension).
    pub low: usize,
    /// Ramp end dimension index `high` (ceil of the correction dimension).
    pub high: usize,
    /// Attention scale applied to cos/sin (`0.1·ln(s) + 1` unless the config gives one).
    pub attention_factor: f64,
    /// Original context length the ramp is computed for (tokens).
    pub original_context: usize,
}

/// Wavelengths 2π/ω against a context length.
#[derive(Debug, Clone, Serialize)]
pub struct WavelengthSummary {
    /// Shortest wavelength, in tokens.
    pub shortest: f64,
    /// Longest wavelength, in tokens.
    pub longest: f64,
    /// Context the counts below refer to (declared, else original), in tokens.
    pub context: Option<usize>,
    /// Frequencies (each drives one pair of dimensions) whose wavelength exceeds the
    /// context: they never complete a full turn within it.
    pub beyond_context: Option<usize>,
    /// Index of the first such frequency.
    pub first_index_beyond_context: Option<usize>,
    /// Dimensions driven by those frequencies (two per frequency).
    pub dimensions_beyond_context: Option<usize>,
}

/// Phase error caused by rounded frequencies at one position.
#[derive(Debug, Clone, Serialize)]
pub struct PhaseError {
    /// Token position.
    pub position: usize,
    /// Largest angle error over all frequencies, `position × |ω_stored − ω_exact|`, radians.
    pub radians: f64,
}

/// Evidence that stored frequencies are a low-precision rounding of exact ones.
#[derive(Debug, Clone, Serialize)]
pub struct PrecisionEvidence {
    /// `bf16` or `f16`: every stored value is exactly representable in that type.
    pub dtype: String,
    /// Stored values equal to the rounding of the fitted exact frequency to `dtype`.
    pub entries_matching_rounded_exact: usize,
    /// Number of values checked.
    pub entries: usize,
    /// Largest relative error of the stored values against the exact frequencies.
    pub max_rel_error: f64,
    /// Resulting phase error at a few positions.
    pub phase_error: Vec<PhaseError>,
}

/// What a rotary frequency vector (or config) says.
#[derive(Debug, Clone, Serialize)]
pub struct RotaryAnalysis {
    /// Base of the geometric progression the (unscaled part of the) frequencies follow;
    /// for `ntk` this is the enlarged base actually in use. `None` when no fit was possible.
    pub base: Option<f64>,
    /// `none`, `linear`, `ntk`, `wavelength-ramp` or `unknown`.
    pub scaling: Scaling,
    /// Context scale factor implied (1.0 for none).
    pub factor: f64,
    /// Where the numbers came from: `inv_freq`, `divisors`, or `config`.
    pub source: String,
    /// Number of frequencies.
    pub frequencies: usize,
    /// Rotated dimensions d used in the exponent `−2i/d`.
    pub rotary_dim: usize,
    /// Largest |ln(stored) − ln(model)| over the frequencies the model covers exactly.
    pub fit_max_log_error: Option<f64>,
    /// Base before an NTK change (config value, or assumed common value; see notes).
    pub original_base: Option<f64>,
    /// NTK α with `base = original_base · α^(d/(d−2))`.
    pub ntk_alpha: Option<f64>,
    /// Ramp groups and parameters, for `wavelength-ramp`.
    pub ramp: Option<WavelengthRamp>,
    /// YaRN parameters, when a config says yarn.
    pub yarn: Option<YarnParameters>,
    /// Wavelengths against the context.
    pub wavelengths: Option<WavelengthSummary>,
    /// Low-precision rounding evidence, `None` when the values are not such a rounding.
    pub low_precision: Option<PrecisionEvidence>,
    /// Assumptions made and oddities seen, in plain words.
    pub notes: Vec<String>,
    /// Why no analysis was possible, if so.
    pub problem: Option<String>,
}

impl RotaryAnalysis {
    fn empty(source: &str, n: usize, d: usize, problem: Option<String>) -> Self {
        RotaryAnalysis {
            base: None,
            scaling: Scaling::Unknown,
            factor: 1.0,
            source: source.into(),
            frequencies: n,
            rotary_dim: d,
            fit_max_log_error: None,
            original_base: None,
            ntk_alpha: None,
            ramp: None,
            yarn: None,
            wavelengths: None,
            low_precision: None,
            notes: Vec::new(),
            problem,
        }
    }
}

/// Bases in common use (check-values §6.2: 1e4 Llama/Llama 2, 5e5 Llama 3, 1e6 Code Llama).
pub(super) const COMMON_BASES: [f64; 3] = [10_000.0, 500_000.0, 1_000_000.0];

/// Positions at which phase errors are reported, besides the declared context.
pub(super) const PHASE_POSITIONS: [usize; 4] = [512, 2048, 4096, 32768];

/// Smallest |log-ratio deviation| that marks a step as off the geometric progression.
/// bf16 rounding moves a log-ratio by at most 2·2⁻⁸ ≈ 7.8e-3 (check-values §7.1).
pub(super) const STEP_TOLERANCE: f64 = 0.012;

/// Exact HF/Meta inverse frequencies `base^(−2i/d)`, i = 0..n.
///
/// ```text
/// inv_freq_i = 1 / base^(2i/d)        (check-values §6.1, HF modeling_rope_utils)
/// ```
pub fn inv_freq(base: f64, rotary_dim: usize) -> Vec<f64> {
    let n = rotary_dim.div_ceil(2);
    (0..n)
        .map(|i| base.powf(-(2.0 * i as f64) / rotary_dim as f64))
        .collect()
}

/// Least-squares line y = a + b·x; `None` with fewer than two distinct x.
pub(super) fn line_fit(x: &[f64], y: &[f64]) -> Option<(f64, f64)> {
    let n = x.len() as f64;
    if x.len() < 2 || x.len() != y.len() {
        return None;
    }
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let sxx: f64 = x.iter().map(|v| (v - mx).powi(2)).sum();
    if sxx <= 0.0 {
        return None;
    }
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let b = sxy / sxx;
    Some((my - b * mx, b))
}

/// Rounds a positive integer-like estimate when it is within 1e-3 relative of one.
pub(super) fn tidy(x: f64) -> f64 {
    let r = x.round();
    if r != 0.0 && ((x - r) / r).abs() < 1e-3 {
        r
    } else {
        x
    }
}

pub(super) fn wavelength_summary(
    freqs: &[f64],
    context: Option<usize>,
) -> Option<WavelengthSummary> {
    if freqs.is_empty() || freqs.iter().any(|f| !f.is_finite() || *f <= 0.0) {
        return None;
    }
    let waves: Vec<f64> = freqs.iter().map(|f| 2.0 * PI / f).collect();
    let shortest = waves.iter().copied().fold(f64::INFINITY, f64::min);
    let longest = waves.iter().copied().fold(0.0, f64::max);
    let (beyond, first) = match context {
        Some(c) => {
            let c = c as f64;
            (
                Some(waves.iter().filter(|w| **w > c).count()),
                waves.iter().position(|w| *w > c),
            )
        }
        None => (None, None),
    };
    Some(WavelengthSummary {
        shortest,
        longest,
        context,
        beyond_context: beyond,
        first_index_beyond_context: first,
        dimensions_beyond_context: beyond.map(|b| 2 * b),
    })
}
