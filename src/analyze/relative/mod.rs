//! Relative-position bias tables: T5-style (buckets, heads) and window-style
//! ((2h−1)(2w−1), heads) tables.
//!
//! Such a table has no row per position, so the questions differ from absolute tables:
//! which bucket rows can any distance reach at all (an unreachable row never gets a
//! gradient and must still hold its initial value), how each head's bias varies with
//! distance (decay, preference for far tokens, or no trend at all — an untrained head),
//! and, for window tables, what the per-head offset map looks like. Integer index
//! buffers that merely enumerate the window offsets are recognised so the caller can
//! say "index buffer, not a table".

use ndarray::ArrayView2;
use serde::Serialize;

/// Hints from the config and the tensor name, all optional.
#[derive(Debug, Clone, Default)]
pub struct RelativeHints {
    /// Whether the table serves bidirectional attention (encoder) or causal (decoder).
    pub bidirectional: Option<bool>,
    /// `relative_attention_num_buckets`; the table's row count is used when absent.
    pub num_buckets: Option<usize>,
    /// `relative_attention_max_distance`; 128 when absent (HF T5 default, check-values §5.1).
    pub max_distance: Option<usize>,
    /// Standard deviation of the initialiser (T5: factor·d_model^−0.5, §5.1).
    pub init_std: Option<f64>,
    /// Tensor name, used to tell encoder from decoder.
    pub name: Option<String>,
}

/// How one head's bias varies with distance.
#[derive(Debug, Clone, Serialize)]
pub struct HeadTrend {
    /// Head index (table column).
    pub head: usize,
    /// Spearman correlation of bias with distance for keys before the query
    /// (T5) or with offset length (window tables); negative means decay.
    pub spearman_before: Option<f64>,
    /// Same for keys after the query (bidirectional T5 only).
    pub spearman_after: Option<f64>,
    /// Fraction of steps to the next-farther bucket where the bias decreases.
    pub decreasing_step_fraction: Option<f64>,
    /// Lag-1 autocorrelation of the bias along distance (neighbouring offsets for
    /// window tables): near 1 for smooth trained curves, near 0 for noise.
    pub neighbour_autocorrelation: Option<f64>,
    /// Standard deviation of the head's reachable values.
    pub std: f64,
    /// `decays`, `grows`, `mixed` or `flat`.
    pub trend: String,
    /// No trend and no smoothness (and, with an init scale, the init's spread).
    pub looks_untrained: bool,
}

/// A bucket row that no relative distance maps to.
#[derive(Debug, Clone, Serialize)]
pub struct UnreachableRow {
    /// Bucket index (table row).
    pub bucket: usize,
    /// Root mean square over heads.
    pub rms: f64,
    /// Mean over heads.
    pub mean: f64,
    /// Median RMS of the reachable rows, for scale.
    pub reachable_rms_median: f64,
    /// `rms / init_std` when an init scale is known: the row's own shrink factor when it
    /// is init noise shrunk by weight decay.
    pub rms_over_init_std: Option<f64>,
    /// `n·mean² / rms²` (n heads): about χ²₁ for zero-mean noise at any scale, up to n
    /// for a row of equal values.
    pub mean_statistic: f64,
    /// z score of this row's factor against the never-trained buckets' common factor
    /// ([`crate::analyze::decay::disagreement`]); `None` without such buckets.
    pub factor_z_vs_never_trained: Option<f64>,
    /// Whether the row still looks like its initial noise; `None` without an init scale.
    /// `false` is a finding: the row cannot have been trained, so it was altered or
    /// initialised differently.
    pub looks_like_init: Option<bool>,
}

/// A run of never-trained buckets and the distances it covers.
#[derive(Debug, Clone, Serialize)]
pub struct NeverTrainedRange {
    /// First bucket.
    pub start: usize,
    /// One past the last bucket.
    pub end: usize,
    /// Signed distance (key − query) of smallest magnitude that maps into the range.
    pub nearest_distance: i64,
    /// Signed distance of largest magnitude, `None` when every farther distance lands
    /// in the range too (it holds the side's last bucket).
    pub farthest_distance: Option<i64>,
}

