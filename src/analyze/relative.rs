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

/// T5 relative-position bucket (Raffel et al. 2020; HF `_relative_position_bucket`,
/// check-values §5.1), with `relative_position = key − query`.
///
/// ```text
/// if bidirectional: nb = nb/2; ret = (rp > 0)·nb; rp = |rp|   else: ret = 0; rp = max(−rp, 0)
/// max_exact = nb/2
/// bucket = rp                                                          if rp < max_exact
///        = min(max_exact + ⌊ln(rp/max_exact)/ln(max_distance/max_exact)·(nb − max_exact)⌋, nb − 1)
/// return ret + bucket
/// ```
///
/// The logarithm is evaluated in f32 as the reference code does, so boundary distances
/// land in the same buckets. Edge cases: `num_buckets` < 2 or `max_distance ≤ max_exact`
/// put every non-exact distance in the last bucket of its side; nothing panics.
pub fn t5_bucket(
    relative_position: i64,
    bidirectional: bool,
    num_buckets: usize,
    max_distance: usize,
) -> usize {
    let mut nb = num_buckets;
    let mut ret = 0usize;
    let rp: u64 = if bidirectional {
        nb /= 2;
        if relative_position > 0 {
            ret = nb;
        }
        relative_position.unsigned_abs()
    } else if relative_position < 0 {
        relative_position.unsigned_abs()
    } else {
        0
    };
    if nb == 0 {
        return ret.min(num_buckets.saturating_sub(1));
    }
    let max_exact = nb / 2;
    if rp < max_exact as u64 {
        return ret + rp as usize;
    }
    if max_exact == 0 || max_distance <= max_exact {
        return ret + nb - 1;
    }
    let ratio = (rp as f32 / max_exact as f32).ln();
    let scale = ((max_distance as f64) / (max_exact as f64)).ln() as f32;
    let large = max_exact + (ratio / scale * (nb - max_exact) as f32) as usize;
    ret + large.min(nb - 1)
}

/// Largest window (cells) whose index is built: 32×32, far above published windows.
const MAX_WINDOW_CELLS: usize = 1024;

/// Largest |distance| enumerated: beyond `max_distance` every distance shares a bucket.
fn enumeration_limit(num_buckets: usize, max_distance: usize) -> i64 {
    let r = max_distance
        .saturating_mul(2)
        .saturating_add(num_buckets)
        .saturating_add(2);
    r.min(1_000_000) as i64
}

/// Buckets that no distance reaches, for the given bucket function settings.
///
/// ```text
/// unreachable = {0..num_buckets} \ {t5_bucket(rp) : |rp| ≤ 2·max_distance + num_buckets + 2}
/// ```
///
/// Distances beyond `max_distance` all fall in the last bucket of their side, so this
/// enumeration covers every reachable bucket (enumeration is capped at 10⁶).
/// Check value (§5.1): bidirectional, 32 buckets, max 128 → `[16]`.
pub fn t5_unreachable(bidirectional: bool, num_buckets: usize, max_distance: usize) -> Vec<usize> {
    let limit = enumeration_limit(num_buckets, max_distance);
    let mut used = vec![false; num_buckets];
    for rp in -limit..=limit {
        if let Some(u) = used.get_mut(t5_bucket(rp, bidirectional, num_buckets, max_distance)) {
            *u = true;
        }
    }
    (0..num_buckets).filter(|&b| !used[b]).collect()
}

/// Buckets visited in order of growing |distance| on one side (−1: key before query,
/// +1: key after), consecutive repeats removed.
fn side_sequence(sign: i64, bidirectional: bool, nb: usize, md: usize) -> Vec<usize> {
    let limit = enumeration_limit(nb, md);
    let mut seq: Vec<usize> = Vec::new();
    for k in 0..=limit {
        let b = t5_bucket(sign * k, bidirectional, nb, md);
        if seq.last() != Some(&b) && b < nb {
            seq.push(b);
        }
    }
    seq
}

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

fn path_cost(table: &ArrayView2<f64>, path: &[usize]) -> f64 {
    if path.len() < 2 {
        return f64::INFINITY;
    }
    let total: f64 = path
        .windows(2)
        .map(|w| {
            table
                .row(w[0])
                .iter()
                .zip(table.row(w[1]).iter())
                .map(|(a, b)| (a - b).powi(2))
                .sum::<f64>()
        })
        .sum();
    total / (path.len() - 1) as f64
}

