//! GGUF (versions 2 and 3), the single-file format of ggml-based runtimes.
//!
//! Layout (little-endian): magic `GGUF`, `u32` version, `u64` tensor count, `u64`
//! metadata count; the metadata key/values (a string key, a `u32` value type, the value;
//! arrays carry an element type and a `u64` count); the tensor infos (name, `u32` number
//! of dimensions, `u64` dimensions fastest-first, `u32` ggml type, `u64` offset into the
//! data section); then the data section, starting at the next multiple of
//! `general.alignment` (32 when absent). Version 1 used 32-bit counts and is refused.
//!
//! Every count and length in the header is checked against a limit and against the bytes
//! left in the file before anything is allocated, so an absurd count is an error message,
//! not an allocation. Dimensions are reversed to the usual row-major order. Quantized
//! tensors of the common GGML block types (Q4_0, Q4_1, Q5_0, Q5_1, Q8_0, Q4_K, Q5_K, Q6_K,
//! Q8_K) are [`Dtype::Quantized`] and read dequantized (`ggml_quants`); other block types
//! are listed with their ggml type name as [`Dtype::Other`]. Architecture metadata (`{arch}.context_length`, rope settings, ...)
//! becomes configuration hints.

use std::collections::BTreeMap;

use serde_json::{Value as Json, json};

use super::{CheckpointError, Dtype, Format, Opened, SourceFile, Storage, TensorInfo};
use crate::config::{ConfigHints, Hint};

/// Most tensors a file may declare.
const MAX_TENSORS: u64 = 1 << 20;
/// Most metadata entries.
const MAX_KV: u64 = 1 << 20;
/// Longest string (key, value or tensor name).
const MAX_STRING: u64 = 64 << 20;
/// Most elements of one metadata array (tokenizer vocabularies reach a few hundred
/// thousand entries).
const MAX_ARRAY: u64 = 1 << 26;
/// Most dimensions of a tensor (ggml itself has 4).
const MAX_DIMS: u32 = 8;
/// Arrays longer than this are skipped rather than kept in the metadata map.
const KEEP_ARRAY: u64 = 64;

/// A metadata value.
#[derive(Debug, Clone, PartialEq)]
pub enum MetaValue {
    /// Any unsigned integer type.
    Uint(u64),
    /// Any signed integer type.
    Int(i64),
    /// `f32` or `f64`.
    Float(f64),
    /// `bool`.
    Bool(bool),
    /// UTF-8 string (lossy).
    Str(String),
    /// A short array.
    Array(Vec<MetaValue>),
    /// A long array, skipped: its element type code and length.
    LongArray {
        /// ggml value-type code of the elements.
        elem_type: u32,
        /// Number of elements.
        len: u64,
    },
}

impl MetaValue {
    fn as_u64(&self) -> Option<u64> {
        match self {
            MetaValue::Uint(v) => Some(*v),
            MetaValue::Int(v) => u64::try_from(*v).ok(),
            _ => None,
        }
    }

    fn as_f64(&self) -> Option<f64> {
        match self {
            MetaValue::Float(v) => Some(*v),
            MetaValue::Uint(v) => Some(*v as f64),
            MetaValue::Int(v) => Some(*v as f64),
            _ => None,
        }
    }

    fn as_str(&self) -> Option<&str> {
        match self {
            MetaValue::Str(s) => Some(s),
            _ => None,
        }
    }
}

/// Name, bytes per block and elements per block of a ggml tensor type.
/// Values from the `gguf` Python package's `GGML_QUANT_SIZES` (gguf 0.19.0).
fn ggml_type(t: u32) -> Option<(&'static str, u64, u64)> {
    Some(match t {
        0 => ("F32", 4, 1),
        1 => ("F16", 2, 1),
        2 => ("Q4_0", 18, 32),
        3 => ("Q4_1", 20, 32),
        6 => ("Q5_0", 22, 32),
        7 => ("Q5_1", 24, 32),
        8 => ("Q8_0", 34, 32),
        9 => ("Q8_1", 40, 32),
        10 => ("Q2_K", 84, 256),
        11 => ("Q3_K", 110, 256),
        12 => ("Q4_K", 144, 256),
        13 => ("Q5_K", 176, 256),
        14 => ("Q6_K", 210, 256),
        15 => ("Q8_K", 292, 256),
        16 => ("IQ2_XXS", 66, 256),
        17 => ("IQ2_XS", 74, 256),
        18 => ("IQ3_XXS", 98, 256),
        19 => ("IQ1_S", 50, 256),
        20 => ("IQ4_NL", 18, 32),
        21 => ("IQ3_S", 110, 256),
        22 => ("IQ2_S", 82, 256),
        23 => ("IQ4_XS", 136, 256),
        24 => ("I8", 1, 1),
        25 => ("I16", 2, 1),
        26 => ("I32", 4, 1),
        27 => ("I64", 8, 1),
        28 => ("F64", 8, 1),
        29 => ("IQ1_M", 56, 256),
        30 => ("BF16", 2, 1),
        34 => ("TQ1_0", 54, 256),
        35 => ("TQ2_0", 66, 256),
        39 => ("MXFP4", 17, 32),
        40 => ("NVFP4", 36, 64),
        41 => ("Q1_0", 18, 128),
        _ => return None,
    })
}

