//! Finds the position tables of a checkpoint: from each tensor's name, shape and a cheap
//! probe of a few sampled rows.
//!
//! The rules, in order:
//! 1. Tensors of a type the analyses cannot read (quantized blocks, ...) are listed as
//!    skipped, with the reason.
//! 2. Optimizer state (Adam `exp_avg` / `exp_avg_sq`, momentum buffers, anything under
//!    an optimizer subtree of a training checkpoint) is never a table.
//! 3. Integer `position_ids` buffers are `position-ids`; stored inverse frequencies are
//!    `rotary-frequencies`; relative-bias tables are `relative-bias`.
//! 4. The name is scored by its tokens ([`names`]): a word of another role (token, type,
//!    norm, attention, projection, class token, output head, ...) means "not a table"
//!    whatever the content. A position word with a table word (`position` + `embd`,
//!    `pos` + `embed`, `wpe`) makes a table candidate: a 2-D grid when its shape is
//!    `(1, h, w, d)` or `(1, extra + h·w, d)` (or a vision name with a square row count),
//!    else a 1-D table, `fixed-sinusoidal` when its sampled rows are an exact sine/cosine
//!    pattern, `learned-absolute` otherwise.
//! 5. A position word alone is a table when the shape agrees (rows equal a declared
//!    maximum such as `max_position_embeddings`, `n_positions`, `max_source_positions` or
//!    GGUF's `context_length`, or it plus 2 or `pad_token_id + 1` offset rows) or the
//!    content does (a smooth region, below).
//! 6. A tensor whose name gives no hint is a table only when its content is clearly one:
//!    sampled rows that are an exact sinusoid, or a smooth region where consecutive
//!    sampled neighbour pairs have cosine > 0.5 for at least four pairs in a row with a
//!    median above 0.95. The region is found where it is, so half a table of untrained
//!    noise does not hide the trained half; `why` names the rows it used.
//!
//! `why` lists every piece of evidence: the name's words, the shape against the config
//! (and the width against the hidden size), and the content probe.
//!
//! The probe reads at most [`PROBE_ROWS`] rows, so detection costs no more than reading
//! headers, whatever the size of the checkpoint.

use serde::Serialize;

use crate::checkpoint::{Checkpoint, CheckpointError, TensorInfo};

pub(crate) mod names;

use names::NameHint;

pub use crate::kind::Kind;

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
#[derive(Debug, Clone, PartialEq)]
struct Probe {
    /// The sampled rows are an exact sine/cosine pattern; the layout that fits.
    sinusoid: Option<&'static str>,
    /// Median cosine between all sampled neighbouring rows.
    neighbour_cosine: Option<f64>,
    /// The smooth region: the longest run of consecutive sampled neighbour pairs whose
    /// cosine is above [`SMOOTH_PAIR`], as (first row, last row + 1, pairs, median cosine).
    /// Judged where the smoothness is, so an untrained noise tail (or a few unused
    /// leading rows) does not hide a trained table.
    smooth: Option<(usize, usize, usize, f64)>,
    /// Number of neighbour pairs sampled.
    pairs: usize,
    /// Every sampled value is >= 0 (squared moments, counts, probabilities): any two such
    /// rows have a high cosine, so smoothness says nothing about position.
    non_negative: bool,
}

impl Probe {
    fn empty() -> Probe {
        Probe {
            sinusoid: None,
            neighbour_cosine: None,
            smooth: None,
            pairs: 0,
            non_negative: false,
        }
    }

    /// Does the smooth region say "position table" at this cosine threshold? It needs at
    /// least [`MIN_SMOOTH_PAIRS`] pairs (or every pair of a table too small for that).
    fn smooth_at(&self, threshold: f64) -> Option<(usize, usize, usize, f64)> {
        self.smooth.filter(|(_, _, k, c)| {
            *c > threshold && (*k >= MIN_SMOOTH_PAIRS || (*k == self.pairs && *k >= 3))
        })
    }

    fn describe(&self) -> String {
        match (self.smooth, self.neighbour_cosine) {
            (Some((a, b, k, c)), Some(all)) => format!(
                "content: median neighbour cosine {c:.3} over rows {a}..{b} ({k} of {} sampled pairs; {all:.3} over all)",
                self.pairs
            ),
            (None, Some(all)) => format!(
                "content: median neighbour cosine {all:.3} over {} sampled pairs, no smooth region",
                self.pairs
            ),
            _ => "content: too few rows to probe".to_string(),
        }
    }
}

/// Cosine above which a sampled neighbour pair counts as smooth.
const SMOOTH_PAIR: f64 = 0.5;
/// Fewest consecutive smooth pairs that make a smooth region.
const MIN_SMOOTH_PAIRS: usize = 4;