/// Analyses a T5-style (buckets, heads) table.
///
/// Steps: decide the direction mode (config hint, then the name — `encoder` is
/// bidirectional, `decoder` is not — else the mode whose far-to-near bucket path through
/// the table is smoother, said in `bidirectional_source`); list unreachable buckets with
/// [`t5_unreachable`] and compare each such row with the init scale; sample each head's
/// bias over signed distances −max_distance..=max_distance; per head, Spearman
/// correlation of bias with distance on each side (negative = decay), fraction of
/// decreasing steps, and lag-1 autocorrelation along distance.
///
/// Never-trained buckets (init scale σ known). Decoupled weight decay (Loshchilov &
/// Hutter 2019) leaves a bucket that never gets a gradient at `init × f`, one common
/// f ≤ 1, so a row is never-trained when it is noise of the init's shape at scale f·σ:
///
/// ```text
/// noise(x, s):  n·mean²/s² ≤ χ²₁(0.999)   and   χ²_n(0.001) ≤ Σx²/s² ≤ χ²_n(0.999)
/// run_side  = longest far-end run of the side's buckets with noise(row, σ)
/// repeat:   f = pooled rms(runs)/σ; cut each run at its first row failing noise(row, f·σ)
/// accept when stable and f ≤ exp(3·se(ln f))
/// ```
///
/// An unreachable row "looks like init" (untrained, possibly shrunk) when, with h heads,
/// it is zero-mean noise at its own scale (`h·mean²/rms² ≤ χ²₁(0.999)`, spread
/// `Σ(x−mean)²/rms² ≥ χ²_{h−1}(0.001)`), not larger than the init
/// (`rms/σ ≤ 1 + 4/√(2h)`), and its factor agrees with the never-trained buckets' one
/// (z ≤ 4, [`crate::analyze::decay::disagreement`]). χ² quantiles: Wilson–Hilferty.
///
/// A head "looks untrained" when the whole table looks like its initialization, or when
/// |Spearman| < 0.6 on every side, the lag-1 autocorrelation is < 0.5, with σ known its
/// spread is within [0.5, 2]·σ and its values on the trained buckets are noise(·, σ).
///
/// Edge cases: fewer than 2 rows, no heads or non-finite values set `problem`.
pub fn analyze_t5(table: ArrayView2<f64>, hints: &RelativeHints) -> RelativeAnalysis {
    let (nb, heads) = table.dim();
    let mut a = RelativeAnalysis::new("t5-buckets", nb, heads);
    if let Some(p) = check_table(&table) {
        a.problem = Some(p);
        return a;
    }
    if let Some(h) = hints.num_buckets.filter(|h| *h != nb) {
        a.notes.push(format!(
            "config says {h} buckets but the table has {nb} rows; using {nb}"
        ));
    }
    let md = hints.max_distance.unwrap_or(128);
    if hints.max_distance.is_none() {
        a.notes
            .push("max_distance not given: the T5 default 128 is assumed".into());
    }
    a.max_distance = Some(md);

    let name = hints.name.as_deref().unwrap_or("").to_ascii_lowercase();
    let (bidirectional, source) = if let Some(b) = hints.bidirectional {
        (b, "config".to_string())
    } else if name.contains("encoder") {
        (true, "name".to_string())
    } else if name.contains("decoder") {
        (false, "name".to_string())
    } else {
        let mut bi_path = side_sequence(-1, true, nb, md);
        bi_path.reverse();
        bi_path.extend(side_sequence(1, true, nb, md).into_iter().skip(1));
        let mut uni_path = side_sequence(-1, false, nb, md);
        uni_path.reverse();
        let (cb, cu) = (path_cost(&table, &bi_path), path_cost(&table, &uni_path));
        (
            cb <= cu,
            format!(
                "inferred: mean squared step along the bidirectional bucket path {cb:.4e} vs the causal path {cu:.4e}"
            ),
        )
    };
    a.bidirectional = bidirectional;
    a.bidirectional_source = source;

    a.unreachable = t5_unreachable(bidirectional, nb, md);
    let reachable: Vec<usize> = (0..nb).filter(|b| !a.unreachable.contains(b)).collect();
    let rms_of = |r: usize| -> f64 {
        (table.row(r).iter().map(|v| v * v).sum::<f64>() / heads as f64).sqrt()
    };
    let row_vals = |b: usize| -> Vec<f64> { table.row(b).to_vec() };
    let init = hints.init_std.filter(|s| s.is_finite() && *s > 0.0);
    let before = side_sequence(-1, bidirectional, nb, md);
    let after = side_sequence(1, bidirectional, nb, md);
    let sides: Vec<&Vec<usize>> = if bidirectional {
        vec![&before, &after]
    } else {
        vec![&before]
    };

    // Never-trained buckets: far-end runs of each side that are noise at the init scale,
    // then shrunk to rows that are noise at the common scale f·σ of the run.
    if let Some(sigma) = init {
        let mut runs: Vec<Vec<usize>> = sides
            .iter()
            .map(|seq| {
                seq.iter()
                    .rev()
                    .take_while(|&&b| noise_at_scale(&row_vals(b), sigma))
                    .copied()
                    .collect()
            })
            .collect();
        for _ in 0..nb + 1 {
            let mut cand: Vec<usize> = runs.iter().flatten().copied().collect();
            cand.sort_unstable();
            cand.dedup();
            let rms: Vec<f64> = cand.iter().map(|&b| rms_of(b)).collect();
            let Some(est) = crate::analyze::decay::estimate(&rms, heads, sigma) else {
                break;
            };
            let s = sigma * est.factor;
            let shrunk: Vec<Vec<usize>> = runs
                .iter()
                .map(|run| {
                    run.iter()
                        .take_while(|&&b| noise_at_scale(&row_vals(b), s))
                        .copied()
                        .collect()
                })
                .collect();
            if shrunk == runs {
                // One common factor f ≤ 1 (within 3 standard errors): decay only shrinks.
                if est.factor <= (3.0 * est.log_standard_error).exp() {
                    a.never_trained = cand;
                    a.never_trained_factor = Some(est);
                }
                break;
            }
            runs = shrunk;
        }
    } else {
        a.notes
            .push("no init scale known: never-trained buckets are not looked for".into());
    }
    a.looks_like_init = !reachable.is_empty() && a.never_trained.len() == reachable.len();
    let limit = enumeration_limit(nb, md);
    let mut i = 0;
    while i < a.never_trained.len() {
        let mut j = i;
        while j + 1 < a.never_trained.len() && a.never_trained[j + 1] == a.never_trained[j] + 1 {
            j += 1;
        }
        let (start, end) = (a.never_trained[i], a.never_trained[j] + 1);
        let dists: Vec<i64> = (-limit..=limit)
            .filter(|&rp| (start..end).contains(&t5_bucket(rp, bidirectional, nb, md)))
            .collect();
        let nearest = dists.iter().copied().min_by_key(|d| d.unsigned_abs());
        let farthest = dists.iter().copied().max_by_key(|d| d.unsigned_abs());
        if let (Some(n), Some(f)) = (nearest, farthest) {
            a.never_trained_ranges.push(NeverTrainedRange {
                start,
                end,
                nearest_distance: n,
                farthest_distance: (f.abs() < limit).then_some(f),
            });
        }
        i = j + 1;
    }

    let mut reach_rms: Vec<f64> = reachable.iter().map(|&r| rms_of(r)).collect();
    reach_rms.sort_by(|x, y| x.total_cmp(y));
    let reach_median = reach_rms.get(reach_rms.len() / 2).copied().unwrap_or(0.0);
    for &b in &a.unreachable {
        let rms = rms_of(b);
        let vals = row_vals(b);
        let mean = vals.iter().sum::<f64>() / heads as f64;
        let h = heads as f64;
        let mean_statistic = if rms > 0.0 {
            h * mean * mean / (rms * rms)
        } else {
            h
        };
        let deviation = if rms > 0.0 {
            vals.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (rms * rms)
        } else {
            0.0
        };
        let own = init.and_then(|s| crate::analyze::decay::estimate(&[rms], heads, s));
        let z = match (&own, &a.never_trained_factor) {
            (Some(o), Some(p)) => Some(crate::analyze::decay::disagreement(o, p)),
            _ => None,
        };
        let looks = init.map(|s| {
            let spread = 4.0 / (2.0 * h).sqrt();
            rms > 0.0
                && mean_statistic <= chi2_upper(1)
                && (heads < 2 || deviation >= chi2_lower(heads - 1))
                && rms / s <= 1.0 + spread
                && z.is_none_or(|z| z <= 4.0)
        });
        a.unreachable_rows.push(UnreachableRow {
            bucket: b,
            rms,
            mean,
            reachable_rms_median: reach_median,
            rms_over_init_std: init.map(|s| rms / s),
            mean_statistic,
            factor_z_vs_never_trained: z,
            looks_like_init: looks,
        });
    }

    let md_i = i64::try_from(md.min(4096)).unwrap_or(4096);
    a.distances = (-md_i..=md_i).collect();
    a.curves = (0..heads)
        .map(|h| {
            a.distances
                .iter()
                .map(|&d| table[[t5_bucket(d, bidirectional, nb, md).min(nb - 1), h]])
                .collect()
        })
        .collect();

    let trained: Vec<usize> = reachable
        .iter()
        .copied()
        .filter(|b| !a.never_trained.contains(b))
        .collect();
    for h in 0..heads {
        let vals = |seq: &[usize]| -> Vec<f64> { seq.iter().map(|&b| table[[b, h]]).collect() };
        let side_corr = |seq: &[usize]| -> Option<f64> {
            let v = vals(seq);
            let x: Vec<f64> = (0..v.len()).map(|i| i as f64).collect();
            spearman(&x, &v)
        };
        let sb = side_corr(&before);
        let sa = if bidirectional {
            side_corr(&after)
        } else {
            None
        };
        let mut seqs = vec![vals(&before)];
        if bidirectional {
            seqs.push(vals(&after));
        }
        let steps: Vec<bool> = seqs
            .iter()
            .flat_map(|s| s.windows(2).map(|w| w[1] < w[0]).collect::<Vec<_>>())
            .collect();
        let dec = (!steps.is_empty())
            .then(|| steps.iter().filter(|x| **x).count() as f64 / steps.len() as f64);
        let ac = pooled_autocorrelation(&seqs);
        let reach_vals: Vec<f64> = reachable.iter().map(|&b| table[[b, h]]).collect();
        let std = std_of(&reach_vals);
        let corrs = [sb, sa];
        // A head is init noise only if its trained buckets are noise at the init scale
        // (zero mean, χ² spread); trained heads of a briefly trained table can be rough.
        let noise_ok = init.is_none_or(|s| {
            let v: Vec<f64> = trained.iter().map(|&b| table[[b, h]]).collect();
            v.is_empty() || noise_at_scale(&v, s)
        });
        let untrained = a.looks_like_init || (untrained_verdict(&corrs, ac, std, init) && noise_ok);
        if untrained {
            a.untrained_heads.push(h);
        }
        a.head_trends.push(HeadTrend {
            head: h,
            spearman_before: sb,
            spearman_after: sa,
            decreasing_step_fraction: dec,
            neighbour_autocorrelation: ac,
            std,
            trend: trend_word(&corrs),
            looks_untrained: untrained,
        });
    }
    a
}

