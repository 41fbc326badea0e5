//! The checkpoint index: one view over every supported file format.
//!
//! Opening a checkpoint reads headers only and produces an index of tensors (name, dtype,
//! shape, where the bytes are). Tensor data is read on demand from a read-only memory map
//! and converted to `f64`, so memory stays of the order of the tables analysed, never of
//! the checkpoint. Each format lives in its own module and only has to produce
//! [`TensorInfo`] records; reading, conversion and strides are handled here once.
//!
//! Adding a format: write `checkpoint/<format>.rs` with `fn open(...) -> Result<Opened>`,
//! add a [`Format`] variant, and route to it in [`Checkpoint::open`] / [`sniff`]. Nothing
//! in the analyses or the report changes.

mod archive;
pub mod ctranslate2;
pub mod dtype;
pub mod ggml_quants;
pub mod gguf;
pub mod limits;
pub mod memory;
pub mod numpy;
pub mod onnx;
pub mod pickle;
pub mod pytorch;
pub mod safetensors;

use std::borrow::Cow;
use std::collections::HashMap;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use memmap2::Mmap;
use ndarray::{Array1, Array2, ArrayD, IxDyn};

pub use dtype::Dtype;
pub use limits::{AnalysisBudget, shown};

use crate::config::ConfigHints;

/// The on-disk format of a checkpoint.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Format {
    /// `.safetensors`, single file or sharded.
    Safetensors,
    /// `torch.save` zip archives (`.bin`, `.pt`, `.pth`, `.ckpt`).
    Pytorch,
    /// NumPy `.npy` / `.npz`.
    Numpy,
    /// GGUF v2/v3.
    Gguf,
    /// Tables handed over in memory (the Python package's arrays), see [`memory`].
    Memory,
    /// ONNX model (`.onnx`, with external data files).
    Onnx,
    /// CTranslate2 `model.bin`.
    Ctranslate2,
}

impl std::fmt::Display for Format {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Format::Safetensors => "safetensors",
            Format::Pytorch => "pytorch",
            Format::Numpy => "numpy",
            Format::Gguf => "gguf",
            Format::Memory => "memory",
            Format::Onnx => "onnx",
            Format::Ctranslate2 => "ctranslate2",
        })
    }
}

/// A problem with the input: the file named cannot be used as a checkpoint.
///
/// Every variant's message names the file; the command line prints it as one line and
/// exits with code 2.
#[derive(Debug, thiserror::Error)]
pub enum CheckpointError {
    /// The path (or a file the checkpoint names) could not be opened or read.
    #[error("{}: cannot read: {source}", limits::escape_controls(&path.display().to_string()))]
    Io {
        /// The file.
        path: PathBuf,
        /// The operating-system error.
        source: std::io::Error,
    },
    /// The file is not a valid checkpoint of its format.
    #[error("{}: {}", limits::escape_controls(&path.display().to_string()), limits::escape_controls(problem))]
    Invalid {
        /// The file.
        path: PathBuf,
        /// What is wrong, lower case, no final period.
        problem: String,
    },
    /// The path holds nothing posaudit can open.
    #[error("{}: {}", limits::escape_controls(&path.display().to_string()), limits::escape_controls(problem))]
    NotACheckpoint {
        /// The file or folder.
        path: PathBuf,
        /// Why it was not recognised.
        problem: String,
    },
}

impl CheckpointError {
    /// Shorthand for [`CheckpointError::Invalid`].
    pub fn invalid(path: &Path, problem: impl Into<String>) -> Self {
        CheckpointError::Invalid {
            path: path.to_path_buf(),
            problem: problem.into(),
        }
    }

    /// Shorthand for [`CheckpointError::Io`].
    pub fn io(path: &Path, source: std::io::Error) -> Self {
        CheckpointError::Io {
            path: path.to_path_buf(),
            source,
        }
    }
}

/// Where the bytes of a tensor's storage are.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Storage {
    /// A byte range of a memory-mapped file.
    Mapped {
        /// Byte offset of the first byte in the file.
        offset: usize,
        /// Length in bytes.
        len: usize,
    },
    /// A compressed (deflate) member of a zip archive: decompressed when read.
    ZipMember {
        /// The member's name inside the archive.
        member: String,
        /// Bytes at the start of the inflated member that precede the storage (the
        /// header of an `.npy` member of an `.npz`; 0 for torch storages).
        skip: usize,
        /// The member's inflated size as the archive declares it.
        size: u64,
        /// The member's compressed size (bytes really in the file).
        compressed: u64,
    },
    /// Bytes copied out of the file when opening (a NumPy array pickled inside a torch
    /// checkpoint, whose bytes the pickle holds as text).
    Owned(OwnedBytes),
    /// Packed protobuf varints (ONNX typed fields), decoded when read into `width`-byte
    /// little-endian integers.
    Varints {
        /// Byte offset of the packed run in the file.
        offset: usize,
        /// Length of the run in bytes.
        len: usize,
        /// Bytes per decoded element.
        width: usize,
    },
}

/// Bytes owned by the index ([`Storage::Owned`]); printed by length only.
#[derive(Clone, PartialEq, Eq)]
pub struct OwnedBytes(pub Arc<[u8]>);

impl std::fmt::Debug for OwnedBytes {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "OwnedBytes({} bytes)", self.0.len())
    }
}

