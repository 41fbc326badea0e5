//! Signal (c): the shape of a row's values against a normal of the row's own scale.

use ndarray::ArrayView1;

/// KS statistic of `row` against N(0, s²) and the excess kurtosis of the values.
///
/// ```text
/// D = max_j max(j/d − Φ(x_(j)/s), Φ(x_(j)/s) − (j−1)/d)     (sorted values x_(j))
/// excess kurtosis = mean(x⁴)/mean(x²)² − 3                  (about mean 0)
/// ```
pub(crate) fn ks_and_kurtosis(row: ArrayView1<f64>, s: f64) -> (f64, f64) {
    let d = row.len();
    if d == 0 || s <= 0.0 || !s.is_finite() {
        return (f64::NAN, f64::NAN);
    }
    // Sorted through integer keys that order like the floats (the IEEE total order):
    // cheaper than a comparison closure on floats.
    let mut keys: Vec<i64> = row
        .iter()
        .map(|x| {
            let b = x.to_bits() as i64;
            b ^ ((((b >> 63) as u64) >> 1) as i64)
        })
        .collect();
    keys.sort_unstable();
    let v: Vec<f64> = keys
        .iter()
        .map(|&k| f64::from_bits((k ^ ((((k >> 63) as u64) >> 1) as i64)) as u64))
        .collect();
    let df = d as f64;
    let mut dmax = 0.0f64;
    for (j, x) in v.iter().enumerate() {
        let f = normal_cdf_tabulated(x / s);
        dmax = dmax.max((j as f64 + 1.0) / df - f).max(f - j as f64 / df);
    }
    let m2 = v.iter().map(|x| x * x).sum::<f64>() / df;
    let m4 = v.iter().map(|x| x.powi(4)).sum::<f64>() / df;
    (dmax, m4 / (m2 * m2) - 3.0)
}

/// Standard normal CDF by linear interpolation in a table of [`normal_cdf`] on
/// [−8.5, 8.5] with step 1/1024 (interpolation error ≤ h²/8·max|φ'| ≈ 3e-8, below the
/// 1.2e-7 of the erfc approximation itself); 0 and 1 outside (Φ(−8.5) ≈ 1e-17). The KS
/// statistic evaluates Φ once per table value, and one `exp` per value was the cost.
pub(super) fn normal_cdf_tabulated(z: f64) -> f64 {
    const STEPS_PER_UNIT: f64 = 1024.0;
    const HALF_RANGE: f64 = 8.5;
    static TABLE: std::sync::OnceLock<Vec<f64>> = std::sync::OnceLock::new();
    let table = TABLE.get_or_init(|| {
        let n = (2.0 * HALF_RANGE * STEPS_PER_UNIT) as usize;
        (0..=n)
            .map(|i| normal_cdf(i as f64 / STEPS_PER_UNIT - HALF_RANGE))
            .collect()
    });
    if z.is_nan() {
        return f64::NAN;
    }
    let t = (z + HALF_RANGE) * STEPS_PER_UNIT;
    if t <= 0.0 {
        return 0.0;
    }
    let i = t as usize;
    if i + 1 >= table.len() {
        return 1.0;
    }
    let frac = t - i as f64;
    table[i] + frac * (table[i + 1] - table[i])
}

/// Standard normal CDF via the complementary error function.
pub(super) fn normal_cdf(z: f64) -> f64 {
    0.5 * erfc(-z / std::f64::consts::SQRT_2)
}

/// Complementary error function, Chebyshev-fitted rational approximation with
/// fractional error below 1.2e-7 everywhere (Press et al., Numerical Recipes, `erfcc`).
fn erfc(x: f64) -> f64 {
    let z = x.abs();
    let t = 1.0 / (1.0 + 0.5 * z);
    let poly = -z * z - 1.265_512_23
        + t * (1.000_023_68
            + t * (0.374_091_96
                + t * (0.096_784_18
                    + t * (-0.186_288_06
                        + t * (0.278_868_07
                            + t * (-1.135_203_98
                                + t * (1.488_515_87 + t * (-0.822_152_23 + t * 0.170_872_77))))))));
    let r = t * poly.exp();
    if x >= 0.0 { r } else { 2.0 - r }
}
