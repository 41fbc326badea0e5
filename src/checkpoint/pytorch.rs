//! PyTorch checkpoints written by `torch.save` (torch >= 1.6): `.bin`, `.pt`, `.pth`,
//! `.ckpt`, single files or shards with a `pytorch_model.bin.index.json`.
//!
//! Such a file is a zip archive: `<archive>/data.pkl` is a pickle of the saved object
//! whose tensors refer, through persistent ids, to storages kept as raw little-endian
//! bytes in `<archive>/data/<key>`. The pickle is read by [`super::pickle`], which never
//! executes anything and refuses any global outside a short allow-list. torch stores the
//! storage members uncompressed, so tensor bytes are read from the memory map; a member
//! that some other tool re-compressed is inflated when read.
//!
//! Nested objects (`{"model": {...}, "optimizer": {...}}`, a Lightning `state_dict`)
//! are flattened to dotted names; values other than tensors are ignored. The pre-1.6
//! format (a bare pickle starting with torch's magic number) is refused with a clear
//! message.

use std::collections::HashMap;
use std::path::Path;

use super::archive::{self, Member};
use super::pickle::{self, NdArray, StandIn, TensorRef, Value};
use super::{CheckpointError, Dtype, Format, Opened, SourceFile, TensorInfo, limits, shown};

/// The pickle that starts a pre-1.6 `torch.save` file: protocol 2, then the magic number
/// 0x1950a86a20f9469cfc6c as a 10-byte LONG1 (torch/serialization.py, `MAGIC_NUMBER`).
const LEGACY_MAGIC: &[u8] = b"\x80\x02\x8a\x0a\x6c\xfc\x9c\x46\xf9\x20\x6a\xa8\x50\x19";

/// Most containers and values visited while flattening (a crafted pickle can refer to
/// one list many times, so the visits, not the pickle size, bound the work).
const MAX_VISITS: usize = 5_000_000;
/// Most tensors one checkpoint file may list.
const MAX_TENSORS: usize = 1_000_000;
/// Deepest container nesting followed when flattening names.
const MAX_NESTING: usize = 64;

fn dtype_of(storage_type: &str) -> Dtype {
    match storage_type {
        "DoubleStorage" => Dtype::F64,
        "FloatStorage" => Dtype::F32,
        "HalfStorage" => Dtype::F16,
        "BFloat16Storage" => Dtype::BF16,
        "LongStorage" => Dtype::I64,
        "IntStorage" => Dtype::I32,
        "ShortStorage" => Dtype::I16,
        "CharStorage" => Dtype::I8,
        "ByteStorage" => Dtype::U8,
        "BoolStorage" => Dtype::Bool,
        other => Dtype::Other {
            name: other.to_string(),
        },
    }
}

/// C-contiguous strides of a shape.
fn c_strides(shape: &[usize]) -> Vec<usize> {
    let mut s = vec![1usize; shape.len()];
    for i in (0..shape.len().saturating_sub(1)).rev() {
        s[i] = s[i + 1].saturating_mul(shape[i + 1]);
    }
    s
}

/// True when `strides` address the shape in C order (size-1 dimensions may have any stride).
fn is_c_contiguous(shape: &[usize], strides: &[usize]) -> bool {
    let c = c_strides(shape);
    shape
        .iter()
        .zip(strides.iter().zip(&c))
        .all(|(&d, (&s, &cs))| d <= 1 || s == cs)
}

/// What flattening has spent so far, against [`MAX_VISITS`], [`MAX_TENSORS`] and
/// [`limits::MAX_NAMES_TOTAL`].
#[derive(Default)]
struct Walk {
    visits: usize,
    name_bytes: usize,
}

/// A tensor found in the pickled object.
#[derive(Debug)]
enum Found {
    /// A torch tensor, its bytes in a storage member.
    Torch(TensorRef),
    /// A NumPy array or scalar, its bytes in the pickle itself.
    Numpy(NdArray),
}

