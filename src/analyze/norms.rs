//! Row norms along position: their drift and their outliers.
//!
//! A trained table usually has row norms that change slowly with position, while rows at
//! initial values sit near `σ·sqrt(dim)` (check-values §8.3) and single damaged or special
//! rows stand out. This module measures the profile and flags outliers with a robust
//! score, so one extreme row cannot hide the others by inflating a standard deviation.

use super::stats::median as median_of;
use ndarray::{ArrayView1, ArrayView2, Axis};
use serde::Serialize;

/// Threshold on the modified z-score above which a value is an outlier
/// (Iglewicz & Hoaglin 1993, *How to Detect and Handle Outliers*, ASQC).
pub const MODIFIED_Z_THRESHOLD: f64 = 3.5;

/// Row norms of a table and what they say about drift and outliers.
#[derive(Debug, Clone, Serialize)]
pub struct NormProfile {
    /// L2 norm of each row, in the table's units; NaN for rows holding non-finite values.
    pub norms: Vec<f64>,
    /// Mean of the finite norms; None when there are none.
    pub mean: Option<f64>,
    /// Median of the finite norms; None when there are none.
    pub median: Option<f64>,
    /// Least-squares slope of norm against position, in norm units per row; None with
    /// fewer than 2 finite rows.
    pub slope_per_position: Option<f64>,
    /// Mean norm over the last 10% of rows divided by the mean over the first 10%
    /// (at least one row each); None when the first mean is 0 or a part holds no
    /// finite norm.
    pub end_to_start_ratio: Option<f64>,
    /// Rows whose modified z-score exceeds [`MODIFIED_Z_THRESHOLD`], increasing.
    pub outliers: Vec<usize>,
    /// Modified z-score of each row (dimensionless); None for rows with a non-finite
    /// norm. See [`modified_z_scores`] for the zero-MAD case.
    pub modified_z: Vec<Option<f64>>,
    /// The storage precision the spread of the norms was floored at: half an ULP of the
    /// stored type at the median norm's scale (None when the type is not known). Norms
    /// that differ by less than this are equal as stored, so their MAD says nothing.
    pub storage_resolution: Option<f64>,
}

/// Half an ULP of a float type at the scale of `x`, from the type's half-ULP for values
/// in [0.5, 1) (`half_ulp_below_one`, e.g. 2^-12 for f16): values in [2^e, 2^(e+1)) have
/// half-ULP `half_ulp_below_one · 2^(e+1)`. None for a zero or non-finite `x`.
pub fn half_ulp_at(x: f64, half_ulp_below_one: f64) -> Option<f64> {
    if x == 0.0 || !x.is_finite() {
        return None;
    }
    let e = x.abs().log2().floor() as i32;
    Some(half_ulp_below_one * 2f64.powi(e + 1))
}

/// Computes the row-norm profile of `table` (positions × dim).
///
/// ```text
/// norm_i   = sqrt(Σ_j x[i, j]²)
/// slope    = Σ (i − ī)(norm_i − n̄) / Σ (i − ī)²        (ordinary least squares)
/// ratio    = mean(norm over last ⌈n/10⌉ rows) / mean(norm over first ⌈n/10⌉ rows)
/// outlier  ⇔ |0.6745·(norm_i − median)/MAD| > 3.5      (Iglewicz & Hoaglin 1993)
/// ```
///
/// Rows with NaN or infinities get a NaN norm and are left out of every statistic.
/// Empty tables give empty lists and None statistics; a table with no columns has norm 0
/// for every row.
pub fn norm_profile(table: ArrayView2<f64>) -> NormProfile {
    norm_profile_stored(table, None)
}

