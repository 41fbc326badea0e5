//! Seeded normal draws for re-initialised rows: N(0, std²), the distribution of the
//! usual initializer of a learned position table (`normal_(0, initializer_range)`,
//! common practice). The values are not torch's (another generator); the distribution
//! is the same.
//!
//! Generator: SplitMix64 (Steele, Lea & Flood 2014, constants as published); normal
//! values by the Box–Muller transform (Box & Muller 1958), one per pair of uniforms.

use ndarray::Array2;

/// A `rows × dim` table of N(0, std²) draws from `seed`; the same seed gives the same
/// values on every machine.
pub fn normal_rows(rows: usize, dim: usize, std: f64, seed: u64) -> Array2<f64> {
    let mut state = seed;
    let mut next = move || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    };
    let mut uniform = move || ((next() >> 11) as f64 + 0.5) / (1u64 << 53) as f64;
    Array2::from_shape_simple_fn((rows, dim), || {
        let (u1, u2) = (uniform(), uniform());
        std * (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn draws_have_the_asked_scale_and_repeat_with_the_seed() {
        let a = normal_rows(200, 64, 0.02, 7);
        assert_eq!(a, normal_rows(200, 64, 0.02, 7));
        assert_ne!(a, normal_rows(200, 64, 0.02, 8));
        let n = a.len() as f64;
        let mean = a.sum() / n;
        let std = (a.mapv(|x| (x - mean).powi(2)).sum() / n).sqrt();
        // 12800 draws: the sample std is within a few 1/sqrt(2n) of the truth
        // (common practice: the standard error of a normal sample's std).
        assert!((std / 0.02 - 1.0).abs() < 4.0 / (2.0 * n).sqrt(), "{std}");
        assert!(mean.abs() < 4.0 * 0.02 / n.sqrt(), "{mean}");
    }
}