/// One tensor of the checkpoint: everything except its values.
#[derive(Debug, Clone)]
pub struct TensorInfo {
    /// Full name, with nested containers flattened to dotted names.
    pub name: String,
    /// Element type.
    pub dtype: Dtype,
    /// Logical shape, row-major (the last dimension varies fastest).
    pub shape: Vec<usize>,
    /// Index into [`Checkpoint::files`] of the file holding the bytes.
    pub file: usize,
    /// Where the storage bytes are.
    pub storage: Storage,
    /// Index of the tensor's first element within its storage, in elements.
    pub element_offset: usize,
    /// Element strides per dimension; `None` means C-contiguous.
    pub strides: Option<Vec<usize>>,
    /// True when elements are stored big-endian (some `.npy` files).
    pub big_endian: bool,
}

impl TensorInfo {
    /// Number of elements (saturating; formats validate against overflow at open).
    pub fn numel(&self) -> usize {
        self.shape
            .iter()
            .try_fold(1usize, |a, &b| a.checked_mul(b))
            .unwrap_or(usize::MAX)
    }

    /// One past the furthest storage element the tensor addresses (offset + Σ (dim−1)·
    /// stride + 1), 0 for an empty tensor; `None` on overflow.
    pub fn extent(&self) -> Option<usize> {
        let n = self.numel();
        if n == 0 {
            return Some(0);
        }
        let last = match &self.strides {
            None => self.element_offset.checked_add(n - 1),
            Some(strides) => self
                .shape
                .iter()
                .zip(strides)
                .try_fold(self.element_offset, |acc, (d, s)| {
                    acc.checked_add((d - 1).checked_mul(*s)?)
                }),
        };
        last?.checked_add(1)
    }

    /// Bytes of the tensor's values in its stored type, when the type has a fixed size.
    pub fn nbytes(&self) -> Option<usize> {
        self.dtype.size()?.checked_mul(self.numel())
    }

    /// The shape with leading size-1 dimensions removed (`(1, 512, 768)` → `(512, 768)`).
    pub fn squeezed_shape(&self) -> Vec<usize> {
        let first = self
            .shape
            .iter()
            .position(|&s| s != 1)
            .unwrap_or(self.shape.len());
        self.shape[first..].to_vec()
    }

    /// Rows and columns when the tensor is read as a table: the last dimension is the
    /// width, all others are flattened into rows. `None` for 0-d tensors.
    pub fn as_table_dims(&self) -> Option<(usize, usize)> {
        let (&cols, rest) = self.shape.split_last()?;
        let rows = rest.iter().try_fold(1usize, |a, &b| a.checked_mul(b))?;
        Some((rows, cols))
    }
}

/// One file of a checkpoint, memory-mapped read-only.
pub struct SourceFile {
    /// The file's path as given or found.
    pub path: PathBuf,
    map: Option<Mmap>,
    /// Bytes held in memory instead of a mapped file ([`memory`]); `map` is then `None`.
    memory: Option<Arc<dyn AsRef<[u8]> + Send + Sync>>,
}

impl std::fmt::Debug for SourceFile {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SourceFile")
            .field("path", &self.path)
            .field("len", &self.bytes().len())
            .finish()
    }
}

impl SourceFile {
    /// Opens and maps a file read-only. An empty file maps to an empty slice. Only
    /// regular files are opened ([`open_regular`]): a named pipe called
    /// `model.safetensors` is refused instead of blocking.
    pub fn open(path: &Path) -> Result<Self, CheckpointError> {
        let (file, meta) = open_regular(path)?;
        let map = if meta.len() == 0 {
            None
        } else {
            // SAFETY: the map is read-only and private to this process. If another process
            // truncates the file while we read it, reads may fault (SIGBUS); posaudit reads
            // checkpoints that are not being written, and the README says so.
            Some(unsafe { Mmap::map(&file) }.map_err(|e| CheckpointError::io(path, e))?)
        };
        Ok(SourceFile {
            path: path.to_path_buf(),
            map,
            memory: None,
        })
    }

    /// The whole file's bytes.
    pub fn bytes(&self) -> &[u8] {
        if let Some(memory) = &self.memory {
            return (**memory).as_ref();
        }
        self.map.as_deref().unwrap_or(&[])
    }

    /// The file name without folders, for reports.
    pub fn display_name(&self) -> String {
        self.path
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_else(|| self.path.display().to_string())
    }
}

/// Opens `path` for reading only when it is a regular file (following symbolic links).
///
/// The type is checked before opening (a FIFO would block `open` until a writer comes),
/// the open itself is non-blocking on Unix, and the opened file's type is checked again
/// (the name could have been swapped in between). Used for weights, shard indexes and
/// `config.json` alike.
pub fn open_regular(path: &Path) -> Result<(File, std::fs::Metadata), CheckpointError> {
    let not_regular = |meta: &std::fs::Metadata| {
        let what = if meta.is_dir() {
            "is a folder, expected a file".to_string()
        } else {
            "is not a regular file (a named pipe, socket or device); posaudit opens regular files only".to_string()
        };
        CheckpointError::invalid(path, what)
    };
    let before = std::fs::metadata(path).map_err(|e| CheckpointError::io(path, e))?;
    if !before.is_file() {
        return Err(not_regular(&before));
    }
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.custom_flags(libc::O_NONBLOCK);
    }
    let file = options
        .open(path)
        .map_err(|e| CheckpointError::io(path, e))?;
    let meta = file.metadata().map_err(|e| CheckpointError::io(path, e))?;
    if !meta.is_file() {
        return Err(not_regular(&meta));
    }
    Ok((file, meta))
}

