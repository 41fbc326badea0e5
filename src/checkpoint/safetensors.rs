//! safetensors: single files, folders of shards, and sharded folders with an index.
//!
//! Header parsing and validation (size cap, UTF-8, JSON, contiguous non-overlapping
//! offsets, exact coverage of the data section) are the `safetensors` crate's; this module
//! turns its errors into messages that say what is wrong with which file.

use std::collections::BTreeMap;
use std::path::Path;

use safetensors::SafeTensors;
use safetensors::tensor::SafeTensorError;

use super::{CheckpointError, Dtype, Format, Opened, SourceFile, Storage, TensorInfo};

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
        SafeTensorError::InvalidHeader(e) => format!("header is not UTF-8 text: {e}"),
        SafeTensorError::InvalidHeaderDeserialization(e) => {
            format!("header is not valid safetensors JSON: {e}")
        }
        SafeTensorError::InvalidOffset(name) => format!(
            "tensor `{name}`: data offsets overlap another tensor or leave a gap"
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
        other => format!("invalid safetensors file: {other}"),
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
    let mut warnings = Vec::new();
    check_duplicate_names(&files, &tensors, &mut warnings);
    Ok(Opened {
        format: Format::Safetensors,
        files,
        tensors,
        hints: None,
        warnings,
    })
}

fn check_duplicate_names(files: &[SourceFile], tensors: &[TensorInfo], warnings: &mut Vec<String>) {
    let mut seen: BTreeMap<&str, usize> = BTreeMap::new();
    for t in tensors {
        if let Some(first) = seen.insert(&t.name, t.file) {
            warnings.push(format!(
                "tensor `{}` appears in both {} and {}; both are listed",
                t.name,
                files[first].display_name(),
                files[t.file].display_name()
            ));
        }
    }
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
    let text =
        std::fs::read_to_string(index_path).map_err(|e| CheckpointError::io(index_path, e))?;
    let json: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
        CheckpointError::invalid(index_path, format!("index is not valid JSON: {e}"))
    })?;
    let map = json
        .get("weight_map")
        .and_then(|m| m.as_object())
        .ok_or_else(|| CheckpointError::invalid(index_path, "index has no `weight_map` object"))?;
    let dir = index_path.parent().unwrap_or(Path::new("."));
    let mut shard_names: Vec<String> = Vec::new();
    for (tensor, shard) in map {
        let shard = shard.as_str().ok_or_else(|| {
            CheckpointError::invalid(
                index_path,
                format!("weight_map entry `{tensor}` is not a file name"),
            )
        })?;
        // Shards must sit beside the index: refuse paths that climb out of the folder.
        if shard.contains('/') || shard.contains('\\') || shard == ".." {
            return Err(CheckpointError::invalid(
                index_path,
                format!("weight_map names shard `{shard}` outside the checkpoint folder"),
            ));
        }
        if !shard_names.iter().any(|s| s == shard) {
            shard_names.push(shard.to_string());
        }
    }
    shard_names.sort();
    let mut files = Vec::with_capacity(shard_names.len());
    for shard in &shard_names {
        let p = dir.join(shard);
        if !p.is_file() {
            return Err(CheckpointError::invalid(
                index_path,
                format!("shard `{shard}` named in weight_map is missing"),
            ));
        }
        files.push(SourceFile::open(&p)?);
    }
    let mut opened = open_files(files)?;
    for (tensor, shard) in map {
        let shard = shard.as_str().unwrap_or_default();
        let found = opened
            .tensors
            .iter()
            .any(|t| t.name == *tensor && opened.files[t.file].display_name() == shard);
        if !found {
            opened.warnings.push(format!(
                "{}: weight_map says `{tensor}` is in {shard}, but that shard does not hold it",
                index_path.display()
            ));
        }
    }
    Ok(opened)
}
