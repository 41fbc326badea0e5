//! safetensors: single files, folders of shards, and sharded folders with an index.
//!
//! Header parsing and validation (size cap, UTF-8, JSON, contiguous non-overlapping
//! offsets, exact coverage of the data section) are the `safetensors` crate's; this module
//! turns its errors into messages that say what is wrong with which file.

use std::collections::{BTreeSet, HashMap};
use std::path::Path;

use safetensors::SafeTensors;
use safetensors::tensor::SafeTensorError;

use super::{
    CheckpointError, Dtype, Format, Opened, SourceFile, Storage, TensorInfo, limits, shown,
};

/// Largest header the `safetensors` crate accepts (its own limit).
const MAX_HEADER: u64 = 100_000_000;

fn dtype_of(d: safetensors::Dtype) -> Dtype {
    use safetensors::Dtype as S;
    match d {
        S::F64 => Dtype::F64,
        S::F32 => Dtype::F32,
        S::F16 => Dtype::F16,
        S::BF16 => Dtype::BF16,
        S::I64 => Dtype::I64,
        S::I32 => Dtype::I32,
        S::I16 => Dtype::I16,
        S::I8 => Dtype::I8,
        S::U64 => Dtype::U64,
        S::U32 => Dtype::U32,
        S::U16 => Dtype::U16,
        S::U8 => Dtype::U8,
        S::BOOL => Dtype::Bool,
        other => Dtype::Other {
            name: format!("{other:?}"),
        },
    }
}

/// Explains a header error in terms of this file's numbers.
fn explain(path: &Path, bytes: &[u8], err: SafeTensorError) -> CheckpointError {
    let len = bytes.len() as u64;
    let declared = bytes
        .get(..8)
        .map(|b| u64::from_le_bytes(b.try_into().unwrap_or([0; 8])));
    let problem = match err {
        SafeTensorError::HeaderTooSmall => {
            format!("file is {len} bytes, too short for a safetensors header (8-byte length, then JSON)")
        }
        SafeTensorError::HeaderTooLarge => format!(
            "header length {} is absurd (file is {len} bytes; safetensors allows at most {MAX_HEADER})",
            declared.unwrap_or(0)
        ),
        SafeTensorError::InvalidHeaderLength => format!(
            "header length {} runs past the end of the file ({len} bytes): truncated or not safetensors",
            declared.unwrap_or(0)
        ),
        SafeTensorError::InvalidHeader(e) => format!(
            "header is not UTF-8 text: {}",
            limits::shown_max(&e.to_string(), 240)
        ),
        SafeTensorError::InvalidHeaderDeserialization(e) => {
            format!(
                "header is not valid safetensors JSON: {}",
                limits::shown_max(&e.to_string(), 240)
            )
        }
        SafeTensorError::InvalidOffset(name) => format!(
            "tensor `{}`: data offsets overlap another tensor or leave a gap",
            shown(&name)
        ),
        SafeTensorError::TensorInvalidInfo => {
            "a tensor's byte range does not match its shape and dtype".to_string()
        }
        SafeTensorError::MetadataIncompleteBuffer => {
            "tensor data does not end where the file ends: truncated, offsets past the end, or trailing bytes".to_string()
        }
        SafeTensorError::ValidationOverflow => {
            "a tensor's shape is so large that its size overflows".to_string()
        }
        SafeTensorError::MisalignedSlice => {
            "a sub-byte tensor does not end on a byte boundary".to_string()
        }
        other => format!("invalid safetensors file: {}", shown(&other.to_string())),
    };
    CheckpointError::invalid(path, problem)
}

/// Parses one file's header into tensor records pointing at file index `file_index`.
fn index_file(file: &SourceFile, file_index: usize) -> Result<Vec<TensorInfo>, CheckpointError> {
    let bytes = file.bytes();
    if bytes.is_empty() {
        return Err(CheckpointError::invalid(&file.path, "file is empty"));
    }
    let (n, metadata) =
        SafeTensors::read_metadata(bytes).map_err(|e| explain(&file.path, bytes, e))?;
    let data_start = 8 + n;
    let infos = metadata.tensors();
    let mut out = Vec::with_capacity(infos.len());
    for name in metadata.offset_keys() {
        let Some(info) = infos.get(&name) else {
            continue;
        };
        let (s, e) = info.data_offsets;
        out.push(TensorInfo {
            name,
            dtype: dtype_of(info.dtype),
            shape: info.shape.clone(),
            file: file_index,
            storage: Storage::Mapped {
                offset: data_start + s,
                len: e - s,
            },
            element_offset: 0,
            strides: None,
            big_endian: false,
        });
    }
    Ok(out)
}