/// Reads a small regular file whole, refusing one larger than `limit` bytes before
/// reading anything. `what` names the limit in the error ("config.json", "shard index").
pub fn read_small_file(path: &Path, limit: u64, what: &str) -> Result<Vec<u8>, CheckpointError> {
    use std::io::Read;
    let (file, meta) = open_regular(path)?;
    if meta.len() > limit {
        return Err(CheckpointError::invalid(
            path,
            format!(
                "is {} bytes, more than the {} MiB limit for a {what}",
                meta.len(),
                limit >> 20
            ),
        ));
    }
    let mut out = Vec::with_capacity(meta.len() as usize);
    // The length can grow after the check: never read more than the limit (+1 to notice).
    file.take(limit + 1)
        .read_to_end(&mut out)
        .map_err(|e| CheckpointError::io(path, e))?;
    if out.len() as u64 > limit {
        return Err(CheckpointError::invalid(
            path,
            format!("is more than the {} MiB limit for a {what}", limit >> 20),
        ));
    }
    Ok(out)
}

/// What a format module returns from opening a path.
#[derive(Debug)]
pub struct Opened {
    /// The format.
    pub format: Format,
    /// The files, mapped.
    pub files: Vec<SourceFile>,
    /// The tensors, in file order.
    pub tensors: Vec<TensorInfo>,
    /// Hints the format's own metadata gives (GGUF key/values); merged with config.json.
    pub hints: Option<ConfigHints>,
    /// Non-fatal problems met while opening.
    pub warnings: Vec<String>,
    /// Pickled globals read as inert stand-ins (torch checkpoints; empty otherwise).
    pub stand_ins: Vec<pickle::StandIn>,
}

/// How a folder was resolved to the weight files read: the hub snapshot (when the folder
/// is a Hugging Face hub cache entry), the file chosen and why, and the other weight
/// files that were not read.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct FolderChoice {
    /// The snapshot read, as `snapshots/<revision>`, when the folder is a hub cache entry
    /// (`models--org--name/` with `refs/` and `snapshots/`).
    pub snapshot: Option<String>,
    /// Why that snapshot (`refs/main` names it, or it is the only one).
    pub snapshot_reason: Option<String>,
    /// The weight file(s) read, named as the (snapshot) folder shows them.
    pub files: Vec<String>,
    /// Why these were chosen.
    pub reason: String,
    /// Other weight files in the folder, not read (pick one with `--file NAME`).
    pub others: Vec<String>,
}

/// An opened checkpoint: its files, its tensor index and the configuration hints.
#[derive(Debug)]
pub struct Checkpoint {
    /// The path the user gave.
    pub path: PathBuf,
    /// The format.
    pub format: Format,
    /// Every file of the checkpoint (one, or the shards).
    pub files: Vec<SourceFile>,
    /// Every tensor.
    pub tensors: Vec<TensorInfo>,
    /// Hints from `config.json` beside the weights (and the format's own metadata).
    pub config: Option<ConfigHints>,
    /// Non-fatal problems (e.g. a broken `config.json`).
    pub warnings: Vec<String>,
    /// Pickled globals read as inert stand-ins ([`pickle::StandIn`]).
    pub stand_ins: Vec<pickle::StandIn>,
    /// How a folder was resolved to its weight files (`None` for a file path).
    pub folder: Option<FolderChoice>,
    /// Position of each tensor in `tensors` by name (names are unique: checked at open).
    by_name: HashMap<String, usize>,
    /// Kinds given by the caller for some tensors (in-memory tables, [`memory`]): the
    /// detector takes them as given. Empty for checkpoints opened from files.
    pub kind_hints: Vec<(String, crate::detect::Kind)>,
}

/// Checks the tensor names of an opened checkpoint against [`limits::MAX_NAME_BYTES`]
/// and [`limits::MAX_NAMES_TOTAL`], and refuses a name held twice (two copies would hide
/// one of them: which one a loader uses depends on the loader). Returns the name index.
fn index_names(opened: &Opened, path: &Path) -> Result<HashMap<String, usize>, CheckpointError> {
    let file_path = |i: usize| {
        opened
            .files
            .get(i)
            .map(|f| f.path.clone())
            .unwrap_or_else(|| path.to_path_buf())
    };
    let mut total = 0usize;
    let mut by_name: HashMap<String, usize> = HashMap::with_capacity(opened.tensors.len());
    for (i, t) in opened.tensors.iter().enumerate() {
        if t.name.len() > limits::MAX_NAME_BYTES {
            return Err(CheckpointError::invalid(
                &file_path(t.file),
                format!(
                    "tensor name `{}` is {} bytes, more than the {}-byte limit for a name",
                    shown(&t.name),
                    t.name.len(),
                    limits::MAX_NAME_BYTES
                ),
            ));
        }
        total += t.name.len();
        if total > limits::MAX_NAMES_TOTAL {
            return Err(CheckpointError::invalid(
                &file_path(t.file),
                format!(
                    "tensor names take more than {} MiB in all (the limit)",
                    limits::MAX_NAMES_TOTAL >> 20
                ),
            ));
        }
        if let Some(&first) = by_name.get(&t.name) {
            let a = &opened.tensors[first];
            let where_ = if a.file == t.file {
                format!("twice in {}", opened.files[t.file].display_name())
            } else {
                format!(
                    "in both {} and {}",
                    opened.files[a.file].display_name(),
                    opened.files[t.file].display_name()
                )
            };
            return Err(CheckpointError::invalid(
                &file_path(t.file),
                format!(
                    "tensor `{}` is stored {where_}; posaudit cannot tell which copy is meant, so it reads neither (keep one copy, or name one file)",
                    shown(&t.name)
                ),
            ));
        }
        by_name.insert(t.name.clone(), i);
    }
    Ok(by_name)
}