/// Flattens nested containers to `(dotted name, tensor)` pairs. Stood-in objects are
/// looked into: their state (attribute dict, or `(dict, slots)`) and items give names
/// under the object's own name (`args.lr`, `config.table`).
///
/// Cost: one step per visited value and the bytes of the names built, both capped, so a
/// pickle that refers to one list many times, or repeats a 1 MB key through every level,
/// stops at a limit instead of building gigabytes of names. A name longer than
/// [`limits::MAX_NAME_BYTES`] and containers nested deeper than [`MAX_NESTING`] are
/// errors: silently dropping them would hide tensors.
fn flatten(
    v: &Value,
    prefix: &str,
    depth: usize,
    walk: &mut Walk,
    out: &mut Vec<(String, Found)>,
) -> Result<(), String> {
    walk.visits += 1;
    if walk.visits > MAX_VISITS {
        return Err(format!(
            "the pickled object has more than {MAX_VISITS} entries (or refers to itself)"
        ));
    }
    let is_container = matches!(
        v,
        Value::Dict(_) | Value::List(_) | Value::Tuple(_) | Value::Object(_)
    );
    if is_container && depth >= MAX_NESTING {
        return Err(format!(
            "the pickled object nests containers more than {MAX_NESTING} deep (the limit) under `{}`",
            shown(prefix)
        ));
    }
    match v {
        Value::Tensor(t) => {
            if out.len() >= MAX_TENSORS {
                return Err(format!(
                    "the pickled object lists more than {MAX_TENSORS} tensors"
                ));
            }
            out.push((prefix.to_string(), Found::Torch((**t).clone())))
        }
        Value::Dict(d) => flatten_items(&d.borrow(), prefix, depth, walk, out)?,
        Value::Object(o) => {
            if let Some(array) = pickle::ndarray_of(o) {
                let array = array.map_err(|e| format!("`{}`: {e}", shown(prefix)))?;
                if out.len() >= MAX_TENSORS {
                    return Err(format!(
                        "the pickled object lists more than {MAX_TENSORS} tensors"
                    ));
                }
                out.push((prefix.to_string(), Found::Numpy(array)));
                return Ok(());
            }
            match &*o.state.borrow() {
                Some(Value::Dict(d)) => flatten_items(&d.borrow(), prefix, depth, walk, out)?,
                // (attribute dict, slots dict), as `object.__reduce_ex__` writes it.
                Some(Value::Tuple(t)) if t.len() == 2 => {
                    for part in t.iter() {
                        if let Value::Dict(d) = part {
                            flatten_items(&d.borrow(), prefix, depth, walk, out)?;
                        }
                    }
                }
                _ => {}
            }
            flatten_items(&o.items.borrow(), prefix, depth, walk, out)?;
            for (i, v) in o.list.borrow().iter().enumerate() {
                let name = join(prefix, &i.to_string(), walk)?;
                flatten(v, &name, depth + 1, walk, out)?;
            }
        }
        Value::List(l) => {
            for (i, v) in l.borrow().iter().enumerate() {
                let name = join(prefix, &i.to_string(), walk)?;
                flatten(v, &name, depth + 1, walk, out)?;
            }
        }
        Value::Tuple(t) => {
            for (i, v) in t.iter().enumerate() {
                let name = join(prefix, &i.to_string(), walk)?;
                flatten(v, &name, depth + 1, walk, out)?;
            }
        }
        _ => {}
    }
    Ok(())
}

/// Flattens the items of a dict (string and integer keys) under `prefix`.
fn flatten_items(
    items: &[(Value, Value)],
    prefix: &str,
    depth: usize,
    walk: &mut Walk,
    out: &mut Vec<(String, Found)>,
) -> Result<(), String> {
    for (k, v) in items {
        let key = match k {
            Value::Str(s) => s.to_string(),
            Value::Int(i) => i.to_string(),
            _ => continue,
        };
        let name = join(prefix, &key, walk)?;
        flatten(v, &name, depth + 1, walk, out)?;
    }
    Ok(())
}

