//! Robust statistics shared by the analyses, the verdicts and the comparison, written
//! once: median, median absolute deviation and cosine similarity.

use ndarray::ArrayView1;

/// Median of `values` (the mean of the two middle values for an even count); None when
/// empty. Values are compared by `f64::total_cmp`, so NaN sorts last; callers pass
/// finite values.
///
/// ```
/// use posaudit::analyze::stats::median;
/// assert_eq!(median(&[3.0, 1.0, 2.0]), Some(2.0));
/// assert_eq!(median(&[4.0, 1.0, 2.0, 3.0]), Some(2.5));
/// assert_eq!(median(&[]), None);
/// ```
pub fn median(values: &[f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    Some(if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    })
}

/// Median absolute deviation from `center` (unscaled; multiply by 1.4826 for the
/// standard deviation of a normal sample, Rousseeuw & Croux 1993); None when empty.
///
/// ```
/// use posaudit::analyze::stats::mad;
/// // |x - 2| = 1, 0, 1, 7 → median 1.
/// assert_eq!(mad(&[1.0, 2.0, 3.0, 9.0], 2.0), Some(1.0));
/// ```
pub fn mad(values: &[f64], center: f64) -> Option<f64> {
    let dev: Vec<f64> = values.iter().map(|v| (v - center).abs()).collect();
    median(&dev)
}

/// Cosine similarity of two vectors; None when either has zero norm or a non-finite
/// value, or the lengths differ.
///
/// ```text
/// cos(a, b) = a·b / (‖a‖ ‖b‖)
/// ```
pub fn cosine(a: ArrayView1<f64>, b: ArrayView1<f64>) -> Option<f64> {
    if a.len() != b.len() || a.iter().chain(b.iter()).any(|v| !v.is_finite()) {
        return None;
    }
    let (mut ab, mut aa, mut bb) = (0.0, 0.0, 0.0);
    for (x, y) in a.iter().zip(b.iter()) {
        ab += x * y;
        aa += x * x;
        bb += y * y;
    }
    (aa > 0.0 && bb > 0.0).then(|| (ab / (aa.sqrt() * bb.sqrt())).clamp(-1.0, 1.0))
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::arr1;

    #[test]
    fn cosine_of_known_vectors() {
        // Textbook values: orthogonal, parallel, opposite, 45 degrees.
        let x = arr1(&[1.0, 0.0]);
        assert_eq!(cosine(x.view(), arr1(&[0.0, 2.0]).view()), Some(0.0));
        assert_eq!(cosine(x.view(), arr1(&[3.0, 0.0]).view()), Some(1.0));
        assert_eq!(cosine(x.view(), arr1(&[-1.0, 0.0]).view()), Some(-1.0));
        let c = cosine(x.view(), arr1(&[1.0, 1.0]).view()).unwrap();
        assert!((c - std::f64::consts::FRAC_1_SQRT_2).abs() < 1e-15);
        assert_eq!(cosine(x.view(), arr1(&[0.0, 0.0]).view()), None);
        assert_eq!(cosine(x.view(), arr1(&[f64::NAN, 0.0]).view()), None);
    }

    #[test]
    fn median_and_mad_of_small_samples() {
        assert_eq!(median(&[5.0]), Some(5.0));
        assert_eq!(median(&[2.0, -1.0]), Some(0.5));
        assert_eq!(mad(&[], 0.0), None);
    }
}