/// [`norm_profile`] of a table stored in a type whose half-ULP for values in [0.5, 1) is
/// `half_ulp_below_one` (`Dtype::half_ulp_below_one`): the MAD of the outlier score is
/// floored at half an ULP of that type at the median norm's scale (common practice:
/// differences below the storage precision are rounding, not signal). An exact sinusoid
/// stored in f16 has every norm within a few 1e-5 (relative) of sqrt(d/2), all of it
/// rounding; without the floor its MAD is that rounding and two rows reach z 3.5.
pub fn norm_profile_stored(table: ArrayView2<f64>, half_ulp_below_one: Option<f64>) -> NormProfile {
    let norms: Vec<f64> = table
        .axis_iter(Axis(0))
        .map(|r| {
            if r.iter().all(|v| v.is_finite()) {
                r.iter().map(|v| v * v).sum::<f64>().sqrt()
            } else {
                f64::NAN
            }
        })
        .collect();
    let finite: Vec<(usize, f64)> = norms
        .iter()
        .copied()
        .enumerate()
        .filter(|(_, v)| v.is_finite())
        .collect();
    let values: Vec<f64> = finite.iter().map(|p| p.1).collect();
    let mean = (!values.is_empty()).then(|| values.iter().sum::<f64>() / values.len() as f64);
    let median = median_of(&values);
    let slope_per_position = ls_slope(&finite);
    let n = norms.len();
    let part = n.div_ceil(10).max(1);
    let end_to_start_ratio = if n == 0 {
        None
    } else {
        let head = finite_mean(&norms[..part.min(n)]);
        let tail = finite_mean(&norms[n.saturating_sub(part)..]);
        match (head, tail) {
            (Some(h), Some(t)) if h > 0.0 => Some(t / h),
            _ => None,
        }
    };
    let storage_resolution =
        half_ulp_below_one.and_then(|h| median.and_then(|m| half_ulp_at(m, h)));
    let modified_z =
        modified_z_scores_floored(ndarray::ArrayView1::from(&norms[..]), storage_resolution);
    let outliers = modified_z
        .iter()
        .enumerate()
        .filter(|(_, z)| z.is_some_and(|z| z.abs() > MODIFIED_Z_THRESHOLD))
        .map(|(i, _)| i)
        .collect();
    NormProfile {
        norms,
        mean,
        median,
        slope_per_position,
        end_to_start_ratio,
        outliers,
        modified_z,
        storage_resolution,
    }
}

/// Modified z-score of each value (Iglewicz & Hoaglin 1993).
///
/// ```text
/// MAD  = median_i |x_i − median(x)|
/// M_i  = 0.6745 · (x_i − median(x)) / MAD
/// ```
///
/// The constant 0.6745 is the 0.75 quantile of the standard normal, which makes `M` a
/// z-score for normal data. Non-finite values get None and are left out of the medians.
/// The MAD is floored at `1e-9·|median|` so that values equal up to rounding (an exact
/// sinusoid table has every norm equal to sqrt(d/2) within a few ulps) do not produce
/// huge scores (common practice: deviations far below the data's precision are noise).
/// When the floored MAD is still 0 (median 0 and more than half the values 0), values
/// equal to the median get `Some(0.0)` and all others `Some(±inf)`.
pub fn modified_z_scores(x: ArrayView1<f64>) -> Vec<Option<f64>> {
    modified_z_scores_floored(x, None)
}

/// [`modified_z_scores`] with the MAD floored at `resolution` too (the precision the
/// values were stored in), when given.
pub fn modified_z_scores_floored(x: ArrayView1<f64>, resolution: Option<f64>) -> Vec<Option<f64>> {
    let values: Vec<f64> = x.iter().copied().filter(|v| v.is_finite()).collect();
    let Some(med) = median_of(&values) else {
        return vec![None; x.len()];
    };
    let deviations: Vec<f64> = values.iter().map(|v| (v - med).abs()).collect();
    let mad = median_of(&deviations)
        .unwrap_or(0.0)
        .max(1e-9 * med.abs())
        .max(resolution.filter(|r| r.is_finite()).unwrap_or(0.0));
    x.iter()
        .map(|&v| {
            if !v.is_finite() {
                None
            } else if mad > 0.0 {
                Some(0.6745 * (v - med) / mad)
            } else if v == med {
                Some(0.0)
            } else {
                Some(f64::INFINITY.copysign(v - med))
            }
        })
        .collect()
}

fn finite_mean(values: &[f64]) -> Option<f64> {
    let f: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    (!f.is_empty()).then(|| f.iter().sum::<f64>() / f.len() as f64)
}