/// Opens one or more safetensors files (a single file, or shards without an index).
pub fn open_files(files: Vec<SourceFile>) -> Result<Opened, CheckpointError> {
    let mut tensors = Vec::new();
    for (i, file) in files.iter().enumerate() {
        tensors.extend(index_file(file, i)?);
    }
    // A name held twice (by two shards without an index) is refused when the checkpoint
    // is indexed by name (`Checkpoint::open`), for every format alike.
    Ok(Opened {
        format: Format::Safetensors,
        files,
        tensors,
        hints: None,
        warnings: Vec::new(),
        stand_ins: Vec::new(),
    })
}

/// Opens a sharded checkpoint from its `*.safetensors.index.json`.
pub fn open_sharded(index_path: &Path) -> Result<Opened, CheckpointError> {
    open_sharded_with(index_path, open_files)
}

/// Opens the shards an index's `weight_map` names with `open_files` (the format's own
/// loader) and checks the map against what the shards hold. Shared with the PyTorch
/// format, whose `pytorch_model.bin.index.json` has the same layout.
pub(crate) fn open_sharded_with(
    index_path: &Path,
    open_files: fn(Vec<SourceFile>) -> Result<Opened, CheckpointError>,
) -> Result<Opened, CheckpointError> {
    let text = super::read_small_file(index_path, limits::MAX_INDEX_BYTES, "shard index")?;
    let json: serde_json::Value = serde_json::from_slice(&text).map_err(|e| {
        CheckpointError::invalid(index_path, format!("index is not valid JSON: {e}"))
    })?;
    let map = json
        .get("weight_map")
        .and_then(|m| m.as_object())
        .ok_or_else(|| CheckpointError::invalid(index_path, "index has no `weight_map` object"))?;
    if map.is_empty() {
        return Err(CheckpointError::invalid(
            index_path,
            "index's `weight_map` is empty: it names no tensor and no shard",
        ));
    }
    let dir = index_path.parent().unwrap_or(Path::new("."));
    let mut shard_names: BTreeSet<String> = BTreeSet::new();
    for (tensor, shard) in map {
        let shard = shard.as_str().ok_or_else(|| {
            CheckpointError::invalid(
                index_path,
                format!("weight_map entry `{}` is not a file name", shown(tensor)),
            )
        })?;
        // Shards must sit beside the index: refuse paths that climb out of the folder.
        if shard.contains('/') || shard.contains('\\') || shard == ".." {
            return Err(CheckpointError::invalid(
                index_path,
                format!(
                    "weight_map names shard `{}` outside the checkpoint folder",
                    shown(shard)
                ),
            ));
        }
        shard_names.insert(shard.to_string());
    }
    let mut files = Vec::with_capacity(shard_names.len());
    for shard in &shard_names {
        let p = dir.join(shard);
        if std::fs::metadata(&p).is_err() {
            return Err(CheckpointError::invalid(
                index_path,
                format!("shard `{}` named in weight_map is missing", shown(shard)),
            ));
        }
        files.push(SourceFile::open(&p)?);
    }
    let mut opened = open_files(files)?;
    // Check the map against what the shards hold: one pass over each (no search per entry).
    let held: HashMap<&str, usize> = opened
        .tensors
        .iter()
        .map(|t| (t.name.as_str(), t.file))
        .collect();
    let mut warnings = Vec::new();
    let (mut missing, mut elsewhere) = (Vec::new(), Vec::new());
    for (tensor, shard) in map {
        let shard = shard.as_str().unwrap_or_default();
        match held.get(tensor.as_str()) {
            None => missing.push(format!("`{}` ({})", shown(tensor), shown(shard))),
            Some(&f) if opened.files[f].display_name() != shard => elsewhere.push(format!(
                "`{}` (index: {}, found in {})",
                shown(tensor),
                shown(shard),
                opened.files[f].display_name()
            )),
            Some(_) => {}
        }
    }
    let unlisted: Vec<String> = opened
        .tensors
        .iter()
        .filter(|t| !map.contains_key(&t.name))
        .map(|t| format!("`{}`", shown(&t.name)))
        .collect();
    let summary = |items: &[String]| {
        let mut s = items.iter().take(3).cloned().collect::<Vec<_>>().join(", ");
        if items.len() > 3 {
            s.push_str(&format!(" and {} more", items.len() - 3));
        }
        s
    };
    if !missing.is_empty() {
        warnings.push(format!(
            "{}: weight_map names {} tensor(s) that no shard holds: {}",
            index_path.display(),
            missing.len(),
            summary(&missing)
        ));
    }
    if !elsewhere.is_empty() {
        warnings.push(format!(
            "{}: {} tensor(s) are in another shard than weight_map says: {}",
            index_path.display(),
            elsewhere.len(),
            summary(&elsewhere)
        ));
    }
    if !unlisted.is_empty() {
        warnings.push(format!(
            "{}: the shards hold {} tensor(s) that weight_map does not name (analysed all the same): {}",
            index_path.display(),
            unlisted.len(),
            summary(&unlisted)
        ));
    }
    opened.warnings.extend(warnings);
    Ok(opened)
}