/// Guesses the format of one file from its first bytes, then its extension.
pub fn sniff(path: &Path, bytes: &[u8]) -> Option<Format> {
    if bytes.starts_with(b"GGUF") {
        return Some(Format::Gguf);
    }
    if bytes.starts_with(b"\x93NUMPY") {
        return Some(Format::Numpy);
    }
    // A pickle at the start of the file: the pre-1.6 torch.save format, which the
    // PyTorch module recognises and explains.
    if bytes.starts_with(b"\x80\x02\x8a\x0a") {
        return Some(Format::Pytorch);
    }
    // CTranslate2 has no magic number: a small version and a spec name (`WhisperSpec`).
    if ctranslate2::looks_like(bytes) {
        return Some(Format::Ctranslate2);
    }
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    if bytes.starts_with(b"PK\x03\x04") || bytes.starts_with(b"PK\x05\x06") {
        return Some(if ext == "npz" {
            Format::Numpy
        } else {
            Format::Pytorch
        });
    }
    match ext.as_str() {
        "safetensors" => Some(Format::Safetensors),
        "gguf" => Some(Format::Gguf),
        "onnx" => Some(Format::Onnx),
        "npy" | "npz" => Some(Format::Numpy),
        "bin" | "pt" | "pth" | "ckpt" => Some(Format::Pytorch),
        _ => None,
    }
}

impl Checkpoint {
    /// Opens a checkpoint file, or a folder holding one (sharded or not), reading headers
    /// only. A `config.json` beside the weights is read for hints; a broken one becomes a
    /// warning.
    pub fn open(path: &Path) -> Result<Checkpoint, CheckpointError> {
        Self::open_choosing(path, None)
    }

    /// [`Checkpoint::open`], reading the weight file `file` of the folder `path` (a
    /// name inside the folder, or inside the hub snapshot it resolves to) instead of
    /// the one posaudit would choose. `file` with a file path is an error.
    pub fn open_choosing(path: &Path, file: Option<&str>) -> Result<Checkpoint, CheckpointError> {
        let meta = std::fs::metadata(path).map_err(|e| CheckpointError::io(path, e))?;
        let (opened, folder, choice) = if meta.is_dir() {
            let (dir, snapshot) = resolve_hub_cache(path)?;
            let (opened, mut choice) = open_folder(&dir, file)?;
            if let Some((snap, why)) = snapshot {
                choice.snapshot = Some(snap);
                choice.snapshot_reason = Some(why);
            }
            (opened, dir, Some(choice))
        } else {
            if let Some(f) = file {
                return Err(CheckpointError::NotACheckpoint {
                    path: path.to_path_buf(),
                    problem: format!(
                        "is a file; --file `{}` picks a file inside a folder (give the folder, or this file alone)",
                        shown(f)
                    ),
                });
            }
            let parent = path.parent().map(Path::to_path_buf).unwrap_or_default();
            (open_file(path)?, parent, None)
        };
        let by_name = index_names(&opened, path)?;
        let mut warnings = opened.warnings;
        let config_path = folder.join("config.json");
        // Anything named config.json is looked at (a named pipe or a huge file is refused
        // by `ConfigHints::read` with a warning, never read).
        let mut config = if std::fs::metadata(&config_path).is_ok() {
            match ConfigHints::read(&config_path) {
                Ok(c) => Some(c),
                Err(problem) => {
                    warnings.push(format!("{}: ignored: {problem}", config_path.display()));
                    None
                }
            }
        } else {
            None
        };
        if let Some(format_hints) = opened.hints {
            config = Some(match config {
                Some(c) => c.merged_with(format_hints),
                None => format_hints,
            });
        }
        Ok(Checkpoint {
            path: path.to_path_buf(),
            format: opened.format,
            files: opened.files,
            tensors: opened.tensors,
            config,
            warnings,
            stand_ins: opened.stand_ins,
            folder: choice,
            by_name,
            kind_hints: Vec::new(),
        })
    }

    /// The tensor with this exact name (a hash lookup: names are unique).
    pub fn tensor(&self, name: &str) -> Option<&TensorInfo> {
        self.by_name.get(name).and_then(|&i| self.tensors.get(i))
    }

    /// Total bytes of all files.
    pub fn total_bytes(&self) -> u64 {
        self.files.iter().map(|f| f.bytes().len() as u64).sum()
    }

    /// The display name of the file holding a tensor.
    pub fn file_name(&self, t: &TensorInfo) -> String {
        self.files
            .get(t.file)
            .map(SourceFile::display_name)
            .unwrap_or_default()
    }

    fn file_of(&self, t: &TensorInfo) -> Result<&SourceFile, CheckpointError> {
        self.files.get(t.file).ok_or_else(|| {
            CheckpointError::invalid(&self.path, format!("tensor `{}` names no file", t.name))
        })
    }

