//! Dequantization of the common GGML block types found in GGUF files.
//!
//! A quantized tensor is a run of fixed-size blocks along its fastest dimension; each
//! block holds one or more scales and small integer codes. The layouts below are those
//! of ggml's `block_*` structs (the same as the `gguf` Python package's
//! `gguf.quants.*.dequantize_blocks`, against which `tests/gguf_quants.rs` checks every
//! type value for value). All scale arithmetic is done in `f32`, in the same order as
//! that reference, so the dequantized values are bit-identical to it.
//!
//! | type | block | bytes | layout (in order) | value |
//! |---|---|---|---|---|
//! | Q4_0 | 32 | 18 | d f16, 16 bytes of 4-bit codes | d·(q−8) |
//! | Q4_1 | 32 | 20 | d f16, m f16, 16 bytes of codes | d·q + m |
//! | Q5_0 | 32 | 22 | d f16, 32 high bits (u32), 16 bytes of low nibbles | d·(q−16) |
//! | Q5_1 | 32 | 24 | d f16, m f16, 32 high bits, 16 bytes of nibbles | d·q + m |
//! | Q8_0 | 32 | 34 | d f16, 32 × i8 | d·q |
//! | Q4_K | 256 | 144 | d f16, dmin f16, 12 bytes of 6-bit scales/mins, 128 bytes of nibbles | (d·sc)·q − (dmin·m) |
//! | Q5_K | 256 | 176 | d, dmin, 12 bytes of scales/mins, 32 bytes of high bits, 128 of nibbles | (d·sc)·q − (dmin·m) |
//! | Q6_K | 256 | 210 | 128 bytes low nibbles, 64 bytes of 2-bit highs, 16 × i8 scales, d f16 | (d·sc)·(q−32) |
//! | Q8_K | 256 | 292 | d f32, 256 × i8, 16 × i16 block sums (unused here) | d·q |
//!
//! In a block of 32 the first 16 values sit in the low nibbles of the 16 code bytes and
//! the next 16 in the high nibbles. In Q4_K/Q5_K each 64 values share 32 code bytes (low
//! nibbles, then high nibbles) and each 32 values have their own 6-bit scale and minimum.
//! Q6_K holds two halves of 128 values; each 32 of a half take low or high nibbles of one
//! of two 32-byte runs and a 2-bit pair of the shared high-bits byte, and each 16 values
//! have their own signed 8-bit scale.
//!
//! Every element can be decoded on its own (its block header plus its code bits), which
//! is what [`QuantType::decode`] does; [`QuantType::decode_run`] decodes a run.

use half::f16;

use super::{Checkpoint, CheckpointError, TensorInfo};

/// A GGML block-quantized element type that posaudit dequantizes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum QuantType {
    /// 4-bit codes, one f16 scale per 32.
    Q4_0,
    /// 4-bit codes, f16 scale and minimum per 32.
    Q4_1,
    /// 5-bit codes, one f16 scale per 32.
    Q5_0,
    /// 5-bit codes, f16 scale and minimum per 32.
    Q5_1,
    /// 8-bit codes, one f16 scale per 32.
    Q8_0,
    /// 4-bit codes in super-blocks of 256, 6-bit scales and minimums per 32.
    Q4K,
    /// 5-bit codes in super-blocks of 256, 6-bit scales and minimums per 32.
    Q5K,
    /// 6-bit codes in super-blocks of 256, 8-bit scales per 16.
    Q6K,
    /// 8-bit codes in super-blocks of 256, one f32 scale.
    Q8K,
}

fn f16_at(b: &[u8], at: usize) -> f32 {
    f16::from_le_bytes([b[at], b[at + 1]]).to_f32()
}

/// The 6-bit scale and minimum of sub-block `j` (0..8) of a Q4_K/Q5_K block, from the
/// 12 packed bytes: bytes 0..4 hold scales 0..3 (low 6 bits), bytes 4..8 minimums 0..3,
/// bytes 8..12 the low 4 bits of scales (low nibble) and minimums (high nibble) 4..7,
/// whose top 2 bits are the top bits of bytes 0..4 (scales) and 4..8 (minimums).
fn scale_min_k4(s: &[u8], j: usize) -> (u8, u8) {
    if j < 4 {
        (s[j] & 0x3F, s[j + 4] & 0x3F)
    } else {
        let k = j - 4;
        (
            (s[8 + k] & 0x0F) | ((s[k] >> 2) & 0x30),
            (s[8 + k] >> 4) | ((s[k + 4] >> 2) & 0x30),
        )
    }
}

