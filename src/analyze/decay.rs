//! Weight decay on rows that never receive a gradient.
//!
//! Decoupled weight decay (AdamW, Loshchilov & Hutter 2019) multiplies every parameter by
//! `(1 − lr_t·wd)` at each step, gradient or not. A row that never gets a gradient
//! therefore ends as `init × f` with one common factor `f = Π_t (1 − lr_t·wd)`: noise of
//! the initializer's shape at a smaller scale. This module estimates `f` from such rows
//! against the init scale, says whether the rows agree on one factor, and compares the
//! estimates of different tables of one checkpoint (they shrink by the same schedule
//! when the same decay applies to them).
//!
//! ```text
//! f̂ = sqrt(Σ_r Σ_j x_rj² / (N·d)) / σ          (pooled RMS over N rows of d values)
//! se(ln f̂) ≈ 1/√(2·N·d)                        (the RMS of m normal values has
//!                                                relative sd ≈ 1/√(2m))
//! row r agrees when |ln(rms_r/σ) − ln f̂| ≤ 4.5/√(2d)
//! ```
//! Sources: the decay rule is Loshchilov & Hutter (2019), Algorithm 2; the standard
//! error of a sample standard deviation, sd(s)/σ ≈ 1/√(2m), is the textbook
//! large-sample result (common practice).

use serde::Serialize;

/// One table's estimate of the common decay factor of its never-trained rows.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DecayEstimate {
    /// Pooled RMS of the rows divided by the init scale.
    pub factor: f64,
    /// The init scale used (config `initializer_range` when given).
    pub init_std: f64,
    /// Rows the estimate pools.
    pub rows: usize,
    /// Values per row.
    pub values_per_row: usize,
    /// Standard error of ln(factor).
    pub log_standard_error: f64,
    /// 95 % interval of the factor, `factor·exp(±1.96·se)`.
    pub interval: [f64; 2],
    /// Largest |ln(rms_r/σ) − ln factor| over the rows.
    pub largest_log_deviation: f64,
    /// Whether every row lies within 4.5/√(2d) of the common factor in log scale.
    pub rows_agree: bool,
}

/// Estimates the common factor from the RMS of each never-trained row (`values_per_row`
/// values each) against the init scale `init_std`. None without rows, values or a
/// positive finite scale.
pub fn estimate(rms: &[f64], values_per_row: usize, init_std: f64) -> Option<DecayEstimate> {
    let rms: Vec<f64> = rms
        .iter()
        .copied()
        .filter(|x| x.is_finite() && *x > 0.0)
        .collect();
    if rms.is_empty() || values_per_row == 0 || !(init_std.is_finite() && init_std > 0.0) {
        return None;
    }
    let pooled = (rms.iter().map(|x| x * x).sum::<f64>() / rms.len() as f64).sqrt();
    let factor = pooled / init_std;
    let se = 1.0 / (2.0 * rms.len() as f64 * values_per_row as f64).sqrt();
    let largest = rms
        .iter()
        .map(|x| (x / pooled).ln().abs())
        .fold(0.0, f64::max);
    Some(DecayEstimate {
        factor,
        init_std,
        rows: rms.len(),
        values_per_row,
        log_standard_error: se,
        interval: [factor * (-1.96 * se).exp(), factor * (1.96 * se).exp()],
        largest_log_deviation: largest,
        rows_agree: largest <= 4.5 / (2.0 * values_per_row as f64).sqrt(),
    })
}

/// How far apart two estimates are: `|ln f₁ − ln f₂| / sqrt(se₁² + se₂²)` (a z score);
/// they agree on one factor when it is at most 3.
pub fn disagreement(a: &DecayEstimate, b: &DecayEstimate) -> f64 {
    let se = (a.log_standard_error.powi(2) + b.log_standard_error.powi(2)).sqrt();
    (a.factor.ln() - b.factor.ln()).abs() / se.max(f64::MIN_POSITIVE)
}

/// The z score below which two estimates agree.
pub const AGREEMENT_Z: f64 = 3.0;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::Rng;

    #[test]
    fn the_factor_of_shrunk_init_noise_is_recovered_within_its_interval() {
        // Invented: N(0, 0.02²) rows of 768 values times 0.3 (a decay factor).
        let mut rng = Rng::new(21);
        let rms: Vec<f64> = (0..50)
            .map(|_| {
                let s: f64 = (0..768).map(|_| (0.3 * 0.02 * rng.normal()).powi(2)).sum();
                (s / 768.0).sqrt()
            })
            .collect();
        let e = estimate(&rms, 768, 0.02).unwrap();
        assert!(e.interval[0] <= 0.3 && 0.3 <= e.interval[1], "{e:?}");
        assert!((e.factor / 0.3 - 1.0).abs() < 0.01);
        assert!(e.rows_agree);
        // A row at twice the scale does not share the factor.
        let mut odd = rms.clone();
        odd[3] *= 2.0;
        assert!(!estimate(&odd, 768, 0.02).unwrap().rows_agree);
    }

    #[test]
    fn estimates_agree_when_their_intervals_allow_it() {
        // all-mpnet-base-v2 (the real checkpoint of tests/real_checkpoints.rs): position
        // row 0 has rms 0.004558 (768 values), bias bucket 16 rms 0.003356 (12 values),
        // initializer_range 0.02: factors 0.228 and 0.168, within their uncertainty.
        let a = estimate(&[0.004558], 768, 0.02).unwrap();
        let b = estimate(&[0.003356], 12, 0.02).unwrap();
        assert!((a.factor - 0.2279).abs() < 1e-3 && (b.factor - 0.1678).abs() < 1e-3);
        assert!(disagreement(&a, &b) < AGREEMENT_Z);
        let c = estimate(&[0.0004558], 768, 0.02).unwrap();
        assert!(disagreement(&a, &c) > AGREEMENT_Z);
        assert!(estimate(&[], 10, 0.02).is_none());
        assert!(estimate(&[0.1], 10, 0.0).is_none());
    }
}
