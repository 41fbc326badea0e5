//! The document model: the plain serde data behind every output.
//!
//! Everything a report says is in these structs before any renderer runs: the JSON
//! documents are these structs serialised, and the terminal summary, the Markdown
//! reports and the SVG plots only format what they hold (contract: design.md "JSON
//! documents"). This layer sits below both the verdict code that fills it
//! ([`crate::verdicts`]) and the renderers ([`crate::report`]); it imports only the
//! result structs of the analyses and the checkpoint index.
//!
//! - [`scan`]: the `posaudit/scan/v1` document.
//! - [`audit`]: the `posaudit/audit/v1` document, one [`audit::TableAudit`] per table.
//! - [`compare`]: the `posaudit/compare/v1` document.
//! - [`extend`]: the `posaudit/extend/v1` document (plan, files written, before/after).
//! - [`finding`]: [`Finding`], its [`FindingCode`]s and [`Severity`].

pub mod audit;
pub mod compare;
pub mod extend;
pub mod finding;
pub mod scan;

use serde::Serialize;

use crate::checkpoint::pickle::StandIn;
use crate::checkpoint::{Checkpoint, FolderChoice, Format};

pub use finding::{Finding, FindingCode, FindingCounts, Severity};

/// The checkpoint a report is about.
#[derive(Debug, Clone, Serialize)]
pub struct CheckpointSummary {
    /// The path as given.
    pub path: String,
    /// The format.
    pub format: Format,
    /// Number of files (1, or the shards).
    pub files: usize,
    /// Number of tensors.
    pub tensors: usize,
    /// Total bytes of the files.
    pub bytes: u64,
    /// Pickled objects that were read as inert data instead of being rebuilt (a training
    /// checkpoint's `argparse.Namespace`, paths, a trainer's own classes): each global's
    /// dotted name, how many objects were built from it, and whether posaudit knows it
    /// to hold data only (the unknown ones are also warnings). Empty for other formats.
    pub stand_ins: Vec<StandIn>,
    /// How a folder was resolved to the files read (hub snapshot, file chosen and why,
    /// the other weight files); `null` for a file path.
    pub folder: Option<FolderChoice>,
}

impl CheckpointSummary {
    /// Summarises an opened checkpoint.
    pub fn of(ckpt: &Checkpoint) -> Self {
        CheckpointSummary {
            path: ckpt.path.display().to_string(),
            format: ckpt.format,
            files: ckpt.files.len(),
            tensors: ckpt.tensors.len(),
            bytes: ckpt.total_bytes(),
            stand_ins: ckpt.stand_ins.clone(),
            folder: ckpt.folder.clone(),
        }
    }

    /// Lines saying how a folder was resolved, when there is something to say: the hub
    /// snapshot read, and the file chosen when the folder holds other weight files.
    pub fn folder_lines(&self) -> Vec<String> {
        let Some(f) = &self.folder else {
            return Vec::new();
        };
        let mut out = Vec::new();
        if let (Some(snap), Some(why)) = (&f.snapshot, &f.snapshot_reason) {
            out.push(format!("hub cache: read {snap} ({why})"));
        }
        if !f.others.is_empty() {
            // A file the user named needs no hint on how to pick one.
            let hint = if f.named {
                ""
            } else {
                " (pick one with --file NAME)"
            };
            out.push(format!(
                "read {} ({}); also in the folder, not read: {}{hint}",
                f.files.join(", "),
                f.reason,
                f.others.join(", ")
            ));
        }
        out
    }

    /// The lines both terminal summaries print under their first line: how a folder
    /// was resolved, the stand-ins, and each warning.
    pub fn note_lines<'a>(&'a self, warnings: &'a [String]) -> impl Iterator<Item = String> + 'a {
        self.folder_lines()
            .into_iter()
            .chain(self.stand_ins_line())
            .chain(warnings.iter().map(|w| format!("warning: {w}")))
    }

    /// One sentence listing the stand-ins (`argparse.Namespace ×1, __main__.Config ×1
    /// (unknown)`), or `None` when there are none: the line both renderers print.
    pub fn stand_ins_line(&self) -> Option<String> {
        if self.stand_ins.is_empty() {
            return None;
        }
        let list = self
            .stand_ins
            .iter()
            .map(|s| {
                format!(
                    "{} ×{}{}",
                    s.global,
                    s.count,
                    if s.known { "" } else { " (unknown)" }
                )
            })
            .collect::<Vec<_>>()
            .join(", ");
        Some(format!(
            "pickled objects read as inert data (never run): {list}"
        ))
    }
}