    /// The raw bytes of a tensor's storage: borrowed from the map, or decompressed.
    fn storage_bytes<'a>(&'a self, t: &'a TensorInfo) -> Result<Cow<'a, [u8]>, CheckpointError> {
        let file = self.file_of(t)?;
        match &t.storage {
            Storage::Mapped { offset, len } => {
                let end = offset.checked_add(*len);
                end.and_then(|end| file.bytes().get(*offset..end))
                    .map(Cow::Borrowed)
                    .ok_or_else(|| {
                        CheckpointError::invalid(
                            &file.path,
                            format!(
                                "tensor `{}`: bytes {offset}..{} lie past the end of the file ({} bytes)",
                                t.name,
                                offset.saturating_add(*len),
                                file.bytes().len()
                            ),
                        )
                    })
            }
            Storage::Owned(bytes) => Ok(Cow::Borrowed(&bytes.0[..])),
            Storage::Varints { offset, len, width } => {
                onnx::decode_varints(file, *offset, *len, *width).map(Cow::Owned)
            }
            Storage::ZipMember { member, skip, .. } => {
                // Inflate only the bytes the tensor can touch, never the declared size.
                let want = t
                    .extent()
                    .and_then(|n| t.dtype.storage_len(n)?.checked_add(*skip))
                    .ok_or_else(|| {
                        CheckpointError::invalid(
                            &file.path,
                            format!("tensor `{}`: its extent overflows", shown(&t.name)),
                        )
                    })?;
                let mut bytes = read_zip_member(file, member, want as u64)?;
                if *skip > bytes.len() {
                    return Err(CheckpointError::invalid(
                        &file.path,
                        format!(
                            "zip member `{}` holds {} bytes, fewer than its {skip}-byte header",
                            shown(member),
                            bytes.len()
                        ),
                    ));
                }
                bytes.drain(..*skip);
                Ok(Cow::Owned(bytes))
            }
        }
    }

    /// Refuses to read `elements` elements of a tensor when that breaks a budget
    /// ([`limits::tensor_problem`]): nothing is allocated or inflated from a declared
    /// size before this check.
    fn check_budget(&self, t: &TensorInfo, elements: usize) -> Result<(), CheckpointError> {
        match limits::tensor_problem(t, elements) {
            None => Ok(()),
            Some(problem) => Err(CheckpointError::invalid(
                &self.file_of(t)?.path,
                format!("tensor `{}`: {problem}", shown(&t.name)),
            )),
        }
    }

    /// Storage element index of the element at C-order flat index `flat`.
    fn storage_index(t: &TensorInfo, flat: usize) -> usize {
        match &t.strides {
            None => t.element_offset + flat,
            Some(strides) => {
                let mut rem = flat;
                let mut idx = t.element_offset;
                for (dim, stride) in t.shape.iter().zip(strides).rev() {
                    if *dim == 0 {
                        return idx;
                    }
                    idx += (rem % dim) * stride;
                    rem /= dim;
                }
                idx
            }
        }
    }

    fn check_readable(&self, t: &TensorInfo, bytes: &[u8]) -> Result<(), CheckpointError> {
        let file = &self.file_of(t)?.path;
        t.dtype.storage_len(1).ok_or_else(|| {
            CheckpointError::invalid(
                file,
                format!(
                    "tensor `{}`: {}",
                    t.name,
                    t.dtype.unsupported_reason().unwrap_or_default()
                ),
            )
        })?;
        if t.numel() == 0 {
            return Ok(());
        }
        // The furthest element any index touches (TensorInfo::extent), in stored bytes.
        let needed = t.extent().and_then(|l| t.dtype.storage_len(l));
        match needed {
            Some(needed) if needed <= bytes.len() => Ok(()),
            _ => Err(CheckpointError::invalid(
                file,
                format!(
                    "tensor `{}` of shape {:?} needs more bytes than its storage holds ({} bytes)",
                    shown(&t.name),
                    t.shape,
                    bytes.len()
                ),
            )),
        }
    }

    /// Reads a whole tensor as f64.
    pub fn read_f64(&self, t: &TensorInfo) -> Result<ArrayD<f64>, CheckpointError> {
        self.check_budget(t, t.numel())?;
        let bytes = self.storage_bytes(t)?;
        self.check_readable(t, &bytes)?;
        let n = t.numel();
        let mut out = Vec::with_capacity(n);
        for flat in 0..n {
            let idx = Self::storage_index(t, flat);
            // check_readable proved every index is inside the storage.
            out.push(
                t.dtype
                    .decode(&bytes, idx, t.big_endian)
                    .unwrap_or(f64::NAN),
            );
        }
        ArrayD::from_shape_vec(IxDyn(&t.shape), out).map_err(|e| {
            CheckpointError::invalid(
                &self.file_of(t).map(|f| f.path.clone()).unwrap_or_default(),
                format!("tensor `{}`: {e}", t.name),
            )
        })
    }

    /// Reads a tensor as a table (rows × last dimension), see [`TensorInfo::as_table_dims`].
    pub fn read_table(&self, t: &TensorInfo) -> Result<Array2<f64>, CheckpointError> {
        let rows: Vec<usize> = (0..t.as_table_dims().map(|d| d.0).unwrap_or(0)).collect();
        self.read_rows(t, &rows)
    }