fn ls_slope(points: &[(usize, f64)]) -> Option<f64> {
    if points.len() < 2 {
        return None;
    }
    let n = points.len() as f64;
    let mx = points.iter().map(|p| p.0 as f64).sum::<f64>() / n;
    let my = points.iter().map(|p| p.1).sum::<f64>() / n;
    let sxx: f64 = points.iter().map(|p| (p.0 as f64 - mx).powi(2)).sum();
    let sxy: f64 = points.iter().map(|p| (p.0 as f64 - mx) * (p.1 - my)).sum();
    (sxx > 0.0).then(|| sxy / sxx)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, array};

    #[test]
    fn sinusoid_rows_have_norm_sqrt_half_dim_and_no_drift() {
        // check-values §1.3: every row of an exact sin/cos table has norm sqrt(d/2).
        let (n, d) = (64, 16);
        let t = Array2::from_shape_fn((n, d), |(p, j)| {
            let w = 10000f64.powf(-((j / 2 * 2) as f64) / d as f64);
            if j % 2 == 0 {
                (p as f64 * w).sin()
            } else {
                (p as f64 * w).cos()
            }
        });
        let prof = norm_profile(t.view());
        for v in &prof.norms {
            assert!((v - 8f64.sqrt()).abs() < 1e-12);
        }
        assert!(prof.slope_per_position.unwrap().abs() < 1e-12);
        assert!((prof.end_to_start_ratio.unwrap() - 1.0).abs() < 1e-12);
        assert!(prof.outliers.is_empty());
    }

    #[test]
    fn linear_drift_and_a_spike_are_measured() {
        // Invented: norm_i = 1 + 0.01 i in one column, with row 7 pushed to 10.
        let mut t = Array2::from_shape_fn((20, 1), |(i, _)| 1.0 + 0.01 * i as f64);
        let clean = norm_profile(t.view());
        assert!((clean.slope_per_position.unwrap() - 0.01).abs() < 1e-12);
        // first 2 rows mean 1.005, last 2 rows mean 1.185
        assert!((clean.end_to_start_ratio.unwrap() - 1.185 / 1.005).abs() < 1e-12);
        t[[7, 0]] = 10.0;
        let spiky = norm_profile(t.view());
        assert_eq!(spiky.outliers, vec![7]);
    }

    #[test]
    fn modified_z_matches_a_hand_computed_example() {
        // x = [1, 2, 3, 4, 100]: median 3, |dev| = [2,1,0,1,97], MAD = 1,
        // M = 0.6745·(x−3): [-1.349, -0.6745, 0, 0.6745, 65.4265] (by hand).
        let z = modified_z_scores(array![1.0, 2.0, 3.0, 4.0, 100.0].view());
        let want = [-1.349, -0.6745, 0.0, 0.6745, 65.4265];
        for (a, b) in z.iter().zip(want) {
            assert!((a.unwrap() - b).abs() < 1e-12);
        }
    }

    #[test]
    fn the_spread_is_floored_at_the_storage_half_ulp_of_the_median_norm() {
        // IEEE 754 binary16 has an 11-bit significand: values in [1024, 2048) are spaced
        // by 1 (half-ULP 0.5) and values in [0.5, 1) by 2^-11 (half-ULP 2^-12).
        let f16 = 2f64.powi(-12);
        assert_eq!(half_ulp_at(1500.0, f16), Some(0.5));
        assert_eq!(half_ulp_at(0.75, f16), Some(f16));
        assert_eq!(half_ulp_at(8.0, f16), Some(2f64.powi(-8)));
        assert_eq!(half_ulp_at(0.0, f16), None);
        // Invented: norms 8 ± a few 1e-4 (below f16's half-ULP 2^-8 at 8) with one row at
        // 8 + 1e-3: an outlier against the unfloored MAD, rounding against the floored one.
        let mut t = Array2::from_shape_fn((41, 1), |(i, _)| 8.0 + 1e-4 * ((i % 5) as f64 - 2.0));
        t[[20, 0]] = 8.0 + 1e-3;
        assert_eq!(norm_profile(t.view()).outliers, vec![20]);
        let stored = norm_profile_stored(t.view(), Some(f16));
        assert!(stored.outliers.is_empty());
        assert_eq!(stored.storage_resolution, Some(2f64.powi(-8)));
        // A real outlier (norm 9, far beyond rounding) is still one.
        t[[20, 0]] = 9.0;
        assert_eq!(norm_profile_stored(t.view(), Some(f16)).outliers, vec![20]);
    }

    #[test]
    fn degenerate_tables_do_not_panic() {
        let e = norm_profile(Array2::<f64>::zeros((0, 3)).view());
        assert!(e.norms.is_empty() && e.mean.is_none() && e.end_to_start_ratio.is_none());
        let one = norm_profile(array![[3.0, 4.0]].view());
        assert_eq!(one.norms, vec![5.0]);
        assert!(one.slope_per_position.is_none());
        let nan = norm_profile(array![[f64::NAN], [1.0], [1.0]].view());
        assert!(nan.norms[0].is_nan());
        assert_eq!(nan.modified_z[0], None);
        assert!(nan.outliers.is_empty());
        let zeros = norm_profile(Array2::<f64>::zeros((5, 2)).view());
        assert_eq!(zeros.end_to_start_ratio, None);
        assert!(zeros.outliers.is_empty());
        let no_cols = norm_profile(Array2::<f64>::zeros((3, 0)).view());
        assert_eq!(no_cols.norms, vec![0.0; 3]);
    }
}