/// `prefix.k`, refused beyond [`limits::MAX_NAME_BYTES`] and counted against
/// [`limits::MAX_NAMES_TOTAL`] before it is built.
fn join(prefix: &str, k: &str, walk: &mut Walk) -> Result<String, String> {
    let len = if prefix.is_empty() {
        k.len()
    } else {
        prefix.len() + 1 + k.len()
    };
    if len > limits::MAX_NAME_BYTES {
        return Err(format!(
            "a tensor name under `{}` would be {len} bytes, more than the {}-byte limit for a name",
            shown(prefix),
            limits::MAX_NAME_BYTES
        ));
    }
    walk.name_bytes += len;
    if walk.name_bytes > limits::MAX_NAMES_TOTAL {
        return Err(format!(
            "the pickled object's flattened names exceed {} MiB in all (the limit)",
            limits::MAX_NAMES_TOTAL >> 20
        ));
    }
    Ok(if prefix.is_empty() {
        k.to_string()
    } else {
        format!("{prefix}.{k}")
    })
}

/// The archive's folder prefix (`archive/`), from the member holding `data.pkl`.
fn find_prefix(members: &[Member]) -> Option<String> {
    members
        .iter()
        .filter_map(|m| m.name.strip_suffix("data.pkl"))
        .filter(|p| p.ends_with('/') && p.matches('/').count() == 1)
        .min_by_key(|p| p.len())
        .map(str::to_string)
}

fn not_zip_problem(bytes: &[u8]) -> String {
    if bytes.starts_with(LEGACY_MAGIC) {
        "legacy (pre-1.6) torch.save format is not supported; re-save with torch>=1.6".into()
    } else if bytes.first() == Some(&0x80) {
        "a bare pickle, not a torch.save zip archive (torch>=1.6 writes zip archives)".into()
    } else {
        "not a torch.save zip archive (no zip signature)".into()
    }
}

