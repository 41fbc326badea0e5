//! The limits that keep a hostile file from costing unbounded memory or time.
//!
//! posaudit opens files from strangers, unattended. Whatever a file declares (sizes,
//! counts, strides, names), the work done is bounded by the numbers below and by the
//! bytes that really back each tensor. Each limit is named in the error or the skip
//! reason that it causes, and the README's reliability section lists them all.
//!
//! Two kinds of consequence:
//! - a file that breaks a structural limit (too many members, a name longer than
//!   [`MAX_NAME_BYTES`], a memo larger than the pickle reader allows, duplicate names) is
//!   refused: exit 2 with one line naming the file;
//! - a tensor that is well-formed but larger than the analysis budget is listed among the
//!   skipped tensors with the reason, and the rest of the checkpoint is analysed
//!   ([`AnalysisBudget`]).

use std::collections::HashMap;

use super::{Storage, TensorInfo};

/// Most elements of one tensor that are ever read and analysed: 2^28 (268,435,456;
/// 2 GiB as f64). Larger tensors are listed as skipped.
pub const MAX_TABLE_ELEMENTS: usize = 1 << 28;
/// Most elements of a view that addresses more elements than its storage holds (zero or
/// overlapping strides, e.g. an `expand`ed buffer): 2^20. Real broadcast buffers
/// (position ids expanded to a batch of one) are far smaller; a stride-0 view that
/// repeats one stored value a billion times is skipped instead of materialised.
pub const MAX_EXPANDED_ELEMENTS: usize = 1 << 20;
/// How many times over the elements of one storage may be examined through the tensors
/// that view it (plus [`MAX_EXPANDED_ELEMENTS`]). Tied or sliced weights stay far below;
/// thousands of views of one small storage are skipped after the budget.
pub const MAX_STORAGE_REUSE: usize = 4;
/// Most position tables analysed in one checkpoint; later candidates are skipped.
/// Real checkpoints have at most a few hundred (one rotary vector or bias per layer).
pub const MAX_TABLES: usize = 10_000;
/// Longest tensor name, in bytes (real names are under 300).
pub const MAX_NAME_BYTES: usize = 4096;
/// Most bytes of all tensor names of one checkpoint together (and of all the dotted
/// names built while flattening a pickled object).
pub const MAX_NAMES_TOTAL: usize = 64 << 20;
/// Largest `config.json` read for hints; a larger one is ignored with a warning.
pub const MAX_CONFIG_BYTES: u64 = 16 << 20;
/// Largest shard index (`*.index.json`) read.
pub const MAX_INDEX_BYTES: u64 = 64 << 20;
/// A deflated zip member is inflated only when its declared size is at most this many
/// times its compressed size, or at most [`INFLATE_FREE_BYTES`]. Real float weights
/// deflate to about 0.9 of their size; only long runs of one value reach 1000:1.
pub const MAX_INFLATE_RATIO: u64 = 64;
/// Inflated size allowed whatever the ratio (an all-zero table compresses about 1000:1):
/// 64 MiB.
pub const INFLATE_FREE_BYTES: u64 = 64 << 20;
/// Longest piece of text taken from a file that a message shows (characters).
pub const MAX_SHOWN_CHARS: usize = 96;

/// A name or value taken from a file, made safe for a one-line message: control and
/// other non-printing characters become `\u{..}` escapes (a terminal never receives raw
/// bytes from the file), and text longer than [`MAX_SHOWN_CHARS`] characters is cut,
/// saying how long it was.
pub fn shown(text: &str) -> String {
    shown_max(text, MAX_SHOWN_CHARS)
}

/// [`shown`] with another length limit (for library error texts that quote the file,
/// such as a JSON parser's, whose position at the end must survive).
#[allow(clippy::explicit_counter_loop)]
pub fn shown_max(text: &str, max_chars: usize) -> String {
    let mut out = String::new();
    let mut count = 0usize;
    for c in text.chars() {
        if count >= max_chars {
            out.push_str(&format!("…({} bytes in all)", text.len()));
            return out;
        }
        if c.is_control()
            || matches!(c, '\u{200b}'..='\u{200f}' | '\u{2028}'..='\u{202e}' | '\u{2066}'..='\u{2069}' | '\u{feff}')
        {
            out.push_str(&c.escape_unicode().to_string());
        } else {
            out.push(c);
        }
        count += 1;
    }
    out
}

/// Escapes control characters in a whole message (without shortening it): the last line
/// of defence, applied to every [`super::CheckpointError`] when it is displayed.
pub fn escape_controls(text: &str) -> String {
    if !text.chars().any(char::is_control) {
        return text.to_string();
    }
    text.chars()
        .map(|c| {
            if c.is_control() {
                c.escape_unicode().to_string()
            } else {
                c.to_string()
            }
        })
        .collect()
}

/// Elements the tensor's storage really holds (its byte length over the element size;
/// for a compressed member, its declared inflated size).
fn stored_elements(t: &TensorInfo) -> usize {
    let Some(size) = t.dtype.size() else {
        // Quantized blocks: the reader checked at open that the blocks cover the tensor.
        return t.numel();
    };
    let size = size.max(1);
    match &t.storage {
        // Typed ONNX fields: the element count was checked against the tensor at open.
        Storage::Varints { .. } => t.numel(),
        Storage::Mapped { len, .. } => len / size,
        Storage::Owned(bytes) => bytes.0.len() / size,
        Storage::ZipMember {
            size: declared,
            skip,
            ..
        } => usize::try_from(declared.saturating_sub(*skip as u64)).unwrap_or(usize::MAX) / size,
    }
}