/// Window relative-position index (Liu et al. 2021, Swin; check-values §5.2), flattened
/// row-major over (query, key), each of the `wh·ww` window cells numbered `y·ww + x`.
///
/// ```text
/// index[i, j] = (y_i − y_j + wh − 1)·(2ww − 1) + (x_i − x_j + ww − 1)
/// ```
///
/// Check values for window 7: 169 distinct entries, diagonal 84, `idx[0,1] = 83`,
/// `idx[1,0] = 85`. Edge cases: a zero-sized window, or one with more than 1024 cells
/// (the index would hold over a million entries), gives an empty vector.
pub fn swin_relative_index(wh: usize, ww: usize) -> Vec<usize> {
    let n = wh.saturating_mul(ww);
    if n == 0 || n > MAX_WINDOW_CELLS {
        return Vec::new();
    }
    let mut out = Vec::with_capacity(n * n);
    for i in 0..n {
        let (yi, xi) = (i / ww, i % ww);
        for j in 0..n {
            let (yj, xj) = (j / ww, j % ww);
            out.push((yi + wh - 1 - yj) * (2 * ww - 1) + (xi + ww - 1 - xj));
        }
    }
    out
}

/// Recognises an integer buffer equal to [`swin_relative_index`] for some window.
///
/// Accepts shapes (N, N), (1, N, N) or (N²,) with N = wh·ww and returns `(wh, ww)`,
/// trying square windows first:
///
/// ```text
/// max(values) + 1 = (2wh − 1)(2ww − 1)   and   values = swin_relative_index(wh, ww)
/// ```
/// Edge cases: other shapes, N > 1024, or a mismatch
/// give `None`.
pub fn is_swin_index(values: &[i64], shape: &[usize]) -> Option<(usize, usize)> {
    let dims: Vec<usize> = shape.iter().copied().filter(|&d| d != 1).collect();
    let n = match dims.as_slice() {
        [a, b] if a == b => *a,
        [l] => {
            let r = (*l as f64).sqrt().round() as usize;
            (r * r == *l).then_some(r)?
        }
        _ => return None,
    };
    if n == 0 || n > MAX_WINDOW_CELLS || values.len() != n * n {
        return None;
    }
    let max = *values.iter().max()?;
    let mut candidates: Vec<(usize, usize)> = (1..=n)
        .filter(|wh| n.is_multiple_of(*wh))
        .map(|wh| (wh, n / wh))
        .filter(|&(wh, ww)| i64::try_from((2 * wh - 1) * (2 * ww - 1)).ok() == Some(max + 1))
        .collect();
    candidates.sort_by_key(|&(wh, ww)| wh.abs_diff(ww));
    candidates.into_iter().find(|&(wh, ww)| {
        swin_relative_index(wh, ww)
            .iter()
            .zip(values)
            .all(|(a, b)| i64::try_from(*a).ok() == Some(*b))
    })
}

