//! Reading base and scaling recipe back from a stored inverse-frequency vector or from
//! GGUF per-dimension divisors.

use ndarray::ArrayView1;

use super::precision::precision_evidence;
use super::*;

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
    let q = crate::analyze::stats::median(&steps).unwrap_or(0.0);
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
    let coarse = v
        .iter()
        .all(|x| crate::analyze::precision::round_bf16(*x) == *x)
        || v.iter()
            .all(|x| crate::analyze::precision::round_f16(*x) == *x);
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
            analysis.scaling = Scaling::None;
            analysis.notes.push(format!(
                "entries {}..{} deviate from the geometric progression",
                head_end, tail_start
            ));
        } else if ln_factor < 0.0 {
            analysis.scaling = Scaling::Unknown;
            analysis.notes.push(
                "low frequencies are larger than the progression predicts (divisor below 1)".into(),
            );
        } else {
            let factor = tidy(ln_factor.exp());
            analysis.scaling = Scaling::WavelengthRamp;
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
        analysis.scaling = if factor > 1.0 {
            Scaling::Linear
        } else {
            Scaling::Unknown
        };
        analysis.factor = factor;
        if factor <= 1.0 {
            analysis
                .notes
                .push(format!("all frequencies multiplied by {:.6}", 1.0 / factor));
        }
        exact = exact_unscaled.iter().map(|w| w / factor).collect();
    } else {
        // One geometric progression starting at 1: plain or NTK-changed base.
        analysis.scaling = Scaling::None;
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
pub(super) fn classify_base(
    analysis: &mut RotaryAnalysis,
    base: f64,
    d: usize,
    hints: &RotaryHints,
) {
    let exponent = (d as f64 - 2.0) / d as f64;
    if let Some(theta) = hints.config_theta {
        let ratio = base / theta;
        if (ratio - 1.0).abs() < 1e-3 {
            return;
        }
        if ratio > 1.0 && d > 2 {
            let alpha = tidy(ratio.powf(exponent));
            analysis.scaling = Scaling::Ntk;
            analysis.factor = alpha;
            analysis.ntk_alpha = Some(alpha);
            analysis.original_base = Some(theta);
            analysis.notes.push(format!(
                "base {base:.6} is larger than the config's rope_theta {theta}: NTK-aware α = {alpha:.6}"
            ));
        } else {
            analysis.scaling = Scaling::Unknown;
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
            analysis.scaling = Scaling::Ntk;
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
pub(super) fn describe_ramp(
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
