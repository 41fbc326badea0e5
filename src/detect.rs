//! Finds the position tables of a checkpoint: from each tensor's name, shape and a cheap
//! probe of a few sampled rows.
//!
//! The rules, in order:
//! 1. Tensors of a type the analyses cannot read are listed as skipped, with the reason.
//! 2. Names of known non-position tensors (token and token-type embeddings, norms,
//!    class/register tokens, output heads) are never tables.
//! 3. Integer `position_ids` buffers are `position-ids`; stored inverse frequencies are
//!    `rotary-frequencies`; relative-bias tables are `relative-bias`.
//! 4. A tensor whose name says "position" is a 2-D grid when its shape is `(1, h, w, d)`
//!    or `(1, extra + h·w, d)` (or a vision name with a square row count), else a 1-D
//!    table: `fixed-sinusoidal` when its sampled rows are an exact sine/cosine pattern,
//!    `learned-absolute` otherwise.
//! 5. A tensor whose name gives no hint is a table only when its content is clearly one:
//!    sampled rows that are an exact sinusoid, or rows so smooth along the first axis
//!    (median neighbour cosine > 0.95) that no weight matrix looks like that.
//!
//! The probe reads at most [`PROBE_ROWS`] rows, so detection costs no more than reading
//! headers, whatever the size of the checkpoint.

use serde::Serialize;

use crate::checkpoint::{Checkpoint, CheckpointError, TensorInfo};

/// The kinds of position table (contract strings).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Kind {
    /// One trained vector per position.
    #[serde(rename = "learned-absolute")]
    LearnedAbsolute,
    /// The sine/cosine formula, stored as a tensor.
    #[serde(rename = "fixed-sinusoidal")]
    FixedSinusoidal,
    /// A vision patch-position table laid out on a grid.
    #[serde(rename = "learned-grid-2d")]
    LearnedGrid2d,
    /// Learned bias per relative-distance bucket and head.
    #[serde(rename = "relative-bias")]
    RelativeBias,
    /// Stored rotary inverse frequencies or per-dimension factors.
    #[serde(rename = "rotary-frequencies")]
    RotaryFrequencies,
    /// An integer index buffer.
    #[serde(rename = "position-ids")]
    PositionIds,
}

impl Kind {
    /// The contract string of the kind.
    pub fn as_str(self) -> &'static str {
        match self {
            Kind::LearnedAbsolute => "learned-absolute",
            Kind::FixedSinusoidal => "fixed-sinusoidal",
            Kind::LearnedGrid2d => "learned-grid-2d",
            Kind::RelativeBias => "relative-bias",
            Kind::RotaryFrequencies => "rotary-frequencies",
            Kind::PositionIds => "position-ids",
        }
    }
}

/// A tensor the detector classified as a position table.
#[derive(Debug, Clone, Serialize)]
pub struct Detected {
    /// Tensor name.
    pub name: String,
    /// Its kind.
    pub kind: Kind,
    /// Why: which name, shape and content evidence decided.
    pub why: String,
}

/// A tensor the detector could not look at.
#[derive(Debug, Clone, Serialize)]
pub struct Skipped {
    /// Tensor name.
    pub name: String,
    /// Its stored type.
    pub dtype: String,
    /// Why it was skipped.
    pub reason: String,
}

/// What detection found in a checkpoint.
#[derive(Debug, Clone, Default, Serialize)]
pub struct Detection {
    /// The position tables, in checkpoint order.
    pub tables: Vec<Detected>,
    /// Tensors of unanalysable types.
    pub skipped: Vec<Skipped>,
    /// Integer index buffers that point into a position table (recognised, not tables).
    pub index_buffers: Vec<IndexBuffer>,
}

/// An integer buffer that indexes a position table (e.g. a windowed model's
/// `relative_position_index`): recognised and described, not analysed as a table.
#[derive(Debug, Clone, Serialize)]
pub struct IndexBuffer {
    /// Tensor name.
    pub name: String,
    /// Stored shape.
    pub shape: Vec<usize>,
    /// What it is, in plain words.
    pub what: String,
}

/// Largest index buffer read to recognise it (elements).
const MAX_INDEX_BUFFER: usize = 1 << 20;