/// Upper χ²_k quantile at p = 0.001 (z = 3.09), Wilson–Hilferty approximation
/// (Wilson & Hilferty 1931): `k·(1 − 2/(9k) + z·√(2/(9k)))³`. k = 1 gives 11.1
/// (exact 10.83), k = 4 gives 18.7 (exact 18.47).
fn chi2_upper(k: usize) -> f64 {
    let k = k.max(1) as f64;
    let c = 2.0 / (9.0 * k);
    k * (1.0 - c + 3.09 * c.sqrt()).powi(3)
}

/// Lower χ²_k quantile at p = 0.001, same approximation, floored at 0.
fn chi2_lower(k: usize) -> f64 {
    let k = k.max(1) as f64;
    let c = 2.0 / (9.0 * k);
    k * (1.0 - c - 3.09 * c.sqrt()).max(0.0).powi(3)
}

/// Whether `values` look like independent draws of N(0, s²): the mean component
/// `n·mean²/s²` (χ²₁ under the model) and the total `Σx²/s²` (χ²_n) both stay under
/// their 0.999 quantiles.
fn noise_at_scale(values: &[f64], s: f64) -> bool {
    if values.is_empty() || s.is_nan() || s <= 0.0 {
        return false;
    }
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let total = values.iter().map(|v| v * v).sum::<f64>() / (s * s);
    n * mean * mean / (s * s) <= chi2_upper(1)
        && total <= chi2_upper(values.len())
        && total >= chi2_lower(values.len())
}

/// What a relative-position bias table says.
#[derive(Debug, Clone, Serialize)]
pub struct RelativeAnalysis {
    /// `t5-buckets` or `window-2d`.
    pub style: String,
    /// Number of table rows (buckets or window offsets).
    pub buckets: usize,
    /// Number of heads (table columns).
    pub heads: usize,
    /// Whether distances in both directions are distinguished.
    pub bidirectional: bool,
    /// Where `bidirectional` came from: `config`, `name`, `inferred …` or `window tables are bidirectional`.
    pub bidirectional_source: String,
    /// Rows that no distance maps to (sorted).
    pub unreachable: Vec<usize>,
    /// Details of each unreachable row.
    pub unreachable_rows: Vec<UnreachableRow>,
    /// `max_distance` used for the bucket function (T5 only).
    pub max_distance: Option<usize>,
    /// Signed distances (key − query) of the curves, T5 only.
    pub distances: Vec<i64>,
    /// Bias per head against `distances`: `curves[head][k]`.
    pub curves: Vec<Vec<f64>>,
    /// Window (height, width), window tables only.
    pub window: Option<(usize, usize)>,
    /// Per-head offset maps `offset_maps[head][dy + h − 1][dx + w − 1]`, dy/dx = query − key.
    pub offset_maps: Vec<Vec<Vec<f64>>>,
    /// Per-head trend.
    pub head_trends: Vec<HeadTrend>,
    /// Heads whose values look like untrained noise.
    pub untrained_heads: Vec<usize>,
    /// Reachable buckets that look never trained: contiguous runs at the far end of each
    /// direction whose values are noise of the init's shape at one common scale f·σ
    /// (sorted). Needs an init scale.
    pub never_trained: Vec<usize>,
    /// Half-open bucket ranges of `never_trained`, each with the signed distances
    /// (key − query) it covers: `(start, end, nearest distance, farthest distance)`;
    /// the farthest is `None` when the range holds the last bucket of its side (every
    /// longer distance lands there).
    pub never_trained_ranges: Vec<NeverTrainedRange>,
    /// Common factor f of the never-trained buckets against the init scale, with its
    /// interval (pooled RMS / σ).
    pub never_trained_factor: Option<crate::analyze::decay::DecayEstimate>,
    /// Every reachable bucket is never-trained: the table looks like its initialization.
    pub looks_like_init: bool,
    /// Assumptions made, in plain words.
    pub notes: Vec<String>,
    /// Why no analysis was possible, if so.
    pub problem: Option<String>,
}

impl RelativeAnalysis {
    fn new(style: &str, buckets: usize, heads: usize) -> Self {
        RelativeAnalysis {
            style: style.into(),
            buckets,
            heads,
            bidirectional: true,
            bidirectional_source: String::new(),
            unreachable: Vec::new(),
            unreachable_rows: Vec::new(),
            max_distance: None,
            distances: Vec::new(),
            curves: Vec::new(),
            window: None,
            offset_maps: Vec::new(),
            head_trends: Vec::new(),
            untrained_heads: Vec::new(),
            never_trained: Vec::new(),
            never_trained_ranges: Vec::new(),
            never_trained_factor: None,
            looks_like_init: false,
            notes: Vec::new(),
            problem: None,
        }
    }
}

