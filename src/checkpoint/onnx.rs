//! ONNX models (`.onnx`): the graph's initializers (and `Constant` nodes' tensors), read
//! by a minimal protobuf reader of only the fields posaudit needs.
//!
//! Fields read (numbers from `onnx.proto`): `ModelProto.graph` (7); `GraphProto.node` (1),
//! `.initializer` (5), `.sparse_initializer` (15, counted and reported as not read);
//! `NodeProto.output` (2), `.op_type` (4), `.attribute` (5); `AttributeProto.name` (1),
//! `.t` (5); `TensorProto.dims` (1), `.data_type` (2), `.segment` (3, refused),
//! `.float_data` (4), `.int32_data` (5), `.int64_data` (7), `.name` (8), `.raw_data` (9),
//! `.double_data` (10), `.uint64_data` (11), `.external_data` (13: key/value entries
//! `location`, `offset`, `length`), `.data_location` (14). Everything else is skipped by
//! its wire type without being interpreted.
//!
//! Names are reported as stored: exporters often rename initializers (`onnx::MatMul_123`,
//! `/embeddings/Constant_output_0`), so the detector's content probe is what finds tables
//! there.
//!
//! Where the bytes are:
//! - `raw_data` and packed `float_data` / `double_data` are little-endian runs inside the
//!   file: mapped, never copied.
//! - `int32_data` / `int64_data` / `uint64_data` are packed varints: counted at open (the
//!   count must equal the element count) and decoded when read
//!   ([`super::Storage::Varints`]) into an owned buffer of at most 8 bytes per varint byte
//!   of the file, i.e. of the order of the tensor.
//! - external data (`data_location` EXTERNAL) lives in a file named by `location`,
//!   relative to the model's folder: absolute paths, `..` components and symbolic links
//!   leading outside the folder are refused; `offset` + `length` must lie inside that
//!   file. Each distinct file is mapped once and becomes one of the checkpoint's files.
//!
//! Limits: varints are at most 10 bytes; every length-delimited field must fit inside its
//! parent; at most [`MAX_TENSORS`] tensors, [`MAX_DIMS`] dimensions,
//! [`MAX_EXTERNAL_FILES`] external files; the nesting is fixed by the message types read
//! (model → graph → node → attribute → tensor), so there is no recursion. Nothing is
//! allocated from a declared size before the bytes behind it are checked.
//!
//! Why a reader of our own rather than `prost` with the vendored `onnx.proto`: prost
//! decodes whole messages into owned structs, so opening a model would copy every
//! initializer's `raw_data` (the whole checkpoint) into memory, while posaudit's promise
//! is that `scan` reads headers only and `audit` memory stays of the order of the tables.
//! The dozen fields needed are a few hundred lines over the protobuf wire format, with
//! the same checked limits as the other readers, and no build-time code generation.

use std::collections::BTreeMap;
use std::path::{Component, Path, PathBuf};

use super::{CheckpointError, Dtype, Format, Opened, SourceFile, Storage, TensorInfo};

/// Most tensors (initializers plus constants) a model may hold.
pub const MAX_TENSORS: usize = 1 << 20;
/// Most dimensions of one tensor.
pub const MAX_DIMS: usize = 16;
/// Most distinct external data files.
pub const MAX_EXTERNAL_FILES: usize = 4096;
/// Longest tensor name or key/value string read.
const MAX_STRING: usize = 1 << 20;

/// A field's value, by wire type.
enum Val<'a> {
    Varint(u64),
    Fixed,
    /// Length-delimited: the bytes and their absolute offset in the file.
    Bytes(&'a [u8], usize),
}

/// A cursor over one message's bytes; `base` is the absolute file offset of `b[0]`.
struct Wire<'a> {
    b: &'a [u8],
    pos: usize,
    base: usize,
    what: &'static str,
}

impl<'a> Wire<'a> {
    fn new(b: &'a [u8], base: usize, what: &'static str) -> Self {
        Wire {
            b,
            pos: 0,
            base,
            what,
        }
    }

    fn at(&self) -> usize {
        self.base + self.pos
    }