fn index_buffer(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Option<IndexBuffer>, CheckpointError> {
    if !t.dtype.is_integer()
        || !t
            .name
            .to_ascii_lowercase()
            .contains("relative_position_index")
    {
        return Ok(None);
    }
    let what = if t.numel() <= MAX_INDEX_BUFFER {
        let values = ckpt.read_i64(t)?;
        match crate::analyze::relative::is_swin_index(values.as_slice().unwrap_or(&[]), &t.shape) {
            Some((h, w)) => format!(
                "window index for a {h}x{w} window: maps each (query, key) pair to one of the {} rows of the relative-bias table (check-values §5.2 construction); an index, not a table",
                (2 * h - 1) * (2 * w - 1)
            ),
            None => "relative-position index buffer, not the standard window construction; an index, not a table".to_string(),
        }
    } else {
        "relative-position index buffer (too large to read for recognition); an index, not a table"
            .to_string()
    };
    Ok(Some(IndexBuffer {
        name: t.name.clone(),
        shape: t.shape.clone(),
        what,
    }))
}

/// Maximum rows read by the content probe of one tensor.
pub const PROBE_ROWS: usize = 24;

/// Words that mark a tensor as a position table.
const POSITION_WORDS: [&str; 14] = [
    "wpe",
    "position_embeddings",
    "position_embedding",
    "positional_embedding",
    "positional_embeddings",
    "positional_encoding",
    "pos_embed",
    "pos_embedding",
    "pos_emb",
    "embed_positions",
    "posembed_input",
    "pos_embedding_table",
    "position_encoding",
    "absolute_pos_embed",
];

/// Words that mark a tensor as something else, whatever its content.
const EXCLUDED_WORDS: [&str; 20] = [
    "token_type",
    "word_embeddings",
    "wte",
    "embed_tokens",
    "tok_embeddings",
    "token_embd",
    "token_embedding",
    "lm_head",
    "layernorm",
    "layer_norm",
    "norm",
    "cls_token",
    "dist_token",
    "reg_token",
    "register_tokens",
    "mask_token",
    "class_embedding",
    "segment",
    "output",
    "classifier",
];

fn tokens(name: &str) -> Vec<String> {
    name.to_ascii_lowercase()
        .split(['.', '/'])
        .map(str::to_string)
        .collect()
}

fn has_word(name: &str, words: &[&str]) -> Option<String> {
    let lower = name.to_ascii_lowercase();
    for tok in tokens(name) {
        for w in words {
            if tok == *w || tok.starts_with(&format!("{w}_")) || tok.ends_with(&format!("_{w}")) {
                return Some((*w).to_string());
            }
        }
    }
    // Layer-norm style names are often glued ("ln_f", "norm1"): match by substring.
    for w in words {
        if (*w == "norm" && lower.contains("norm"))
            || (*w == "layernorm" && lower.contains("layernorm"))
        {
            return Some((*w).to_string());
        }
    }
    None
}

fn is_rotary_name(name: &str) -> bool {
    let l = name.to_ascii_lowercase();
    l.ends_with("inv_freq")
        || l.contains("rope.freqs")
        || l.contains("rope_freqs")
        || l.contains("rope_factors")
}

fn is_relative_name(name: &str) -> bool {
    let l = name.to_ascii_lowercase();
    l.contains("relative_attention_bias")
        || l.contains("relative_position_bias_table")
        || l.contains("rel_pos_bias")
}

fn is_vision_name(name: &str) -> bool {
    let l = name.to_ascii_lowercase();
    ["vision", "visual", "patch", "vit", "image", "img"]
        .iter()
        .any(|w| l.contains(w))
}

/// The number of leading non-grid rows (0..=8) that leaves a square grid of at least 2×2,
/// smallest first.
pub fn square_grid_split(rows: usize) -> Option<(usize, usize)> {
    (0..=8usize).find_map(|extra| {
        let g = rows.checked_sub(extra)?;
        let side = (g as f64).sqrt().round() as usize;
        (side >= 2 && side * side == g).then_some((extra, side))
    })
}

/// Rows to sample for the probe: the first few and evenly spaced neighbouring pairs.
fn probe_rows(n: usize) -> Vec<usize> {
    if n <= PROBE_ROWS {
        return (0..n).collect();
    }
    let mut rows: Vec<usize> = (0..4).collect();
    let pairs = (PROBE_ROWS - 4) / 2;
    for k in 0..pairs {
        let r = 4 + (n - 6) * (k + 1) / (pairs + 1);
        rows.push(r);
        rows.push(r + 1);
    }
    rows.sort_unstable();
    rows.dedup();
    rows
}

/// Evidence from the probe of sampled rows.
#[derive(Debug, Clone, Copy, PartialEq)]
struct Probe {
    /// The sampled rows are an exact sine/cosine pattern; the layout that fits.
    sinusoid: Option<&'static str>,
    /// Median cosine between sampled neighbouring rows.
    neighbour_cosine: Option<f64>,
}

fn cosine(a: ndarray::ArrayView1<f64>, b: ndarray::ArrayView1<f64>) -> Option<f64> {
    let na = a.dot(&a).sqrt();
    let nb = b.dot(&b).sqrt();
    (na > 0.0 && nb > 0.0 && na.is_finite() && nb.is_finite()).then(|| a.dot(&b) / (na * nb))
}

/// Is every sampled non-zero row a sin/cos pattern: values in [-1, 1] and sin² + cos² = 1
/// for each frequency's pair of columns, in one layout? Tolerance 1e-2 covers storage
/// in bf16 (half-ULP 2^-9 per value). Row norms of an exact table are sqrt(d/2)
/// (check-values §1.3), which this implies.
fn sinusoid_layout(rows: &ndarray::Array2<f64>) -> Option<&'static str> {
    let d = rows.ncols();
    if d < 4 || rows.nrows() < 4 {
        return None;
    }
    let half = d / 2;
    let pairs_ok = |layout: &str| -> bool {
        let mut nonzero = 0;
        let mut distinct = false;
        let first = rows.row(0);
        for row in rows.rows() {
            if row.iter().all(|v| *v == 0.0) {
                continue; // padding rows of fairseq-style tables are zero
            }
            if row.iter().any(|v| !v.is_finite() || v.abs() > 1.0 + 1e-2) {
                return false;
            }
            nonzero += 1;
            if row != first {
                distinct = true;
            }
            for i in 0..half {
                let (a, b) = if layout == "interleaved" {
                    (row[2 * i], row[2 * i + 1])
                } else {
                    (row[i], row[i + half])
                };
                if (a * a + b * b - 1.0).abs() > 2e-2 {
                    return false;
                }
            }
        }
        nonzero >= 4 && distinct
    };
    ["interleaved", "split"].into_iter().find(|l| pairs_ok(l))
}