/// Indexes one `torch.save` archive; tensors point at file index `file_index`.
fn index_file(
    file: &SourceFile,
    file_index: usize,
) -> Result<(Vec<TensorInfo>, Vec<StandIn>), CheckpointError> {
    let path = &file.path;
    let bytes = file.bytes();
    if bytes.is_empty() {
        return Err(CheckpointError::invalid(path, "file is empty"));
    }
    if !bytes.starts_with(b"PK") {
        return Err(CheckpointError::invalid(path, not_zip_problem(bytes)));
    }
    let members = archive::members(file)?;
    let prefix = find_prefix(&members).ok_or_else(|| {
        CheckpointError::invalid(
            path,
            "zip archive has no `<archive>/data.pkl`: not a torch.save checkpoint",
        )
    })?;
    let by_name: HashMap<&str, &Member> = members.iter().map(|m| (m.name.as_str(), m)).collect();

    let big_endian = match by_name.get(format!("{prefix}byteorder").as_str()) {
        Some(m) => {
            let b = archive::member_prefix(file, m, 16)?;
            match b.as_slice() {
                b"little" => false,
                b"big" => true,
                other => {
                    return Err(CheckpointError::invalid(
                        path,
                        format!(
                            "byteorder member says `{}`, expected `little` or `big`",
                            shown(&String::from_utf8_lossy(other))
                        ),
                    ));
                }
            }
        }
        None => false,
    };

    let pkl = by_name[format!("{prefix}data.pkl").as_str()];
    if pkl.size > pickle::MAX_PICKLE_BYTES as u64 {
        return Err(CheckpointError::invalid(
            path,
            format!(
                "data.pkl is {} bytes, more than the {} MiB limit",
                pkl.size,
                pickle::MAX_PICKLE_BYTES >> 20
            ),
        ));
    }
    let pkl_bytes = archive::member_prefix(file, pkl, pickle::MAX_PICKLE_BYTES)?;
    let loaded =
        pickle::load_with_stand_ins(&pkl_bytes).map_err(|e| CheckpointError::invalid(path, e))?;
    let root = loaded.value;

    let mut refs = Vec::new();
    flatten(&root, "", 0, &mut Walk::default(), &mut refs)
        .map_err(|e| CheckpointError::invalid(path, e))?;

    let mut out = Vec::with_capacity(refs.len());
    for (name, found) in refs {
        let bad = |what: String| {
            CheckpointError::invalid(path, format!("tensor `{}`: {what}", shown(&name)))
        };
        let r = match found {
            Found::Torch(r) => r,
            Found::Numpy(a) => {
                out.push(numpy_tensor(name, a, file_index));
                continue;
            }
        };
        let member_name = format!("{prefix}data/{}", r.key);
        let member = by_name.get(member_name.as_str()).ok_or_else(|| {
            bad(format!(
                "its storage `{}` is missing from the archive",
                shown(&member_name)
            ))
        })?;
        let dtype = dtype_of(&r.storage_type);
        let to_usize = |v: u64| usize::try_from(v).map_err(|_| bad(format!("{v} is too large")));
        let shape = r
            .size
            .iter()
            .map(|&d| to_usize(d))
            .collect::<Result<Vec<_>, _>>()?;
        let strides = r
            .stride
            .iter()
            .map(|&d| to_usize(d))
            .collect::<Result<Vec<_>, _>>()?;
        let element_offset = to_usize(r.offset)?;
        if let Some(size) = dtype.size() {
            // The storage member must hold the declared element count, and the tensor's
            // furthest element must lie inside the storage.
            let declared = r.storage_numel.checked_mul(size as u64);
            if declared.is_none_or(|d| d > member.size) {
                return Err(bad(format!(
                    "storage declares {} elements of {size} bytes but its member holds {} bytes",
                    r.storage_numel, member.size
                )));
            }
            let numel = shape.iter().try_fold(1usize, |a, &b| a.checked_mul(b));
            let last = match numel {
                Some(0) => Some(0),
                Some(_) => shape
                    .iter()
                    .zip(&strides)
                    .try_fold(element_offset, |acc, (d, s)| {
                        acc.checked_add((d - 1).checked_mul(*s)?)
                    })
                    .and_then(|l| l.checked_add(1)),
                None => None,
            };
            if last.is_none_or(|l| l as u64 > r.storage_numel) {
                return Err(bad(format!(
                    "shape {shape:?}, strides {strides:?} and offset {element_offset} reach past its storage of {} elements",
                    r.storage_numel
                )));
            }
        }
        let strides = if is_c_contiguous(&shape, &strides) {
            None
        } else {
            Some(strides)
        };
        out.push(TensorInfo {
            name,
            dtype,
            shape,
            file: file_index,
            storage: member.storage.clone(),
            element_offset,
            strides,
            big_endian,
        });
    }
    Ok((out, loaded.stand_ins))
}

/// The tensor of a NumPy array pickled inside the checkpoint: its bytes are copied out
/// of the pickle ([`super::Storage::Owned`]), checked against its shape by
/// [`pickle::ndarray_of`].
fn numpy_tensor(name: String, a: NdArray, file_index: usize) -> TensorInfo {
    let strides = if a.fortran && a.shape.len() > 1 {
        let mut s = vec![1usize; a.shape.len()];
        for i in 1..a.shape.len() {
            s[i] = s[i - 1].saturating_mul(a.shape[i - 1]);
        }
        (!is_c_contiguous(&a.shape, &s)).then_some(s)
    } else {
        None
    };
    TensorInfo {
        name,
        dtype: a.dtype,
        shape: a.shape,
        file: file_index,
        storage: super::Storage::Owned(super::OwnedBytes(std::sync::Arc::from(&*a.data))),
        element_offset: 0,
        strides,
        big_endian: a.big_endian,
    }
}