    fn varint(&mut self) -> Result<u64, String> {
        let start = self.at();
        let mut v = 0u64;
        for i in 0..10 {
            let Some(&byte) = self.b.get(self.pos) else {
                return Err(format!(
                    "file ends inside a varint of {} at byte {start} (truncated)",
                    self.what
                ));
            };
            self.pos += 1;
            if i == 9 && byte > 1 {
                return Err(format!(
                    "bad varint in {} at byte {start}: more than 64 bits",
                    self.what
                ));
            }
            v |= u64::from(byte & 0x7F) << (7 * i);
            if byte < 0x80 {
                return Ok(v);
            }
        }
        Err(format!(
            "bad varint in {} at byte {start}: longer than 10 bytes",
            self.what
        ))
    }

    /// The next field, or `None` at the end of the message.
    fn field(&mut self) -> Result<Option<(u64, Val<'a>)>, String> {
        if self.pos >= self.b.len() {
            return Ok(None);
        }
        let at = self.at();
        let key = self.varint()?;
        let (number, wire) = (key >> 3, key & 7);
        if number == 0 || number > (1 << 29) {
            return Err(format!(
                "bad field number {number} in {} at byte {at}: not an ONNX protobuf",
                self.what
            ));
        }
        let val = match wire {
            0 => Val::Varint(self.varint()?),
            1 | 5 => {
                let n = if wire == 1 { 8 } else { 4 };
                if self.b.len() - self.pos < n {
                    return Err(format!(
                        "file ends inside field {number} of {} at byte {at} (truncated)",
                        self.what
                    ));
                }
                self.pos += n;
                Val::Fixed
            }
            2 => {
                let len = self.varint()?;
                let left = (self.b.len() - self.pos) as u64;
                if len > left {
                    return Err(format!(
                        "field {number} of {} at byte {at} declares {len} bytes, {left} left in its message (truncated or damaged)",
                        self.what
                    ));
                }
                let start = self.pos;
                self.pos += len as usize;
                Val::Bytes(&self.b[start..self.pos], self.base + start)
            }
            other => {
                return Err(format!(
                    "unsupported wire type {other} (field {number}) in {} at byte {at}: not an ONNX protobuf",
                    self.what
                ));
            }
        };
        Ok(Some((number, val)))
    }
}

fn string(b: &[u8], what: &str) -> Result<String, String> {
    if b.len() > MAX_STRING {
        return Err(format!(
            "{what} is {} bytes long (limit {MAX_STRING})",
            b.len()
        ));
    }
    Ok(String::from_utf8_lossy(b).into_owned())
}

/// Where a tensor's values are, as found in its `TensorProto`.
#[derive(Debug)]
enum Data {
    None,
    Raw {
        offset: usize,
        len: usize,
    },
    /// A packed repeated field: its number, absolute offset and length.
    Packed {
        field: u64,
        offset: usize,
        len: usize,
    },
    External(BTreeMap<String, String>),
}

#[derive(Debug)]
struct RawTensor {
    name: String,
    dims: Vec<u64>,
    data_type: u64,
    data: Data,
    external: bool,
}