fn dtype_of(name: &str) -> Dtype {
    match name {
        "F32" => Dtype::F32,
        "F16" => Dtype::F16,
        "BF16" => Dtype::BF16,
        "F64" => Dtype::F64,
        "I8" => Dtype::I8,
        "I16" => Dtype::I16,
        "I32" => Dtype::I32,
        "I64" => Dtype::I64,
        other => match super::ggml_quants::QuantType::from_name(other) {
            Some(q) => Dtype::Quantized(q),
            None => Dtype::Other {
                name: other.to_string(),
            },
        },
    }
}

struct Reader<'a> {
    b: &'a [u8],
    pos: usize,
}

impl<'a> Reader<'a> {
    fn left(&self) -> u64 {
        (self.b.len() - self.pos) as u64
    }

    fn take(&mut self, n: u64, what: &str) -> Result<&'a [u8], String> {
        if n > self.left() {
            return Err(format!(
                "file ends inside {what}: {n} bytes wanted at byte {}, {} left (truncated)",
                self.pos,
                self.left()
            ));
        }
        let s = &self.b[self.pos..self.pos + n as usize];
        self.pos += n as usize;
        Ok(s)
    }

    fn u32(&mut self, what: &str) -> Result<u32, String> {
        let s = self.take(4, what)?;
        Ok(u32::from_le_bytes([s[0], s[1], s[2], s[3]]))
    }

    fn u64(&mut self, what: &str) -> Result<u64, String> {
        let s = self.take(8, what)?;
        let mut a = [0u8; 8];
        a.copy_from_slice(s);
        Ok(u64::from_le_bytes(a))
    }

    fn string(&mut self, what: &str) -> Result<String, String> {
        let at = self.pos;
        let n = self.u64(what)?;
        if n > MAX_STRING || n > self.left() {
            return Err(format!(
                "{what} at byte {at} declares a string of {n} bytes (limit {MAX_STRING}, {} bytes left in the file)",
                self.left()
            ));
        }
        Ok(String::from_utf8_lossy(self.take(n, what)?).into_owned())
    }

    /// Smallest encoded size of one value of a type, to bound array counts.
    fn min_size(t: u32) -> Option<u64> {
        Some(match t {
            0 | 1 | 7 => 1,
            2 | 3 => 2,
            4..=6 => 4,
            8 | 10..=12 => 8,
            9 => 12,
            _ => return None,
        })
    }

    fn value(&mut self, t: u32, depth: usize, what: &str) -> Result<MetaValue, String> {
        let at = self.pos;
        Ok(match t {
            0 => MetaValue::Uint(self.take(1, what)?[0] as u64),
            1 => MetaValue::Int(self.take(1, what)?[0] as i8 as i64),
            2 => {
                let s = self.take(2, what)?;
                MetaValue::Uint(u16::from_le_bytes([s[0], s[1]]) as u64)
            }
            3 => {
                let s = self.take(2, what)?;
                MetaValue::Int(i16::from_le_bytes([s[0], s[1]]) as i64)
            }
            4 => MetaValue::Uint(self.u32(what)? as u64),
            5 => MetaValue::Int(self.u32(what)? as i32 as i64),
            6 => MetaValue::Float(f32::from_bits(self.u32(what)?) as f64),
            7 => MetaValue::Bool(self.take(1, what)?[0] != 0),
            8 => MetaValue::Str(self.string(what)?),
            9 => {
                if depth > 4 {
                    return Err(format!("{what}: arrays nested too deeply"));
                }
                let elem = self.u32(what)?;
                let len = self.u64(what)?;
                let min = Self::min_size(elem).ok_or_else(|| {
                    format!("{what} at byte {at}: unknown array element type {elem}")
                })?;
                if len > MAX_ARRAY || len.saturating_mul(min) > self.left() {
                    return Err(format!(
                        "{what} at byte {at} declares an array of {len} elements (limit {MAX_ARRAY}, {} bytes left in the file)",
                        self.left()
                    ));
                }
                if len <= KEEP_ARRAY {
                    let mut items = Vec::with_capacity(len as usize);
                    for _ in 0..len {
                        items.push(self.value(elem, depth + 1, what)?);
                    }
                    MetaValue::Array(items)
                } else {
                    for _ in 0..len {
                        self.value(elem, depth + 1, what)?;
                    }
                    MetaValue::LongArray {
                        elem_type: elem,
                        len,
                    }
                }
            }
            10 => MetaValue::Uint(self.u64(what)?),
            11 => MetaValue::Int(self.u64(what)? as i64),
            12 => MetaValue::Float(f64::from_bits(self.u64(what)?)),
            other => return Err(format!("{what} at byte {at}: unknown value type {other}")),
        })
    }
}