fn probe(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Probe, CheckpointError> {
    let Some((n, d)) = t.as_table_dims() else {
        return Ok(Probe {
            sinusoid: None,
            neighbour_cosine: None,
        });
    };
    if n < 4 || d < 2 {
        return Ok(Probe {
            sinusoid: None,
            neighbour_cosine: None,
        });
    }
    let idx = probe_rows(n);
    let rows = ckpt.read_rows(t, &idx)?;
    let mut cos: Vec<f64> = Vec::new();
    for k in 0..idx.len().saturating_sub(1) {
        if idx[k + 1] == idx[k] + 1
            && let Some(c) = cosine(rows.row(k), rows.row(k + 1))
        {
            cos.push(c);
        }
    }
    cos.sort_by(f64::total_cmp);
    let neighbour_cosine = (!cos.is_empty()).then(|| cos[cos.len() / 2]);
    Ok(Probe {
        sinusoid: sinusoid_layout(&rows),
        neighbour_cosine,
    })
}

/// Classifies a 1-D-or-grid table candidate whose name (or the user) already says it is a
/// position table.
fn classify_table(
    ckpt: &Checkpoint,
    t: &TensorInfo,
    reason: &str,
) -> Result<Option<Detected>, CheckpointError> {
    let shape = &t.shape;
    let name = &t.name;
    let grid = match shape.as_slice() {
        [1, h, w, _] if *h >= 2 && *w >= 2 => {
            Some(format!("shape (1, {h}, {w}, dim) is a {h}x{w} grid"))
        }
        [1, rows, _] | [rows, _] if shape.len() == 3 || is_vision_name(name) => {
            square_grid_split(*rows)
                .filter(|_| shape.len() == 3 || is_vision_name(name))
                .map(|(extra, side)| format!("{rows} rows = {extra} extra + {side}x{side} grid"))
        }
        _ => None,
    };
    let p = probe(ckpt, t)?;
    if let Some(g) = grid {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::LearnedGrid2d,
            why: format!("{reason}; shape: {g}"),
        }));
    }
    if t.squeezed_shape().len() != 2 {
        return Ok(None);
    }
    if let Some(layout) = p.sinusoid {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::FixedSinusoidal,
            why: format!(
                "{reason}; content: sampled rows are an exact sine/cosine pattern ({layout})"
            ),
        }));
    }
    let named_fixed = name.to_ascii_lowercase().contains("sinusoid");
    let content = match p.neighbour_cosine {
        Some(c) => format!("content: median neighbour cosine {c:.3} on sampled rows"),
        None => "content: too few rows to probe".to_string(),
    };
    Ok(Some(Detected {
        name: name.clone(),
        kind: if named_fixed {
            Kind::FixedSinusoidal
        } else {
            Kind::LearnedAbsolute
        },
        why: format!("{reason}; {content}"),
    }))
}