impl QuantType {
    /// Every supported type.
    pub const ALL: [QuantType; 9] = [
        QuantType::Q4_0,
        QuantType::Q4_1,
        QuantType::Q5_0,
        QuantType::Q5_1,
        QuantType::Q8_0,
        QuantType::Q4K,
        QuantType::Q5K,
        QuantType::Q6K,
        QuantType::Q8K,
    ];

    /// The ggml name (`Q4_K`, ...).
    pub fn name(self) -> &'static str {
        match self {
            QuantType::Q4_0 => "Q4_0",
            QuantType::Q4_1 => "Q4_1",
            QuantType::Q5_0 => "Q5_0",
            QuantType::Q5_1 => "Q5_1",
            QuantType::Q8_0 => "Q8_0",
            QuantType::Q4K => "Q4_K",
            QuantType::Q5K => "Q5_K",
            QuantType::Q6K => "Q6_K",
            QuantType::Q8K => "Q8_K",
        }
    }

    /// The type with this ggml name, if supported.
    pub fn from_name(name: &str) -> Option<QuantType> {
        Self::ALL.into_iter().find(|q| q.name() == name)
    }

    /// Elements per block.
    pub fn block_elems(self) -> usize {
        match self {
            QuantType::Q4_0
            | QuantType::Q4_1
            | QuantType::Q5_0
            | QuantType::Q5_1
            | QuantType::Q8_0 => 32,
            _ => 256,
        }
    }

    /// Bytes per block (ggml's `sizeof(block_*)`; the `gguf` package's GGML_QUANT_SIZES).
    pub fn block_bytes(self) -> usize {
        match self {
            QuantType::Q4_0 => 18,
            QuantType::Q4_1 => 20,
            QuantType::Q5_0 => 22,
            QuantType::Q5_1 => 24,
            QuantType::Q8_0 => 34,
            QuantType::Q4K => 144,
            QuantType::Q5K => 176,
            QuantType::Q6K => 210,
            QuantType::Q8K => 292,
        }
    }

    /// Bytes of storage that elements `0..n` occupy (whole blocks), `None` on overflow.
    pub fn storage_len(self, n: usize) -> Option<usize> {
        n.div_ceil(self.block_elems())
            .checked_mul(self.block_bytes())
    }

    /// Element `e` (0..block_elems) of one block `b` (exactly `block_bytes` long).
    fn element(self, b: &[u8], e: usize) -> f32 {
        match self {
            QuantType::Q4_0 => {
                let q = (b[2 + e % 16] >> (4 * (e / 16))) & 0x0F;
                f16_at(b, 0) * (q as i8 - 8) as f32
            }
            QuantType::Q4_1 => {
                let q = (b[4 + e % 16] >> (4 * (e / 16))) & 0x0F;
                f16_at(b, 0) * q as f32 + f16_at(b, 2)
            }
            QuantType::Q5_0 => {
                let qh = u32::from_le_bytes([b[2], b[3], b[4], b[5]]);
                let lo = (b[6 + e % 16] >> (4 * (e / 16))) & 0x0F;
                let q = lo | ((((qh >> e) & 1) as u8) << 4);
                f16_at(b, 0) * (q as i8 - 16) as f32
            }
            QuantType::Q5_1 => {
                let qh = u32::from_le_bytes([b[4], b[5], b[6], b[7]]);
                let lo = (b[8 + e % 16] >> (4 * (e / 16))) & 0x0F;
                let q = lo | ((((qh >> e) & 1) as u8) << 4);
                f16_at(b, 0) * q as f32 + f16_at(b, 2)
            }
            QuantType::Q8_0 => (b[2 + e] as i8) as f32 * f16_at(b, 0),
            QuantType::Q4K | QuantType::Q5K => {
                let (j, l) = (e / 32, e % 32);
                let (sc, m) = scale_min_k4(&b[4..16], j);
                let d = f16_at(b, 0) * sc as f32;
                let dm = f16_at(b, 2) * m as f32;
                let codes = if self == QuantType::Q4K { 16 } else { 48 };
                let mut q = (b[codes + 32 * (j / 2) + l] >> (4 * (j % 2))) & 0x0F;
                if self == QuantType::Q5K {
                    q |= ((b[16 + l] >> j) & 1) << 4;
                }
                d * q as f32 - dm
            }
            QuantType::Q6K => {
                let (half, r) = (e / 128, e % 128);
                let (g, l) = (r / 32, r % 32);
                let ql = b[64 * half + 32 * (g % 2) + l] >> (4 * (g / 2));
                let qh = b[128 + 32 * half + l] >> (2 * g);
                let q = ((ql & 0x0F) | ((qh & 0x03) << 4)) as i8 - 32;
                let scale = b[192 + e / 16] as i8;
                (f16_at(b, 208) * scale as f32) * q as f32
            }
            QuantType::Q8K => {
                let d = f32::from_le_bytes([b[0], b[1], b[2], b[3]]);
                d * (b[4 + e] as i8) as f32
            }
        }
    }

    /// Decodes element `i` of a quantized storage; `None` when its block is not inside
    /// `bytes`.
    pub fn decode(self, bytes: &[u8], i: usize) -> Option<f64> {
        let (nb, bb) = (self.block_elems(), self.block_bytes());
        let start = (i / nb).checked_mul(bb)?;
        let block = bytes.get(start..start.checked_add(bb)?)?;
        Some(self.element(block, i % nb) as f64)
    }

    /// Decodes `out.len()` consecutive elements starting at element `start`; false (and
    /// `out` untouched) when the run is not inside `bytes`.
    pub fn decode_run(self, bytes: &[u8], start: usize, out: &mut [f64]) -> bool {
        let (nb, bb) = (self.block_elems(), self.block_bytes());
        let Some(end) = start.checked_add(out.len()) else {
            return false;
        };
        match self.storage_len(end) {
            Some(needed) if needed <= bytes.len() => {}
            _ => return false,
        }
        for (k, o) in out.iter_mut().enumerate() {
            let i = start + k;
            let at = (i / nb) * bb;
            *o = self.element(&bytes[at..at + bb], i % nb) as f64;
        }
        true
    }

    /// The quantization steps of one block: (step, number of elements it applies to) for
    /// each group of the block that shares one step (the spacing between adjacent
    /// representable values).
    fn steps(self, b: &[u8], out: &mut Vec<(f64, usize)>) {
        match self {
            QuantType::Q4_0 | QuantType::Q4_1 | QuantType::Q5_0 | QuantType::Q5_1 => {
                out.push((f16_at(b, 0).abs() as f64, 32));
            }
            QuantType::Q8_0 => out.push((f16_at(b, 0).abs() as f64, 32)),
            QuantType::Q4K | QuantType::Q5K => {
                for j in 0..8 {
                    let (sc, _) = scale_min_k4(&b[4..16], j);
                    out.push(((f16_at(b, 0) * sc as f32).abs() as f64, 32));
                }
            }
            QuantType::Q6K => {
                for j in 0..16 {
                    let scale = b[192 + j] as i8;
                    out.push(((f16_at(b, 208) * scale as f32).abs() as f64, 16));
                }
            }
            QuantType::Q8K => {
                let d = f32::from_le_bytes([b[0], b[1], b[2], b[3]]);
                out.push((d.abs() as f64, 256));
            }
        }
    }
}