fn tensor_proto(b: &[u8], base: usize) -> Result<RawTensor, String> {
    let mut w = Wire::new(b, base, "a TensorProto");
    let mut t = RawTensor {
        name: String::new(),
        dims: Vec::new(),
        data_type: 0,
        data: Data::None,
        external: false,
    };
    let mut entries = BTreeMap::new();
    let set = |data: &mut Data, new: Data, what: &str| -> Result<(), String> {
        if !matches!(data, Data::None) {
            return Err(format!(
                "holds its values in more than one field ({what} after another): split or ambiguous data is not supported"
            ));
        }
        *data = new;
        Ok(())
    };
    while let Some((number, val)) = w.field()? {
        match (number, val) {
            (1, Val::Varint(d)) => {
                if t.dims.len() >= MAX_DIMS {
                    return Err(format!("has more than {MAX_DIMS} dimensions"));
                }
                t.dims.push(d);
            }
            (1, Val::Bytes(packed, at)) => {
                let mut p = Wire::new(packed, at, "packed dims");
                while p.pos < packed.len() {
                    if t.dims.len() >= MAX_DIMS {
                        return Err(format!("has more than {MAX_DIMS} dimensions"));
                    }
                    t.dims.push(p.varint()?);
                }
            }
            (2, Val::Varint(v)) => t.data_type = v,
            (3, _) => return Err("is a segment of a larger tensor: not supported".into()),
            (8, Val::Bytes(s, _)) => t.name = string(s, "a tensor name")?,
            (9, Val::Bytes(s, at)) => set(
                &mut t.data,
                Data::Raw {
                    offset: at,
                    len: s.len(),
                },
                "raw_data",
            )?,
            (f @ (4 | 5 | 7 | 10 | 11), Val::Bytes(s, at)) => set(
                &mut t.data,
                Data::Packed {
                    field: f,
                    offset: at,
                    len: s.len(),
                },
                "a typed field",
            )?,
            (4 | 5 | 7 | 10 | 11, _) => {
                return Err(
                    "stores a typed field unpacked (one value per field): not supported".into(),
                );
            }
            (6, _) => {} // string_data: STRING tensors are listed, never read
            (13, Val::Bytes(s, at)) => {
                let mut e = Wire::new(s, at, "an external_data entry");
                let (mut key, mut value) = (String::new(), String::new());
                while let Some((n, v)) = e.field()? {
                    match (n, v) {
                        (1, Val::Bytes(k, _)) => key = string(k, "an external_data key")?,
                        (2, Val::Bytes(v, _)) => value = string(v, "an external_data value")?,
                        _ => {}
                    }
                }
                if entries.len() < 64 {
                    entries.insert(key, value);
                }
            }
            (14, Val::Varint(v)) => t.external = v == 1,
            _ => {}
        }
    }
    if t.external {
        set(&mut t.data, Data::External(entries), "external data")?;
    }
    Ok(t)
}

/// The tensor of a `Constant` node (its `value` attribute), named by the node's output.
fn constant_node(b: &[u8], base: usize) -> Result<Option<RawTensor>, String> {
    let mut w = Wire::new(b, base, "a NodeProto");
    let (mut output, mut op, mut tensor) = (None, String::new(), None);
    while let Some((number, val)) = w.field()? {
        match (number, val) {
            (2, Val::Bytes(s, _)) if output.is_none() => {
                output = Some(string(s, "a node output")?);
            }
            (4, Val::Bytes(s, _)) => op = string(s, "an op type")?,
            (5, Val::Bytes(s, at)) => {
                let mut a = Wire::new(s, at, "an AttributeProto");
                let (mut name, mut t) = (String::new(), None);
                while let Some((n, v)) = a.field()? {
                    match (n, v) {
                        (1, Val::Bytes(k, _)) => name = string(k, "an attribute name")?,
                        (5, Val::Bytes(tb, tat)) => t = Some((tb, tat)),
                        _ => {}
                    }
                }
                if name == "value" {
                    tensor = t;
                }
            }
            _ => {}
        }
    }
    if op != "Constant" {
        return Ok(None);
    }
    let (Some(out), Some((tb, at))) = (output, tensor) else {
        return Ok(None);
    };
    let mut t = tensor_proto(tb, at).map_err(|e| format!("constant `{out}` {e}"))?;
    t.name = out;
    Ok(Some(t))
}

struct Parsed {
    tensors: Vec<RawTensor>,
    sparse: usize,
    graphs: usize,
}

fn model_proto(b: &[u8]) -> Result<Parsed, String> {
    let mut p = Parsed {
        tensors: Vec::new(),
        sparse: 0,
        graphs: 0,
    };
    let mut m = Wire::new(b, 0, "the ModelProto");
    while let Some((number, val)) = m.field()? {
        let (7, Val::Bytes(g, at)) = (number, val) else {
            continue;
        };
        p.graphs += 1;
        let mut w = Wire::new(g, at, "the GraphProto");
        while let Some((number, val)) = w.field()? {
            let found = match (number, val) {
                (5, Val::Bytes(s, at)) => Some(
                    tensor_proto(s, at)
                        .map_err(|e| format!("initializer #{} {e}", p.tensors.len()))?,
                ),
                (1, Val::Bytes(s, at)) => constant_node(s, at)?,
                (15, _) => {
                    p.sparse += 1;
                    None
                }
                _ => None,
            };
            if let Some(t) = found {
                if p.tensors.len() >= MAX_TENSORS {
                    return Err(format!("more than {MAX_TENSORS} tensors"));
                }
                p.tensors.push(t);
            }
        }
    }
    Ok(p)
}

