//! CTranslate2 `model.bin`, the single-file format of the CTranslate2 inference library
//! (the format its converters write for Whisper, Transformer, BART, GPT-2 ... models).
//!
//! Layout (little-endian, as the library's `ModelSpec` serializer writes it and its C++
//! loader reads it): a `u32` binary version (1..=6 are known); from version 2 the spec
//! name (a string) and a `u32` spec revision; a `u32` variable count; per variable its
//! name (a string), a `u8` rank, `rank` × `u32` dimensions (row-major), then from
//! version 4 a `u8` data type and a `u32` byte count (before version 4: a `u8` item size
//! and a `u32` element count), then the bytes; from version 3 a `u32` alias count and the
//! alias / target name pairs. A string is a `u16` length that counts a closing NUL, then
//! the bytes and the NUL.
//!
//! Data type codes (the library's `DataType` enum, from memory; codes 1 and 4 are
//! confirmed by the byte counts of a real Whisper checkpoint): 0 float32, 1 int8,
//! 2 int16, 3 int32, 4 float16, 5 bfloat16. Every byte count is checked against the
//! shape and the type's size, and every length against the bytes left in the file.
//! Aliases (a tied output projection named after the embedding) are not tensors and are
//! not listed. Int8 weights come with a separate scale variable; the int8 values are read
//! as integers, as stored.

use super::{CheckpointError, Dtype, Format, Opened, SourceFile, Storage, TensorInfo};

/// Highest binary version known (the library's current one).
const MAX_VERSION: u32 = 6;
/// Versions still recognised as CTranslate2 (and refused by name) though not read: a
/// little margin above [`MAX_VERSION`] for later versions of the library.
const RECOGNISED_VERSIONS: std::ops::RangeInclusive<u32> = 1..=8;
/// Most variables a file may declare.
const MAX_VARIABLES: u32 = 1 << 20;
/// Most dimensions of one variable.
const MAX_RANK: u8 = 8;

/// True when the first bytes look like a CTranslate2 `model.bin`: a small binary version,
/// then (version 2 and later) a printable spec name closed by a NUL.
pub fn looks_like(bytes: &[u8]) -> bool {
    let Some(version) = read_u32(bytes, 0) else {
        return false;
    };
    if !RECOGNISED_VERSIONS.contains(&version) {
        return false;
    }
    if version == 1 {
        // No spec name to check: only the variable count follows. Accept a plausible one.
        return read_u32(bytes, 4).is_some_and(|n| n > 0 && n <= MAX_VARIABLES);
    }
    let Some(len) = read_u16(bytes, 4) else {
        return false;
    };
    // A spec name is an identifier (`TransformerSpec`, `WhisperSpec`): 1..=128 ASCII
    // letters, digits or `_` and its NUL; the revision and the variable count follow.
    let len = len as usize;
    if !(2..=129).contains(&len) || bytes.len() < 6 + len + 8 {
        return false;
    }
    let name = &bytes[6..6 + len];
    name[len - 1] == 0
        && name[..len - 1]
            .iter()
            .all(|b| b.is_ascii_alphanumeric() || *b == b'_')
}

fn read_u32(bytes: &[u8], at: usize) -> Option<u32> {
    let b = bytes.get(at..at.checked_add(4)?)?;
    Some(u32::from_le_bytes([b[0], b[1], b[2], b[3]]))
}

fn read_u16(bytes: &[u8], at: usize) -> Option<u16> {
    let b = bytes.get(at..at.checked_add(2)?)?;
    Some(u16::from_le_bytes([b[0], b[1]]))
}

/// A cursor over the file's bytes; every read says what it was reading when the file
/// ends early.
struct Reader<'a> {
    bytes: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    fn take(&mut self, n: usize, what: &str) -> Result<&'a [u8], String> {
        let end = self
            .at
            .checked_add(n)
            .filter(|&e| e <= self.bytes.len())
            .ok_or_else(|| {
                format!(
                    "ends inside {what} (byte {} of {}, {n} more bytes declared)",
                    self.at,
                    self.bytes.len()
                )
            })?;
        let out = &self.bytes[self.at..end];
        self.at = end;
        Ok(out)
    }

    fn u8(&mut self, what: &str) -> Result<u8, String> {
        Ok(self.take(1, what)?[0])
    }

    fn u16(&mut self, what: &str) -> Result<u16, String> {
        let b = self.take(2, what)?;
        Ok(u16::from_le_bytes([b[0], b[1]]))
    }

    fn u32(&mut self, what: &str) -> Result<u32, String> {
        let b = self.take(4, what)?;
        Ok(u32::from_le_bytes([b[0], b[1], b[2], b[3]]))
    }

    fn string(&mut self, what: &str) -> Result<String, String> {
        let len = self.u16(what)? as usize;
        if len == 0 {
            return Err(format!(
                "{what} has length 0 (the length counts a closing NUL)"
            ));
        }
        let b = self.take(len, what)?;
        if b[len - 1] != 0 {
            return Err(format!("{what} is not closed by a NUL byte"));
        }
        Ok(String::from_utf8_lossy(&b[..len - 1]).into_owned())
    }
}