/// Warnings for the globals stood in for that posaudit does not know to be plain data.
fn stand_in_warnings(path: &Path, stand_ins: &[StandIn]) -> Vec<String> {
    stand_ins
        .iter()
        .filter(|s| !s.known)
        .map(|s| {
            let module = s.global.rsplit_once('.').map(|(m, _)| m).unwrap_or(&s.global);
            format!(
                "{}: pickled global `{}` ({} object{}) was read as inert data; a full unpickler (pickle.load, torch.load with weights_only=False) would import module `{}` and run its code to rebuild it",
                path.display(),
                shown(&s.global),
                s.count,
                if s.count == 1 { "" } else { "s" },
                shown(module)
            )
        })
        .collect()
}

/// Adds the stand-ins of one file to the checkpoint's, summing counts by global.
fn merge_stand_ins(all: &mut Vec<StandIn>, more: Vec<StandIn>) {
    for s in more {
        match all.iter_mut().find(|a| a.global == s.global) {
            Some(a) => a.count += s.count,
            None => all.push(s),
        }
    }
}

/// Opens one or more `torch.save` archives (a single file, or shards).
pub fn open_files(files: Vec<SourceFile>) -> Result<Opened, CheckpointError> {
    let mut tensors = Vec::new();
    let mut stand_ins = Vec::new();
    let mut warnings = Vec::new();
    for (i, file) in files.iter().enumerate() {
        let (t, s) = index_file(file, i)?;
        tensors.extend(t);
        warnings.extend(stand_in_warnings(&file.path, &s));
        merge_stand_ins(&mut stand_ins, s);
    }
    if tensors.is_empty() {
        warnings.push(format!(
            "{}: the pickled object holds no tensors",
            files
                .first()
                .map(|f| f.path.display().to_string())
                .unwrap_or_default()
        ));
    }
    Ok(Opened {
        format: Format::Pytorch,
        files,
        tensors,
        hints: None,
        warnings,
        stand_ins,
    })
}

/// Opens a sharded checkpoint from its `pytorch_model.bin.index.json` (same `weight_map`
/// layout as safetensors' index).
pub fn open_sharded(index_path: &Path) -> Result<Opened, CheckpointError> {
    super::safetensors::open_sharded_with(index_path, open_files)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn contiguity_ignores_unit_dimensions() {
        assert!(is_c_contiguous(&[4, 3], &[3, 1]));
        assert!(is_c_contiguous(&[1, 3], &[7, 1]));
        assert!(!is_c_contiguous(&[4, 3], &[1, 4]));
    }

    #[test]
    fn a_list_referenced_many_times_stops_at_the_visit_limit() {
        // L = [t] * 1000 built from memo references, then [L] * 1000 * 1000 by the same
        // trick: 10^9 paths from a pickle of a few kilobytes.
        let t = Value::Tensor(std::rc::Rc::new(TensorRef {
            key: "0".into(),
            storage_type: "FloatStorage".into(),
            storage_numel: 1,
            offset: 0,
            size: vec![1],
            stride: vec![1],
        }));
        let l = |v: Value| Value::List(std::rc::Rc::new(std::cell::RefCell::new(vec![v; 1000])));
        let root = l(l(l(t)));
        let mut out = Vec::new();
        let e = flatten(&root, "", 0, &mut Walk::default(), &mut out).unwrap_err();
        assert!(e.contains("more than"), "{e}");
        assert!(out.len() <= MAX_TENSORS);
    }

    #[test]
    fn legacy_magic_gets_its_own_message() {
        let mut b = LEGACY_MAGIC.to_vec();
        b.extend_from_slice(b".");
        assert!(not_zip_problem(&b).contains("legacy (pre-1.6)"));
    }
}