/// Analyses a window-style ((2h−1)(2w−1), heads) bias table.
///
/// ```text
/// row r ↦ (dy, dx) = (r div (2w−1) − (h−1),  r mod (2w−1) − (w−1))
/// map_head[dy + h − 1][dx + w − 1] = table[r, head]
/// ```
///
/// The window is `window` when given, else the square window with
/// `2w − 1 = √rows`. Row r holds offset `dy = r / (2w−1) − (h−1)`,
/// `dx = r mod (2w−1) − (w−1)` (query − key, check-values §5.2), so each head's column
/// reshapes to a (2h−1)×(2w−1) map. Per head: Spearman correlation of bias with offset
/// length √(dy² + dx²) (negative = decay) and the autocorrelation between
/// horizontally and vertically neighbouring offsets. Every row is used by the index
/// (§5.2), so `unreachable` is empty.
///
/// Edge cases: a row count that is not (2h−1)(2w−1), too few rows, or non-finite values
/// set `problem`.
pub fn analyze_swin(
    table: ArrayView2<f64>,
    window: Option<(usize, usize)>,
    init_std: Option<f64>,
) -> RelativeAnalysis {
    let (rows, heads) = table.dim();
    let mut a = RelativeAnalysis::new("window-2d", rows, heads);
    a.bidirectional_source = "window tables are bidirectional".into();
    if let Some(p) = check_table(&table) {
        a.problem = Some(p);
        return a;
    }
    let (wh, ww) = match window {
        Some(w) => w,
        None => {
            let s = (rows as f64).sqrt().round() as usize;
            if s * s != rows || s.is_multiple_of(2) {
                a.problem = Some(format!(
                    "{rows} rows is not (2w−1)² for a square window and no window size was given"
                ));
                return a;
            }
            a.notes
                .push("square window inferred from the row count".into());
            (s.div_ceil(2), s.div_ceil(2))
        }
    };
    let (mh, mw) = (
        wh.saturating_mul(2).saturating_sub(1),
        ww.saturating_mul(2).saturating_sub(1),
    );
    if mh.checked_mul(mw) != Some(rows) || wh == 0 || ww == 0 {
        a.problem = Some(format!(
            "window {wh}x{ww} needs (2h−1)(2w−1) rows, table has {rows}"
        ));
        return a;
    }
    a.window = Some((wh, ww));
    a.offset_maps = (0..heads)
        .map(|h| {
            (0..mh)
                .map(|r| (0..mw).map(|c| table[[r * mw + c, h]]).collect())
                .collect()
        })
        .collect();
    let dist: Vec<f64> = (0..rows)
        .map(|r| {
            let dy = (r / mw) as f64 - (wh as f64 - 1.0);
            let dx = (r % mw) as f64 - (ww as f64 - 1.0);
            (dy * dy + dx * dx).sqrt()
        })
        .collect();
    for h in 0..heads {
        let col: Vec<f64> = table.column(h).to_vec();
        let sp = spearman(&dist, &col);
        // Neighbour pairs along both axes of the offset map.
        let m = col.iter().sum::<f64>() / rows as f64;
        let var: f64 = col.iter().map(|v| (v - m).powi(2)).sum::<f64>() / rows as f64;
        let (mut s, mut k) = (0.0, 0usize);
        for r in 0..mh {
            for c in 0..mw {
                let v = col[r * mw + c] - m;
                if c + 1 < mw {
                    s += v * (col[r * mw + c + 1] - m);
                    k += 1;
                }
                if r + 1 < mh {
                    s += v * (col[(r + 1) * mw + c] - m);
                    k += 1;
                }
            }
        }
        let ac = (k > 1 && var > 0.0).then(|| s / k as f64 / var);
        let std = var.sqrt();
        let corrs = [sp];
        let untrained = untrained_verdict(&corrs, ac, std, init_std);
        if untrained {
            a.untrained_heads.push(h);
        }
        a.head_trends.push(HeadTrend {
            head: h,
            spearman_before: sp,
            spearman_after: None,
            decreasing_step_fraction: None,
            neighbour_autocorrelation: ac,
            std,
            trend: trend_word(&corrs),
            looks_untrained: untrained,
        });
    }
    a
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

    /// Deterministic normal samples (xorshift64* + Box–Muller) for invented noise.
    struct Noise(u64);
    impl Noise {
        fn uniform(&mut self) -> f64 {
            self.0 ^= self.0 >> 12;
            self.0 ^= self.0 << 25;
            self.0 ^= self.0 >> 27;
            ((self.0.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        }
        fn normal(&mut self) -> f64 {
            let (u, v) = (self.uniform(), self.uniform());
            (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
        }
    }

    #[test]
    fn t5_bidirectional_buckets_match_the_published_table() {
        // check-values §5.1 (a-calc from HF t5 `_relative_position_bucket`), 32 buckets, max 128.
        let table: [(i64, usize); 22] = [
            (-1000, 15),
            (-128, 15),
            (-64, 14),
            (-32, 12),
            (-16, 10),
            (-9, 8),
            (-8, 8),
            (-7, 7),
            (-1, 1),
            (0, 0),
            (1, 17),
            (7, 23),
            (8, 24),
            (9, 24),
            (15, 25),
            (16, 26),
            (31, 27),
            (32, 28),
            (63, 29),
            (64, 30),
            (127, 31),
            (128, 31),
        ];
        for (rp, want) in table {
            assert_eq!(t5_bucket(rp, true, 32, 128), want, "rp {rp}");
        }
        assert_eq!(t5_bucket(100_000, true, 32, 128), 31);
        // First |rp| of each log bucket on either side: 8→8, 9→12, …, 15→91.
        let firsts = [
            (8, 8),
            (9, 12),
            (10, 16),
            (11, 23),
            (12, 32),
            (13, 46),
            (14, 64),
            (15, 91),
        ];
        for (bucket, first) in firsts {
            assert_eq!(t5_bucket(-first, true, 32, 128), bucket);
            assert_eq!(t5_bucket(-(first - 1), true, 32, 128), bucket - 1);
            assert_eq!(t5_bucket(first, true, 32, 128), bucket + 16);
            assert_eq!(t5_bucket(first - 1, true, 32, 128), bucket + 15);
        }
    }

    #[test]
    fn t5_causal_buckets_match_the_published_first_distances() {
        // check-values §5.1: buckets 0–15 exact; first distances of 16..31.
        for d in 0..16 {
            assert_eq!(t5_bucket(-d, false, 32, 128), d as usize);
        }
        let firsts = [
            16, 19, 21, 24, 27, 31, 35, 40, 46, 52, 59, 67, 77, 87, 99, 113,
        ];
        for (k, first) in firsts.iter().enumerate() {
            assert_eq!(
                t5_bucket(-first, false, 32, 128),
                16 + k,
                "distance {first}"
            );
            assert_eq!(t5_bucket(-(first - 1), false, 32, 128), 15 + k);
        }
        // Keys after the query all share bucket 0 in causal mode.
        assert_eq!(t5_bucket(5, false, 32, 128), 0);
    }

    #[test]
    fn bucket_16_is_unreachable_only_in_bidirectional_mode() {
        // check-values §5.1.
        assert_eq!(t5_unreachable(true, 32, 128), vec![16]);
        assert!(t5_unreachable(false, 32, 128).is_empty());
    }

    /// Invented T5-like encoder table: each head decays with |distance| at its own rate on
    /// both sides, row 16 holds init noise of std 0.05, one head (5) is pure init noise.
    fn invented_encoder_table(seed: u64, row16_scale: f64) -> Array2<f64> {
        let mut noise = Noise(seed);
        let mut t = Array2::<f64>::zeros((32, 8));
        for h in 0..8 {
            for b in 0..32 {
                let dist = if b == 0 {
                    0.0
                } else if b < 16 {
                    (1..=2000)
                        .find(|&d| t5_bucket(-d, true, 32, 128) == b)
                        .unwrap() as f64
                } else if b > 16 {
                    (1..=2000)
                        .find(|&d| t5_bucket(d, true, 32, 128) == b)
                        .unwrap() as f64
                } else {
                    f64::NAN
                };
                t[[b, h]] = if b == 16 {
                    row16_scale * noise.normal()
                } else if h == 5 {
                    0.05 * noise.normal()
                } else {
                    3.0 - (1.0 + dist).ln() * (0.5 + 0.1 * h as f64)
                };
            }
        }
        t
    }

    #[test]
    fn an_invented_encoder_table_shows_decay_unreachable_row_and_noise_head() {
        let t = invented_encoder_table(7, 0.05);
        let hints = RelativeHints {
            init_std: Some(0.05),
            name: Some(
                "encoder.block.0.layer.0.SelfAttention.relative_attention_bias.weight".into(),
            ),
            ..Default::default()
        };
        let a = analyze_t5(t.view(), &hints);
        assert!(a.bidirectional);
        assert_eq!(a.bidirectional_source, "name");
        assert_eq!(a.unreachable, vec![16]);
        assert_eq!(a.unreachable_rows[0].looks_like_init, Some(true));
        for (h, tr) in a.head_trends.iter().enumerate() {
            if h == 5 {
                continue;
            }
            assert_eq!(tr.trend, "decays", "head {h}: {tr:?}");
            assert!(!tr.looks_untrained);
        }
        assert_eq!(a.curves.len(), 8);
        assert_eq!(a.distances.len(), 257);
        assert_eq!(a.curves[0][128], t[[0, 0]]);
        assert_eq!(a.curves[0][129], t[[17, 0]]);
        assert_eq!(a.curves[0][127], t[[1, 0]]);
        // A row 16 moved away from its init scale is not init (invented: scale 1.0).
        let t = invented_encoder_table(7, 1.0);
        let a = analyze_t5(t.view(), &hints);
        assert_eq!(a.unreachable_rows[0].looks_like_init, Some(false));
    }

    #[test]
    fn noise_heads_are_flagged_and_smooth_heads_never_are() {
        // Invented: over 50 seeds, the pure-noise head 5 should mostly be flagged
        // (the verdict has a known false-negative rate on 16-value sides), and the
        // smooth heads never.
        let hints = RelativeHints {
            bidirectional: Some(true),
            init_std: Some(0.05),
            ..Default::default()
        };
        let mut flagged = 0;
        for seed in 1..=50 {
            let a = analyze_t5(invented_encoder_table(seed, 0.05).view(), &hints);
            assert!(
                a.untrained_heads.iter().all(|h| *h == 5),
                "{:?}",
                a.untrained_heads
            );
            flagged += a.untrained_heads.len();
        }
        assert!(flagged >= 35, "noise head flagged only {flagged}/50 times");
    }

    #[test]
    fn direction_is_inferred_from_smoothness_when_nothing_says_it() {
        let t = invented_encoder_table(3, 0.05);
        let a = analyze_t5(t.view(), &RelativeHints::default());
        assert!(a.bidirectional, "{}", a.bidirectional_source);
        assert!(a.bidirectional_source.starts_with("inferred"));
        // Invented causal table: smooth in the causal bucket order 0..31.
        let c = Array2::from_shape_fn((32, 4), |(b, h)| -((1 + b) as f64).ln() * (1.0 + h as f64));
        let a = analyze_t5(c.view(), &RelativeHints::default());
        assert!(!a.bidirectional, "{}", a.bidirectional_source);
        assert!(a.unreachable.is_empty());
    }

    #[test]
    fn swin_index_has_the_published_structure() {
        // check-values §5.2, window 7.
        let idx = swin_relative_index(7, 7);
        assert_eq!(idx.len(), 49 * 49);
        let mut counts = vec![0usize; 169];
        for &i in &idx {
            counts[i] += 1;
        }
        assert!(counts.iter().all(|c| *c > 0), "all 169 entries used");
        assert_eq!(idx.iter().max(), Some(&168));
        for i in 0..49 {
            assert_eq!(idx[i * 49 + i], 84);
        }
        assert_eq!(idx[1], 83);
        assert_eq!(idx[49], 85);
        for (r, &c) in counts.iter().enumerate() {
            let dy = (r / 13) as i64 - 6;
            let dx = (r % 13) as i64 - 6;
            assert_eq!(c as i64, (7 - dy.abs()) * (7 - dx.abs()), "row {r}");
        }
        assert_eq!(counts[84], 49);
        assert_eq!(counts[0], 1);
    }

    #[test]
    fn swin_index_buffers_are_recognised_and_tables_are_not() {
        let idx: Vec<i64> = swin_relative_index(7, 7)
            .iter()
            .map(|&i| i as i64)
            .collect();
        assert_eq!(is_swin_index(&idx, &[49, 49]), Some((7, 7)));
        assert_eq!(is_swin_index(&idx, &[2401]), Some((7, 7)));
        let rect: Vec<i64> = swin_relative_index(2, 4)
            .iter()
            .map(|&i| i as i64)
            .collect();
        assert_eq!(is_swin_index(&rect, &[8, 8]), Some((2, 4)));
        let mut bad = idx.clone();
        bad[100] = 0;
        assert_eq!(is_swin_index(&bad, &[49, 49]), None);
        assert_eq!(is_swin_index(&[], &[0, 0]), None);
        assert_eq!(is_swin_index(&idx, &[49, 48]), None);
    }

    #[test]
    fn swin_tables_decode_to_offset_maps() {
        // Invented: bias = −(dy² + dx²) per head, window 7, 3 heads (Swin-T stage 1 shape, §5.2).
        let t = Array2::from_shape_fn((169, 3), |(r, h)| {
            let dy = (r / 13) as f64 - 6.0;
            let dx = (r % 13) as f64 - 6.0;
            -(dy * dy + dx * dx) * (1.0 + h as f64)
        });
        let a = analyze_swin(t.view(), None, Some(0.02));
        assert_eq!(a.window, Some((7, 7)));
        assert_eq!(a.offset_maps.len(), 3);
        assert_eq!(a.offset_maps[0].len(), 13);
        assert_eq!(a.offset_maps[1][6][6], 0.0);
        assert_eq!(a.offset_maps[0][0][0], -72.0);
        assert!(a.head_trends.iter().all(|t| t.trend == "decays"));
        assert!(a.untrained_heads.is_empty());
        assert!(a.unreachable.is_empty());
        // Noise of the init scale is flagged (invented, std 0.02).
        let mut n = Noise(11);
        let t = Array2::from_shape_fn((169, 4), |_| 0.02 * n.normal());
        let a = analyze_swin(t.view(), Some((7, 7)), Some(0.02));
        assert!(a.untrained_heads.len() >= 3, "{:?}", a.head_trends);
        let a = analyze_swin(t.view(), Some((6, 7)), None);
        assert!(a.problem.is_some());
    }

    fn reference() -> serde_json::Value {
        // Written by tests/reference/kinds.py (numpy; version recorded in the file).
        let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/kinds.json");
        serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
    }

    #[test]
    fn t5_buckets_match_the_numpy_reference_over_600_distances() {
        // tests/reference/kinds.py evaluates check-values §5.1 in numpy float32.
        let r = reference();
        let t = &r["t5_buckets"];
        let rps = t["relative_positions"].as_array().unwrap();
        for (mode, bidirectional) in [("bidirectional", true), ("causal", false)] {
            let want = t[mode].as_array().unwrap();
            assert_eq!(rps.len(), want.len());
            for (rp, b) in rps.iter().zip(want) {
                let rp = rp.as_i64().unwrap();
                assert_eq!(
                    t5_bucket(rp, bidirectional, 32, 128) as u64,
                    b.as_u64().unwrap(),
                    "{mode} rp {rp}"
                );
            }
        }
    }

    #[test]
    fn degenerate_tables_give_a_problem_not_a_panic() {
        let empty = Array2::<f64>::zeros((0, 4));
        assert!(
            analyze_t5(empty.view(), &RelativeHints::default())
                .problem
                .is_some()
        );
        let one = Array2::<f64>::zeros((1, 4));
        assert!(
            analyze_t5(one.view(), &RelativeHints::default())
                .problem
                .is_some()
        );
        let mut nan = Array2::<f64>::zeros((32, 2));
        nan[[3, 1]] = f64::NAN;
        assert!(
            analyze_t5(nan.view(), &RelativeHints::default())
                .problem
                .is_some()
        );
        // Constant table: no panic, no trend, not called untrained (no spread).
        let c = Array2::<f64>::ones((32, 2));
        let a = analyze_t5(c.view(), &RelativeHints::default());
        assert!(a.problem.is_none());
        assert!(a.untrained_heads.is_empty());
        assert!(analyze_swin(empty.view(), None, None).problem.is_some());
        assert!(
            analyze_swin(Array2::<f64>::zeros((10, 2)).view(), None, None)
                .problem
                .is_some()
        );
        // Odd bucket settings do not panic.
        for nb in 0..5 {
            for md in 0..4 {
                for rp in -10..=10 {
                    let b = t5_bucket(rp, true, nb, md);
                    assert!(nb == 0 || b < nb);
                    let b = t5_bucket(rp, false, nb, md);
                    assert!(nb == 0 || b < nb);
                }
            }
        }
        assert_eq!(t5_bucket(i64::MIN, true, 32, 128), 15);
        assert!(swin_relative_index(0, 7).is_empty());
    }

    #[test]
    fn serialises_the_contract_fields() {
        // design.md: "relative": {"buckets": 32, "heads": 12, "bidirectional": true, "unreachable": [16]}
        let t = Array2::from_shape_fn((32, 12), |(b, h)| -((1 + b) as f64).ln() * (1 + h) as f64);
        let hints = RelativeHints {
            bidirectional: Some(true),
            ..Default::default()
        };
        let j = serde_json::to_value(analyze_t5(t.view(), &hints)).unwrap();
        assert_eq!(j["buckets"], serde_json::json!(32));
        assert_eq!(j["heads"], serde_json::json!(12));
        assert_eq!(j["bidirectional"], serde_json::json!(true));
        assert_eq!(j["unreachable"], serde_json::json!([16]));
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]

        #[test]
        fn buckets_stay_in_range(rp in proptest::num::i64::ANY, bi in proptest::bool::ANY,
                                 nb in 0usize..200, md in 0usize..100_000) {
            let b = t5_bucket(rp, bi, nb, md);
            proptest::prop_assert!(nb == 0 || b < nb);
        }

        #[test]
        fn arbitrary_tables_never_panic(
            rows in 0usize..40, heads in 0usize..5,
            vals in proptest::collection::vec(proptest::num::f64::ANY, 200),
            md in proptest::option::of(0usize..1000),
            bi in proptest::option::of(proptest::bool::ANY),
            init in proptest::option::of(proptest::num::f64::ANY),
        ) {
            let t = Array2::from_shape_fn((rows, heads), |(r, h)| vals[(r * 5 + h) % 200]);
            let hints = RelativeHints { bidirectional: bi, num_buckets: None, max_distance: md, init_std: init, name: None };
            let a = analyze_t5(t.view(), &hints);
            proptest::prop_assert!(a.problem.is_some() || a.head_trends.len() == heads);
            let s = analyze_swin(t.view(), None, init);
            proptest::prop_assert!(s.problem.is_some() || s.offset_maps.len() == heads);
            let _ = analyze_swin(t.view(), Some((usize::MAX, 3)), init);
        }
    }
}
