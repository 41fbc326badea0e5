//! The three commands. Each takes plain options (no command-line types), opens what it
//! needs read-only, and returns its document ([`crate::model`]); it writes nothing.
//! `main.rs` renders the document and is the only writer of stdout and `--out`.
//!
//! - [`scan`]: open → detect → [`crate::model::scan::ScanReport`].
//! - [`audit`]: open → detect → read each table → analyse → verdicts →
//!   [`crate::model::audit::AuditReport`].
//! - [`compare`]: checkpoints visited one at a time → tables matched → numerics of
//!   [`crate::compare`] → verdicts → [`crate::model::compare::CompareReport`].

pub mod audit;
pub mod compare;
pub mod extend;
pub mod run;
pub mod scan;

use std::path::Path;

use crate::checkpoint::Checkpoint;
use crate::error::Result;

/// Opens a checkpoint read-only; `file` picks one weight file of a folder (`--file`).
fn open(path: &Path, file: Option<&str>) -> Result<Checkpoint> {
    Ok(Checkpoint::open_choosing(path, file)?)
}

/// File name endings of the weight files a checkpoint folder may hold.
pub(crate) const WEIGHT_ENDINGS: [&str; 7] = [
    ".safetensors",
    ".bin",
    ".pt",
    ".pth",
    ".npz",
    ".npy",
    ".gguf",
];

/// Sub-folders of `dir` that hold weight files themselves (checkpoints of a run), sorted.
fn checkpoint_subfolders(dir: &Path) -> Vec<String> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Vec::new();
    };
    let mut out: Vec<String> = entries
        .flatten()
        .filter(|e| e.path().is_dir())
        .filter(|e| {
            std::fs::read_dir(e.path()).is_ok_and(|files| {
                files.flatten().any(|f| {
                    let name = f.file_name().to_string_lossy().to_ascii_lowercase();
                    WEIGHT_ENDINGS.iter().any(|end| name.ends_with(end))
                })
            })
        })
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    out.sort();
    out
}

/// The arguments of `posaudit compare` for the sub-folders `subs` of `dir`: the folder
/// alone when it is a run folder (checkpoints named with step numbers, which compare
/// orders itself, [`run::find_run`]), else the sub-folders in name order (at most 8
/// listed).
fn compare_command(dir: &Path, subs: &[String]) -> String {
    if run::find_run(dir).is_some() {
        return crate::checkpoint::shown(&dir.display().to_string());
    }
    let mut s = subs
        .iter()
        .take(8)
        .map(|sub| crate::checkpoint::shown(&dir.join(sub).display().to_string()))
        .collect::<Vec<_>>()
        .join(" ");
    if subs.len() > 8 {
        s.push_str(" …");
    }
    s
}

/// Opens one checkpoint for `audit`. A run folder (no weights of its own, checkpoints in
/// sub-folders) is refused with a sentence that says what to do instead.
fn open_for_audit(path: &Path, file: Option<&str>) -> Result<Checkpoint> {
    match Checkpoint::open_choosing(path, file) {
        Ok(mut c) => {
            let subs = if path.is_dir() {
                checkpoint_subfolders(path)
            } else {
                Vec::new()
            };
            if !subs.is_empty() {
                let read = c
                    .folder
                    .as_ref()
                    .map(|f| f.files.join(", "))
                    .unwrap_or_default();
                c.warnings.push(format!(
                    "{}: a run folder: besides {read} (the file audited) it holds {} checkpoints in sub-folders; compare them: `posaudit compare {}`",
                    path.display(),
                    subs.len(),
                    compare_command(path, &subs)
                ));
            }
            Ok(c)
        }
        Err(e) if path.is_dir() => {
            let subs = checkpoint_subfolders(path);
            if subs.is_empty() {
                return Err(e.into());
            }
            let listed = subs.iter().take(3).cloned().collect::<Vec<_>>().join(", ");
            let more = if subs.len() > 3 { ", …" } else { "" };
            let command = compare_command(path, &subs);
            Err(crate::error::Error::Usage(format!(
                "{}: a run folder holding {} checkpoints ({listed}{more}), not one checkpoint; audit one of them (e.g. `posaudit audit {}`), or compare them: `posaudit compare {command}`",
                path.display(),
                subs.len(),
                path.join(&subs[0]).display()
            )))
        }
        Err(e) => Err(e.into()),
    }
}