    /// Reads selected rows of a tensor viewed as a table; out-of-range rows are an error.
    /// Used by the detector's cheap content probe: only these rows are touched.
    pub fn read_rows(
        &self,
        t: &TensorInfo,
        rows: &[usize],
    ) -> Result<Array2<f64>, CheckpointError> {
        let path = self.file_of(t)?.path.clone();
        let (nrows, ncols) = t.as_table_dims().ok_or_else(|| {
            CheckpointError::invalid(&path, format!("tensor `{}` is a scalar", t.name))
        })?;
        self.check_budget(t, rows.len().saturating_mul(ncols))?;
        let bytes = self.storage_bytes(t)?;
        self.check_readable(t, &bytes)?;
        let mut out = Array2::<f64>::zeros((rows.len(), ncols));
        for (i, &r) in rows.iter().enumerate() {
            if r >= nrows {
                return Err(CheckpointError::invalid(
                    &path,
                    format!("tensor `{}`: row {r} out of range ({nrows} rows)", t.name),
                ));
            }
            // Contiguous little-endian floats, the common case: decode the row's bytes in
            // one pass (check_readable proved the whole tensor lies inside `bytes`).
            if t.strides.is_none() && !t.big_endian {
                let start = t.element_offset + r * ncols;
                let mut row = out.row_mut(i);
                if let Some(dst) = row.as_slice_mut()
                    && t.dtype.decode_le_run(&bytes, start, dst)
                {
                    continue;
                }
            }
            for c in 0..ncols {
                let idx = Self::storage_index(t, r * ncols + c);
                out[[i, c]] = t
                    .dtype
                    .decode(&bytes, idx, t.big_endian)
                    .unwrap_or(f64::NAN);
            }
        }
        Ok(out)
    }

    /// Reads an integer tensor exactly, flattened in C order.
    pub fn read_i64(&self, t: &TensorInfo) -> Result<Array1<i64>, CheckpointError> {
        let path = self.file_of(t)?.path.clone();
        if !t.dtype.is_integer() {
            return Err(CheckpointError::invalid(
                &path,
                format!(
                    "tensor `{}` has type {}, expected an integer type",
                    t.name, t.dtype
                ),
            ));
        }
        self.check_budget(t, t.numel())?;
        let bytes = self.storage_bytes(t)?;
        self.check_readable(t, &bytes)?;
        let n = t.numel();
        let mut out = Vec::with_capacity(n);
        for flat in 0..n {
            let idx = Self::storage_index(t, flat);
            out.push(
                t.dtype
                    .decode_int(&bytes, idx, t.big_endian)
                    .unwrap_or(i64::MIN),
            );
        }
        Ok(Array1::from(out))
    }
}

/// Decompresses the first `limit` bytes of one member of a zip archive held in `file`
/// (fewer when the member is shorter). The buffer grows with the bytes really inflated,
/// never with the size the archive declares.
fn read_zip_member(
    file: &SourceFile,
    member: &str,
    limit: u64,
) -> Result<Vec<u8>, CheckpointError> {
    use std::io::Read;
    let mut archive = zip::ZipArchive::new(std::io::Cursor::new(file.bytes())).map_err(|e| {
        CheckpointError::invalid(&file.path, format!("not a readable zip archive: {e}"))
    })?;
    let entry = archive.by_name(member).map_err(|e| {
        CheckpointError::invalid(&file.path, format!("zip member `{}`: {e}", shown(member)))
    })?;
    let first = entry.size().min(limit).min(64 << 20) as usize;
    let mut out = Vec::with_capacity(first);
    entry.take(limit).read_to_end(&mut out).map_err(|e| {
        CheckpointError::invalid(&file.path, format!("zip member `{}`: {e}", shown(member)))
    })?;
    Ok(out)
}

fn open_file(path: &Path) -> Result<Opened, CheckpointError> {
    let file = SourceFile::open(path)?;
    if file.bytes().is_empty() {
        return Err(CheckpointError::invalid(path, "file is empty"));
    }
    let format = sniff(path, file.bytes());
    if let Some(problem) = foreign_format(file.bytes(), format) {
        return Err(CheckpointError::NotACheckpoint {
            path: path.to_path_buf(),
            problem,
        });
    }
    match format {
        Some(Format::Safetensors) => safetensors::open_files(vec![file]),
        Some(Format::Pytorch) => pytorch::open_files(vec![file]),
        Some(Format::Numpy) => numpy::open(path, file),
        Some(Format::Gguf) => gguf::open(file),
        Some(Format::Onnx) => onnx::open(file),
        Some(Format::Ctranslate2) => ctranslate2::open(file),
        None | Some(Format::Memory) => {
            // An unknown extension: try safetensors' header as the last resort, since it
            // has no magic number.
            safetensors::open_files(vec![file]).map_err(|_| CheckpointError::NotACheckpoint {
                path: path.to_path_buf(),
                problem: "not a recognised checkpoint (expected .safetensors, .bin/.pt/.pth/.ckpt, .npy/.npz or .gguf)".into(),
            })
        }
    }
}

/// The first line of every Git LFS pointer file (the Git LFS specification, "The pointer").
const LFS_SPEC: &[u8] = b"version https://git-lfs.github.com/spec/v1";
/// The HDF5 format signature (HDF5 File Format Specification, "Format Signature").
const HDF5_MAGIC: &[u8] = b"\x89HDF\r\n\x1a\n";
/// The last 8 bytes of a LevelDB-style table, the layout of a TensorFlow checkpoint's
/// `.index` file (LevelDB `table_format.md`: `kTableMagicNumber` 0xdb4775248b80fb57,
/// stored little-endian).
const TABLE_MAGIC: [u8; 8] = 0xdb4775248b80fb57u64.to_le_bytes();

