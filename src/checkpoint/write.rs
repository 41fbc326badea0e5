//! Writing safetensors: a copy of one checkpoint file with some tensors replaced.
//!
//! The header is rebuilt from the source's own header JSON (its `__metadata__` kept
//! entry by entry, the dtype strings kept as written), with the tensors in the source's
//! storage order and new data offsets. Every tensor that is not replaced is copied byte
//! for byte from the source file with `std::io::copy` over a bounded reader (on Linux
//! the kernel copies, with no user-space buffer), so memory stays of the order of the
//! replacements, not of the file. The file is written under a temporary name in the
//! destination folder and renamed when complete: an interrupted run leaves no
//! half-written weight file under the final name.
//!
//! Layout written (the safetensors format): an 8-byte little-endian header length, the
//! JSON header padded with spaces to a multiple of 8 bytes, then the tensor data.

use std::fs::{File, OpenOptions};
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use serde_json::{Map, Value, json};

use super::{CheckpointError, SourceFile, Storage, TensorInfo};

/// A tensor to write in place of the source's tensor of the same name.
#[derive(Debug, Clone)]
pub struct Replacement {
    /// Tensor name (as in the source).
    pub name: String,
    /// New shape.
    pub shape: Vec<usize>,
    /// Little-endian element bytes, `product(shape) × element size` of the source's dtype.
    pub bytes: Vec<u8>,
}

/// What was written for one file.
#[derive(Debug, Clone, serde::Serialize)]
pub struct WrittenFile {
    /// File name in the destination folder.
    pub name: String,
    /// Size in bytes.
    pub bytes: u64,
    /// Number of tensors in it.
    pub tensors: usize,
    /// Names of the tensors written from new values (the others are byte copies).
    pub replaced: Vec<String>,
}

/// The header JSON of a safetensors file that was opened (and so validated) before.
pub fn header_json(file: &SourceFile) -> Result<Map<String, Value>, CheckpointError> {
    let bytes = file.bytes();
    let n = bytes
        .get(..8)
        .map(|b| u64::from_le_bytes(b.try_into().unwrap_or([0; 8])) as usize)
        .ok_or_else(|| {
            CheckpointError::invalid(&file.path, "too short for a safetensors header")
        })?;
    let text = bytes.get(8..8usize.saturating_add(n)).ok_or_else(|| {
        CheckpointError::invalid(&file.path, "header runs past the end of the file")
    })?;
    serde_json::from_slice(text).map_err(|e| {
        CheckpointError::invalid(&file.path, format!("header is not a JSON object: {e}"))
    })
}

/// Writes `dest` (a new file: refused if it exists) as a copy of `source`, whose tensors
/// are `tensors` (the checkpoint's records of this file), with `replacements` instead
/// of the tensors of the same names and `metadata` entries added to `__metadata__`.
/// An existing `dest` is refused unless `overwrite`.
pub fn write_copy(
    source: &SourceFile,
    tensors: &[&TensorInfo],
    replacements: &[Replacement],
    metadata: &[(String, String)],
    dest: &Path,
    overwrite: bool,
) -> Result<WrittenFile, CheckpointError> {
    let header = header_json(source)?;
    let mut ordered: Vec<&TensorInfo> = tensors.to_vec();
    ordered.sort_by_key(|t| match t.storage {
        Storage::Mapped { offset, .. } => offset,
        _ => usize::MAX,
    });
    let mut new_header = Map::new();
    let mut meta = header
        .get("__metadata__")
        .and_then(Value::as_object)
        .cloned()
        .unwrap_or_default();
    for (k, v) in metadata {
        meta.insert(k.clone(), Value::String(v.clone()));
    }
    if !meta.is_empty() {
        new_header.insert("__metadata__".into(), Value::Object(meta));
    }
    // (source offset, length) of each copied tensor, or the replacement's bytes.
    enum Data<'a> {
        Copy(u64, u64),
        New(&'a [u8]),
    }
    let mut plan = Vec::with_capacity(ordered.len());
    let mut at = 0u64;
    let mut replaced = Vec::new();
    for t in &ordered {
        let entry = header
            .get(&t.name)
            .and_then(Value::as_object)
            .ok_or_else(|| {
                CheckpointError::invalid(
                    &source.path,
                    format!("header has no entry for `{}`", t.name),
                )
            })?;
        let dtype = entry.get("dtype").cloned().unwrap_or(Value::Null);
        let (shape, data, len) = match replacements.iter().find(|r| r.name == t.name) {
            Some(r) => {
                replaced.push(r.name.clone());
                (r.shape.clone(), Data::New(&r.bytes), r.bytes.len() as u64)
            }
            None => {
                let Storage::Mapped { offset, len } = t.storage else {
                    return Err(CheckpointError::invalid(
                        &source.path,
                        format!("tensor `{}` is not stored in the file", t.name),
                    ));
                };
                (
                    t.shape.clone(),
                    Data::Copy(offset as u64, len as u64),
                    len as u64,
                )
            }
        };
        new_header.insert(
            t.name.clone(),
            json!({"dtype": dtype, "shape": shape, "data_offsets": [at, at + len]}),
        );
        at += len;
        plan.push(data);
    }
    if let Some(missing) = replacements.iter().find(|r| !replaced.contains(&r.name)) {
        return Err(CheckpointError::invalid(
            &source.path,
            format!("holds no tensor `{}` to replace", missing.name),
        ));
    }
    let mut text = serde_json::to_vec(&Value::Object(new_header))
        .map_err(|e| CheckpointError::invalid(&source.path, format!("cannot write header: {e}")))?;
    while text.len() % 8 != 0 {
        text.push(b' ');
    }

    let tmp = temporary_name(dest);
    let io = |e: std::io::Error| CheckpointError::io(dest, e);
    let mut out = OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&tmp)
        .map_err(io)?;
    let result = (|| -> Result<(), CheckpointError> {
        let mut input =
            File::open(&source.path).map_err(|e| CheckpointError::io(&source.path, e))?;
        out.write_all(&(text.len() as u64).to_le_bytes())
            .map_err(io)?;
        out.write_all(&text).map_err(io)?;
        for data in &plan {
            match data {
                Data::New(bytes) => out.write_all(bytes).map_err(io)?,
                Data::Copy(offset, len) => {
                    input
                        .seek(SeekFrom::Start(*offset))
                        .map_err(|e| CheckpointError::io(&source.path, e))?;
                    let copied = std::io::copy(&mut (&input).take(*len), &mut out).map_err(io)?;
                    if copied != *len {
                        return Err(CheckpointError::invalid(
                            &source.path,
                            "file became shorter while it was copied",
                        ));
                    }
                }
            }
        }
        out.sync_all().map_err(io)?;
        Ok(())
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(e);
    }
    if dest.exists() && !overwrite {
        let _ = std::fs::remove_file(&tmp);
        return Err(CheckpointError::invalid(
            dest,
            "exists already; not replaced",
        ));
    }
    std::fs::rename(&tmp, dest).map_err(io)?;
    Ok(WrittenFile {
        name: dest
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default(),
        bytes: 8 + text.len() as u64 + at,
        tensors: ordered.len(),
        replaced,
    })
}