/// Why reading `elements` elements of `t` would break a budget, or `None`:
/// - more than [`MAX_TABLE_ELEMENTS`] in the tensor or in the read;
/// - a view addressing more distinct elements than exist (zero or overlapping strides)
///   beyond [`MAX_EXPANDED_ELEMENTS`]: the distinct elements are at most the storage's
///   elements past the tensor's offset, and at most its extent;
/// - a compressed member declaring more than [`MAX_INFLATE_RATIO`] times its compressed
///   size, beyond [`INFLATE_FREE_BYTES`].
///
/// Checked before anything is allocated or inflated, by the reader and by
/// [`AnalysisBudget::admit`] alike, so a tensor the detector admits can be read.
pub(crate) fn tensor_problem(t: &TensorInfo, elements: usize) -> Option<String> {
    t.dtype.storage_len(1)?;
    let n = t.numel();
    if n > MAX_TABLE_ELEMENTS || elements > MAX_TABLE_ELEMENTS {
        return Some(format!(
            "{n} elements, more than the analysis budget of {MAX_TABLE_ELEMENTS} (2^28) elements per tensor"
        ));
    }
    if let Storage::ZipMember {
        member,
        size: declared,
        compressed,
        ..
    } = &t.storage
    {
        let allowed = compressed
            .saturating_mul(MAX_INFLATE_RATIO)
            .max(INFLATE_FREE_BYTES);
        if *declared > allowed {
            return Some(format!(
                "its compressed zip member `{}` declares {declared} bytes from {compressed} compressed bytes; posaudit inflates at most {MAX_INFLATE_RATIO} times the compressed size beyond {} MiB",
                shown(member),
                INFLATE_FREE_BYTES >> 20
            ));
        }
    }
    let extent = t.extent().unwrap_or(usize::MAX);
    let distinct = stored_elements(t)
        .saturating_sub(t.element_offset)
        .min(extent.saturating_sub(t.element_offset));
    if elements > MAX_EXPANDED_ELEMENTS && elements > distinct {
        return Some(format!(
            "a view of {n} elements over {distinct} stored ones (zero or overlapping strides); views larger than their storage are read up to {MAX_EXPANDED_ELEMENTS} (2^20) elements"
        ));
    }
    None
}

/// Where a tensor's elements live, for counting how often one storage is examined.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
enum StorageKey {
    Mapped(usize, usize, usize),
    Member(usize, String),
    Owned(usize, usize),
}

/// Decides, tensor by tensor, whether a tensor may be examined (probed, read, analysed)
/// within the limits above, and counts what was admitted. The detector asks it before
/// looking at a tensor's values; a refusal is a skip reason for the report.
///
/// Cost: one hash lookup per tensor.
#[derive(Debug)]
pub struct AnalysisBudget {
    used: HashMap<StorageKey, usize>,
    tables: usize,
}

impl Default for AnalysisBudget {
    fn default() -> Self {
        Self::new()
    }
}

impl AnalysisBudget {
    /// A fresh budget for one checkpoint.
    pub fn new() -> Self {
        AnalysisBudget {
            used: HashMap::new(),
            tables: 0,
        }
    }

    /// Why `t` must not be examined, or `None` after counting it against its storage.
    pub fn admit(&mut self, t: &TensorInfo) -> Option<String> {
        if let Some(problem) = tensor_problem(t, t.numel()) {
            return Some(problem);
        }
        let key = match &t.storage {
            Storage::Mapped { offset, len } => StorageKey::Mapped(t.file, *offset, *len),
            Storage::ZipMember { member, .. } => StorageKey::Member(t.file, member.clone()),
            Storage::Varints { offset, len, .. } => StorageKey::Mapped(t.file, *offset, *len),
            Storage::Owned(bytes) => StorageKey::Owned(bytes.0.as_ptr() as usize, bytes.0.len()),
        };
        let stored = stored_elements(t);
        let cap = stored
            .saturating_mul(MAX_STORAGE_REUSE)
            .saturating_add(MAX_EXPANDED_ELEMENTS);
        let n = t.numel();
        let used = self.used.entry(key).or_insert(0);
        if used.saturating_add(n) > cap {
            return Some(format!(
                "its storage ({stored} elements) is shared with tensors already examined; one storage is examined at most {MAX_STORAGE_REUSE} times over (plus 2^20 elements)"
            ));
        }
        *used += n;
        None
    }

    /// Counts one more detected table; `Some(reason)` once [`MAX_TABLES`] are counted.
    pub fn admit_table(&mut self) -> Option<String> {
        if self.tables >= MAX_TABLES {
            return Some(format!(
                "the checkpoint already has {MAX_TABLES} position tables, the most one run analyses"
            ));
        }
        self.tables += 1;
        None
    }

    /// True once [`MAX_TABLES`] tables were counted.
    pub fn tables_full(&self) -> bool {
        self.tables >= MAX_TABLES
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shown_escapes_controls_and_shortens() {
        assert_eq!(shown("a\u{1b}[2Jb"), "a\\u{1b}[2Jb");
        let long = "x".repeat(1000);
        let s = shown(&long);
        assert!(s.starts_with(&"x".repeat(MAX_SHOWN_CHARS)));
        assert!(s.ends_with("…(1000 bytes in all)"), "{s}");
        assert_eq!(shown("pos_embed.weight"), "pos_embed.weight");
        assert_eq!(escape_controls("a\nb\u{7}"), "a\\u{a}b\\u{7}");
    }
}