fn cosine(a: ndarray::ArrayView1<f64>, b: ndarray::ArrayView1<f64>) -> Option<f64> {
    let na = a.dot(&a).sqrt();
    let nb = b.dot(&b).sqrt();
    (na > 0.0 && nb > 0.0 && na.is_finite() && nb.is_finite()).then(|| a.dot(&b) / (na * nb))
}

fn median(v: &mut [f64]) -> Option<f64> {
    v.sort_by(f64::total_cmp);
    (!v.is_empty()).then(|| v[v.len() / 2])
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
        return Ok(Probe::empty());
    };
    if n < 4 || d < 2 {
        return Ok(Probe::empty());
    }
    let idx = probe_rows(n);
    let rows = ckpt.read_rows(t, &idx)?;
    // Neighbour pairs in row order, with their cosine (None for a zero or non-finite row).
    let mut pairs: Vec<(usize, Option<f64>)> = Vec::new();
    for k in 0..idx.len().saturating_sub(1) {
        if idx[k + 1] == idx[k] + 1 {
            pairs.push((idx[k], cosine(rows.row(k), rows.row(k + 1))));
        }
    }
    let mut all: Vec<f64> = pairs.iter().filter_map(|p| p.1).collect();
    let neighbour_cosine = median(&mut all);
    // Longest run of consecutive smooth pairs (ties: the higher median).
    let mut smooth: Option<(usize, usize, usize, f64)> = None;
    let mut i = 0;
    while i < pairs.len() {
        if pairs[i].1.is_none_or(|c| c <= SMOOTH_PAIR) {
            i += 1;
            continue;
        }
        let mut j = i;
        while j < pairs.len() && pairs[j].1.is_some_and(|c| c > SMOOTH_PAIR) {
            j += 1;
        }
        let mut run: Vec<f64> = pairs[i..j].iter().filter_map(|p| p.1).collect();
        let m = median(&mut run).unwrap_or(0.0);
        let cand = (pairs[i].0, pairs[j - 1].0 + 2, j - i, m);
        if smooth.is_none_or(|s| cand.2 > s.2 || (cand.2 == s.2 && cand.3 > s.3)) {
            smooth = Some(cand);
        }
        i = j;
    }
    Ok(Probe {
        sinusoid: sinusoid_layout(&rows),
        neighbour_cosine,
        smooth,
        pairs: pairs.len(),
        non_negative: rows.iter().all(|v| *v >= 0.0),
    })
}

/// Shape and config evidence: the row count equals a declared maximum (or it plus a known
/// offset), and the width equals the hidden size.
fn shape_evidence(ckpt: &Checkpoint, t: &TensorInfo) -> (Option<String>, Option<String>) {
    let Some((n, d)) = t.as_table_dims() else {
        return (None, None);
    };
    let Some(cfg) = ckpt.config.as_ref() else {
        return (None, None);
    };
    let source = if cfg.source.contains("GGUF") {
        "GGUF metadata".to_string()
    } else {
        std::path::Path::new(&cfg.source)
            .file_name()
            .map_or("config".to_string(), |f| f.to_string_lossy().into_owned())
    };
    let mut rows = None;
    for h in [&cfg.max_positions, &cfg.max_source_positions]
        .into_iter()
        .flatten()
    {
        let m = h.value as usize;
        let pad_offset = cfg
            .pad_token_id
            .as_ref()
            .filter(|p| p.value >= 0)
            .map(|p| (p.value as usize + 1, format!("{} + 1", p.key)));
        let offsets = std::iter::once((0usize, String::new()))
            .chain(pad_offset)
            .chain(std::iter::once((2, "2 (offset rows)".to_string())));
        for (off, what) in offsets {
            if m + off == n {
                rows = Some(if off == 0 {
                    format!("{n} rows = {} {m} ({source})", h.key)
                } else {
                    format!("{n} rows = {} {m} + {what} ({source})", h.key)
                });
                break;
            }
        }
        if rows.is_some() {
            break;
        }
    }
    let width = cfg
        .hidden_size
        .as_ref()
        .filter(|h| h.value as usize == d)
        .map(|h| format!("width {d} = {} ({source})", h.key));
    (rows, width)
}

