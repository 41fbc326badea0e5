//! NumPy arrays: `.npy` (one array, named after the file stem) and `.npz` (a zip of
//! `.npy` members, stored by `numpy.savez` or deflated by `numpy.savez_compressed`).
//!
//! The `.npy` header is a short Python dict literal (`{'descr': '<f4', 'fortran_order':
//! False, 'shape': (64, 16), }`) after a magic string, a version and a length (format
//! versions 1.0, 2.0 and 3.0, described in numpy's `numpy.lib.format` documentation). We
//! parse that literal ourselves with a tiny reader that only knows strings, booleans,
//! integers, tuples, lists and dicts, so nothing is ever evaluated. Object arrays (`|O`)
//! hold pickles and are refused. Fortran-order arrays get column-major strides;
//! big-endian arrays (`>f8`) are flagged so the reader swaps bytes.

use std::path::Path;

use super::archive::{self, Member};
use super::{CheckpointError, Dtype, Format, Opened, SourceFile, Storage, TensorInfo};

const MAGIC: &[u8] = b"\x93NUMPY";
/// Longest header we accept. numpy writes headers of a few hundred bytes and its own
/// reader refuses more than 10 000 by default; 1 MiB leaves room for wide shapes.
const MAX_HEADER: usize = 1 << 20;

/// A parsed `.npy` header.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct NpyHeader {
    /// Element type.
    pub dtype: Dtype,
    /// True for `>` descriptors.
    pub big_endian: bool,
    /// True when the data is in column-major order.
    pub fortran_order: bool,
    /// Shape.
    pub shape: Vec<usize>,
    /// Bytes before the data: magic, version, length field and header text.
    pub data_offset: usize,
}

impl NpyHeader {
    /// Bytes of the array data, when the type has a fixed size and the count fits.
    fn nbytes(&self) -> Option<usize> {
        self.shape
            .iter()
            .try_fold(1usize, |a, &b| a.checked_mul(b))?
            .checked_mul(self.dtype.size()?)
    }

    /// Element strides, `None` for C order (or when the order makes no difference).
    fn strides(&self) -> Option<Vec<usize>> {
        let nontrivial = self.shape.iter().filter(|&&d| d > 1).count();
        if !self.fortran_order || nontrivial <= 1 {
            return None;
        }
        let mut s = Vec::with_capacity(self.shape.len());
        let mut acc = 1usize;
        for &d in &self.shape {
            s.push(acc);
            acc = acc.saturating_mul(d);
        }
        Some(s)
    }
}

/// A Python literal, as far as `.npy` headers use them.
#[derive(Debug, Clone, PartialEq)]
enum Lit {
    Str(String),
    Bool(bool),
    None,
    Int(u64),
    Seq(Vec<Lit>),
    Dict(Vec<(Lit, Lit)>),
}

struct LitParser<'a> {
    s: &'a [u8],
    pos: usize,
}