/// Classifies one tensor, or returns `None` when it is not a position table.
fn classify(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Option<Detected>, CheckpointError> {
    let name = &t.name;
    let squeezed = t.squeezed_shape();
    if t.dtype.is_integer() {
        if name.to_ascii_lowercase().contains("position_ids") {
            return Ok(Some(Detected {
                name: name.clone(),
                kind: Kind::PositionIds,
                why: format!(
                    "name: `position_ids`; integer buffer of shape {:?}",
                    t.shape
                ),
            }));
        }
        return Ok(None);
    }
    if !t.dtype.is_float() {
        return Ok(None);
    }
    if is_rotary_name(name) && squeezed.len() == 1 {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::RotaryFrequencies,
            why: format!(
                "name: rotary frequencies; 1-D vector of {} values",
                squeezed[0]
            ),
        }));
    }
    if is_relative_name(name) && squeezed.len() == 2 {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::RelativeBias,
            why: format!(
                "name: relative bias; shape {:?} = (buckets, heads)",
                squeezed
            ),
        }));
    }
    if has_word(name, &EXCLUDED_WORDS).is_some() {
        return Ok(None);
    }
    if let Some(word) = has_word(name, &POSITION_WORDS) {
        if squeezed.len() >= 2 {
            return classify_table(ckpt, t, &format!("name: `{word}`"));
        }
        return Ok(None);
    }
    // No hint in the name: only clear content makes it a table.
    if squeezed.len() != 2 || squeezed[0] < 16 || squeezed[1] < 4 {
        return Ok(None);
    }
    let p = probe(ckpt, t)?;
    if let Some(layout) = p.sinusoid {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::FixedSinusoidal,
            why: format!(
                "content: sampled rows are an exact sine/cosine pattern ({layout}); the name gives no hint"
            ),
        }));
    }
    if let Some(c) = p.neighbour_cosine.filter(|c| *c > 0.95) {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::LearnedAbsolute,
            why: format!(
                "content: rows are smooth along the first axis (median neighbour cosine {c:.3}); the name gives no hint"
            ),
        }));
    }
    Ok(None)
}

/// Finds every position table of `ckpt`, plus the tensors named in `forced` (which must
/// exist: the caller checks with [`check_forced`]).
pub fn detect(ckpt: &Checkpoint, forced: &[String]) -> Result<Detection, CheckpointError> {
    let mut out = Detection::default();
    // Memory and time limits whatever the file declares (checkpoint::limits).
    let mut budget = crate::checkpoint::AnalysisBudget::new();
    for t in &ckpt.tensors {
        if let Some(reason) = t.dtype.unsupported_reason() {
            out.skipped.push(Skipped {
                name: t.name.clone(),
                dtype: t.dtype.to_string(),
                reason,
            });
            continue;
        }
        if let Some(reason) = budget.admit(t) {
            out.skipped.push(Skipped {
                name: t.name.clone(),
                dtype: t.dtype.to_string(),
                reason: format!("not examined: {reason}"),
            });
            continue;
        }
        if !forced.iter().any(|f| f == &t.name)
            && let Some(b) = index_buffer(ckpt, t)?
        {
            out.index_buffers.push(b);
            continue;
        }
        if let Some((_, kind)) = ckpt.kind_hints.iter().find(|(n, _)| n == &t.name) {
            out.tables.push(Detected {
                name: t.name.clone(),
                kind: *kind,
                why: format!("kind {} given by the caller", kind.as_str()),
            });
            continue;
        }
        let found = if forced.iter().any(|f| f == &t.name) {
            force(ckpt, t)?
        } else {
            classify(ckpt, t)?
        };
        if found.is_some()
            && let Some(reason) = budget.admit_table()
        {
            out.skipped.push(Skipped {
                name: t.name.clone(),
                dtype: t.dtype.to_string(),
                reason: format!("not analysed: {reason}"),
            });
            continue;
        }
        out.tables.extend(found);
    }
    Ok(out)
}