/// posaudit's element type for an ONNX `TensorProto.DataType`.
fn dtype_of(code: u64) -> Dtype {
    match code {
        1 => Dtype::F32,
        2 => Dtype::U8,
        3 => Dtype::I8,
        4 => Dtype::U16,
        5 => Dtype::I16,
        6 => Dtype::I32,
        7 => Dtype::I64,
        9 => Dtype::Bool,
        10 => Dtype::F16,
        11 => Dtype::F64,
        12 => Dtype::U32,
        13 => Dtype::U64,
        16 => Dtype::BF16,
        other => Dtype::Other {
            name: match other {
                0 => "UNDEFINED".to_string(),
                8 => "STRING".to_string(),
                14 => "COMPLEX64".to_string(),
                15 => "COMPLEX128".to_string(),
                17 => "FLOAT8E4M3FN".to_string(),
                18 => "FLOAT8E4M3FNUZ".to_string(),
                19 => "FLOAT8E5M2".to_string(),
                20 => "FLOAT8E5M2FNUZ".to_string(),
                21 => "UINT4".to_string(),
                22 => "INT4".to_string(),
                23 => "FLOAT4E2M1".to_string(),
                n => format!("ONNX data type {n}"),
            },
        },
    }
}

/// Checks an external `location` and returns the file it names inside `folder`.
fn external_path(folder: &Path, location: &str) -> Result<PathBuf, String> {
    if location.is_empty() {
        return Err("names an empty external data location".into());
    }
    let shown = location.escape_debug().to_string();
    let rel = Path::new(location);
    let drive = location.as_bytes().get(1) == Some(&b':');
    if rel.is_absolute() || location.starts_with(['/', '\\']) || drive {
        return Err(format!(
            "external data location `{shown}` is an absolute path; it must be relative to the model's folder"
        ));
    }
    if location.contains('\0')
        || location.split(['/', '\\']).any(|c| c == "..")
        || rel
            .components()
            .any(|c| !matches!(c, Component::Normal(_) | Component::CurDir))
    {
        return Err(format!(
            "external data location `{shown}` leaves the model's folder"
        ));
    }
    let path = folder.join(rel);
    let canon_folder = folder
        .canonicalize()
        .map_err(|e| format!("cannot resolve the model's folder: {e}"))?;
    let canon = path
        .canonicalize()
        .map_err(|e| format!("external data file `{shown}`: cannot read: {e}"))?;
    if !canon.starts_with(&canon_folder) {
        return Err(format!(
            "external data location `{shown}` leads outside the model's folder (through a symbolic link)"
        ));
    }
    Ok(path)
}

fn parse_u64(entries: &BTreeMap<String, String>, key: &str) -> Result<Option<u64>, String> {
    entries
        .get(key)
        .map(|v| {
            v.trim().parse::<u64>().map_err(|_| {
                format!(
                    "external data `{key}` is `{}`, not a non-negative integer",
                    v.escape_debug()
                )
            })
        })
        .transpose()
}

/// Counts the varints of a packed run and checks that it ends on a varint's last byte.
fn count_varints(b: &[u8]) -> Option<usize> {
    if b.last().is_some_and(|&x| x >= 0x80) {
        return None;
    }
    Some(b.iter().filter(|&&x| x < 0x80).count())
}