/// The parsed header of a GGUF file.
#[derive(Debug, Clone)]
pub struct GgufHeader {
    /// Format version (2 or 3).
    pub version: u32,
    /// Metadata, by key.
    pub metadata: BTreeMap<String, MetaValue>,
    /// Tensors, with storage offsets already resolved and checked against the file.
    pub tensors: Vec<TensorInfo>,
}

/// Parses and validates a GGUF header; tensor records point at file index 0.
pub fn parse(b: &[u8]) -> Result<GgufHeader, String> {
    let mut r = Reader { b, pos: 0 };
    let magic = r.take(4, "the magic number")?;
    if magic != b"GGUF" {
        return Err("wrong magic: not a GGUF file (expected `GGUF`)".into());
    }
    let version = r.u32("the version")?;
    match version {
        2 | 3 => {}
        1 => return Err("GGUF version 1 is not supported (versions 2 and 3 are)".into()),
        v if v.swap_bytes() == 2 || v.swap_bytes() == 3 => {
            return Err("big-endian GGUF files are not supported".into());
        }
        v => {
            return Err(format!(
                "GGUF version {v} is not supported (versions 2 and 3 are)"
            ));
        }
    }
    let n_tensors = r.u64("the tensor count")?;
    let n_kv = r.u64("the metadata count")?;
    // A tensor info takes at least 24 bytes, a key/value at least 13.
    if n_tensors > MAX_TENSORS || n_tensors.saturating_mul(24) > r.left() {
        return Err(format!(
            "tensor count {n_tensors} is absurd (limit {MAX_TENSORS}; the file has {} bytes)",
            b.len()
        ));
    }
    if n_kv > MAX_KV || n_kv.saturating_mul(13) > r.left() {
        return Err(format!(
            "metadata count {n_kv} is absurd (limit {MAX_KV}; the file has {} bytes)",
            b.len()
        ));
    }
    let mut metadata = BTreeMap::new();
    for i in 0..n_kv {
        let key = r.string(&format!("metadata key #{i}"))?;
        let what = format!("metadata `{key}`");
        let t = r.u32(&what)?;
        let v = r.value(t, 0, &what)?;
        metadata.insert(key, v);
    }
    let alignment = match metadata.get("general.alignment") {
        None => 32,
        Some(v) => match v.as_u64() {
            Some(a) if a > 0 && a.is_power_of_two() && a <= 1 << 20 => a,
            _ => return Err(format!("general.alignment {v:?} is not a power of two")),
        },
    };
    struct Raw {
        name: String,
        dims: Vec<u64>,
        ty: u32,
        offset: u64,
    }
    let mut raws = Vec::with_capacity(n_tensors as usize);
    for i in 0..n_tensors {
        let name = r.string(&format!("tensor name #{i}"))?;
        let what = format!("tensor `{name}`");
        let n_dims = r.u32(&what)?;
        if n_dims > MAX_DIMS {
            return Err(format!("{what} has {n_dims} dimensions (limit {MAX_DIMS})"));
        }
        let mut dims = Vec::with_capacity(n_dims as usize);
        for _ in 0..n_dims {
            dims.push(r.u64(&what)?);
        }
        let ty = r.u32(&what)?;
        let offset = r.u64(&what)?;
        raws.push(Raw {
            name,
            dims,
            ty,
            offset,
        });
    }
    let data_start = (r.pos as u64).div_ceil(alignment) * alignment;
    let file_len = b.len() as u64;
    let mut tensors = Vec::with_capacity(raws.len());
    for raw in raws {
        let what = format!("tensor `{}`", raw.name);
        if raw.offset % alignment != 0 {
            return Err(format!(
                "{what}: offset {} is not a multiple of the alignment {alignment}",
                raw.offset
            ));
        }
        let (type_name, block_bytes, block_elems) = ggml_type(raw.ty)
            .map(|(n, b, e)| (n.to_string(), b, e))
            .unwrap_or_else(|| (format!("ggml type {}", raw.ty), 0, 1));
        let numel = raw
            .dims
            .iter()
            .try_fold(1u64, |a, &d| a.checked_mul(d))
            .ok_or_else(|| format!("{what}: dimensions {:?} overflow", raw.dims))?;
        // Blocks run along the fastest dimension, which must hold whole blocks.
        let fastest = raw.dims.first().copied().unwrap_or(1);
        if block_elems > 1 && fastest % block_elems != 0 {
            return Err(format!(
                "{what}: first dimension {fastest} is not a multiple of the {type_name} block of {block_elems}"
            ));
        }
        let nbytes = (numel / block_elems)
            .checked_mul(block_bytes)
            .ok_or_else(|| format!("{what}: size overflows"))?;
        let start = data_start
            .checked_add(raw.offset)
            .ok_or_else(|| format!("{what}: offset overflows"))?;
        let end = start.checked_add(nbytes);
        if start > file_len || end.is_none_or(|e| e > file_len) {
            return Err(format!(
                "{what}: bytes {start}..{} lie past the end of the file ({file_len} bytes)",
                start.saturating_add(nbytes)
            ));
        }
        let shape = raw
            .dims
            .iter()
            .rev()
            .map(|&d| usize::try_from(d).map_err(|_| format!("{what}: dimension {d} too large")))
            .collect::<Result<Vec<_>, _>>()?;
        tensors.push(TensorInfo {
            name: raw.name,
            dtype: dtype_of(&type_name),
            shape,
            file: 0,
            storage: Storage::Mapped {
                offset: start as usize,
                len: nbytes as usize,
            },
            element_offset: 0,
            strides: None,
            big_endian: false,
        });
    }
    Ok(GgufHeader {
        version,
        metadata,
        tensors,
    })
}

