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

use ndarray::ArrayView2;
use serde::Serialize;

use crate::analyze::decay::{self, DecayEstimate};
use crate::analyze::ranges::ranges_from_mask;
use crate::linalg;

mod phase;
mod shape;

pub(crate) use shape::ks_and_kurtosis;
#[cfg(test)]
use shape::{normal_cdf, normal_cdf_tabulated};

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
    /// With an init std hint, the common factor by which the untrained rows' init noise
    /// shrank (weight decay), pooled over those rows, and whether they agree on it.
    pub decay: Option<DecayEstimate>,
    /// Rows not untrained because their RMS is above `INIT_SCALE_MAX`·init std: decay
    /// only shrinks, so such a row moved away from its initial value.
    pub above_init_scale_rows: Vec<[usize; 2]>,
    /// The common RMS of the never-trained candidates (the mode of their scales).
    pub common_scale: Option<f64>,
    /// Half-width, in ln RMS, of the common-scale test (SCALE_Z/√(2d)).
    pub scale_tolerance: f64,
    /// Rows otherwise noise-like but off the common scale: moved, so not untrained.
    pub off_common_scale_rows: Vec<[usize; 2]>,
    /// What signal (a) gives on independent rows: the median of the largest of 6
    /// cosines, each ~ N(0, 1/d), i.e. Φ⁻¹(0.5^(1/6))/√d = 1.2297/√d.
    pub noise_neighbour_cosine_median: f64,
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
    /// The statistic just before the row (mean over the window for `smoothness`; the
    /// line fitted to ln ‖x_r‖ before the split, at the split, for `log_norm`).
    pub before: f64,
    /// The same just after the row.
    pub after: f64,
    /// |after − before| in units of the pooled within-window standard deviation
    /// (for `log_norm`: the step between the two fitted lines over its standard error).
    pub effect: f64,
    /// Rows in each window.
    pub window: usize,
    /// Median row norm over the window before the row.
    pub median_norm_before: f64,
    /// Median row norm over the window after the row.
    pub median_norm_after: f64,
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
pub(crate) const KS_001: f64 = 1.9495;
/// An untrained row keeps its init noise, shrunk by any weight decay, so with the init
/// std σ known a row whose RMS exceeds 1.5σ has moved (the same bound as the numpy
/// reference of the real checkpoints, tests/reference/real_checkpoints.py; common
/// practice, well above the ±4.5/√(2d) sampling spread of an RMS for d ≥ 32).
pub const INIT_SCALE_MAX: f64 = 1.5;
/// Never-trained rows share one scale: a row whose ln RMS is more than SCALE_Z/√(2d)
/// from the common scale moved (the ln RMS of d normal values has sd ≈ 1/√(2d), the
/// large-sample result for a sample sd, common practice; 3.5 sd flags an untrained
/// row with probability 5e-4).
pub const SCALE_Z: f64 = 3.5;
/// Φ⁻¹(0.5^(1/6)): the median of the largest of 6 independent standard normals.
const MEDIAN_MAX_OF_SIX: f64 = 1.2297;

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
    report.evidence.zero_rows = ranges_from_mask(&zero);
    report.evidence.non_finite_rows = ranges_from_mask(&non_finite);

    // (a) neighbour cosine.
    let t_cos = 4.5 / sqrt_d;
    let t_trained = (9.0 / sqrt_d).min(0.5 * (1.0 + t_cos));
    report.evidence.cosine_threshold = t_cos;
    report.evidence.noise_neighbour_cosine_median = MEDIAN_MAX_OF_SIX / sqrt_d;
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
    let rms_of = |r: usize| rms[r];

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

    let init = hints.init_std.filter(|s| s.is_finite() && *s > 0.0);
    // Reserved rows are never indexed by the family's own indexing: their scale is not
    // evidence of training (a converted checkpoint's config may name another init
    // than the one that drew them), so only their shape and neighbours are judged.
    let reserved = hints.reserved_rows.min(n);
    let above_init: Vec<bool> = (0..n)
        .map(|r| r >= reserved && valid[r] && init.is_some_and(|s| rms_of(r) > INIT_SCALE_MAX * s))
        .collect();
    let noise_like =
        |r: usize| valid[r] && nan_or_below(neighbour[r], t_cos) && ks[r] <= ks_critical;
    // (b) scale: with the init std known, decay only shrinks, so a row above
    // INIT_SCALE_MAX·σ moved. Whatever the hint, never-trained rows share one scale
    // (init std × one common decay factor): a candidate whose ln RMS is more than
    // SCALE_Z/√(2d) from the candidates' common scale (their mode) moved.
    let scale_tolerance = SCALE_Z / (2.0 * d as f64).sqrt();
    let first_pass: Vec<bool> = (0..n).map(|r| noise_like(r) && !above_init[r]).collect();
    let common = common_log_scale(
        &(0..n)
            .filter(|&r| first_pass[r] && r >= reserved)
            .map(|r| rms[r].ln())
            .collect::<Vec<_>>(),
        scale_tolerance,
    );
    report.evidence.scale_tolerance = scale_tolerance;
    report.evidence.common_scale = common.map(f64::exp);
    let off_scale: Vec<bool> = (0..n)
        .map(|r| {
            r >= reserved
                && valid[r]
                && common.is_some_and(|c| (rms[r].ln() - c).abs() > scale_tolerance)
        })
        .collect();
    report.evidence.above_init_scale_rows = ranges_from_mask(
        &(0..n)
            .map(|r| above_init[r] && noise_like(r))
            .collect::<Vec<_>>(),
    );
    report.evidence.off_common_scale_rows = ranges_from_mask(
        &(0..n)
            .map(|r| off_scale[r] && !above_init[r] && noise_like(r))
            .collect::<Vec<_>>(),
    );

    // (d) trained subspace, from seeds that are plainly not init noise (smooth, or off
    // the common scale): trained rows of small or briefly trained tables are often not
    // smooth along position. A second pass takes every row the first pass kept as
    // trained as a seed, so the subspace is the trained rows' and not only the seeds'.
    let start_row = hints.reserved_rows.min(n);
    let mut seeds: Vec<usize> = (start_row..n)
        .filter(|&r| valid[r] && (neighbour[r] > t_trained || above_init[r] || off_scale[r]))
        .collect();
    let mut sub: Option<Subspace> = None;
    let mut untrained: Vec<bool> = first_pass.clone();
    for _pass in 0..2 {
        sub = (seeds.len() >= 3)
            .then(|| subspace(table, &norms, &valid, &seeds))
            .flatten();
        untrained = (0..n)
            .map(|r| {
                first_pass[r]
                    && !off_scale[r]
                    && sub.as_ref().is_none_or(|s| s.energy[r] < s.threshold)
            })
            .collect();
        let next: Vec<usize> = (start_row..n)
            .filter(|&r| valid[r] && !untrained[r])
            .collect();
        if next == seeds {
            break;
        }
        seeds = next;
    }
    let energy: Vec<f64> = sub.as_ref().map(|s| s.energy.clone()).unwrap_or_default();
    let e_noise = sub.as_ref().map(|s| s.noise_expected);
    let e_trained_median = sub.as_ref().and_then(|s| s.trained_median);
    if let Some(s) = &sub {
        report.evidence.subspace_rank = Some(s.rank);
        report.evidence.subspace_noise_expected = Some(s.noise_expected);
        report.evidence.subspace_threshold = Some(s.threshold);
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
    report.ranges = ranges_from_mask(&in_range);
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
    if let Some(s) = init {
        let never: Vec<f64> = (0..n)
            .filter(|&r| valid[r] && untrained[r])
            .map(|r| rms[r])
            .collect();
        report.evidence.decay = decay::estimate(&never, d, s);
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
        ranges_from_mask(&weak)
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
    report.phase_boundary = phase::phase_boundary(table, &norms, &valid, start, end);

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

/// The trained rows' leading subspace and every row's share of energy in it.
struct Subspace {
    /// Per-row energy fraction (NaN for invalid rows).
    energy: Vec<f64>,
    /// Dimension k.
    rank: usize,
    /// k/d, the mean fraction of a noise row.
    noise_expected: f64,
    /// Rows below this are noise-like.
    threshold: f64,
    /// Median fraction over the seeds.
    trained_median: Option<f64>,
}

/// Signal (d) from `seeds`: the top-k right singular vectors of at most 384 evenly
/// spread seed rows (k: 90 % of their energy, at most min(d/4, 64, seeds−1)). Noise has
/// energy fraction ~ Beta(k/2, (d−k)/2), mean k/d, sd √(2k(d−k)/(d²(d+2))); a row is
/// noise-like below `min(k/d + 6·sd, (k/d + median seed fraction)/2)`.
fn subspace(
    table: ArrayView2<f64>,
    norms: &[f64],
    valid: &[bool],
    seeds: &[usize],
) -> Option<Subspace> {
    let (n, d) = table.dim();
    // The trained structure is low-rank (k ≤ 64), and the Gram of a sample of 384
    // rows is far cheaper than the d×d one.
    let sample: Vec<usize> = if seeds.len() <= 384 {
        seeds.to_vec()
    } else {
        (0..384)
            .map(|j| seeds[j * (seeds.len() - 1) / 383])
            .collect()
    };
    let rows = table.select(ndarray::Axis(0), &sample);
    let kmax = (d / 4).min(64).min(sample.len() - 1).max(1);
    let dec = linalg::gram_spectrum(rows.view(), kmax, linalg::Centring::None)
        .ok()?
        .decomposition;
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
    let energy: Vec<f64> = (0..n)
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
    let trained_median = median(seeds.iter().map(|&r| energy[r]).collect());
    let threshold = (mu + 6.0 * sd).min(0.5 * (mu + trained_median.unwrap_or(1.0)));
    Some(Subspace {
        energy,
        rank: k,
        noise_expected: mu,
        threshold,
        trained_median,
    })
}

/// The common ln scale of candidate rows: the centre of the window of half-width
/// `tolerance` holding the most values (a mode, so trained rows that happen to look
/// noise-like at another scale do not move it), refined to the median of the values
/// within `tolerance` of it. None without values.
pub(crate) fn common_log_scale(ln_rms: &[f64], tolerance: f64) -> Option<f64> {
    let mut v: Vec<f64> = ln_rms.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let (mut best, mut best_count, mut hi) = (0usize, 0usize, 0usize);
    for lo in 0..v.len() {
        while hi < v.len() && v[hi] - v[lo] <= 2.0 * tolerance {
            hi += 1;
        }
        if hi - lo > best_count {
            best = lo;
            best_count = hi - lo;
        }
    }
    let centre = median(v[best..best + best_count].to_vec())?;
    median(
        v.into_iter()
            .filter(|x| (x - centre).abs() <= tolerance)
            .collect(),
    )
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

#[cfg(test)]
mod tests;