/// The element type and its size for a data type code.
fn dtype_of(code: u8) -> Option<(Dtype, usize)> {
    Some(match code {
        0 => (Dtype::F32, 4),
        1 => (Dtype::I8, 1),
        2 => (Dtype::I16, 2),
        3 => (Dtype::I32, 4),
        4 => (Dtype::F16, 2),
        5 => (Dtype::BF16, 2),
        _ => return None,
    })
}

/// The element type for an item size (binary versions before 4 stored only the size,
/// and the loader took 4 bytes as float32, 2 as int16, 1 as int8).
fn dtype_of_size(size: u8) -> Option<Dtype> {
    Some(match size {
        4 => Dtype::F32,
        2 => Dtype::I16,
        1 => Dtype::I8,
        _ => return None,
    })
}

/// The parsed header: spec name and tensors.
#[derive(Debug)]
pub struct Header {
    /// Binary version.
    pub version: u32,
    /// The model spec's name (`WhisperSpec`, `TransformerSpec`, ...), when stored.
    pub spec: Option<String>,
    /// The variables, in file order.
    pub tensors: Vec<TensorInfo>,
}

/// Parses the whole variable index of a `model.bin`.
pub fn parse(bytes: &[u8]) -> Result<Header, String> {
    let mut r = Reader { bytes, at: 0 };
    let version = r.u32("the binary version")?;
    if !(1..=MAX_VERSION).contains(&version) {
        return Err(format!(
            "binary version {version} is newer than the versions posaudit reads (1..={MAX_VERSION}): audit the checkpoint it was converted from"
        ));
    }
    let spec = if version >= 2 {
        let s = r.string("the spec name")?;
        r.u32("the spec revision")?;
        Some(s)
    } else {
        None
    };
    let count = r.u32("the variable count")?;
    if count > MAX_VARIABLES {
        return Err(format!(
            "declares {count} variables, more than the {MAX_VARIABLES} allowed"
        ));
    }
    let mut tensors = Vec::new();
    for i in 0..count {
        let name = r.string(&format!("the name of variable {i}"))?;
        let what = format!("variable `{}`", super::shown(&name));
        let rank = r.u8(&what)?;
        if rank > MAX_RANK {
            return Err(format!(
                "{what} declares {rank} dimensions, more than {MAX_RANK}"
            ));
        }
        let mut shape = Vec::with_capacity(rank as usize);
        for _ in 0..rank {
            shape.push(r.u32(&what)? as usize);
        }
        let numel = shape
            .iter()
            .try_fold(1usize, |a, &d| a.checked_mul(d))
            .ok_or_else(|| format!("{what}: the shape {shape:?} overflows"))?;
        let (dtype, len) = if version >= 4 {
            let code = r.u8(&what)?;
            let (dtype, size) = dtype_of(code)
                .ok_or_else(|| format!("{what} has data type code {code}, not one of 0..=5"))?;
            let len = r.u32(&what)? as usize;
            if Some(len) != numel.checked_mul(size) {
                return Err(format!(
                    "{what} declares {len} bytes, but its shape {shape:?} of {dtype} needs {}",
                    numel.saturating_mul(size)
                ));
            }
            (dtype, len)
        } else {
            let size = r.u8(&what)?;
            let dtype = dtype_of_size(size)
                .ok_or_else(|| format!("{what} has item size {size}, not 1, 2 or 4"))?;
            let n = r.u32(&what)? as usize;
            if n != numel {
                return Err(format!(
                    "{what} declares {n} elements, but its shape {shape:?} holds {numel}"
                ));
            }
            (dtype, n * size as usize)
        };
        let offset = r.at;
        r.take(len, &format!("the values of {what}"))?;
        tensors.push(TensorInfo {
            name,
            dtype,
            shape,
            file: 0,
            storage: Storage::Mapped { offset, len },
            element_offset: 0,
            strides: None,
            big_endian: false,
        });
    }
    if version >= 3 {
        let aliases = r.u32("the alias count")?;
        if aliases > MAX_VARIABLES {
            return Err(format!("declares {aliases} aliases, more than allowed"));
        }
        for i in 0..aliases {
            r.string(&format!("alias {i}"))?;
            r.string(&format!("the target of alias {i}"))?;
        }
    }
    Ok(Header {
        version,
        spec,
        tensors,
    })
}