/// Decodes a packed run of varints into `width`-byte little-endian integers (the low
/// bytes of each value: two's complement for negative ints, the bit pattern for F16/BF16
/// stored in `int32_data`).
pub(super) fn decode_varints(
    file: &SourceFile,
    offset: usize,
    len: usize,
    width: usize,
) -> Result<Vec<u8>, CheckpointError> {
    let bytes = offset
        .checked_add(len)
        .and_then(|end| file.bytes().get(offset..end))
        .ok_or_else(|| {
            CheckpointError::invalid(
                &file.path,
                format!("packed values at byte {offset} lie past the end of the file"),
            )
        })?;
    let count = count_varints(bytes).unwrap_or(0);
    let mut out = Vec::with_capacity(count.saturating_mul(width.min(8)));
    let mut w = Wire::new(bytes, offset, "packed values");
    while w.pos < bytes.len() {
        let v = w
            .varint()
            .map_err(|e| CheckpointError::invalid(&file.path, e))?;
        out.extend_from_slice(&v.to_le_bytes()[..width.min(8)]);
    }
    Ok(out)
}

/// Opens an ONNX model file (and the external data files it names).
pub fn open(file: SourceFile) -> Result<Opened, CheckpointError> {
    let path = file.path.clone();
    let bad = |e: String| CheckpointError::invalid(&path, e);
    let parsed = model_proto(file.bytes()).map_err(&bad)?;
    if parsed.graphs == 0 {
        return Err(bad(
            "holds no graph: not an ONNX model (ModelProto.graph missing)".into(),
        ));
    }
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let mut files = vec![file];
    let mut external: BTreeMap<String, usize> = BTreeMap::new();
    let mut tensors = Vec::with_capacity(parsed.tensors.len());
    let mut warnings = Vec::new();
    if parsed.sparse > 0 {
        warnings.push(format!(
            "{}: {} sparse initializer(s) not read (sparse tensors are not supported)",
            path.display(),
            parsed.sparse
        ));
    }
    for raw in parsed.tensors {
        let name = raw.name.clone();
        let what = |e: String| bad(format!("tensor `{}`: {e}", name.escape_debug()));
        let dtype = dtype_of(raw.data_type);
        let numel = raw
            .dims
            .iter()
            .try_fold(1u64, |a, &d| {
                if d > i64::MAX as u64 {
                    None
                } else {
                    a.checked_mul(d)
                }
            })
            .and_then(|n| usize::try_from(n).ok())
            .ok_or_else(|| {
                what(format!(
                    "dimensions {:?} are negative or overflow",
                    raw.dims
                ))
            })?;
        let shape: Vec<usize> = raw.dims.iter().map(|&d| d as usize).collect();
        let expected = dtype.size().and_then(|s| s.checked_mul(numel));
        let check_len = |len: usize, field: &str| -> Result<(), CheckpointError> {
            match expected {
                Some(e) if e != len => Err(what(format!(
                    "{field} holds {len} bytes, but shape {shape:?} of {dtype} needs {e}"
                ))),
                _ => Ok(()),
            }
        };
        let (file_index, storage) = match raw.data {
            Data::None if numel == 0 || expected.is_none() => {
                (0, Storage::Mapped { offset: 0, len: 0 })
            }
            Data::None => return Err(what("holds no data".into())),
            Data::Raw { offset, len } => {
                check_len(len, "raw_data")?;
                (0, Storage::Mapped { offset, len })
            }
            Data::Packed { field, offset, len } => {
                let (field_name, varint) = match field {
                    4 => ("float_data", false),
                    10 => ("double_data", false),
                    5 => ("int32_data", true),
                    7 => ("int64_data", true),
                    _ => ("uint64_data", true),
                };
                let fits = match (field, &dtype) {
                    (4, Dtype::F32) | (10, Dtype::F64) | (7, Dtype::I64) => true,
                    (11, Dtype::U32 | Dtype::U64) => true,
                    (5, d) => matches!(
                        d,
                        Dtype::I32
                            | Dtype::I16
                            | Dtype::I8
                            | Dtype::U16
                            | Dtype::U8
                            | Dtype::Bool
                            | Dtype::F16
                            | Dtype::BF16
                    ),
                    (_, Dtype::Other { .. }) => true,
                    _ => false,
                };
                if !fits {
                    return Err(what(format!(
                        "type {dtype} stored in {field_name}, which does not hold that type"
                    )));
                }
                match (varint, dtype.size()) {
                    (false, _) | (_, None) => {
                        check_len(len, field_name)?;
                        (0, Storage::Mapped { offset, len })
                    }
                    (true, Some(width)) => {
                        let bytes = &files[0].bytes()[offset..offset + len];
                        let count = count_varints(bytes).ok_or_else(|| {
                            what(format!("{field_name} ends inside a varint (truncated)"))
                        })?;
                        if count != numel {
                            return Err(what(format!(
                                "{field_name} holds {count} values, but shape {shape:?} has {numel}"
                            )));
                        }
                        (0, Storage::Varints { offset, len, width })
                    }
                }
            }
            Data::External(entries) => {
                let location = entries
                    .get("location")
                    .ok_or_else(|| what("external data without a `location`".into()))?;
                let offset = parse_u64(&entries, "offset").map_err(&what)?.unwrap_or(0);
                let length = parse_u64(&entries, "length").map_err(&what)?;
                let index = match external.get(location) {
                    Some(&i) => i,
                    None => {
                        if external.len() >= MAX_EXTERNAL_FILES {
                            return Err(what(format!(
                                "more than {MAX_EXTERNAL_FILES} external data files"
                            )));
                        }
                        let p = external_path(&folder, location).map_err(&what)?;
                        let f = SourceFile::open(&p).map_err(|e| what(e.to_string()))?;
                        files.push(f);
                        external.insert(location.clone(), files.len() - 1);
                        files.len() - 1
                    }
                };
                let file_len = files[index].bytes().len() as u64;
                let len = match (length, expected) {
                    (Some(l), _) => l,
                    (None, Some(e)) => e as u64,
                    (None, None) => file_len.saturating_sub(offset),
                };
                if offset.checked_add(len).is_none_or(|end| end > file_len) {
                    return Err(what(format!(
                        "external data bytes {offset}..{} lie past the end of `{}` ({file_len} bytes)",
                        offset.saturating_add(len),
                        location.escape_debug()
                    )));
                }
                check_len(len as usize, "external data")?;
                (
                    index,
                    Storage::Mapped {
                        offset: offset as usize,
                        len: len as usize,
                    },
                )
            }
        };
        tensors.push(TensorInfo {
            name: raw.name,
            dtype,
            shape,
            file: file_index,
            storage,
            element_offset: 0,
            strides: None,
            big_endian: false,
        });
    }
    Ok(Opened {
        format: Format::Onnx,
        files,
        tensors,
        hints: None,
        warnings,
        stand_ins: Vec::new(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn varints_are_checked() {
        // 300 = 0b1_0010_1100: bytes 0xAC 0x02 (protobuf encoding documentation).
        let mut w = Wire::new(&[0xAC, 0x02], 0, "test");
        assert_eq!(w.varint().unwrap(), 300);
        let mut w = Wire::new(&[0xFF; 11], 0, "test");
        assert!(w.varint().unwrap_err().contains("bad varint"));
        let mut w = Wire::new(&[0x80, 0x80], 0, "test");
        assert!(w.varint().unwrap_err().contains("truncated"));
        // u64::MAX takes ten bytes, the last one 0x01.
        let mut b = vec![0xFF; 9];
        b.push(0x01);
        assert_eq!(Wire::new(&b, 0, "t").varint().unwrap(), u64::MAX);
        assert_eq!(count_varints(&[0xAC, 0x02, 0x01]), Some(2));
        assert_eq!(count_varints(&[0x01, 0x80]), None);
    }

    #[test]
    fn a_length_past_its_message_is_refused() {
        // Field 7 (graph), wire type 2, declares 100 bytes; 2 follow.
        let e = model_proto(&[0x3A, 100, 0, 0]).err().unwrap();
        assert!(e.contains("declares 100 bytes"), "{e}");
    }

    #[test]
    fn external_locations_stay_in_the_folder() {
        let dir = std::env::temp_dir();
        for bad in ["/etc/passwd", "../x", "a/../../x", "C:\\x", "\\\\server\\x"] {
            assert!(external_path(&dir, bad).is_err(), "{bad}");
        }
    }
}