impl std::fmt::Display for QuantType {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// What storing a table quantized costs in accuracy, from the steps its blocks store.
///
/// The step of a group of values is the spacing of the levels it can take (`d` for the
/// 32-blocks, `d·sc` for the K-quants' sub-blocks). Rounding to the nearest level moves a
/// value by at most half a step; if the rounding errors are uniform over the step, their
/// standard deviation is step/√12. Limits: ggml's reference quantizers clamp the far end
/// of Q4_0/Q5_0 blocks (the value opposite the block's largest magnitude can be off by a
/// whole step) and choose the K-quant scales by search, so values that fell outside a
/// sub-block's grid are off by more than half a step; the f16 rounding of each scale adds
/// up to 2^-11 of the level's magnitude. The original values are not in the file, so the
/// actual errors cannot be measured from it.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct QuantizationError {
    /// The ggml type name.
    pub ggml_type: String,
    /// Largest step of any group of the tensor.
    pub max_step: f64,
    /// max_step / 2: the round-to-nearest error bound per element.
    pub max_rounding_error: f64,
    /// √(mean over elements of step²/12): the standard deviation of uniform rounding
    /// noise, the scale to compare with the noise of untrained rows.
    pub rms_rounding_error: f64,
}

/// The quantization error implied by the stored blocks of `bytes` (a whole tensor's
/// storage of `numel` elements).
pub fn quantization_error(q: QuantType, bytes: &[u8], numel: usize) -> Option<QuantizationError> {
    let bb = q.block_bytes();
    let blocks = numel / q.block_elems();
    if blocks == 0 || q.storage_len(numel)? > bytes.len() {
        return None;
    }
    let mut steps = Vec::with_capacity(16);
    let (mut max_step, mut sum_sq, mut count) = (0f64, 0f64, 0usize);
    for k in 0..blocks {
        steps.clear();
        q.steps(&bytes[k * bb..(k + 1) * bb], &mut steps);
        for &(s, n) in &steps {
            max_step = max_step.max(s);
            sum_sq += s * s / 12.0 * n as f64;
            count += n;
        }
    }
    Some(QuantizationError {
        ggml_type: q.name().to_string(),
        max_step,
        max_rounding_error: max_step / 2.0,
        rms_rounding_error: (sum_sq / count.max(1) as f64).sqrt(),
    })
}