fn meta_to_json(v: &MetaValue) -> Json {
    match v {
        MetaValue::Uint(u) => json!(u),
        MetaValue::Int(i) => json!(i),
        MetaValue::Float(f) => json!(f),
        MetaValue::Bool(b) => json!(b),
        MetaValue::Str(s) => json!(s),
        MetaValue::Array(a) => Json::Array(a.iter().map(meta_to_json).collect()),
        MetaValue::LongArray { len, .. } => json!(format!("<array of {len}>")),
    }
}

/// The rotary base ggml-based runtimes use when `{arch}.rope.freq_base` is absent.
pub const DEFAULT_ROPE_BASE: f64 = 10000.0;

/// GGUF architectures that encode positions with rotary embeddings (llama family and
/// others); a missing rope base there means [`DEFAULT_ROPE_BASE`].
const ROPE_ARCHS: [&str; 24] = [
    "llama",
    "mistral",
    "qwen",
    "qwen2",
    "qwen2moe",
    "qwen3",
    "qwen3moe",
    "gemma",
    "gemma2",
    "gemma3",
    "phi2",
    "phi3",
    "internlm2",
    "deepseek",
    "deepseek2",
    "starcoder2",
    "stablelm",
    "granite",
    "olmo",
    "olmo2",
    "command-r",
    "minicpm",
    "gptneox",
    "falcon",
];

