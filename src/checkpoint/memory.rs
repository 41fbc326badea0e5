//! Checkpoints whose tables are held in memory instead of a file.
//!
//! The Python package hands over arrays that live in the interpreter (a model's
//! embedding weight, a table computed in a notebook): [`Checkpoint::from_memory`] builds
//! a checkpoint of one or more such tensors, each backed by the caller's bytes (no copy),
//! with the array's element type, shape and strides (in elements, as for PyTorch
//! storages). Everything downstream (detection, audit, compare, reports) runs unchanged.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use super::{Checkpoint, CheckpointError, Dtype, Format, SourceFile, Storage, TensorInfo};
use crate::config::ConfigHints;
use crate::kind::Kind;

/// One tensor held in memory.
pub struct MemoryTensor {
    /// The tensor's name in reports.
    pub name: String,
    /// Element type of `bytes`.
    pub dtype: Dtype,
    /// Logical shape, row-major.
    pub shape: Vec<usize>,
    /// Element strides per dimension; `None` means C-contiguous.
    pub strides: Option<Vec<usize>>,
    /// Index of the first element within `bytes`, in elements.
    pub element_offset: usize,
    /// True when elements are stored big-endian.
    pub big_endian: bool,
    /// The bytes every element lies in (the caller keeps them alive and unchanged).
    pub bytes: Arc<dyn AsRef<[u8]> + Send + Sync>,
    /// The kind, when the caller states it; `None` lets the detector decide.
    pub kind: Option<Kind>,
}

impl Checkpoint {
    /// A checkpoint of tensors held in memory. `label` stands for the path in reports
    /// and error messages; `config` gives the hints a `config.json` would. Every tensor is
    /// checked to lie inside its bytes; reading then works as for a mapped file.
    pub fn from_memory(
        label: &str,
        tensors: Vec<MemoryTensor>,
        config: Option<ConfigHints>,
    ) -> Result<Checkpoint, CheckpointError> {
        let path = PathBuf::from(label);
        let mut files = Vec::with_capacity(tensors.len());
        let mut infos = Vec::with_capacity(tensors.len());
        let mut kind_hints = Vec::new();
        for (i, t) in tensors.into_iter().enumerate() {
            if infos.iter().any(|o: &TensorInfo| o.name == t.name) {
                return Err(CheckpointError::invalid(
                    &path,
                    format!("two tables are named `{}`", t.name),
                ));
            }
            let len = (*t.bytes).as_ref().len();
            let info = TensorInfo {
                name: t.name,
                dtype: t.dtype,
                shape: t.shape,
                file: i,
                storage: Storage::Mapped { offset: 0, len },
                element_offset: t.element_offset,
                strides: t.strides,
                big_endian: t.big_endian,
            };
            check_extent(&path, &info, len)?;
            if let Some(kind) = t.kind {
                kind_hints.push((info.name.clone(), kind));
            }
            files.push(SourceFile {
                path: path.clone(),
                map: None,
                memory: Some(t.bytes),
            });
            infos.push(info);
        }
        let by_name = infos
            .iter()
            .enumerate()
            .map(|(i, t)| (t.name.clone(), i))
            .collect();
        Ok(Checkpoint {
            path,
            format: Format::Memory,
            files,
            tensors: infos,
            config,
            warnings: Vec::new(),
            stand_ins: Vec::new(),
            folder: None,
            by_name,
            kind_hints,
        })
    }
}

/// Checks that the element type has a size, the element count does not overflow, and
/// the furthest element lies inside the `len` bytes.
fn check_extent(path: &Path, t: &TensorInfo, len: usize) -> Result<(), CheckpointError> {
    let size = t.dtype.size().ok_or_else(|| {
        CheckpointError::invalid(
            path,
            format!("`{}`: element type {} has no fixed size", t.name, t.dtype),
        )
    })?;
    let numel = t.shape.iter().try_fold(1usize, |a, &b| a.checked_mul(b));
    if numel.is_none() {
        return Err(CheckpointError::invalid(
            path,
            format!("`{}`: shape {:?} has too many elements", t.name, t.shape),
        ));
    }
    if let Some(strides) = &t.strides
        && strides.len() != t.shape.len()
    {
        return Err(CheckpointError::invalid(
            path,
            format!(
                "`{}`: {} strides for {} dimensions",
                t.name,
                strides.len(),
                t.shape.len()
            ),
        ));
    }
    if numel == Some(0) {
        return Ok(());
    }
    let last = match &t.strides {
        None => numel.and_then(|n| t.element_offset.checked_add(n - 1)),
        Some(strides) => t
            .shape
            .iter()
            .zip(strides)
            .try_fold(t.element_offset, |acc, (d, s)| {
                acc.checked_add((d - 1).checked_mul(*s)?)
            }),
    };
    match last.and_then(|l| l.checked_add(1)?.checked_mul(size)) {
        Some(needed) if needed <= len => Ok(()),
        _ => Err(CheckpointError::invalid(
            path,
            format!(
                "`{}` of shape {:?} needs more bytes than the {len} bytes handed over",
                t.name, t.shape
            ),
        )),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tensor(
        name: &str,
        values: &[f32],
        shape: Vec<usize>,
        strides: Option<Vec<usize>>,
    ) -> MemoryTensor {
        let bytes: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
        MemoryTensor {
            name: name.into(),
            dtype: Dtype::F32,
            shape,
            strides,
            element_offset: 0,
            big_endian: false,
            bytes: Arc::new(bytes),
            kind: None,
        }
    }

    #[test]
    fn reads_back_what_was_handed_over_with_strides() {
        // A 2x3 table stored transposed (column-major): element (r, c) at c*2 + r.
        let stored = [1.0f32, 4.0, 2.0, 5.0, 3.0, 6.0];
        let ckpt = Checkpoint::from_memory(
            "<memory>",
            vec![tensor("t", &stored, vec![2, 3], Some(vec![1, 2]))],
            None,
        )
        .unwrap();
        let table = ckpt.read_table(&ckpt.tensors[0]).unwrap();
        assert_eq!(table, ndarray::arr2(&[[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]]));
        assert_eq!(ckpt.format, Format::Memory);
        assert_eq!(ckpt.total_bytes(), 24);
    }

    #[test]
    fn rejects_a_table_larger_than_its_bytes_and_duplicate_names() {
        let short = Checkpoint::from_memory(
            "<memory>",
            vec![tensor("t", &[1.0; 5], vec![2, 3], None)],
            None,
        );
        let message = short.unwrap_err().to_string();
        assert!(
            message.starts_with("<memory>: `t` of shape [2, 3] needs more bytes"),
            "{message}"
        );
        let twice = Checkpoint::from_memory(
            "<memory>",
            vec![
                tensor("t", &[1.0; 6], vec![2, 3], None),
                tensor("t", &[1.0; 6], vec![2, 3], None),
            ],
            None,
        );
        assert!(
            twice
                .unwrap_err()
                .to_string()
                .contains("two tables are named `t`")
        );
    }
}