/// Opens a CTranslate2 `model.bin`.
pub fn open(file: SourceFile) -> Result<Opened, CheckpointError> {
    let header = parse(file.bytes())
        .map_err(|e| CheckpointError::invalid(&file.path, format!("CTranslate2 model: {e}")))?;
    let mut warnings = Vec::new();
    if header
        .tensors
        .iter()
        .any(|t| t.dtype == Dtype::I8 && t.shape.len() >= 2)
    {
        warnings.push(
            "CTranslate2 int8 weights are stored without their scales applied; they are read as the stored integers".into(),
        );
    }
    Ok(Opened {
        format: Format::Ctranslate2,
        files: vec![file],
        tensors: header.tensors,
        hints: None,
        warnings,
        stand_ins: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A file laid out as the CTranslate2 serializer writes it (module docs).
    fn model(version: u32, vars: &[(&str, &[u32], u8, &[u8])]) -> Vec<u8> {
        fn string(out: &mut Vec<u8>, s: &str) {
            out.extend_from_slice(&((s.len() + 1) as u16).to_le_bytes());
            out.extend_from_slice(s.as_bytes());
            out.push(0);
        }
        let mut out = version.to_le_bytes().to_vec();
        string(&mut out, "TestSpec");
        out.extend_from_slice(&1u32.to_le_bytes());
        out.extend_from_slice(&(vars.len() as u32).to_le_bytes());
        for (name, shape, code, data) in vars {
            string(&mut out, name);
            out.push(shape.len() as u8);
            for d in *shape {
                out.extend_from_slice(&d.to_le_bytes());
            }
            out.push(*code);
            out.extend_from_slice(&(data.len() as u32).to_le_bytes());
            out.extend_from_slice(data);
        }
        out.extend_from_slice(&1u32.to_le_bytes());
        string(&mut out, "decoder/projection/weight");
        string(&mut out, "decoder/embeddings/weight");
        out
    }

    #[test]
    fn reads_variables_and_skips_aliases() {
        let table: Vec<u8> = (0..12u16).flat_map(|v| v.to_le_bytes()).collect();
        let bytes = model(
            6,
            &[
                ("decoder/activation", &[], 1, &[3]),
                ("decoder/position_encodings/encodings", &[3, 4], 4, &table),
            ],
        );
        assert!(looks_like(&bytes));
        let h = parse(&bytes).unwrap();
        assert_eq!(h.spec.as_deref(), Some("TestSpec"));
        assert_eq!(h.tensors.len(), 2);
        let t = &h.tensors[1];
        assert_eq!(t.dtype, Dtype::F16);
        assert_eq!(t.shape, vec![3, 4]);
        match &t.storage {
            Storage::Mapped { offset, len } => {
                assert_eq!(*len, 24);
                assert_eq!(&bytes[*offset..*offset + 24], &table[..]);
            }
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn refuses_a_byte_count_that_does_not_match_the_shape() {
        let bytes = model(6, &[("w", &[2, 2], 0, &[0; 12])]);
        let e = parse(&bytes).unwrap_err();
        assert!(
            e.contains("declares 12 bytes") && e.contains("needs 16"),
            "{e}"
        );
    }

    #[test]
    fn refuses_a_truncated_file_and_an_absurd_count() {
        let bytes = model(6, &[("w", &[2, 2], 0, &[0; 16])]);
        let e = parse(&bytes[..bytes.len() - 40]).unwrap_err();
        assert!(e.contains("ends inside"), "{e}");
        let mut huge = model(6, &[]);
        // The variable count sits after version (4), spec name (2 + 9) and revision (4).
        huge[19..23].copy_from_slice(&u32::MAX.to_le_bytes());
        let e = parse(&huge).unwrap_err();
        assert!(e.contains("variables"), "{e}");
    }

    #[test]
    fn a_pickle_or_zip_is_not_taken_for_ctranslate2() {
        assert!(!looks_like(b"PK\x03\x04rest"));
        assert!(!looks_like(b"\x80\x02\x8a\x0a"));
        assert!(!looks_like(&[6, 0, 0, 0, 3, 0, b'a', b'b', b'c']));
    }
}
