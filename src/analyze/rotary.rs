//! Rotary (RoPE) frequencies: what base they follow, whether and how they were rescaled
//! for a longer context, whether they were rounded to a low-precision type, and ALiBi
//! slopes for models that use linear biases instead.
//!
//! Rotary encoding stores no table: at most a vector of inverse frequencies
//! (`…rotary_emb.inv_freq`, length dim/2), per-dimension divisors (GGUF `rope_freqs`),
//! or only config values. Every context-extension recipe leaves a signature in that
//! vector — one common divisor (linear interpolation), a larger base (NTK-aware), or a
//! ramp between two wavelength bounds (Llama 3.1, YaRN) — and a model-wide cast to
//! bf16/f16 leaves the rounding of the exact values. This module reads those
//! signatures back from the numbers.

use ndarray::ArrayView1;
use serde::Serialize;
use std::f64::consts::PI;

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
    pub scaling: String,
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
            scaling: "unknown".into(),
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
const COMMON_BASES: [f64; 3] = [10_000.0, 500_000.0, 1_000_000.0];

/// Positions at which phase errors are reported, besides the declared context.
const PHASE_POSITIONS: [usize; 4] = [512, 2048, 4096, 32768];

/// Smallest |log-ratio deviation| that marks a step as off the geometric progression.
/// bf16 rounding moves a log-ratio by at most 2·2⁻⁸ ≈ 7.8e-3 (check-values §7.1).
const STEP_TOLERANCE: f64 = 0.012;

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