impl LitParser<'_> {
    fn skip_ws(&mut self) {
        while self.s.get(self.pos).is_some_and(u8::is_ascii_whitespace) {
            self.pos += 1;
        }
    }

    fn peek(&mut self) -> Option<u8> {
        self.skip_ws();
        self.s.get(self.pos).copied()
    }

    fn expect(&mut self, c: u8) -> Result<(), String> {
        if self.peek() == Some(c) {
            self.pos += 1;
            Ok(())
        } else {
            Err(format!(
                "header: expected `{}` at character {}",
                c as char, self.pos
            ))
        }
    }

    fn value(&mut self, depth: usize) -> Result<Lit, String> {
        if depth > 16 {
            return Err("header: literal nested too deeply".into());
        }
        match self.peek() {
            Some(q @ (b'\'' | b'"')) => {
                self.pos += 1;
                let start = self.pos;
                while self.s.get(self.pos).is_some_and(|&c| c != q) {
                    if self.s[self.pos] == b'\\' {
                        return Err("header: escapes in strings are not supported".into());
                    }
                    self.pos += 1;
                }
                if self.pos >= self.s.len() {
                    return Err("header: unterminated string".into());
                }
                let text = String::from_utf8_lossy(&self.s[start..self.pos]).into_owned();
                self.pos += 1;
                Ok(Lit::Str(text))
            }
            Some(open @ (b'(' | b'[')) => {
                let close = if open == b'(' { b')' } else { b']' };
                self.pos += 1;
                let mut items = Vec::new();
                loop {
                    if self.peek() == Some(close) {
                        self.pos += 1;
                        return Ok(Lit::Seq(items));
                    }
                    items.push(self.value(depth + 1)?);
                    match self.peek() {
                        Some(b',') => self.pos += 1,
                        Some(c) if c == close => {}
                        _ => return Err(format!("header: bad sequence at character {}", self.pos)),
                    }
                }
            }
            Some(b'{') => {
                self.pos += 1;
                let mut items = Vec::new();
                loop {
                    if self.peek() == Some(b'}') {
                        self.pos += 1;
                        return Ok(Lit::Dict(items));
                    }
                    let k = self.value(depth + 1)?;
                    self.expect(b':')?;
                    let v = self.value(depth + 1)?;
                    items.push((k, v));
                    match self.peek() {
                        Some(b',') => self.pos += 1,
                        Some(b'}') => {}
                        _ => return Err(format!("header: bad dict at character {}", self.pos)),
                    }
                }
            }
            Some(c) if c.is_ascii_digit() => {
                let start = self.pos;
                while self.s.get(self.pos).is_some_and(u8::is_ascii_digit) {
                    self.pos += 1;
                }
                let text = std::str::from_utf8(&self.s[start..self.pos]).unwrap_or("");
                let v = text
                    .parse::<u64>()
                    .map_err(|_| format!("header: integer `{text}` is too large"))?;
                // Python 2 long suffix, as very old files write it.
                if self.s.get(self.pos) == Some(&b'L') {
                    self.pos += 1;
                }
                Ok(Lit::Int(v))
            }
            Some(c) if c.is_ascii_alphabetic() => {
                let start = self.pos;
                while self.s.get(self.pos).is_some_and(u8::is_ascii_alphabetic) {
                    self.pos += 1;
                }
                match &self.s[start..self.pos] {
                    b"True" => Ok(Lit::Bool(true)),
                    b"False" => Ok(Lit::Bool(false)),
                    b"None" => Ok(Lit::None),
                    other => Err(format!(
                        "header: unexpected word `{}`",
                        super::shown(&String::from_utf8_lossy(other))
                    )),
                }
            }
            _ => Err(format!("header: unexpected character at {}", self.pos)),
        }
    }
}

/// Maps a descriptor such as `<f4` to a type and byte order.
pub(crate) fn dtype_of(descr: &str) -> Result<(Dtype, bool), String> {
    let (order, code) = match descr.as_bytes().first() {
        Some(b'<' | b'|' | b'=') => (false, &descr[1..]),
        Some(b'>') => (true, &descr[1..]),
        _ => (false, descr),
    };
    if code.starts_with('O') {
        return Err(format!(
            "array of Python objects (dtype `{}`): its elements are pickles, which posaudit never reads",
            super::shown(descr)
        ));
    }
    let dtype = match code {
        "f8" => Dtype::F64,
        "f4" => Dtype::F32,
        "f2" => Dtype::F16,
        "i8" => Dtype::I64,
        "i4" => Dtype::I32,
        "i2" => Dtype::I16,
        "i1" => Dtype::I8,
        "u8" => Dtype::U64,
        "u4" => Dtype::U32,
        "u2" => Dtype::U16,
        "u1" => Dtype::U8,
        "b1" => Dtype::Bool,
        _ => Dtype::Other {
            name: super::shown(descr),
        },
    };
    Ok((dtype, order))
}

