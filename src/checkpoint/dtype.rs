//! Element types of stored tensors and their conversion to `f64`.
//!
//! Every format maps its own type codes onto [`Dtype`]; the analyses only ever see `f64`.
//! Conversion goes through `half` for F16 and BF16, so values are exact (every F16, BF16
//! and F32 value is representable in f64).

use std::fmt;

pub use super::ggml_quants::QuantType;

/// Reads one number of type `$t` (`$n` bytes) from the slice `$raw` of exactly that length.
macro_rules! read_number {
    ($t:ty, $n:expr, $raw:expr, $big_endian:expr) => {{
        let mut a = [0u8; $n];
        a.copy_from_slice($raw);
        if $big_endian {
            <$t>::from_be_bytes(a)
        } else {
            <$t>::from_le_bytes(a)
        }
    }};
}

/// The element type of a stored tensor.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub enum Dtype {
    /// IEEE binary64.
    F64,
    /// IEEE binary32.
    F32,
    /// IEEE binary16.
    F16,
    /// bfloat16 (the upper half of a binary32).
    BF16,
    /// Signed 64-bit integer.
    I64,
    /// Signed 32-bit integer.
    I32,
    /// Signed 16-bit integer.
    I16,
    /// Signed 8-bit integer.
    I8,
    /// Unsigned 64-bit integer.
    U64,
    /// Unsigned 32-bit integer.
    U32,
    /// Unsigned 16-bit integer.
    U16,
    /// Unsigned 8-bit integer.
    U8,
    /// One byte per boolean.
    Bool,
    /// A GGML block-quantized type that posaudit dequantizes (GGUF files).
    Quantized(QuantType),
    /// Any type posaudit cannot analyse (8-bit floats, quantized blocks, complex numbers):
    /// the format's own name for it, and its size in bytes per element when the format
    /// defines one.
    Other {
        /// The format's own name for the type, e.g. `F8_E4M3` or `Q4_K`.
        name: String,
    },
}

impl Dtype {
    /// Bytes per element, or `None` for types without a fixed per-element size.
    pub fn size(&self) -> Option<usize> {
        Some(match self {
            Dtype::F64 | Dtype::I64 | Dtype::U64 => 8,
            Dtype::F32 | Dtype::I32 | Dtype::U32 => 4,
            Dtype::F16 | Dtype::BF16 | Dtype::I16 | Dtype::U16 => 2,
            Dtype::I8 | Dtype::U8 | Dtype::Bool => 1,
            Dtype::Other { .. } | Dtype::Quantized(_) => return None,
        })
    }

    /// Bytes of storage that elements `0..n` occupy: `n` times the element size, or the
    /// whole blocks of a quantized type. `None` for types posaudit cannot read.
    pub fn storage_len(&self, n: usize) -> Option<usize> {
        match self {
            Dtype::Quantized(q) => q.storage_len(n),
            _ => self.size()?.checked_mul(n),
        }
    }

    /// True for the floating-point types whose values the analyses read (quantized
    /// types read as the values they dequantize to).
    pub fn is_float(&self) -> bool {
        matches!(
            self,
            Dtype::F64 | Dtype::F32 | Dtype::F16 | Dtype::BF16 | Dtype::Quantized(_)
        )
    }

    /// True for the integer types (index buffers such as position ids).
    pub fn is_integer(&self) -> bool {
        matches!(
            self,
            Dtype::I64
                | Dtype::I32
                | Dtype::I16
                | Dtype::I8
                | Dtype::U64
                | Dtype::U32
                | Dtype::U16
                | Dtype::U8
        )
    }

    /// Half the spacing of representable values in [0.5, 1): the rounding error a value of
    /// a sine/cosine table can have from storage alone. `None` for non-float types.
    ///
    /// ```text
    /// F64: 2^-54   F32: 2^-25   F16: 2^-12   BF16: 2^-9
    /// ```
    /// (A value in [0.5, 1) has ULP 2^-53, 2^-24, 2^-11, 2^-8 for these types.)
    pub fn half_ulp_below_one(&self) -> Option<f64> {
        Some(match self {
            Dtype::F64 => 2f64.powi(-54),
            Dtype::F32 => 2f64.powi(-25),
            Dtype::F16 => 2f64.powi(-12),
            Dtype::BF16 => 2f64.powi(-9),
            _ => return None,
        })
    }

    /// Why the analyses cannot read this type, or `None` when they can.
    pub fn unsupported_reason(&self) -> Option<String> {
        match self {
            Dtype::Other { name } if name == crate::checkpoint::pickle::OBJECT_DTYPE => Some(
                "a NumPy array of Python objects: its elements are pickles of their own, which posaudit never reads".to_string(),
            ),
            Dtype::Other { name } => Some(format!(
                "element type {name} is not analysable (only F64, F32, F16, BF16 tables and integer index buffers are)"
            )),
            Dtype::Bool => Some("boolean tensors hold no position table".to_string()),
            _ => None,
        }
    }