impl Checkpoint {
    /// For a tensor stored in a GGML block type, the error its quantization implies
    /// (see [`QuantizationError`]); `None` for tensors stored otherwise.
    pub fn quantization_error(
        &self,
        t: &TensorInfo,
    ) -> Result<Option<QuantizationError>, CheckpointError> {
        let super::Dtype::Quantized(q) = t.dtype else {
            return Ok(None);
        };
        let bytes = self.storage_bytes(t)?;
        Ok(quantization_error(q, &bytes, t.numel()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sizes_match_the_ggml_block_structs() {
        // sizeof(block_q4_0) = 2 + 16, q4_1 = 4 + 16, q5_0 = 2 + 4 + 16, q5_1 = 4 + 4 + 16,
        // q8_0 = 2 + 32, q4_K = 4 + 12 + 128, q5_K = 4 + 12 + 32 + 128,
        // q6_K = 128 + 64 + 16 + 2, q8_K = 4 + 256 + 32 (ggml's static asserts).
        let sizes: Vec<usize> = QuantType::ALL.iter().map(|q| q.block_bytes()).collect();
        assert_eq!(sizes, vec![18, 20, 22, 24, 34, 144, 176, 210, 292]);
        assert_eq!(QuantType::Q4K.storage_len(512), Some(288));
        assert_eq!(QuantType::Q8_0.storage_len(33), Some(68));
    }

    #[test]
    fn q8_0_is_scale_times_code() {
        // d = 0.5 (f16 0x3800), codes 0, 1, -1, 127, -128, ...
        let mut b = vec![0x00u8, 0x38];
        let codes: Vec<i8> = (0..32).map(|i| [0i8, 1, -1, 127, -128][i % 5]).collect();
        b.extend(codes.iter().map(|&c| c as u8));
        let mut out = vec![0f64; 32];
        assert!(QuantType::Q8_0.decode_run(&b, 0, &mut out));
        for (i, &c) in codes.iter().enumerate() {
            assert_eq!(out[i], 0.5 * c as f64);
            assert_eq!(QuantType::Q8_0.decode(&b, i), Some(0.5 * c as f64));
        }
        assert_eq!(QuantType::Q8_0.decode(&b, 32), None);
        assert!(!QuantType::Q8_0.decode_run(&b, 1, &mut out));
        let e = quantization_error(QuantType::Q8_0, &b, 32).unwrap();
        assert_eq!(e.max_step, 0.5);
        assert_eq!(e.max_rounding_error, 0.25);
        assert!((e.rms_rounding_error - 0.5 / 12f64.sqrt()).abs() < 1e-15);
    }
}