/// Parses the header at the start of `bytes` (which may hold only the header).
pub(crate) fn parse_header(bytes: &[u8]) -> Result<NpyHeader, String> {
    if !bytes.starts_with(MAGIC) {
        return Err("wrong magic: not a .npy array (expected \\x93NUMPY)".into());
    }
    let (major, minor) = match bytes.get(6..8) {
        Some(&[a, b]) => (a, b),
        _ => return Err("file ends inside the .npy preamble".into()),
    };
    let (len, start) = match major {
        1 => match bytes.get(8..10) {
            Some(&[a, b]) => (u16::from_le_bytes([a, b]) as usize, 10),
            _ => return Err("file ends inside the .npy preamble".into()),
        },
        2 | 3 => match bytes.get(8..12) {
            Some(&[a, b, c, d]) => (u32::from_le_bytes([a, b, c, d]) as usize, 12),
            _ => return Err("file ends inside the .npy preamble".into()),
        },
        _ => {
            return Err(format!(
                ".npy format version {major}.{minor} is not supported"
            ));
        }
    };
    if len > MAX_HEADER {
        return Err(format!(
            ".npy header length {len} exceeds the limit of {MAX_HEADER} bytes"
        ));
    }
    let text = bytes.get(start..start + len).ok_or_else(|| {
        format!(
            ".npy header of {len} bytes runs past the end ({} bytes)",
            bytes.len()
        )
    })?;
    let mut p = LitParser { s: text, pos: 0 };
    let Lit::Dict(items) = p.value(0)? else {
        return Err(".npy header is not a dict".into());
    };
    let get = |key: &str| {
        items
            .iter()
            .find(|(k, _)| matches!(k, Lit::Str(s) if s == key))
            .map(|(_, v)| v)
    };
    let (dtype, big_endian) = match get("descr") {
        Some(Lit::Str(d)) => dtype_of(d)?,
        Some(_) => {
            return Err("structured arrays (a list of fields as `descr`) are not supported".into());
        }
        None => return Err(".npy header has no `descr`".into()),
    };
    let fortran_order = match get("fortran_order") {
        Some(Lit::Bool(b)) => *b,
        _ => return Err(".npy header has no boolean `fortran_order`".into()),
    };
    let shape = match get("shape") {
        Some(Lit::Seq(items)) => items
            .iter()
            .map(|d| match d {
                Lit::Int(v) => {
                    usize::try_from(*v).map_err(|_| format!("dimension {v} is too large"))
                }
                _ => Err(".npy shape holds a non-integer".to_string()),
            })
            .collect::<Result<Vec<_>, _>>()?,
        _ => return Err(".npy header has no `shape` tuple".into()),
    };
    Ok(NpyHeader {
        dtype,
        big_endian,
        fortran_order,
        shape,
        data_offset: start + len,
    })
}

fn tensor(name: String, h: &NpyHeader, file: usize, storage: Storage) -> TensorInfo {
    TensorInfo {
        name,
        dtype: h.dtype.clone(),
        shape: h.shape.clone(),
        file,
        storage,
        element_offset: 0,
        strides: h.strides(),
        big_endian: h.big_endian,
    }
}

fn too_short(nbytes: Option<usize>, h: &NpyHeader, have: u64) -> String {
    match nbytes {
        Some(n) => format!(
            "data of {n} bytes (shape {:?}, {}) at offset {} lies past the end ({have} bytes): truncated",
            h.shape, h.dtype, h.data_offset
        ),
        None => format!("shape {:?} is so large that its size overflows", h.shape),
    }
}

fn open_npy(file: SourceFile) -> Result<Opened, CheckpointError> {
    let h = parse_header(file.bytes()).map_err(|e| CheckpointError::invalid(&file.path, e))?;
    let nbytes = h.nbytes();
    let have = file.bytes().len();
    let len = match nbytes {
        Some(n) if h.data_offset.checked_add(n).is_some_and(|e| e <= have) => n,
        Some(_) if h.dtype.size().is_none() => 0,
        None if h.dtype.size().is_none() => 0,
        _ => {
            return Err(CheckpointError::invalid(
                &file.path,
                too_short(nbytes, &h, have as u64),
            ));
        }
    };
    let name = file
        .path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "array".into());
    let t = tensor(
        name,
        &h,
        0,
        Storage::Mapped {
            offset: h.data_offset,
            len,
        },
    );
    Ok(Opened {
        format: Format::Numpy,
        files: vec![file],
        tensors: vec![t],
        hints: None,
        warnings: Vec::new(),
        stand_ins: Vec::new(),
    })
}

/// Reads the header of one `.npz` member: its preamble first, then exactly the header.
fn member_header(file: &SourceFile, m: &Member) -> Result<NpyHeader, CheckpointError> {
    let bad = |e: String| {
        CheckpointError::invalid(
            &file.path,
            format!("array `{}`: {e}", super::shown(&m.name)),
        )
    };
    let pre = archive::member_prefix(file, m, 12)?;
    // The first parse fails on the header text, but tells us how long the header is.
    let len = match pre.get(6) {
        Some(1) => pre
            .get(8..10)
            .map(|b| 10 + u16::from_le_bytes([b[0], b[1]]) as usize),
        Some(2 | 3) => pre
            .get(8..12)
            .map(|b| 12 + u32::from_le_bytes([b[0], b[1], b[2], b[3]]) as usize),
        _ => None,
    };
    let len = match len {
        Some(l) if pre.starts_with(MAGIC) && l <= MAX_HEADER + 12 => l,
        _ => return Err(bad(parse_header(&pre).err().unwrap_or_default())),
    };
    let head = archive::member_prefix(file, m, len)?;
    parse_header(&head).map_err(bad)
}