/// Recognises a file of another kind given under a weight file's name (by its magic
/// number or content, never its name) and says what it is: a Git LFS pointer, HDF5, a
/// TensorFlow checkpoint index, a plain pickle where no pickle is expected, or text.
/// `None` when the file may be what its name says (its reader then checks it).
fn foreign_format(bytes: &[u8], expected: Option<Format>) -> Option<String> {
    if bytes.starts_with(LFS_SPEC) {
        let size = std::str::from_utf8(&bytes[..bytes.len().min(1024)])
            .ok()
            .and_then(|t| t.lines().find_map(|l| l.strip_prefix("size ")))
            .map(|n| format!(" (the real file has {} bytes)", shown(n.trim())))
            .unwrap_or_default();
        return Some(format!(
            "is a Git LFS pointer, not the weights{size}: fetch them (git lfs pull)"
        ));
    }
    if bytes.starts_with(HDF5_MAGIC) {
        return Some(
            "is an HDF5 file (Keras / TensorFlow .h5 weights), a format posaudit does not read: convert it to safetensors".into(),
        );
    }
    if bytes.len() >= 48 && bytes[bytes.len() - 8..] == TABLE_MAGIC {
        return Some(
            "is a TensorFlow checkpoint index (a LevelDB-style table naming the variables in .data-* shards), a format posaudit does not read: convert the checkpoint to safetensors".into(),
        );
    }
    let pickle_start = bytes.len() >= 2 && bytes[0] == 0x80 && (2..=5).contains(&bytes[1]);
    if pickle_start && expected != Some(Format::Pytorch) {
        return Some(
            "is a Python pickle, not the format its name says (a pickle is read only as a torch.save .bin/.pt/.pth/.ckpt file)".into(),
        );
    }
    let head = &bytes[..bytes.len().min(512)];
    let text = match std::str::from_utf8(head) {
        Ok(t) => Some(t),
        // A multi-byte character cut at the end of the sample.
        Err(e) if e.valid_up_to() + 4 > head.len() => {
            std::str::from_utf8(&head[..e.valid_up_to()]).ok()
        }
        Err(_) => None,
    };
    if let Some(t) = text
        && !t.trim().is_empty()
        && t.chars()
            .all(|c| !c.is_control() || matches!(c, '\n' | '\r' | '\t'))
    {
        let first = t.lines().find(|l| !l.trim().is_empty()).unwrap_or("");
        return Some(format!(
            "is a text file, not a checkpoint (it starts with `{}`)",
            limits::shown_max(first.trim(), 60)
        ));
    }
    None
}

/// File name endings of the weight files a folder may hold.
const WEIGHT_EXTENSIONS: [&str; 9] = [
    "safetensors",
    "bin",
    "pt",
    "pth",
    "ckpt",
    "npy",
    "npz",
    "gguf",
    "onnx",
];

/// True when `p` is named like a weight file.
fn is_weight_file(p: &Path) -> bool {
    let ext = p
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    WEIGHT_EXTENSIONS.contains(&ext.as_str())
}

/// The file name of `p` for messages and reports.
fn file_name(p: &Path) -> String {
    p.file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| p.display().to_string())
}

/// Most snapshot revisions listed in a message.
const MAX_LISTED: usize = 5;

