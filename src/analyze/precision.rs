//! Rounding to the low-precision storage types, correctly (one rounding from f64), for
//! the checks "is this value the bf16/f16 rounding of that one" and "is this error
//! within half an ULP".
//!
//! `half` 2.7's `bf16::from_f64` drops the low 32 mantissa bits before rounding and
//! `f16::from_f64` goes through f32 on x86, so both can round twice and miss the nearest
//! value by a hair; here the value is scaled by its quantum (a power of two, so the
//! division is exact) and rounded once, ties to even.

/// Explicit mantissa bits of bf16.
pub const BF16_MANTISSA: i32 = 7;
/// Explicit mantissa bits of f16.
pub const F16_MANTISSA: i32 = 10;

/// Round to the nearest bf16 value (ties to even), correctly rounded from f64.
pub fn round_bf16(x: f64) -> f64 {
    round_to_format(x, BF16_MANTISSA, -126, half::bf16::MAX.to_f64())
}

/// Round to the nearest f16 value (ties to even), correctly rounded from f64.
pub fn round_f16(x: f64) -> f64 {
    round_to_format(x, F16_MANTISSA, -14, half::f16::MAX.to_f64())
}

/// Half an ULP of a float type with `mant_bits` explicit mantissa bits, for values just
/// below 1: `2^-(mant_bits + 1)`.
pub fn half_ulp_below_one(mant_bits: i32) -> f64 {
    2f64.powi(-(mant_bits + 1))
}

/// Nearest value with `mant_bits` stored mantissa bits, minimum normal exponent
/// `min_exp` (subnormals below it) and largest finite value `max`; beyond it ±∞.
pub fn round_to_format(x: f64, mant_bits: i32, min_exp: i32, max: f64) -> f64 {
    if !x.is_finite() || x == 0.0 {
        return x;
    }
    let biased = ((x.to_bits() >> 52) & 0x7ff) as i32;
    let exp = (biased - 1023).max(min_exp);
    let quantum = 2f64.powi(exp - mant_bits);
    let r = (x / quantum).round_ties_even() * quantum;
    if r.abs() > max {
        f64::INFINITY.copysign(x)
    } else {
        r
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testutil::Rng;

    #[test]
    fn low_dtype_rounding_matches_published_values_and_half() {
        // check-values §7.3 (a-calc with ml_dtypes): bf16 of the θ=1e4, d=128 inv_freq.
        let f32_vals = [
            1.0, 0.86596435, 0.74989420, 0.64938164, 0.56234133, 0.48696753,
        ];
        let bf16_vals = [1.0, 0.8671875, 0.75, 0.6484375, 0.5625, 0.486328125];
        for (x, want) in f32_vals.iter().zip(bf16_vals) {
            assert_eq!(round_bf16(*x), want);
        }
        // §7.3: 2.455e-6 is subnormal in f16 and is stored as 2.4438e-6.
        assert!((round_f16(2.4551408e-6) - 2.4438e-6).abs() < 1e-10);
        // §7.1: f16 max 65504; integers exact up to 2048 (f16) and 256 (bf16).
        assert_eq!(round_f16(65504.0), 65504.0);
        assert!(round_f16(70000.0).is_infinite());
        assert_eq!(round_f16(2049.0), 2048.0);
        assert_eq!(round_bf16(257.0), 256.0);
        // Common practice: half an ULP below 1 is 2^-8 for bf16 and 2^-11 for f16.
        assert_eq!(half_ulp_below_one(BF16_MANTISSA), 2f64.powi(-8));
        assert_eq!(half_ulp_below_one(F16_MANTISSA), 2f64.powi(-11));
        // On f32 inputs `half` rounds correctly, so both must agree exactly.
        let mut rng = Rng(3);
        for _ in 0..10_000 {
            let x = (rng.normal() * 3.0) as f32;
            assert_eq!(round_bf16(x as f64), half::bf16::from_f32(x).to_f64());
            assert_eq!(round_f16(x as f64), half::f16::from_f32(x).to_f64());
        }
    }
}