fn open_npz(file: SourceFile) -> Result<Opened, CheckpointError> {
    let members = archive::members(&file)?;
    let mut tensors = Vec::new();
    let mut warnings = Vec::new();
    for m in &members {
        let Some(name) = m.name.strip_suffix(".npy") else {
            warnings.push(format!(
                "{}: member `{}` is not a .npy array; ignored",
                file.path.display(),
                super::shown(&m.name)
            ));
            continue;
        };
        let h = member_header(&file, m)?;
        let nbytes = h.nbytes();
        let fits = nbytes
            .and_then(|n| n.checked_add(h.data_offset))
            .is_some_and(|e| e as u64 <= m.size);
        let storage = match (&m.storage, fits, h.dtype.size()) {
            (_, false, Some(_)) => {
                return Err(CheckpointError::invalid(
                    &file.path,
                    format!(
                        "array `{}`: {}",
                        super::shown(name),
                        too_short(nbytes, &h, m.size)
                    ),
                ));
            }
            (Storage::Mapped { offset, .. }, _, _) => Storage::Mapped {
                offset: offset + h.data_offset,
                len: nbytes
                    .unwrap_or(0)
                    .min(m.size as usize - h.data_offset.min(m.size as usize)),
            },
            (
                Storage::ZipMember {
                    member,
                    size,
                    compressed,
                    ..
                },
                _,
                _,
            ) => Storage::ZipMember {
                member: member.clone(),
                skip: h.data_offset,
                size: *size,
                compressed: *compressed,
            },
            // Archive members are never varint runs (those are ONNX typed fields).
            (Storage::Varints { .. } | Storage::Owned(_), _, _) => {
                return Err(CheckpointError::invalid(&file.path, "unexpected storage"));
            }
        };
        tensors.push(tensor(name.to_string(), &h, 0, storage));
    }
    Ok(Opened {
        format: Format::Numpy,
        files: vec![file],
        tensors,
        hints: None,
        warnings,
        stand_ins: Vec::new(),
    })
}

/// Opens a `.npy` or `.npz` file (told apart by their first bytes).
pub fn open(path: &Path, file: SourceFile) -> Result<Opened, CheckpointError> {
    if file.bytes().starts_with(MAGIC) {
        open_npy(file)
    } else if file.bytes().starts_with(b"PK") {
        open_npz(file)
    } else {
        Err(CheckpointError::invalid(
            path,
            "wrong magic: neither a .npy array (\\x93NUMPY) nor a .npz zip archive (PK)",
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn npy(header: &str) -> Vec<u8> {
        let mut b = MAGIC.to_vec();
        b.extend_from_slice(&[1, 0]);
        b.extend_from_slice(&(header.len() as u16).to_le_bytes());
        b.extend_from_slice(header.as_bytes());
        b
    }

    #[test]
    fn parses_a_version_one_header() {
        // Header text as numpy.lib.format documents it (version 1.0).
        let h = parse_header(&npy(
            "{'descr': '>f8', 'fortran_order': True, 'shape': (3, 4), }",
        ))
        .unwrap();
        assert_eq!(h.dtype, Dtype::F64);
        assert!(h.big_endian && h.fortran_order);
        assert_eq!(h.shape, vec![3, 4]);
        assert_eq!(h.strides(), Some(vec![1, 3]));
    }

    #[test]
    fn a_scalar_and_a_vector_have_no_strides() {
        let h = parse_header(&npy(
            "{'descr': '<f4', 'fortran_order': True, 'shape': (), }",
        ))
        .unwrap();
        assert_eq!(h.shape, Vec::<usize>::new());
        assert_eq!(h.strides(), None);
        let h = parse_header(&npy(
            "{'descr': '<f4', 'fortran_order': True, 'shape': (5,), }",
        ))
        .unwrap();
        assert_eq!(h.strides(), None);
    }

    #[test]
    fn refuses_object_arrays() {
        let e = parse_header(&npy(
            "{'descr': '|O', 'fortran_order': False, 'shape': (2,), }",
        ))
        .unwrap_err();
        assert!(e.contains("Python objects"), "{e}");
    }
}
