//! Opening a folder: the hub cache snapshot it resolves to, and which weight file (or
//! set of shards) is read, recorded in [`FolderChoice`].

use std::path::{Path, PathBuf};

use super::*;

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
pub(super) fn resolve_hub_cache(
    dir: &Path,
) -> Result<(PathBuf, Option<(String, String)>), CheckpointError> {
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
pub(super) fn open_folder(
    dir: &Path,
    file: Option<&str>,
) -> Result<(Opened, FolderChoice), CheckpointError> {
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
    let choice = |opened: &Opened, reason: String, named: bool| {
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
            named,
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
        let c = choice(&opened, "named with --file".into(), true);
        return Ok((opened, c));
    }
    let (opened, reason) = open_folder_default(dir, &names, &weights)?;
    let c = choice(&opened, reason, false);
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
