//! Were the angles computed in bf16/f16? The stored table against the formula with its
//! angles simulated in each low-precision type (check-values §7.2).

use ndarray::ArrayView2;
use serde::Serialize;

use super::fit::ErrorBin;
use super::fit::row_error;
use super::formula::SinusoidSpec;
use crate::analyze::precision::{round_bf16, round_f16};

/// Error of the formula recomputed after simulating angle computation in one dtype.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SimulatedDtype {
    /// `"bf16"` or `"f16"`.
    pub dtype: String,
    /// Largest |table − simulated table| over non-zero rows.
    pub max_abs_residual: f64,
    /// Root mean square of the same residual.
    pub rms_residual: f64,
}

/// Evidence on whether the table's angles were computed in a low-precision dtype.
///
/// Published pattern (check-values §7.2): computing `angle = round(round(pos)·round(ω))`
/// in bf16 or f16 gives errors far above the storage rounding error that grow with
/// position, while merely storing an exact table in a low dtype keeps the error within
/// half an ULP of the stored values.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PrecisionEvidence {
    /// Half-ULP of the storage dtype for values in [−1, 1], as given by the caller.
    pub storage_half_ulp: f64,
    /// max_abs_error / (storage_half_ulp · scale).
    pub error_to_half_ulp: f64,
    /// Largest error over row ranges [0,64), [64,128), [128,256), … (doubling).
    pub error_by_range: Vec<ErrorBin>,
    /// Whether the error of the last range is more than twice that of the first.
    pub grows_with_position: bool,
    /// Residuals of the formula with angles computed in bf16 and in f16.
    pub simulated: Vec<SimulatedDtype>,
    /// The dtype whose simulation reproduces the table, when the verdict is positive.
    pub best_match: Option<String>,
    /// The verdict: error ≫ half-ULP (> 16×), growing with position, and one simulated
    /// dtype reproduces the table with at most a quarter of the exact formula's RMS error.
    pub computed_in_low_precision: bool,
    /// Dtypes (`"bf16"`, `"f16"`, `"f32"`) that hold every value of the table exactly.
    pub representable_in: Vec<String>,
}

pub(super) fn precision_evidence(
    table: ArrayView2<f64>,
    spec: &SinusoidSpec,
    row_err: &[Option<(f64, f64)>],
    half_ulp: f64,
    max_abs_error: f64,
    rms: f64,
) -> PrecisionEvidence {
    let n = table.nrows();
    // Doubling ranges [0,64), [64,128), [128,256), ...
    let mut error_by_range = Vec::new();
    let (mut start, mut end) = (0usize, 64usize);
    while start < n {
        let e = end.min(n);
        let max = row_err[start..e]
            .iter()
            .flatten()
            .map(|x| x.0)
            .fold(f64::NEG_INFINITY, f64::max);
        if max.is_finite() {
            error_by_range.push(ErrorBin {
                start,
                end: e,
                max_abs_error: max,
            });
        }
        start = end;
        end *= 2;
    }
    let grows_with_position = match (error_by_range.first(), error_by_range.last()) {
        (Some(a), Some(b)) if error_by_range.len() >= 2 => b.max_abs_error > 2.0 * a.max_abs_error,
        _ => false,
    };
    let unit = half_ulp * spec.scale.abs();
    let error_to_half_ulp = if unit > 0.0 {
        max_abs_error / unit
    } else {
        f64::INFINITY
    };
    let freqs = spec.frequencies(table.ncols());
    let simulated: Vec<SimulatedDtype> = [
        ("bf16", round_bf16 as fn(f64) -> f64),
        ("f16", round_f16 as fn(f64) -> f64),
    ]
    .into_iter()
    .map(|(name, rd)| {
        let (mut max, mut sq, mut count) = (0.0f64, 0.0, 0usize);
        for (r, e) in row_err.iter().enumerate() {
            if e.is_none() {
                continue;
            }
            let (m, s) = row_error(table, spec, &freqs, r, |p, w| rd(rd(p) * rd(w)));
            max = max.max(m);
            sq += s;
            count += table.ncols();
        }
        SimulatedDtype {
            dtype: name.to_string(),
            max_abs_residual: max,
            rms_residual: (sq / count.max(1) as f64).sqrt(),
        }
    })
    .collect();
    let best = simulated
        .iter()
        .min_by(|a, b| a.rms_residual.total_cmp(&b.rms_residual));
    let computed_in_low_precision = error_to_half_ulp > 16.0
        && grows_with_position
        && best.is_some_and(|b| b.rms_residual <= 0.25 * rms);
    let best_match = if computed_in_low_precision {
        best.map(|b| b.dtype.clone())
    } else {
        None
    };
    let mut representable_in = Vec::new();
    for (name, rd) in [
        ("bf16", round_bf16 as fn(f64) -> f64),
        ("f16", round_f16 as fn(f64) -> f64),
        ("f32", |x: f64| x as f32 as f64),
    ] {
        if table.iter().all(|&v| rd(v) == v) {
            representable_in.push(name.to_string());
        }
    }
    PrecisionEvidence {
        storage_half_ulp: half_ulp,
        error_to_half_ulp,
        error_by_range,
        grows_with_position,
        simulated,
        best_match,
        computed_in_low_precision,
        representable_in,
    }
}
