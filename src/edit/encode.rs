//! f64 values to the bytes of a stored element type, rounded once.
//!
//! F32: Rust's `as f32` rounds to nearest, ties to even (IEEE 754 conversion). F16 and
//! BF16: [`crate::analyze::precision`] rounds correctly from f64 (the `half` crate's own
//! conversions from f64 may round twice); the rounded value is then exactly
//! representable, so turning it into the `half` type changes nothing. F64: as is.
//! Little-endian, as safetensors stores every type.

use crate::analyze::precision::{round_bf16, round_f16};
use crate::checkpoint::Dtype;

/// The element types a new table can be written in.
pub fn encodable(dtype: &Dtype) -> bool {
    matches!(dtype, Dtype::F64 | Dtype::F32 | Dtype::F16 | Dtype::BF16)
}

/// The little-endian bytes of `values` in `dtype`, each value rounded once to nearest
/// (ties to even); `None` for a type that is not a float type posaudit writes.
pub fn encode(values: impl IntoIterator<Item = f64>, dtype: &Dtype) -> Option<Vec<u8>> {
    let values = values.into_iter();
    let mut out = Vec::with_capacity(values.size_hint().0 * 4);
    match dtype {
        Dtype::F64 => values.for_each(|v| out.extend_from_slice(&v.to_le_bytes())),
        Dtype::F32 => values.for_each(|v| out.extend_from_slice(&(v as f32).to_le_bytes())),
        Dtype::F16 => values
            .for_each(|v| out.extend_from_slice(&half::f16::from_f64(round_f16(v)).to_le_bytes())),
        Dtype::BF16 => values.for_each(|v| {
            out.extend_from_slice(&half::bf16::from_f64(round_bf16(v)).to_le_bytes())
        }),
        _ => return None,
    }
    Some(out)
}

/// The little-endian bytes of integer ids in an integer `dtype`; `None` for another
/// type or a value it cannot hold.
pub fn encode_ids(values: impl IntoIterator<Item = i64>, dtype: &Dtype) -> Option<Vec<u8>> {
    let mut out = Vec::new();
    for v in values {
        match dtype {
            Dtype::I64 => out.extend_from_slice(&v.to_le_bytes()),
            Dtype::I32 => out.extend_from_slice(&i32::try_from(v).ok()?.to_le_bytes()),
            Dtype::I16 => out.extend_from_slice(&i16::try_from(v).ok()?.to_le_bytes()),
            Dtype::U64 => out.extend_from_slice(&u64::try_from(v).ok()?.to_le_bytes()),
            Dtype::U32 => out.extend_from_slice(&u32::try_from(v).ok()?.to_le_bytes()),
            _ => return None,
        }
    }
    Some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_rounding_to_each_type() {
        // check-values §7.3 (a-calc with ml_dtypes): bf16 of 0.86596435 is 0.8671875.
        let b = encode([0.86596435], &Dtype::BF16).unwrap();
        assert_eq!(half::bf16::from_le_bytes([b[0], b[1]]).to_f64(), 0.8671875);
        // 1 + 2^-24 + 2^-40 lies just above the midpoint 1 + 2^-24 between the f32 values
        // 1 and 1 + 2^-23, so the nearest f32 is the upper one (IEEE 754 nearest).
        let x = 1.0 + 2f64.powi(-24) + 2f64.powi(-40);
        let f = encode([x], &Dtype::F32).unwrap();
        assert_eq!(
            f32::from_le_bytes(f[..4].try_into().unwrap()),
            1.0 + 2f32.powi(-23)
        );
        // f16: 2049 is a tie between 2048 and 2050; ties go to the even mantissa, 2048
        // (check-values §7.1: integers exact only up to 2048).
        let h = encode([2049.0, 2051.0], &Dtype::F16).unwrap();
        assert_eq!(half::f16::from_le_bytes([h[0], h[1]]).to_f64(), 2048.0);
        assert_eq!(half::f16::from_le_bytes([h[2], h[3]]).to_f64(), 2052.0);
        assert!(encode([1.0], &Dtype::I8).is_none());
        assert_eq!(encode_ids([1, 2], &Dtype::I64).unwrap().len(), 16);
        assert!(encode_ids([1 << 40], &Dtype::I32).is_none());
    }
}