fn median(values: &mut [f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    values.sort_by(|a, b| a.total_cmp(b));
    let m = values.len() / 2;
    Some(if values.len() % 2 == 1 {
        values[m]
    } else {
        0.5 * (values[m - 1] + values[m])
    })
}

/// Least-squares line y = a + b·x; `None` with fewer than two distinct x.
fn line_fit(x: &[f64], y: &[f64]) -> Option<(f64, f64)> {
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
fn tidy(x: f64) -> f64 {
    let r = x.round();
    if r != 0.0 && ((x - r) / r).abs() < 1e-3 {
        r
    } else {
        x
    }
}

fn wavelength_summary(freqs: &[f64], context: Option<usize>) -> Option<WavelengthSummary> {
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

fn phase_errors(stored: &[f64], exact: &[f64], hints: &RotaryHints) -> Vec<PhaseError> {
    let max_err = stored
        .iter()
        .zip(exact)
        .map(|(s, e)| (s - e).abs())
        .fold(0.0, f64::max);
    let mut positions: Vec<usize> = PHASE_POSITIONS.to_vec();
    positions.extend(hints.declared_context);
    positions.extend(hints.original_context);
    positions.sort_unstable();
    positions.dedup();
    positions
        .into_iter()
        .map(|p| PhaseError {
            position: p,
            radians: p as f64 * max_err,
        })
        .collect()
}

/// Checks whether `stored` is the bf16 or f16 rounding of `exact` (check-values §7.3).
fn precision_evidence(
    stored: &[f64],
    exact: &[f64],
    hints: &RotaryHints,
) -> Option<PrecisionEvidence> {
    // A generic f32 value is bf16-representable with probability 2⁻¹⁶, so requiring every
    // one of at least four values to be representable is a strong signal.
    if stored.len() < 4 || stored.len() != exact.len() {
        return None;
    }
    let as_bf16 = |v: f64| half::bf16::from_f64(v).to_f64();
    let as_f16 = |v: f64| half::f16::from_f64(v).to_f64();
    let is_f32_exact = stored
        .iter()
        .zip(exact)
        .all(|(s, e)| *s == (*e as f32) as f64);
    if is_f32_exact {
        return None;
    }
    let candidates: [(&str, &dyn Fn(f64) -> f64); 2] = [("bf16", &as_bf16), ("f16", &as_f16)];
    for (name, round) in candidates {
        if stored.iter().all(|s| round(*s) == *s) {
            let matching = stored
                .iter()
                .zip(exact)
                .filter(|(s, e)| round(**e) == **s)
                .count();
            // The stored values must also be close to the exact ones (within a few ULP),
            // otherwise they are representable for some other reason.
            let max_rel_error = stored
                .iter()
                .zip(exact)
                .map(|(s, e)| ((s - e) / e).abs())
                .fold(0.0, f64::max);
            if matching * 10 >= stored.len() * 9 && max_rel_error < 0.02 {
                return Some(PrecisionEvidence {
                    dtype: name.into(),
                    entries_matching_rounded_exact: matching,
                    entries: stored.len(),
                    max_rel_error,
                    phase_error: phase_errors(stored, exact, hints),
                });
            }
        }
    }
    None
}

/// Fits base and scaling to a stored inverse-frequency vector.
///
/// Algorithm:
/// 1. Work on `y_i = ln ω_i`. For unscaled RoPE the steps `y_{i+1} − y_i` all equal
///    `q = −2 ln(base)/d` (check-values §6.1). Take `q` as the median step and mark the
///    steps that deviate by more than max(0.05·|q|, 0.012) (bf16 noise stays below).
/// 2. No deviating steps: fit one line `y = a + s·i`. `a ≈ 0` means no linear scaling;
///    otherwise `linear` with factor `e^(−a)` (check-values §6.3, `inv_freq /= factor`).
///    A base that differs from the config's `rope_theta` (or, without config, from a
///    common base by an integer α) is `ntk`, `α = (base/base₀)^((d−2)/d)` (§6.4).
/// 3. One block of deviating steps in the middle: the indices before it (`unchanged`) and
///    after it (`divided`) share one slope with separate intercepts; the factor is
///    `e^(a_head − a_tail)`. The kept fraction `t = (1/div − 1/s)/(1 − 1/s)` of the
///    smoothed indices is fitted linear in `ω/2π` (Llama 3.1, §6.6: t = 0 at the
///    low-frequency wavelength bound, 1 at the high one) and linear in the index (YaRN,
///    §6.5); the better fit names the shape. With `low_freq_factor = 1` (the published
///    default) the original context is the low-frequency wavelength bound.
/// 4. Wavelengths `2π/ω` are compared with the declared context, and the values are
///    tested for being the exact bf16/f16 rounding of the fitted frequencies (§7.3).
///
/// Edge cases: fewer than two values, non-finite, zero or negative values, or increasing
/// frequencies give `scaling = "unknown"` with `problem` set; nothing panics.
pub fn analyze_inv_freq(inv_freq_values: ArrayView1<f64>, hints: &RotaryHints) -> RotaryAnalysis {
    let v: Vec<f64> = inv_freq_values.iter().copied().collect();
    let n = v.len();
    let mut d = 2 * n;
    let mut notes = Vec::new();
    if let Some(rd) = hints.rotary_dim {
        if rd.div_ceil(2) == n && rd > 0 {
            d = rd;
        } else {
            notes.push(format!(
                "rotary dimension {rd} from the config does not match {n} stored frequencies; using d = {d}"
            ));
        }
    }
    if n < 2 {
        return RotaryAnalysis::empty(
            "inv_freq",
            n,
            d,
            Some(format!("need at least 2 frequencies, got {n}")),
        );
    }
    if v.iter().any(|x| !x.is_finite() || *x <= 0.0) {
        return RotaryAnalysis::empty(
            "inv_freq",
            n,
            d,
            Some("frequencies hold non-finite, zero or negative values".into()),
        );
    }
    let y: Vec<f64> = v.iter().map(|x| x.ln()).collect();
    let steps: Vec<f64> = y.windows(2).map(|w| w[1] - w[0]).collect();
    let q = median(&mut steps.clone()).unwrap_or(0.0);
    if q >= 0.0 {
        let mut a = RotaryAnalysis::empty(
            "inv_freq",
            n,
            d,
            Some("frequencies do not decrease with the index".into()),
        );
        a.notes = notes;
        return a;
    }
    let tol = (0.05 * q.abs()).max(STEP_TOLERANCE);
    let odd: Vec<usize> = (0..steps.len())
        .filter(|&i| (steps[i] - q).abs() > tol)
        .collect();

    // Group the indices: head = before the first odd step, tail = after the last one.
    let (head_end, tail_start) = match (odd.first(), odd.last()) {
        (Some(&f), Some(&l)) => (f + 1, l + 1),
        _ => (n, n),
    };
    let contiguous = odd.windows(2).all(|w| w[1] == w[0] + 1);
    let mut analysis = RotaryAnalysis::empty("inv_freq", n, d, None);
    analysis.notes = notes;
    if !contiguous {
        analysis.problem = Some(format!(
            "steps off the geometric progression are scattered (at indices {odd:?})"
        ));
        return analysis;
    }
    // Shared slope, separate intercepts for head and tail.
    let groups: Vec<(usize, usize)> = if tail_start < n {
        vec![(0, head_end), (tail_start, n)]
    } else {
        vec![(0, head_end)]
    };
    let mut sxx = 0.0;
    let mut sxy = 0.0;
    let mut means = Vec::new();
    for &(s, e) in &groups {
        let k = (e - s) as f64;
        let mx = (s..e).map(|i| i as f64).sum::<f64>() / k;
        let my = y[s..e].iter().sum::<f64>() / k;
        for (i, yi) in y.iter().enumerate().take(e).skip(s) {
            sxx += (i as f64 - mx).powi(2);
            sxy += (i as f64 - mx) * (yi - my);
        }
        means.push((mx, my));
    }
    if sxx <= 0.0 {
        analysis.problem = Some("too few regular frequencies to fit a base".into());
        return analysis;
    }
    let slope = sxy / sxx;
    let intercepts: Vec<f64> = means.iter().map(|(mx, my)| my - slope * mx).collect();
    let mut base = (-slope * d as f64 / 2.0).exp();
    let a_head = intercepts[0];
    let fit_err = groups
        .iter()
        .zip(&intercepts)
        .flat_map(|(&(s, e), a)| (s..e).map(move |i| (i, *a)))
        .map(|(i, a)| (y[i] - (a + slope * i as f64)).abs())
        .fold(0.0, f64::max);
    analysis.fit_max_log_error = Some(fit_err);

    // Snap the base to the config value or a common value when it is that value. Values
    // stored at bf16/f16 resolution (every one representable) only pin the base to about
    // 1e-3, so the window widens for them; the precision test below then checks that the
    // snapped frequencies round exactly to the stored ones.
    let coarse = v.iter().all(|x| half::bf16::from_f64(*x).to_f64() == *x)
        || v.iter().all(|x| half::f16::from_f64(*x).to_f64() == *x);
    let window = if coarse { 2e-3 } else { 1e-4 };
    base = hints
        .config_theta
        .into_iter()
        .chain(COMMON_BASES)
        .find(|c| ((base - c) / c).abs() < window)
        .unwrap_or(base);
    analysis.base = Some(base);

    let exact_unscaled = inv_freq(base, d);
    let mut exact = exact_unscaled.clone();

    if groups.len() == 2 {
        let ln_factor = a_head - intercepts[1];
        if ln_factor.abs() < 5e-3 {
            analysis.scaling = "none".into();
            analysis.notes.push(format!(
                "entries {}..{} deviate from the geometric progression",
                head_end, tail_start
            ));
        } else if ln_factor < 0.0 {
            analysis.scaling = "unknown".into();
            analysis.notes.push(
                "low frequencies are larger than the progression predicts (divisor below 1)".into(),
            );
        } else {
            let factor = tidy(ln_factor.exp());
            analysis.scaling = "wavelength-ramp".into();
            analysis.factor = factor;
            for i in tail_start..n {
                exact[i] = exact_unscaled[i] / factor;
            }
            let ramp = describe_ramp(&v, &exact_unscaled, head_end, tail_start, factor, hints);
            if a_head.abs() > 5e-3 {
                analysis.notes.push(format!(
                    "the unchanged group is itself divided by {:.6}",
                    (-a_head).exp()
                ));
            }
            analysis.ramp = Some(ramp);
        }
    } else if a_head.abs() >= 5e-3 {
        let factor = tidy((-a_head).exp());
        analysis.scaling = if factor > 1.0 { "linear" } else { "unknown" }.into();
        analysis.factor = factor;
        if factor <= 1.0 {
            analysis
                .notes
                .push(format!("all frequencies multiplied by {:.6}", 1.0 / factor));
        }
        exact = exact_unscaled.iter().map(|w| w / factor).collect();
    } else {
        // One geometric progression starting at 1: plain or NTK-changed base.
        analysis.scaling = "none".into();
        classify_base(&mut analysis, base, d, hints);
    }

    // Precision check only over the indices the model covers exactly.
    let covered: Vec<usize> = match &analysis.ramp {
        Some(_) => (0..head_end).chain(tail_start..n).collect(),
        None => (0..n).collect(),
    };
    let st: Vec<f64> = covered.iter().map(|&i| v[i]).collect();
    let ex: Vec<f64> = covered.iter().map(|&i| exact[i]).collect();
    analysis.low_precision = precision_evidence(&st, &ex, hints);
    analysis.wavelengths =
        wavelength_summary(&v, hints.declared_context.or(hints.original_context));
    analysis
}

/// Decides between `none` and `ntk` for a single progression starting at 1.
fn classify_base(analysis: &mut RotaryAnalysis, base: f64, d: usize, hints: &RotaryHints) {
    let exponent = (d as f64 - 2.0) / d as f64;
    if let Some(theta) = hints.config_theta {
        let ratio = base / theta;
        if (ratio - 1.0).abs() < 1e-3 {
            return;
        }
        if ratio > 1.0 && d > 2 {
            let alpha = tidy(ratio.powf(exponent));
            analysis.scaling = "ntk".into();
            analysis.factor = alpha;
            analysis.ntk_alpha = Some(alpha);
            analysis.original_base = Some(theta);
            analysis.notes.push(format!(
                "base {base:.6} is larger than the config's rope_theta {theta}: NTK-aware α = {alpha:.6}"
            ));
        } else {
            analysis.scaling = "unknown".into();
            analysis.notes.push(format!(
                "base {base:.6} is smaller than the config's rope_theta {theta}"
            ));
        }
        return;
    }
    if COMMON_BASES.contains(&base) || d <= 2 {
        return;
    }
    for c in COMMON_BASES {
        if base <= c {
            continue;
        }
        let alpha = (base / c).powf(exponent);
        let r = alpha.round();
        if r >= 2.0 && ((alpha - r) / r).abs() < 1e-4 {
            analysis.scaling = "ntk".into();
            analysis.factor = r;
            analysis.ntk_alpha = Some(r);
            analysis.original_base = Some(c);
            analysis.notes.push(format!(
                "no rope_theta given: base {base:.6} equals the common base {c} scaled by integer NTK α = {r}, assumed"
            ));
            return;
        }
    }
    analysis.notes.push(format!(
        "base {base:.6} is not a common value and no config base was given; it may have been changed"
    ));
}

/// Describes the smoothed block between `head_end` and `tail_start`.
fn describe_ramp(
    stored: &[f64],
    original: &[f64],
    head_end: usize,
    tail_start: usize,
    factor: f64,
    hints: &RotaryHints,
) -> WavelengthRamp {
    let idx: Vec<usize> = (head_end..tail_start).collect();
    let divisors: Vec<f64> = idx.iter().map(|&i| original[i] / stored[i]).collect();
    let kept: Vec<f64> = divisors
        .iter()
        .map(|dv| (1.0 / dv - 1.0 / factor) / (1.0 - 1.0 / factor))
        .collect();
    let mut ramp = WavelengthRamp {
        unchanged: (0, head_end),
        smoothed: (head_end, tail_start),
        divided: (tail_start, stored.len()),
        smoothed_divisors: divisors,
        shape: "undetermined".into(),
        shape_fit_max_error: None,
        high_freq_wavelength: None,
        low_freq_wavelength: None,
        original_context: None,
        low_freq_factor: None,
        high_freq_factor: None,
        ramp_start_index: None,
        ramp_end_index: None,
        context_assumption: None,
    };
    if idx.len() < 3 {
        return ramp;
    }
    let inv_wave: Vec<f64> = idx.iter().map(|&i| original[i] / (2.0 * PI)).collect();
    let index: Vec<f64> = idx.iter().map(|&i| i as f64).collect();
    let max_err = |x: &[f64], (a, b): (f64, f64)| {
        x.iter()
            .zip(&kept)
            .map(|(xi, t)| (t - (a + b * xi)).abs())
            .fold(0.0, f64::max)
    };
    let freq_fit = line_fit(&inv_wave, &kept);
    let index_fit = line_fit(&index, &kept);
    let (Some(ff), Some(fi)) = (freq_fit, index_fit) else {
        return ramp;
    };
    let (ef, ei) = (max_err(&inv_wave, ff), max_err(&index, fi));
    if ef <= ei && ff.1 != 0.0 {
        ramp.shape = "linear-in-frequency".into();
        ramp.shape_fit_max_error = Some(ef);
        // t = a + b/λ: t = 0 at λ_low, t = 1 at λ_high.
        let low = tidy(-ff.1 / ff.0);
        let high = tidy(ff.1 / (1.0 - ff.0));
        ramp.low_freq_wavelength = Some(low);
        ramp.high_freq_wavelength = Some(high);
        let (ctx, assumption) = match hints.original_context {
            Some(c) => (c as f64, "original context from the config".to_string()),
            None => (
                low,
                "low_freq_factor = 1 assumed (the published default), so the original context equals the low-frequency wavelength".to_string(),
            ),
        };
        ramp.original_context = Some(ctx);
        ramp.low_freq_factor = Some(tidy(ctx / low));
        ramp.high_freq_factor = Some(tidy(ctx / high));
        ramp.context_assumption = Some(assumption);
    } else if fi.1 != 0.0 {
        ramp.shape = "linear-in-index".into();
        ramp.shape_fit_max_error = Some(ei);
        ramp.ramp_start_index = Some(tidy((1.0 - fi.0) / fi.1));
        ramp.ramp_end_index = Some(tidy(-fi.0 / fi.1));
    }
    ramp
}

/// Analyses per-dimension divisors (GGUF `rope_freqs`): frequencies are `base^(−2i/d) / divisor_i`.
///
/// ```text
/// ω_i = base^(−2i/d) / divisor_i       (check-values §6.8: llama.cpp divides θ by these)
/// ```
///
/// The derived frequencies go through [`analyze_inv_freq`] with `base` as the config
/// base; the precision test is skipped because the frequencies are computed, not stored.
/// Edge cases: empty, non-finite or non-positive divisors, or a base ≤ 1, set `problem`.
pub fn analyze_rope_factors(
    divisors: ArrayView1<f64>,
    base: f64,
    hints: &RotaryHints,
) -> RotaryAnalysis {
    let n = divisors.len();
    let d = hints
        .rotary_dim
        .filter(|rd| rd.div_ceil(2) == n)
        .unwrap_or(2 * n);
    if n < 2 || !base.is_finite() || base <= 1.0 {
        return RotaryAnalysis::empty(
            "divisors",
            n,
            d,
            Some(format!(
                "need ≥ 2 divisors and a base > 1 (got {n}, {base})"
            )),
        );
    }
    if divisors.iter().any(|x| !x.is_finite() || *x <= 0.0) {
        return RotaryAnalysis::empty(
            "divisors",
            n,
            d,
            Some("divisors hold non-finite, zero or negative values".into()),
        );
    }
    let freqs: Vec<f64> = inv_freq(base, d)
        .iter()
        .zip(divisors.iter())
        .map(|(w, dv)| w / dv)
        .collect();
    let mut h = hints.clone();
    h.config_theta = Some(base);
    h.rotary_dim = Some(d);
    let mut a = analyze_inv_freq(ArrayView1::from(&freqs), &h);
    a.source = "divisors".into();
    a.low_precision = None;
    a
}

fn json_f64(v: &serde_json::Value, key: &str) -> Option<f64> {
    v.get(key).and_then(|x| x.as_f64())
}

/// Builds the frequencies a config describes, following the HF rope-type formulas.
///
/// ```text
/// default / none : base^(−2i/d)
/// linear         : base^(−2i/d) / factor                                    §6.3
/// dynamic        : base^(−2i/d) up to max_position_embeddings (NTK beyond)  §6.4
/// yarn           : ramp(i) = clamp((i − low)/(high − low), 0, 1)
///                  ω = ω_extrap·(1 − ramp) + ω_extrap/s·ramp                §6.5
/// llama3         : wavelength ramp between L/high_ff and L/low_ff           §6.6
/// longrope       : base^(−2i/d) / long_factor_i
/// ```
///
/// Returns the frequencies and, for yarn, its parameters; `Err` with a reason when the
/// config is not usable (unknown type, missing factor, bad numbers).
pub fn frequencies_from_config(
    theta: f64,
    rotary_dim: usize,
    rope_scaling: Option<&serde_json::Value>,
    max_positions: Option<usize>,
) -> Result<(Vec<f64>, Option<YarnParameters>), String> {
    if !theta.is_finite() || theta <= 1.0 || rotary_dim < 2 {
        return Err(format!(
            "need rope_theta > 1 and a rotary dimension ≥ 2 (got {theta}, {rotary_dim})"
        ));
    }
    let base_freqs = inv_freq(theta, rotary_dim);
    let Some(rs) = rope_scaling.filter(|v| v.is_object()) else {
        return Ok((base_freqs, None));
    };
    let kind = rs
        .get("rope_type")
        .or_else(|| rs.get("type"))
        .and_then(|x| x.as_str())
        .unwrap_or("default");
    let original = rs
        .get("original_max_position_embeddings")
        .and_then(|x| x.as_u64())
        .map(|x| x as usize);
    let factor = json_f64(rs, "factor").or_else(|| {
        // HF falls back to max/original when the factor is missing (check-values §6.5).
        match (max_positions, original) {
            (Some(m), Some(o)) if o > 0 => Some(m as f64 / o as f64),
            _ => None,
        }
    });
    let need_factor = || {
        factor
            .filter(|f| f.is_finite() && *f > 0.0)
            .ok_or_else(|| format!("rope_scaling type {kind} without a usable factor"))
    };
    match kind {
        "default" | "none" => Ok((base_freqs, None)),
        "linear" | "dynamic" => {
            let f = need_factor()?;
            if kind == "linear" {
                Ok((base_freqs.iter().map(|w| w / f).collect(), None))
            } else {
                Ok((base_freqs, None))
            }
        }
        "llama3" => {
            let f = need_factor()?;
            let lff = json_f64(rs, "low_freq_factor").unwrap_or(1.0);
            let hff = json_f64(rs, "high_freq_factor").unwrap_or(4.0);
            let old = original
                .or(max_positions)
                .ok_or("llama3 scaling without a context")?;
            if hff <= lff || lff <= 0.0 {
                return Err(format!(
                    "llama3 scaling needs 0 < low_freq_factor < high_freq_factor (got {lff}, {hff})"
                ));
            }
            Ok((llama3_scale(&base_freqs, f, lff, hff, old as f64), None))
        }
        "yarn" => {
            let s = need_factor()?;
            let beta_fast = json_f64(rs, "beta_fast").unwrap_or(32.0);
            let beta_slow = json_f64(rs, "beta_slow").unwrap_or(1.0);
            let old = original
                .or(max_positions)
                .ok_or("yarn scaling without a context")?;
            let dim = rotary_dim as f64;
            let corr = |r: f64| dim * (old as f64 / (r * 2.0 * PI)).ln() / (2.0 * theta.ln());
            let low = corr(beta_fast).floor().max(0.0) as usize;
            let high = (corr(beta_slow).ceil().max(0.0) as usize).min(rotary_dim - 1);
            let span = if high == low {
                0.001
            } else {
                high as f64 - low as f64
            };
            let freqs = base_freqs
                .iter()
                .enumerate()
                .map(|(i, w)| {
                    let ramp = ((i as f64 - low as f64) / span).clamp(0.0, 1.0);
                    w * (1.0 - ramp) + w / s * ramp
                })
                .collect();
            let attention_factor = json_f64(rs, "attention_factor").unwrap_or(if s > 1.0 {
                0.1 * s.ln() + 1.0
            } else {
                1.0
            });
            Ok((
                freqs,
                Some(YarnParameters {
                    beta_fast,
                    beta_slow,
                    low,
                    high,
                    attention_factor,
                    original_context: old,
                }),
            ))
        }
        "longrope" => {
            let long = rs
                .get("long_factor")
                .and_then(|x| x.as_array())
                .ok_or("longrope scaling without long_factor")?;
            let lf: Vec<f64> = long.iter().filter_map(|x| x.as_f64()).collect();
            if lf.len() != base_freqs.len() || lf.iter().any(|x| !x.is_finite() || *x <= 0.0) {
                return Err(format!(
                    "longrope long_factor has {} usable entries, expected {}",
                    lf.len(),
                    base_freqs.len()
                ));
            }
            Ok((
                base_freqs.iter().zip(&lf).map(|(w, f)| w / f).collect(),
                None,
            ))
        }
        other => Err(format!("unrecognised rope_scaling type {other:?}")),
    }
}

/// Llama 3.1 `apply_scaling` (check-values §6.6).
fn llama3_scale(freqs: &[f64], factor: f64, lff: f64, hff: f64, old: f64) -> Vec<f64> {
    let low_wl = old / lff;
    let high_wl = old / hff;
    freqs
        .iter()
        .map(|&f| {
            let wl = 2.0 * PI / f;
            if wl < high_wl {
                f
            } else if wl > low_wl {
                f / factor
            } else {
                let smooth = (old / wl - lff) / (hff - lff);
                (1.0 - smooth) * f / factor + smooth * f
            }
        })
        .collect()
}

/// Rotary analysis from config values alone (no stored vector).
///
/// ```text
/// ω = frequencies_from_config(theta, head_dim, rope_scaling)   (HF rope types, §6.1–6.6)
/// analysis = analyze_inv_freq(ω, hints from the config)
/// ```
///
/// Builds the frequencies with [`frequencies_from_config`] and reads them back with
/// [`analyze_inv_freq`] (so a config and a stored vector are described the same way);
/// `dynamic` is reported as `ntk` (its base grows only past `max_positions`), `longrope`
/// as `unknown` with a note. `rope_scaling` uses the HF keys: `rope_type`/`type`,
/// `factor`, `low_freq_factor`, `high_freq_factor`, `original_max_position_embeddings`,
/// `beta_fast`, `beta_slow`, `attention_factor`, `long_factor`.
/// Edge cases: an unusable config gives `scaling = "unknown"` and `problem` set.
pub fn rotary_from_config(
    theta: f64,
    head_dim: usize,
    rope_scaling: Option<&serde_json::Value>,
    max_positions: Option<usize>,
) -> RotaryAnalysis {
    let n = head_dim.div_ceil(2);
    let (freqs, yarn) = match frequencies_from_config(theta, head_dim, rope_scaling, max_positions)
    {
        Ok(x) => x,
        Err(e) => return RotaryAnalysis::empty("config", n, head_dim, Some(e)),
    };
    let kind = rope_scaling
        .and_then(|rs| rs.get("rope_type").or_else(|| rs.get("type")))
        .and_then(|x| x.as_str())
        .unwrap_or("default")
        .to_string();
    let original = rope_scaling
        .and_then(|rs| rs.get("original_max_position_embeddings"))
        .and_then(|x| x.as_u64())
        .map(|x| x as usize);
    let hints = RotaryHints {
        declared_context: max_positions,
        original_context: original,
        config_theta: Some(theta),
        rotary_dim: Some(head_dim),
    };
    let mut a = analyze_inv_freq(ArrayView1::from(&freqs), &hints);
    a.source = "config".into();
    a.low_precision = None;
    match kind.as_str() {
        "dynamic" => {
            let f = rope_scaling
                .and_then(|rs| json_f64(rs, "factor"))
                .unwrap_or(1.0);
            a.scaling = "ntk".into();
            a.factor = f;
            a.original_base = Some(theta);
            a.notes.push(
                "dynamic NTK: base' = base·((factor·L/max_pos) − (factor−1))^(d/(d−2)) grows only for sequences longer than max_position_embeddings".into(),
            );
        }
        "longrope" => {
            a.scaling = "unknown".into();
            a.notes
                .push("longrope: per-dimension factors from the config (long_factor)".into());
        }
        "yarn" => {
            if let Some(y) = &yarn {
                // The ramp ends where the index reaches `high`; report the config factor.
                a.factor = rope_scaling
                    .and_then(|rs| json_f64(rs, "factor"))
                    .unwrap_or(a.factor);
                a.notes.push(format!(
                    "yarn: ramp over dims {}..{}, attention factor {:.6}",
                    y.low, y.high, y.attention_factor
                ));
            }
        }
        _ => {}
    }
    a.yarn = yarn;
    a
}

/// Agreement between the rotary vectors stored for several layers.
#[derive(Debug, Clone, Serialize)]
pub struct LayerAgreement {
    /// Number of vectors compared.
    pub count: usize,
    /// True when every vector is bit-identical to the first.
    pub identical: bool,
    /// Name of the vector the others are compared with (the first).
    pub reference: Option<String>,
    /// Vectors that differ from the reference.
    pub differing: Vec<LayerDifference>,
}

/// One vector that differs from the reference.
#[derive(Debug, Clone, Serialize)]
pub struct LayerDifference {
    /// Tensor name.
    pub name: String,
    /// Its length when it differs from the reference's.
    pub length_mismatch: Option<usize>,
    /// Largest absolute difference (NaN-aware: NaN vs number counts as infinite).
    pub max_abs_diff: f64,
    /// Largest relative difference against the reference value.
    pub max_rel_diff: f64,
}

/// Compares per-layer rotary vectors with the first one.
///
/// ```text
/// identical ⇔ bitwise equal (NaN equals NaN only with the same bits)
/// max_abs_diff = max_i |x_i − ref_i|,  max_rel_diff = max_i |x_i − ref_i| / |ref_i|
/// ```
///
/// Edge cases: an empty list is trivially identical; vectors of another length are
/// reported with `length_mismatch` and infinite differences.
pub fn compare_layers(vectors: &[(String, ArrayView1<f64>)]) -> LayerAgreement {
    let Some((ref_name, reference)) = vectors.first() else {
        return LayerAgreement {
            count: 0,
            identical: true,
            reference: None,
            differing: Vec::new(),
        };
    };
    let mut differing = Vec::new();
    for (name, v) in &vectors[1..] {
        if v.len() != reference.len() {
            differing.push(LayerDifference {
                name: name.clone(),
                length_mismatch: Some(v.len()),
                max_abs_diff: f64::INFINITY,
                max_rel_diff: f64::INFINITY,
            });
            continue;
        }
        if v.iter()
            .zip(reference.iter())
            .all(|(a, b)| a.to_bits() == b.to_bits())
        {
            continue;
        }
        let mut max_abs: f64 = 0.0;
        let mut max_rel: f64 = 0.0;
        for (a, b) in v.iter().zip(reference.iter()) {
            let diff = if a.is_nan() != b.is_nan() {
                f64::INFINITY
            } else if a.is_nan() {
                0.0
            } else {
                (a - b).abs()
            };
            max_abs = max_abs.max(diff);
            let rel = if *b != 0.0 {
                diff / b.abs()
            } else if diff > 0.0 {
                f64::INFINITY
            } else {
                0.0
            };
            max_rel = max_rel.max(rel);
        }
        differing.push(LayerDifference {
            name: name.clone(),
            length_mismatch: None,
            max_abs_diff: max_abs,
            max_rel_diff: max_rel,
        });
    }
    LayerAgreement {
        count: vectors.len(),
        identical: differing.is_empty(),
        reference: Some(ref_name.clone()),
        differing,
    }
}

/// ALiBi head slopes (Press et al. 2022; check-values §6.9).
///
/// ```text
/// n a power of 2:  slope_h = 2^(−8h/n),  h = 1..n
/// otherwise:       c = 2^⌊log2 n⌋;  slopes(c) ++ every other slope of slopes(2c), first n−c
/// ```
///
/// Edge cases: 0 heads, or more than 65536 (a config error, not a model), gives an
/// empty vector.
pub fn alibi_slopes(n_heads: usize) -> Vec<f64> {
    fn power_of_two(n: usize) -> Vec<f64> {
        let start = 2f64.powf(-8.0 / n as f64);
        (1..=n).map(|h| start.powi(h as i32)).collect()
    }
    if n_heads == 0 || n_heads > 65_536 {
        return Vec::new();
    }
    if n_heads.is_power_of_two() {
        return power_of_two(n_heads);
    }
    let c = 1usize << n_heads.ilog2();
    let mut slopes = power_of_two(c);
    slopes.extend(alibi_slopes(2 * c).into_iter().step_by(2).take(n_heads - c));
    slopes
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array1;

    fn f32_round(v: &[f64]) -> Vec<f64> {
        v.iter().map(|x| (*x as f32) as f64).collect()
    }

    fn analyze(v: &[f64], hints: &RotaryHints) -> RotaryAnalysis {
        analyze_inv_freq(ArrayView1::from(v), hints)
    }

    #[test]
    fn llama_inverse_frequencies_match_the_published_check_values() {
        // check-values §6.1 (a-calc from the HF / Meta formula), head_dim 128.
        let cases = [
            (1e4, 0.86596432, 1.1547820e-4),
            (5e5, 0.81461723, 2.4551408e-6),
            (1e6, 0.80584219, 1.2409378e-6),
        ];
        for (base, f1, f63) in cases {
            let v = inv_freq(base, 128);
            assert_eq!(v.len(), 64);
            assert_eq!(v[0], 1.0);
            assert!((v[1] - f1).abs() < 1e-8, "{base}: {}", v[1]);
            assert!(((v[63] - f63) / f63).abs() < 1e-6, "{base}: {}", v[63]);
        }
        // Longest wavelength for θ=1e4 is 54410 (§6.1).
        let w = wavelength_summary(&inv_freq(1e4, 128), Some(4096)).unwrap();
        assert!((w.longest - 54410.0).abs() < 1.0, "{}", w.longest);
    }

    #[test]
    fn unscaled_vectors_are_recognised_with_their_base() {
        // check-values §6.1: the three published bases, stored as float32.
        for base in [1e4, 5e5, 1e6] {
            let v = f32_round(&inv_freq(base, 128));
            let a = analyze(&v, &RotaryHints::default());
            assert_eq!(a.scaling, "none", "{base}: {a:?}");
            assert_eq!(a.base, Some(base));
            assert_eq!(a.factor, 1.0);
            assert!(a.low_precision.is_none());
            assert!(a.problem.is_none());
        }
    }

    #[test]
    fn an_uncommon_base_without_config_is_reported_as_fitted() {
        // Invented base 123456: no scaling claimed, the fit returns it.
        let v = f32_round(&inv_freq(123_456.0, 64));
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, "none");
        assert!((a.base.unwrap() / 123_456.0 - 1.0).abs() < 1e-5);
    }

    #[test]
    fn ntk_aware_bases_are_recognised_and_alpha_recovered() {
        // check-values §6.4: d=128, base 1e4; α=2,4,8 → 20221.26, 40889.94, 82684.62.
        for (alpha, expected) in [(2.0, 20221.26), (4.0, 40889.94), (8.0, 82684.62)] {
            let base: f64 = 1e4 * f64::powf(alpha, 128.0 / 126.0);
            assert!((base - expected).abs() < 0.01, "{base}");
            let v = f32_round(&inv_freq(base, 128));
            // With the config's rope_theta …
            let hints = RotaryHints {
                config_theta: Some(1e4),
                ..Default::default()
            };
            let a = analyze(&v, &hints);
            assert_eq!(a.scaling, "ntk", "{a:?}");
            assert_eq!(a.ntk_alpha, Some(alpha));
            assert_eq!(a.factor, alpha);
            assert!((a.base.unwrap() - expected).abs() < 0.5, "{:?}", a.base);
            // … and without it (the common base 1e4 is assumed and said so).
            let a = analyze(&v, &RotaryHints::default());
            assert_eq!(a.scaling, "ntk", "{a:?}");
            assert_eq!(a.ntk_alpha, Some(alpha));
            assert_eq!(a.original_base, Some(1e4));
        }
    }

    #[test]
    fn linear_interpolation_is_recognised_with_its_factor() {
        // check-values §6.3: HF linear scaling is inv_freq /= factor.
        for factor in [2.0, 4.0, 8.0] {
            let v: Vec<f64> = f32_round(
                &inv_freq(1e4, 128)
                    .iter()
                    .map(|w| w / factor)
                    .collect::<Vec<_>>(),
            );
            let a = analyze(&v, &RotaryHints::default());
            assert_eq!(a.scaling, "linear", "{a:?}");
            assert_eq!(a.factor, factor);
            assert_eq!(a.base, Some(1e4));
        }
    }

    fn llama31_frequencies() -> Vec<f64> {
        // check-values §6.6: θ=5e5, head_dim 128, factor 8, low 1, high 4, old context 8192.
        llama3_scale(&inv_freq(5e5, 128), 8.0, 1.0, 4.0, 8192.0)
    }

    #[test]
    fn llama31_scaling_has_the_published_groups_and_divisors() {
        let base = inv_freq(5e5, 128);
        let out = llama31_frequencies();
        let div: Vec<f64> = base.iter().zip(&out).map(|(b, o)| b / o).collect();
        // §6.6: 29 unchanged, 6 smoothed (listed divisors), 29 divided by 8.
        assert!(div[..29].iter().all(|x| *x == 1.0));
        let listed = [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327];
        for (d, l) in div[29..35].iter().zip(listed) {
            assert!((d - l).abs() < 1e-6, "{d} vs {l}");
        }
        assert!(div[35..].iter().all(|x| (x - 8.0).abs() < 1e-12));
        assert!((out[63] - 3.0689e-7).abs() < 1e-10, "{}", out[63]);
    }

    #[test]
    fn llama31_scaled_frequencies_are_a_wavelength_ramp_with_factor_8() {
        let v = f32_round(&llama31_frequencies());
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, "wavelength-ramp", "{a:?}");
        assert_eq!(a.factor, 8.0);
        assert_eq!(a.base, Some(5e5));
        let r = a.ramp.unwrap();
        assert_eq!(
            (r.unchanged, r.smoothed, r.divided),
            ((0, 29), (29, 35), (35, 64))
        );
        assert_eq!(r.shape, "linear-in-frequency");
        assert_eq!(r.low_freq_wavelength, Some(8192.0));
        assert_eq!(r.high_freq_wavelength, Some(2048.0));
        assert_eq!(r.original_context, Some(8192.0));
        assert_eq!(r.low_freq_factor, Some(1.0));
        assert_eq!(r.high_freq_factor, Some(4.0));
        let listed = [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327];
        for (d, l) in r.smoothed_divisors.iter().zip(listed) {
            assert!((d - l).abs() < 1e-5, "{d} vs {l}");
        }
    }

    #[test]
    fn gguf_divisors_of_llama31_give_the_same_ramp() {
        // check-values §6.8: the converter's formula, which must reproduce the listed vector.
        let base = inv_freq(5e5, 128);
        let divisors: Vec<f64> = base
            .iter()
            .map(|&f| {
                let wl = 2.0 * PI / f;
                if wl < 8192.0 / 4.0 {
                    1.0
                } else if wl > 8192.0 {
                    8.0
                } else {
                    let smooth = (8192.0 / wl - 1.0) / (4.0 - 1.0);
                    1.0 / ((1.0 - smooth) / 8.0 + smooth)
                }
            })
            .map(|x| (x as f32) as f64)
            .collect();
        assert!(divisors[..29].iter().all(|x| *x == 1.0));
        assert!(divisors[35..].iter().all(|x| *x == 8.0));
        let listed = [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327];
        for (d, l) in divisors[29..35].iter().zip(listed) {
            assert!((d - l).abs() < 1e-6);
        }
        let a = analyze_rope_factors(
            Array1::from(divisors).view(),
            5e5,
            &RotaryHints {
                declared_context: Some(131072),
                ..Default::default()
            },
        );
        assert_eq!(a.source, "divisors");
        assert_eq!(a.scaling, "wavelength-ramp", "{a:?}");
        assert_eq!(a.factor, 8.0);
        let r = a.ramp.unwrap();
        assert_eq!(
            (r.unchanged, r.smoothed, r.divided),
            ((0, 29), (29, 35), (35, 64))
        );
        assert_eq!(r.original_context, Some(8192.0));
        // Every scaled wavelength is below 131072 except the longest ones.
        assert!(a.wavelengths.unwrap().beyond_context.is_some());
    }

    #[test]
    fn config_llama3_and_linear_entries_agree_with_the_formulas() {
        let rs = serde_json::json!({"rope_type": "llama3", "factor": 8.0, "low_freq_factor": 1.0,
            "high_freq_factor": 4.0, "original_max_position_embeddings": 8192});
        let a = rotary_from_config(5e5, 128, Some(&rs), Some(131072));
        assert_eq!(a.source, "config");
        assert_eq!(a.scaling, "wavelength-ramp");
        assert_eq!(a.factor, 8.0);
        let r = a.ramp.unwrap();
        assert_eq!(r.smoothed, (29, 35));
        assert_eq!(
            r.context_assumption.as_deref(),
            Some("original context from the config")
        );
        let rs = serde_json::json!({"type": "linear", "factor": 4.0});
        let a = rotary_from_config(1e4, 128, Some(&rs), Some(8192));
        assert_eq!((a.scaling.as_str(), a.factor), ("linear", 4.0));
        let a = rotary_from_config(1e4, 128, None, Some(4096));
        assert_eq!(
            (a.scaling.as_str(), a.factor, a.base),
            ("none", 1.0, Some(1e4))
        );
        // 4096 context with θ=1e4, d=128: wavelength 2π·1e4^(2i/128) exceeds 4096 from
        // i = ceil(64·ln(4096/2π)/ln(1e4)) = 46 on (computed from §6.1's formula).
        let w = a.wavelengths.unwrap();
        assert_eq!(w.first_index_beyond_context, Some(46));
        assert_eq!(w.beyond_context, Some(18));
    }

    #[test]
    fn config_yarn_has_the_published_ramp_bounds_and_attention_factor() {
        // check-values §6.5: dim 128, base 1e4, L=4096 → low 20, high 46; s=8 → 1.207944.
        let rs = serde_json::json!({"rope_type": "yarn", "factor": 8.0,
            "original_max_position_embeddings": 4096});
        let a = rotary_from_config(1e4, 128, Some(&rs), Some(32768));
        let y = a.yarn.clone().unwrap();
        assert_eq!((y.low, y.high), (20, 46));
        assert!((y.attention_factor - 1.207944).abs() < 1e-6);
        assert_eq!(a.scaling, "wavelength-ramp", "{a:?}");
        assert_eq!(a.factor, 8.0);
        let r = a.ramp.unwrap();
        assert_eq!(r.shape, "linear-in-index");
        assert_eq!(r.ramp_start_index, Some(20.0));
        assert_eq!(r.ramp_end_index, Some(46.0));
        // Other published bounds: base 1e4, L=2048 → 16, 41; base 5e5, L=8192 → 18, 35.
        for (base, l, lo, hi) in [(1e4, 2048, 16, 41), (5e5, 8192, 18, 35)] {
            let rs = serde_json::json!({"rope_type": "yarn", "factor": 4.0,
                "original_max_position_embeddings": l});
            let (_, y) = frequencies_from_config(base, 128, Some(&rs), None).unwrap();
            let y = y.unwrap();
            assert_eq!((y.low, y.high), (lo, hi));
        }
    }

    #[test]
    fn bf16_rounded_frequencies_carry_the_published_fingerprint_and_phase_error() {
        // check-values §7.3: bf16(inv_freq)[:6] for θ=1e4, d=128, and the phase error.
        let exact = inv_freq(1e4, 128);
        let v: Vec<f64> = exact
            .iter()
            .map(|x| half::bf16::from_f64(*x).to_f64())
            .collect();
        let fingerprint = [1.0, 0.8671875, 0.75, 0.6484375, 0.5625, 0.486328125];
        assert_eq!(&v[..6], &fingerprint);
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, "none", "{a:?}");
        assert_eq!(a.base, Some(1e4));
        let p = a.low_precision.expect("bf16 fingerprint");
        assert_eq!(p.dtype, "bf16");
        assert_eq!(p.entries, 64);
        // §7.3: max relative error 3.65e-3; phase 0.63 rad at 512, 2.5 at 2048, 5.0 at 4096.
        assert!(
            (p.max_rel_error - 3.65e-3).abs() < 1e-4,
            "{}",
            p.max_rel_error
        );
        let at = |pos| {
            p.phase_error
                .iter()
                .find(|e| e.position == pos)
                .unwrap()
                .radians
        };
        assert!((at(512) - 0.63).abs() < 0.01, "{}", at(512));
        assert!((at(2048) - 2.5).abs() < 0.05, "{}", at(2048));
        assert!((at(4096) - 5.0).abs() < 0.1, "{}", at(4096));
        // f16 rounding is detected as f16 (max relative error 4.09e-4, §7.3).
        let v16: Vec<f64> = exact
            .iter()
            .map(|x| half::f16::from_f64(*x).to_f64())
            .collect();
        let p = analyze(&v16, &RotaryHints::default())
            .low_precision
            .unwrap();
        assert_eq!(p.dtype, "f16");
        assert!(
            (p.max_rel_error - 4.09e-4).abs() < 1e-5,
            "{}",
            p.max_rel_error
        );
    }

    fn reference() -> serde_json::Value {
        // Written by tests/reference/kinds.py (numpy; version recorded in the file).
        let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/kinds.json");
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
    }

    #[test]
    fn numpy_float32_llama31_frequencies_are_read_back_as_the_published_ramp() {
        // tests/reference/kinds.py computes check-values §6.6 in numpy float32.
        let r = reference();
        let v: Vec<f64> = serde_json::from_value(r["llama31"]["inv_freq_f32"].clone()).unwrap();
        assert_eq!(v.len(), 64);
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, "wavelength-ramp", "{a:?}");
        assert_eq!((a.factor, a.base), (8.0, Some(5e5)));
        let ramp = a.ramp.unwrap();
        assert_eq!(
            (ramp.unchanged, ramp.smoothed, ramp.divided),
            ((0, 29), (29, 35), (35, 64))
        );
        assert_eq!(ramp.original_context, Some(8192.0));
        assert_eq!(ramp.high_freq_factor, Some(4.0));
    }

    #[test]
    fn alibi_slopes_match_the_published_values() {
        // check-values §6.9.
        let s8 = alibi_slopes(8);
        let want8: Vec<f64> = (1..=8).map(|h| 2f64.powi(-h)).collect();
        assert_eq!(s8.len(), 8);
        for (a, b) in s8.iter().zip(&want8) {
            assert!((a - b).abs() < 1e-15);
        }
        let s16 = alibi_slopes(16);
        for (h, s) in s16.iter().enumerate() {
            assert!((s - 2f64.powf(-0.5 * (h + 1) as f64)).abs() < 1e-15);
        }
        let s12 = alibi_slopes(12);
        let mut want12 = want8.clone();
        want12.extend([-0.5, -1.5, -2.5, -3.5].map(|e| 2f64.powf(e)));
        assert_eq!(s12.len(), 12);
        for (a, b) in s12.iter().zip(&want12) {
            assert!((a - b).abs() < 1e-15, "{a} vs {b}");
        }
        assert!((alibi_slopes(32)[0] - 2f64.powf(-0.25)).abs() < 1e-15);
        assert!((alibi_slopes(64)[0] - 2f64.powf(-0.125)).abs() < 1e-15);
        assert!(alibi_slopes(0).is_empty());
        assert_eq!(alibi_slopes(1), vec![2f64.powi(-8)]);
    }

    #[test]
    fn layer_vectors_are_compared_bitwise() {
        let a = Array1::from(inv_freq(1e4, 8));
        let mut b = a.clone();
        b[3] *= 1.0 + 1e-6;
        let vs = vec![
            ("l0".to_string(), a.view()),
            ("l1".to_string(), a.view()),
            ("l2".to_string(), b.view()),
        ];
        let r = compare_layers(&vs);
        assert!(!r.identical);
        assert_eq!(r.differing.len(), 1);
        assert_eq!(r.differing[0].name, "l2");
        assert!((r.differing[0].max_rel_diff - 1e-6).abs() < 1e-9);
        let r = compare_layers(&vs[..2]);
        assert!(r.identical);
        assert!(compare_layers(&[]).identical);
        let short = Array1::from(vec![1.0]);
        let r = compare_layers(&[("a".into(), a.view()), ("b".into(), short.view())]);
        assert_eq!(r.differing[0].length_mismatch, Some(1));
    }

    #[test]
    fn degenerate_inputs_give_a_problem_not_a_panic() {
        for v in [
            vec![],
            vec![1.0],
            vec![1.0, f64::NAN, 0.1],
            vec![1.0, 0.0],
            vec![0.1, 0.2, 0.3],
            vec![1.0, 1.0, 1.0],
        ] {
            let a = analyze(&v, &RotaryHints::default());
            assert!(a.problem.is_some(), "{v:?}: {a:?}");
            assert_eq!(a.scaling, "unknown");
        }
        let a = analyze_rope_factors(
            Array1::from(vec![1.0, -1.0]).view(),
            1e4,
            &RotaryHints::default(),
        );
        assert!(a.problem.is_some());
        let a = rotary_from_config(f64::NAN, 128, None, None);
        assert!(a.problem.is_some());
        let rs = serde_json::json!({"rope_type": "linear"});
        assert!(
            rotary_from_config(1e4, 128, Some(&rs), None)
                .problem
                .is_some()
        );
        let rs = serde_json::json!({"rope_type": "made-up", "factor": 2.0});
        assert!(
            rotary_from_config(1e4, 128, Some(&rs), None)
                .problem
                .is_some()
        );
        // Scattered deviations are not forced into a scaling scheme (invented vector).
        let mut v = inv_freq(1e4, 64);
        v[3] *= 1.5;
        v[20] *= 1.5;
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, "unknown");
    }

    #[test]
    fn serialises_the_contract_fields() {
        // design.md "JSON documents": "rotary": {"base": 10000.0, "scaling": "none", "factor": 1.0}
        let a = analyze(&inv_freq(1e4, 128), &RotaryHints::default());
        let j = serde_json::to_value(&a).unwrap();
        assert_eq!(j["base"], serde_json::json!(10000.0));
        assert_eq!(j["scaling"], serde_json::json!("none"));
        assert_eq!(j["factor"], serde_json::json!(1.0));
    }

    /// The contract's scaling names (design.md, "Rotary `scaling`").
    const SCALINGS: [&str; 5] = ["none", "linear", "ntk", "wavelength-ramp", "unknown"];

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]

        #[test]
        fn arbitrary_vectors_never_panic(
            v in proptest::collection::vec(proptest::num::f64::ANY, 0..70),
            theta in proptest::option::of(proptest::num::f64::ANY),
            rd in proptest::option::of(0usize..200),
        ) {
            let hints = RotaryHints { config_theta: theta, rotary_dim: rd, declared_context: Some(4096), original_context: None };
            let a = analyze_inv_freq(ArrayView1::from(&v), &hints);
            proptest::prop_assert!(a.problem.is_some() || a.base.is_some());
            let _ = analyze_rope_factors(ArrayView1::from(&v), theta.unwrap_or(1e4), &hints);
        }

        #[test]
        fn decreasing_positive_vectors_always_get_a_fit(
            mut v in proptest::collection::vec(1e-12f64..1.0, 2..70),
        ) {
            // Invented: any strictly positive vector sorted in decreasing order.
            v.sort_by(|a, b| b.total_cmp(a));
            let a = analyze_inv_freq(ArrayView1::from(&v), &RotaryHints::default());
            proptest::prop_assert!(a.problem.is_some() || a.base.is_some_and(|b| !b.is_nan()));
            proptest::prop_assert!(SCALINGS.contains(&a.scaling.as_str()));
        }

        #[test]
        fn arbitrary_configs_never_panic(
            theta in proptest::num::f64::ANY,
            dim in 0usize..300,
            factor in proptest::num::f64::ANY,
            kind in proptest::sample::select(vec!["linear", "dynamic", "yarn", "llama3", "longrope", "default", "x"]),
            orig in proptest::option::of(0u64..100_000),
            maxp in proptest::option::of(0usize..200_000),
        ) {
            let rs = serde_json::json!({"rope_type": kind, "factor": factor, "original_max_position_embeddings": orig,
                "low_freq_factor": 1.0, "high_freq_factor": 4.0, "long_factor": [1.0, 2.0]});
            let a = rotary_from_config(theta, dim, Some(&rs), maxp);
            proptest::prop_assert!(SCALINGS.contains(&a.scaling.as_str()));
        }
    }
}