/// Configuration hints from the architecture metadata (`source` "GGUF metadata").
pub fn hints(metadata: &BTreeMap<String, MetaValue>) -> ConfigHints {
    let mut h = ConfigHints {
        source: "GGUF metadata".to_string(),
        ..ConfigHints::default()
    };
    let Some(arch) = metadata
        .get("general.architecture")
        .and_then(MetaValue::as_str)
    else {
        return h;
    };
    h.model_type = Some(arch.to_string());
    let key = |k: &str| format!("{arch}.{k}");
    let uint = |k: &str| {
        let key = key(k);
        metadata
            .get(&key)
            .and_then(MetaValue::as_u64)
            .map(|value| Hint { value, key })
    };
    h.max_positions = uint("context_length");
    h.hidden_size = uint("embedding_length");
    h.num_heads = uint("attention.head_count");
    let theta_key = key("rope.freq_base");
    h.rope_theta = metadata
        .get(&theta_key)
        .and_then(MetaValue::as_f64)
        .map(|value| Hint {
            value,
            key: theta_key.clone(),
        })
        .or_else(|| {
            // ggml's runtime falls back to base 10000 when the key is absent (its default
            // `rope_freq_base`); say so rather than leave the base unknown.
            ROPE_ARCHS.contains(&arch).then(|| Hint {
                value: DEFAULT_ROPE_BASE,
                key: format!("{theta_key} absent: assumed default"),
            })
        });
    let mut scaling = serde_json::Map::new();
    for (k, out) in [
        ("rope.scaling.type", "rope_type"),
        ("rope.scaling.factor", "factor"),
        (
            "rope.scaling.original_context_length",
            "original_max_position_embeddings",
        ),
    ] {
        if let Some(v) = metadata.get(&key(k)) {
            scaling.insert(out.to_string(), meta_to_json(v));
        }
    }
    if !scaling.is_empty() {
        h.rope_scaling = Some(Hint {
            value: Json::Object(scaling),
            key: key("rope.scaling"),
        });
    }
    h
}

/// Opens a GGUF file.
pub fn open(file: SourceFile) -> Result<Opened, CheckpointError> {
    let header = parse(file.bytes()).map_err(|e| CheckpointError::invalid(&file.path, e))?;
    let hints = hints(&header.metadata);
    Ok(Opened {
        format: Format::Gguf,
        files: vec![file],
        tensors: header.tensors,
        hints: Some(hints),
        warnings: Vec::new(),
        stand_ins: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn header(n_tensors: u64, n_kv: u64) -> Vec<u8> {
        let mut b = b"GGUF".to_vec();
        b.extend_from_slice(&3u32.to_le_bytes());
        b.extend_from_slice(&n_tensors.to_le_bytes());
        b.extend_from_slice(&n_kv.to_le_bytes());
        b
    }

    #[test]
    fn an_empty_file_parses() {
        let h = parse(&header(0, 0)).unwrap();
        assert_eq!(h.version, 3);
        assert!(h.tensors.is_empty());
    }

    #[test]
    fn absurd_counts_are_refused_before_allocation() {
        let e = parse(&header(u64::MAX, 0)).unwrap_err();
        assert!(e.contains("tensor count"), "{e}");
        let e = parse(&header(0, 1 << 40)).unwrap_err();
        assert!(e.contains("metadata count"), "{e}");
    }

    #[test]
    fn absurd_string_length_is_refused() {
        let mut b = header(0, 1);
        b.extend_from_slice(&(u64::MAX / 2).to_le_bytes());
        b.extend_from_slice(&[b'x'; 16]);
        let e = parse(&b).unwrap_err();
        assert!(e.contains("string of"), "{e}");
    }

    #[test]
    fn hints_come_from_the_architecture_keys() {
        let mut m = BTreeMap::new();
        m.insert(
            "general.architecture".into(),
            MetaValue::Str("llama".into()),
        );
        m.insert("llama.context_length".into(), MetaValue::Uint(4096));
        m.insert("llama.rope.freq_base".into(), MetaValue::Float(500000.0));
        m.insert("llama.rope.scaling.factor".into(), MetaValue::Float(8.0));
        let mut without_base = m.clone();
        without_base.remove("llama.rope.freq_base");
        let assumed = hints(&without_base).rope_theta.unwrap();
        assert_eq!(assumed.value, 10000.0);
        assert_eq!(assumed.key, "llama.rope.freq_base absent: assumed default");
        let mut gpt2 = BTreeMap::new();
        gpt2.insert("general.architecture".into(), MetaValue::Str("gpt2".into()));
        assert!(
            hints(&gpt2).rope_theta.is_none(),
            "learned positions: no base"
        );
        let h = hints(&m);
        assert_eq!(h.model_type.as_deref(), Some("llama"));
        assert_eq!(h.max_positions.unwrap().value, 4096);
        assert_eq!(h.rope_theta.unwrap().value, 500000.0);
        assert_eq!(h.rope_scaling.unwrap().value, json!({"factor": 8.0}));
    }
}