/// Resolves a Hugging Face hub cache entry (`models--org--name/` holding `refs/` and
/// `snapshots/<revision>/`, whose files are symbolic links into `blobs/`) to the snapshot
/// folder to read: the revision `refs/main` names, else the only snapshot. Any other
/// folder is returned as it is. The layout is huggingface_hub's documented cache
/// structure ("Manage the cache" guide).
fn resolve_hub_cache(dir: &Path) -> Result<(PathBuf, Option<(String, String)>), CheckpointError> {
    let snapshots = dir.join("snapshots");
    if !snapshots.is_dir() || !dir.join("refs").is_dir() && !dir.join("blobs").is_dir() {
        return Ok((dir.to_path_buf(), None));
    }
    let main = dir.join("refs").join("main");
    if main.is_file() {
        let bytes = read_small_file(&main, 4096, "hub ref")?;
        let rev = String::from_utf8_lossy(&bytes).trim().to_string();
        let ok = !rev.is_empty()
            && rev.len() <= 128
            && rev
                .chars()
                .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_' || c == '.')
            && rev != "."
            && rev != "..";
        if !ok {
            return Err(CheckpointError::invalid(
                &main,
                format!("names `{}`, not a snapshot revision", shown(&rev)),
            ));
        }
        let snap = snapshots.join(&rev);
        if !snap.is_dir() {
            return Err(CheckpointError::NotACheckpoint {
                path: dir.to_path_buf(),
                problem: format!(
                    "hub cache: refs/main names revision {rev}, but snapshots/{rev} is missing (download it again, or give a snapshot folder)"
                ),
            });
        }
        return Ok((
            snap,
            Some((
                format!("snapshots/{rev}"),
                "the revision refs/main names".into(),
            )),
        ));
    }
    let mut revs: Vec<String> = std::fs::read_dir(&snapshots)
        .map_err(|e| CheckpointError::io(&snapshots, e))?
        .flatten()
        .filter(|e| e.path().is_dir())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    revs.sort();
    match revs.as_slice() {
        [one] => Ok((
            snapshots.join(one),
            Some((
                format!("snapshots/{one}"),
                "the only snapshot (no refs/main)".into(),
            )),
        )),
        [] => Err(CheckpointError::NotACheckpoint {
            path: dir.to_path_buf(),
            problem: "hub cache folder with no snapshot (nothing was downloaded)".into(),
        }),
        many => Err(CheckpointError::NotACheckpoint {
            path: dir.to_path_buf(),
            problem: format!(
                "hub cache folder with {} snapshots and no refs/main: give one snapshot folder ({})",
                many.len(),
                many.iter()
                    .take(MAX_LISTED)
                    .map(|r| format!("snapshots/{}", shown(r)))
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        }),
    }
}

/// Opens the weights of a folder and says which files were read and why.
fn open_folder(dir: &Path, file: Option<&str>) -> Result<(Opened, FolderChoice), CheckpointError> {
    let entries = std::fs::read_dir(dir).map_err(|e| CheckpointError::io(dir, e))?;
    let mut names: Vec<PathBuf> = Vec::new();
    for entry in entries {
        let entry = entry.map_err(|e| CheckpointError::io(dir, e))?;
        if entry.path().is_file() {
            names.push(entry.path());
        }
    }
    names.sort();
    let weights: Vec<PathBuf> = names
        .iter()
        .filter(|p| is_weight_file(p))
        .cloned()
        .collect();
    let choice = |opened: &Opened, reason: String| {
        let read: Vec<String> = opened.files.iter().map(|f| file_name(&f.path)).collect();
        let others = weights
            .iter()
            .map(|p| file_name(p))
            .filter(|n| !read.contains(n))
            .collect();
        FolderChoice {
            snapshot: None,
            snapshot_reason: None,
            files: read,
            reason,
            others,
        }
    };
    if let Some(name) = file {
        let named = Path::new(name);
        let simple = named.components().count() == 1
            && matches!(
                named.components().next(),
                Some(std::path::Component::Normal(_))
            );
        let target = dir.join(named);
        if !simple || !target.is_file() {
            return Err(CheckpointError::NotACheckpoint {
                path: dir.to_path_buf(),
                problem: format!(
                    "--file `{}` is not a file of this folder (weight files here: {})",
                    shown(name),
                    listed(&weights)
                ),
            });
        }
        let opened = open_file(&target)?;
        let c = choice(&opened, "named with --file".into());
        return Ok((opened, c));
    }
    let (opened, reason) = open_folder_default(dir, &names, &weights)?;
    let c = choice(&opened, reason);
    Ok((opened, c))
}

/// `a, b, c` of file names (at most [`MAX_LISTED`], then `…`), or `none`.
fn listed(paths: &[PathBuf]) -> String {
    if paths.is_empty() {
        return "none".into();
    }
    let mut s = paths
        .iter()
        .take(MAX_LISTED)
        .map(|p| shown(&file_name(p)))
        .collect::<Vec<_>>()
        .join(", ");
    if paths.len() > MAX_LISTED {
        s.push_str(", …");
    }
    s
}

/// The folder's default choice: an index of shards, the conventional file name, shards
/// named `-of-`, or its only weight file; several others are ambiguous.
fn open_folder_default(
    dir: &Path,
    names: &[PathBuf],
    weights: &[PathBuf],
) -> Result<(Opened, String), CheckpointError> {
    let has = |suffix: &str| -> Vec<PathBuf> {
        names
            .iter()
            .filter(|p| p.to_string_lossy().ends_with(suffix))
            .cloned()
            .collect()
    };
    let is_shard = |p: &PathBuf| file_name(p).contains("-of-");
    let st_index = has(".safetensors.index.json");
    if let Some(index) = st_index.first() {
        let why = format!("`{}` lists its shards", file_name(index));
        return Ok((safetensors::open_sharded(index)?, why));
    }
    let single = dir.join("model.safetensors");
    if single.is_file() {
        let why = if weights.len() > 1 {
            "the conventional name model.safetensors, preferred over the other weight files"
        } else {
            "the only weight file"
        };
        return Ok((open_file(&single)?, why.into()));
    }
    let shards = has(".safetensors");
    if shards.len() > 1 && shards.iter().all(is_shard) {
        let files = shards
            .iter()
            .map(|p| SourceFile::open(p))
            .collect::<Result<Vec<_>, _>>()?;
        return Ok((
            safetensors::open_files(files)?,
            "safetensors shards named -of-, read together (no index)".into(),
        ));
    }
    // PyTorch: an index of shards, the conventional single file, or any one torch file.
    let bin_index = has(".bin.index.json");
    if let Some(index) = bin_index.first() {
        let why = format!("`{}` lists its shards", file_name(index));
        return Ok((pytorch::open_sharded(index)?, why));
    }
    for conventional in ["pytorch_model.bin", "model.onnx"] {
        let single = dir.join(conventional);
        if single.is_file() {
            let why = if weights.len() > 1 {
                format!(
                    "the conventional name {conventional}, preferred over the other weight files"
                )
            } else {
                "the only weight file".into()
            };
            return Ok((open_file(&single)?, why));
        }
    }
    // torch shards without their index (`pytorch_model-00001-of-00002.bin`, ...).
    let unindexed_shards = weights.len() > 1
        && weights
            .iter()
            .all(|p| file_name(p).ends_with(".bin") && is_shard(p));
    if unindexed_shards {
        let files = weights
            .iter()
            .map(|p| SourceFile::open(p))
            .collect::<Result<Vec<_>, _>>()?;
        return Ok((
            pytorch::open_files(files)?,
            "torch shards named -of-, read together (no index)".into(),
        ));
    }
    match weights {
        [one] => Ok((open_file(one)?, "the only weight file".into())),
        [] => Err(CheckpointError::NotACheckpoint {
            path: dir.to_path_buf(),
            problem: "folder holds no checkpoint (no .safetensors, .bin, .pt, .pth, .ckpt, .npy, .npz, .gguf or .onnx file)".into(),
        }),
        many => Err(CheckpointError::NotACheckpoint {
            path: dir.to_path_buf(),
            problem: format!(
                "folder holds {} candidate checkpoint files ({}) and no index: pick one with --file NAME (or give its path)",
                many.len(),
                listed(many)
            ),
        }),
    }
}