    /// The bytes of element `i`, or `None` when it lies outside `bytes` or the type has
    /// no fixed size.
    fn element<'a>(&self, bytes: &'a [u8], i: usize) -> Option<&'a [u8]> {
        let size = self.size()?;
        let start = i.checked_mul(size)?;
        bytes.get(start..start.checked_add(size)?)
    }

    /// Decodes `out.len()` consecutive little-endian elements starting at element `start`
    /// into `out`, for F64, F32, F16 and BF16; returns false (and leaves `out` for the
    /// element-wise path) for other types or when the run is not inside `bytes`.
    pub fn decode_le_run(&self, bytes: &[u8], start: usize, out: &mut [f64]) -> bool {
        if let Dtype::Quantized(q) = self {
            return q.decode_run(bytes, start, out);
        }
        let Some(size) = self.size() else {
            return false;
        };
        let Some(run) = start
            .checked_mul(size)
            .and_then(|a| Some((a, a.checked_add(out.len().checked_mul(size)?)?)))
            .and_then(|(a, b)| bytes.get(a..b))
        else {
            return false;
        };
        match self {
            Dtype::F64 => {
                for (o, c) in out.iter_mut().zip(run.chunks_exact(8)) {
                    *o = f64::from_le_bytes(c.try_into().unwrap_or([0; 8]));
                }
            }
            Dtype::F32 => {
                for (o, c) in out.iter_mut().zip(run.chunks_exact(4)) {
                    *o = f64::from(f32::from_le_bytes(c.try_into().unwrap_or([0; 4])));
                }
            }
            Dtype::F16 => {
                for (o, c) in out.iter_mut().zip(run.chunks_exact(2)) {
                    *o = half::f16::from_le_bytes([c[0], c[1]]).to_f64();
                }
            }
            Dtype::BF16 => {
                for (o, c) in out.iter_mut().zip(run.chunks_exact(2)) {
                    *o = half::bf16::from_le_bytes([c[0], c[1]]).to_f64();
                }
            }
            _ => return false,
        }
        true
    }

    /// Decodes element `i` of `bytes` (little- or big-endian) as f64. Returns `None` when
    /// the element lies outside `bytes` or the type is not numeric.
    pub fn decode(&self, bytes: &[u8], i: usize, big_endian: bool) -> Option<f64> {
        if let Dtype::Quantized(q) = self {
            return q.decode(bytes, i);
        }
        let raw = self.element(bytes, i)?;
        macro_rules! take {
            ($t:ty, $n:expr) => {
                read_number!($t, $n, raw, big_endian)
            };
        }
        Some(match self {
            Dtype::F64 => take!(f64, 8),
            Dtype::F32 => take!(f32, 4) as f64,
            Dtype::F16 => half::f16::from_bits(take!(u16, 2)).to_f64(),
            Dtype::BF16 => half::bf16::from_bits(take!(u16, 2)).to_f64(),
            Dtype::I64 => take!(i64, 8) as f64,
            Dtype::I32 => take!(i32, 4) as f64,
            Dtype::I16 => take!(i16, 2) as f64,
            Dtype::I8 => take!(i8, 1) as f64,
            Dtype::U64 => take!(u64, 8) as f64,
            Dtype::U32 => take!(u32, 4) as f64,
            Dtype::U16 => take!(u16, 2) as f64,
            Dtype::U8 => raw[0] as f64,
            Dtype::Bool => f64::from(u8::from(raw[0] != 0)),
            Dtype::Other { .. } | Dtype::Quantized(_) => return None,
        })
    }

    /// Decodes element `i` as i64 for integer types (exact, unlike the f64 path for
    /// values beyond 2^53). `None` for non-integer types or out-of-range elements.
    pub fn decode_int(&self, bytes: &[u8], i: usize, big_endian: bool) -> Option<i64> {
        let raw = self.element(bytes, i)?;
        macro_rules! take {
            ($t:ty, $n:expr) => {
                read_number!($t, $n, raw, big_endian)
            };
        }
        match self {
            Dtype::I64 => Some(take!(i64, 8)),
            Dtype::I32 => Some(take!(i32, 4) as i64),
            Dtype::I16 => Some(take!(i16, 2) as i64),
            Dtype::I8 => Some(take!(i8, 1) as i64),
            Dtype::U64 => i64::try_from(take!(u64, 8)).ok(),
            Dtype::U32 => Some(take!(u32, 4) as i64),
            Dtype::U16 => Some(take!(u16, 2) as i64),
            Dtype::U8 => Some(raw[0] as i64),
            _ => None,
        }
    }
}

impl fmt::Display for Dtype {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = match self {
            Dtype::F64 => "F64",
            Dtype::F32 => "F32",
            Dtype::F16 => "F16",
            Dtype::BF16 => "BF16",
            Dtype::I64 => "I64",
            Dtype::I32 => "I32",
            Dtype::I16 => "I16",
            Dtype::I8 => "I8",
            Dtype::U64 => "U64",
            Dtype::U32 => "U32",
            Dtype::U16 => "U16",
            Dtype::U8 => "U8",
            Dtype::Bool => "BOOL",
            Dtype::Quantized(q) => q.name(),
            Dtype::Other { name } => name,
        };
        f.write_str(s)
    }
}

impl serde::Serialize for Dtype {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decodes_half_precision_bit_patterns() {
        // IEEE 754 binary16: 0x3C00 = 1.0, 0xC000 = -2.0; bfloat16 0x3F80 = 1.0 (the top
        // 16 bits of binary32 1.0 = 0x3F800000).
        let f16 = [0x00u8, 0x3C, 0x00, 0xC0];
        assert_eq!(Dtype::F16.decode(&f16, 0, false), Some(1.0));
        assert_eq!(Dtype::F16.decode(&f16, 1, false), Some(-2.0));
        let bf16 = [0x80u8, 0x3F];
        assert_eq!(Dtype::BF16.decode(&bf16, 0, false), Some(1.0));
        assert_eq!(Dtype::BF16.decode(&[0x3Fu8, 0x80], 0, true), Some(1.0));
    }

    #[test]
    fn out_of_range_elements_are_none_not_a_panic() {
        assert_eq!(Dtype::F32.decode(&[0u8; 6], 1, false), None);
        assert_eq!(Dtype::F32.decode(&[0u8; 8], usize::MAX, false), None);
        assert_eq!(
            Dtype::I64.decode_int(&[1, 0, 0, 0, 0, 0, 0, 0], 0, false),
            Some(1)
        );
    }
}