mod t5;
mod window;

pub use t5::{analyze_t5, t5_bucket, t5_unreachable};
pub use window::{analyze_swin, is_swin_index, swin_relative_index};

/// Average ranks (ties share the mean rank).
fn ranks(x: &[f64]) -> Vec<f64> {
    let mut idx: Vec<usize> = (0..x.len()).collect();
    idx.sort_by(|&a, &b| x[a].total_cmp(&x[b]));
    let mut r = vec![0.0; x.len()];
    let mut i = 0;
    while i < idx.len() {
        let mut j = i;
        while j + 1 < idx.len() && x[idx[j + 1]] == x[idx[i]] {
            j += 1;
        }
        let avg = (i + j) as f64 / 2.0;
        for &k in &idx[i..=j] {
            r[k] = avg;
        }
        i = j + 1;
    }
    r
}

fn pearson(x: &[f64], y: &[f64]) -> Option<f64> {
    if x.len() != y.len() || x.len() < 3 {
        return None;
    }
    let n = x.len() as f64;
    let mx = x.iter().sum::<f64>() / n;
    let my = y.iter().sum::<f64>() / n;
    let (mut sxy, mut sxx, mut syy) = (0.0, 0.0, 0.0);
    for (a, b) in x.iter().zip(y) {
        sxy += (a - mx) * (b - my);
        sxx += (a - mx).powi(2);
        syy += (b - my).powi(2);
    }
    if sxx <= 0.0 || syy <= 0.0 {
        return None;
    }
    Some(sxy / (sxx * syy).sqrt())
}

/// Spearman rank correlation; `None` with fewer than 3 points or a constant input.
fn spearman(x: &[f64], y: &[f64]) -> Option<f64> {
    pearson(&ranks(x), &ranks(y))
}

/// Lag-1 autocorrelation pooled over several sequences (each centred on its own mean).
fn pooled_autocorrelation(seqs: &[Vec<f64>]) -> Option<f64> {
    let (mut num, mut den, mut pairs) = (0.0, 0.0, 0usize);
    for s in seqs {
        if s.len() < 2 {
            continue;
        }
        let m = s.iter().sum::<f64>() / s.len() as f64;
        for w in s.windows(2) {
            num += (w[0] - m) * (w[1] - m);
            pairs += 1;
        }
        den += s.iter().map(|v| (v - m).powi(2)).sum::<f64>();
    }
    if pairs < 2 || den <= 0.0 {
        return None;
    }
    Some(num / den)
}

fn std_of(v: &[f64]) -> f64 {
    if v.is_empty() {
        return 0.0;
    }
    let m = v.iter().sum::<f64>() / v.len() as f64;
    (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / v.len() as f64).sqrt()
}

fn trend_word(corrs: &[Option<f64>]) -> String {
    let known: Vec<f64> = corrs.iter().flatten().copied().collect();
    if known.is_empty() {
        "flat".into()
    } else if known.iter().all(|c| *c <= -0.5) {
        "decays".into()
    } else if known.iter().all(|c| *c >= 0.5) {
        "grows".into()
    } else {
        "mixed".into()
    }
}

/// Verdict shared by both table styles: noise has no trend and no smoothness.
///
/// Thresholds (common practice, not a published test): |Spearman| < 0.6 on every side,
/// lag-1 autocorrelation < 0.5, and with a known init scale a spread within [0.5, 2]×.
fn untrained_verdict(
    corrs: &[Option<f64>],
    autocorr: Option<f64>,
    std: f64,
    init: Option<f64>,
) -> bool {
    let no_trend = corrs.iter().flatten().all(|c| c.abs() < 0.6);
    let rough = autocorr.is_some_and(|a| a < 0.5);
    let scale_ok = init.is_none_or(|s| s > 0.0 && std / s > 0.5 && std / s < 2.0);
    no_trend && rough && scale_ok && std > 0.0
}

fn check_table(table: &ArrayView2<f64>) -> Option<String> {
    if table.nrows() < 2 || table.ncols() == 0 {
        return Some(format!(
            "need at least 2 rows and 1 head, got {}x{}",
            table.nrows(),
            table.ncols()
        ));
    }
    if table.iter().any(|v| !v.is_finite()) {
        return Some("table holds non-finite values".into());
    }
    None
}

#[cfg(test)]
mod tests;