/// Writes small text (config.json, an index) to the new file `dest`, through a
/// temporary name and a rename; refused if `dest` exists unless `overwrite`.
pub fn write_new_text(dest: &Path, text: &str, overwrite: bool) -> Result<(), CheckpointError> {
    let tmp = temporary_name(dest);
    let io = |e: std::io::Error| CheckpointError::io(dest, e);
    let mut out = OpenOptions::new()
        .write(true)
        .create_new(true)
        .open(&tmp)
        .map_err(io)?;
    let written = out.write_all(text.as_bytes()).and_then(|_| out.sync_all());
    if let Err(e) = written {
        let _ = std::fs::remove_file(&tmp);
        return Err(io(e));
    }
    if dest.exists() && !overwrite {
        let _ = std::fs::remove_file(&tmp);
        return Err(CheckpointError::invalid(
            dest,
            "exists already; not replaced",
        ));
    }
    std::fs::rename(&tmp, dest).map_err(io)
}

/// `.NAME.partial` beside `dest`.
fn temporary_name(dest: &Path) -> PathBuf {
    let name = dest
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    dest.with_file_name(format!(".{name}.partial"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::checkpoint::Checkpoint;

    /// A file written by the `safetensors` crate's own serializer (the format's Rust
    /// reference writer), copied with one tensor replaced: the others come back
    /// bit-identical, the replacement as given, the metadata kept.
    #[test]
    fn copy_keeps_other_tensors_and_metadata() {
        use safetensors::tensor::TensorView;
        let dir = tempfile::tempdir().unwrap();
        let a: Vec<u8> = (0..24u8).collect();
        let b: Vec<u8> = (100..116u8).collect();
        let views = vec![
            (
                "a",
                TensorView::new(safetensors::Dtype::F32, vec![2, 3], &a).unwrap(),
            ),
            (
                "b",
                TensorView::new(safetensors::Dtype::F16, vec![8], &b).unwrap(),
            ),
        ];
        let mut meta = std::collections::HashMap::new();
        meta.insert("format".to_string(), "pt".to_string());
        let src = dir.path().join("in.safetensors");
        safetensors::serialize_to_file(views, Some(meta), &src).unwrap();
        let ckpt = Checkpoint::open(&src).unwrap();
        let tensors: Vec<&TensorInfo> = ckpt.tensors.iter().collect();
        let new_a: Vec<u8> = (0..32u8).rev().collect();
        let dest = dir.path().join("out.safetensors");
        let written = write_copy(
            &ckpt.files[0],
            &tensors,
            &[Replacement {
                name: "a".into(),
                shape: vec![2, 4],
                bytes: new_a.clone(),
            }],
            &[("edited".into(), "a".into())],
            &dest,
            false,
        )
        .unwrap();
        assert_eq!(written.replaced, vec!["a".to_string()]);
        let bytes = std::fs::read(&dest).unwrap();
        assert_eq!(written.bytes, bytes.len() as u64);
        let st = safetensors::SafeTensors::deserialize(&bytes).unwrap();
        assert_eq!(st.tensor("a").unwrap().data(), &new_a[..]);
        assert_eq!(st.tensor("a").unwrap().shape(), &[2, 4]);
        assert_eq!(st.tensor("b").unwrap().data(), &b[..]);
        let (_, m) = safetensors::SafeTensors::read_metadata(&bytes).unwrap();
        let m = m.metadata().clone().unwrap();
        assert_eq!(m.get("format").map(String::as_str), Some("pt"));
        assert_eq!(m.get("edited").map(String::as_str), Some("a"));
        // Never over an existing file, and no temporary left behind.
        assert!(write_copy(&ckpt.files[0], &tensors, &[], &[], &dest, false).is_err());
        assert!(!dir.path().join(".out.safetensors.partial").exists());
    }
}