fn join_evidence(parts: &[Option<String>]) -> String {
    parts
        .iter()
        .flatten()
        .cloned()
        .collect::<Vec<_>>()
        .join("; ")
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
    let vision = names::is_vision(name);
    let grid = match shape.as_slice() {
        [1, h, w, _] if *h >= 2 && *w >= 2 => {
            Some(format!("shape (1, {h}, {w}, dim) is a {h}x{w} grid"))
        }
        [1, rows, _] | [rows, _] if shape.len() == 3 || vision => square_grid_split(*rows)
            .filter(|_| shape.len() == 3 || vision)
            .map(|(extra, side)| format!("{rows} rows = {extra} extra + {side}x{side} grid")),
        _ => None,
    };
    let p = probe(ckpt, t)?;
    let (rows_ev, width_ev) = shape_evidence(ckpt, t);
    if let Some(g) = grid {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::LearnedGrid2d,
            why: join_evidence(&[
                Some(reason.to_string()),
                Some(format!("shape: {g}")),
                width_ev,
            ]),
        }));
    }
    if t.squeezed_shape().len() != 2 {
        return Ok(None);
    }
    let shape_part = rows_ev.map(|r| format!("shape: {r}"));
    if let Some(layout) = p.sinusoid {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::FixedSinusoidal,
            why: join_evidence(&[
                Some(reason.to_string()),
                shape_part,
                width_ev,
                Some(format!(
                    "content: sampled rows are an exact sine/cosine pattern ({layout})"
                )),
            ]),
        }));
    }
    let named_fixed = names::tokens(name)
        .iter()
        .any(|t| t.starts_with("sinusoid"));
    Ok(Some(Detected {
        name: name.clone(),
        kind: if named_fixed {
            Kind::FixedSinusoidal
        } else {
            Kind::LearnedAbsolute
        },
        why: join_evidence(&[
            Some(reason.to_string()),
            shape_part,
            width_ev,
            Some(p.describe()),
        ]),
    }))
}

/// Classifies one tensor, or returns `None` when it is not a position table.
fn classify(ckpt: &Checkpoint, t: &TensorInfo) -> Result<Option<Detected>, CheckpointError> {
    let name = &t.name;
    let squeezed = t.squeezed_shape();
    if names::optimizer_state(name).is_some() {
        return Ok(None);
    }
    if t.dtype.is_integer() {
        if names::is_position_ids(name) {
            return Ok(Some(Detected {
                name: name.clone(),
                kind: Kind::PositionIds,
                why: format!(
                    "name: `position` + `ids`; integer buffer of shape {:?}",
                    t.shape
                ),
            }));
        }
        return Ok(None);
    }
    if !t.dtype.is_float() {
        return Ok(None);
    }
    if names::is_rotary(name) && squeezed.len() == 1 {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::RotaryFrequencies,
            why: format!(
                "name: rotary frequencies; 1-D vector of {} values",
                squeezed[0]
            ),
        }));
    }
    if names::is_relative(name) && squeezed.len() == 2 {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::RelativeBias,
            why: format!(
                "name: relative bias; shape {:?} = (buckets, heads)",
                squeezed
            ),
        }));
    }
    let hint = names::score(name);
    match &hint {
        NameHint::Other(_) => return Ok(None),
        NameHint::Strong(words) => {
            if squeezed.len() >= 2 {
                return classify_table(ckpt, t, &format!("name: {words}"));
            }
            return Ok(None);
        }
        NameHint::Weak(_) | NameHint::None => {}
    }
    if squeezed.len() != 2 || squeezed[0] < 16 || squeezed[1] < 4 {
        return Ok(None);
    }
    let p = probe(ckpt, t)?;
    let (rows_ev, width_ev) = shape_evidence(ckpt, t);
    if let NameHint::Weak(word) = &hint {
        // A position word alone: the shape or the content must agree.
        let smooth = p.smooth_at(0.9).filter(|_| !p.non_negative);
        if rows_ev.is_some() || smooth.is_some() || p.sinusoid.is_some() {
            return classify_table(
                ckpt,
                t,
                &format!("name: {word} (a position word, no table word)"),
            );
        }
        return Ok(None);
    }
    // No hint in the name: only clear content makes it a table.
    if let Some(layout) = p.sinusoid {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::FixedSinusoidal,
            why: join_evidence(&[
                Some(format!(
                    "content: sampled rows are an exact sine/cosine pattern ({layout})"
                )),
                rows_ev.map(|r| format!("shape: {r}")),
                width_ev,
                Some("the name has no position word".to_string()),
            ]),
        }));
    }
    if p.smooth_at(0.95).is_some() && !p.non_negative {
        return Ok(Some(Detected {
            name: name.clone(),
            kind: Kind::LearnedAbsolute,
            why: join_evidence(&[
                Some(format!(
                    "rows are smooth along the first axis, {}",
                    p.describe()
                )),
                rows_ev.map(|r| format!("shape: {r}")),
                width_ev,
                Some("the name has no position word".to_string()),
            ]),
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