fn force(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Option<Detected>, CheckpointError> {
    if let Some(mut d) = classify(ckpt, t)? {
        d.why = format!("forced with --table; {}", d.why);
        return Ok(Some(d));
    }
    let squeezed = t.squeezed_shape();
    let reason = "forced with --table";
    if t.dtype.is_integer() {
        return Ok(Some(Detected {
            name: t.name.clone(),
            kind: Kind::PositionIds,
            why: format!("{reason}; integer buffer"),
        }));
    }
    if squeezed.len() == 1 {
        return Ok(Some(Detected {
            name: t.name.clone(),
            kind: Kind::RotaryFrequencies,
            why: format!("{reason}; 1-D vector"),
        }));
    }
    classify_table(ckpt, t, reason)
}

/// Checks that every forced name exists; otherwise a one-line reason with the closest
/// existing names.
pub fn check_forced(ckpt: &Checkpoint, forced: &[String]) -> Result<(), String> {
    for f in forced {
        if ckpt.tensor(f).is_none() {
            let close = closest_names(f, ckpt.tensors.iter().map(|t| t.name.as_str()), 3);
            let hint = if close.is_empty() {
                String::new()
            } else {
                format!(
                    "; closest: {}",
                    close
                        .iter()
                        .map(|c| format!("`{c}`"))
                        .collect::<Vec<_>>()
                        .join(", ")
                )
            };
            return Err(format!(
                "{}: no tensor named `{f}`{hint}",
                ckpt.path.display()
            ));
        }
    }
    Ok(())
}

/// Edit distance (Levenshtein) between two strings, by characters.
pub fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.iter().enumerate() {
        let mut cur = vec![i + 1; b.len() + 1];
        for (j, cb) in b.iter().enumerate() {
            let sub = prev[j] + usize::from(ca != cb);
            cur[j + 1] = sub.min(prev[j + 1] + 1).min(cur[j] + 1);
        }
        prev = cur;
    }
    prev[b.len()]
}

/// The `k` names closest to `target` by edit distance (names containing it first).
pub fn closest_names<'a>(
    target: &str,
    names: impl Iterator<Item = &'a str>,
    k: usize,
) -> Vec<String> {
    let mut scored: Vec<(usize, &str)> = names
        .map(|n| {
            let d = if n.contains(target) || target.contains(n) {
                0
            } else {
                edit_distance(target, n)
            };
            (d, n)
        })
        .collect();
    scored.sort();
    scored
        .into_iter()
        .take(k)
        .map(|(_, n)| n.to_string())
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn square_grids_with_extra_rows_are_split() {
        // ViT-B/16 @224: 197 = 1 + 14² (check-values §3.9); DeiT 198 = 2 + 14² (§3.11);
        // DINOv2 1370 = 1 + 37² (§3.12); CLIP ViT-B/32 50 = 1 + 7² (§3.8).
        assert_eq!(square_grid_split(197), Some((1, 14)));
        assert_eq!(square_grid_split(198), Some((2, 14)));
        assert_eq!(square_grid_split(1370), Some((1, 37)));
        assert_eq!(square_grid_split(50), Some((1, 7)));
        assert_eq!(square_grid_split(3), None);
    }

    #[test]
    fn probe_rows_stay_within_the_budget_and_include_neighbour_pairs() {
        let rows = probe_rows(100_000);
        assert!(rows.len() <= PROBE_ROWS);
        assert!(rows.iter().all(|&r| r < 100_000));
        assert!(rows.windows(2).filter(|w| w[1] == w[0] + 1).count() >= 8);
        assert_eq!(probe_rows(5), vec![0, 1, 2, 3, 4]);
    }

    #[test]
    fn names_are_classified_by_their_words() {
        assert!(has_word("transformer.wpe.weight", &POSITION_WORDS).is_some());
        assert!(
            has_word(
                "bert.embeddings.position_embeddings.weight",
                &POSITION_WORDS
            )
            .is_some()
        );
        assert!(
            has_word(
                "bert.embeddings.token_type_embeddings.weight",
                &EXCLUDED_WORDS
            )
            .is_some()
        );
        assert!(has_word("transformer.wte.weight", &EXCLUDED_WORDS).is_some());
        assert!(has_word("bert.embeddings.LayerNorm.weight", &EXCLUDED_WORDS).is_some());
        assert!(has_word("transformer.wte.weight", &POSITION_WORDS).is_none());
    }

    #[test]
    fn suggestions_prefer_near_names() {
        let names = [
            "transformer.wpe.weight",
            "transformer.wte.weight",
            "lm_head.weight",
        ];
        let c = closest_names("transformer.wpe", names.iter().copied(), 2);
        assert_eq!(c[0], "transformer.wpe.weight");
        assert_eq!(edit_distance("kitten", "sitting"), 3);
    }
}
