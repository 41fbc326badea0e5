//! The published context-extension recipes, forward: the frequencies a config's
//! `rope_theta` / `rope_scaling` implies (HF rope types, check-values §6.1–6.6).

use super::*;

pub(super) fn json_f64(v: &serde_json::Value, key: &str) -> Option<f64> {
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
pub(super) fn llama3_scale(freqs: &[f64], factor: f64, lff: f64, hff: f64, old: f64) -> Vec<f64> {
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
            a.scaling = Scaling::Ntk;
            a.factor = f;
            a.original_base = Some(theta);
            a.notes.push(
                "dynamic NTK: base' = base·((factor·L/max_pos) − (factor−1))^(d/(d−2)) grows only for sequences longer than max_position_embeddings".into(),
            );
        }
        "longrope" => {
            a.scaling = Scaling::Unknown;
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
