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
pub mod write;

mod folder;
mod foreign;
mod read;

use std::collections::HashMap;
use std::fs::File;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use memmap2::Mmap;

pub use dtype::Dtype;
use folder::{open_folder, resolve_hub_cache};
use foreign::foreign_format;
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
    /// True when the file was named with `--file` (not chosen by posaudit).
    pub named: bool,
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
    pub kind_hints: Vec<(String, crate::kind::Kind)>,
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
