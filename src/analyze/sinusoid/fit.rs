//! Fitting the formula family to a stored table: layout, sin/cos order, frequencies,
//! base and exponent convention, offset, and the error against the recomputed formula.

use ndarray::ArrayView2;
use serde::Serialize;

use super::formula::{Exponent, Layout, SinusoidSpec, pair_columns};
use super::precision::{PrecisionEvidence, precision_evidence};
use crate::analyze::ranges::ranges_from_mask;
use crate::analyze::stats::median as median_of;

/// One bin of an error-by-position series: rows `[start, end)` and the largest error.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ErrorBin {
    /// First row of the bin.
    pub start: usize,
    /// One past the last row of the bin.
    pub end: usize,
    /// Largest absolute error over the bin's non-zero rows (table units).
    pub max_abs_error: f64,
}

/// Result of fitting the sinusoid formula family to a table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SinusoidFit {
    /// Fitted base of the frequency progression.
    pub base: f64,
    /// Column layout.
    pub layout: Layout,
    /// Whether each pair stores the sine first.
    pub sin_first: bool,
    /// Rows before the row whose angle is zero.
    pub offset: i64,
    /// Largest |table − formula| over the non-zero rows, formula recomputed in f64.
    pub max_abs_error: f64,
    /// Root mean square of the same error.
    pub rms_error: f64,
    /// Row holding the largest error.
    pub worst_row: usize,
    /// Exponent convention: `"2i/d"` or `"i/(d/2-1)"`.
    pub exponent: Exponent,
    /// The base the other exponent convention would need for the same frequencies
    /// (the two conventions are only told apart by which base is a round number).
    pub base_other_convention: f64,
    /// Amplitude of the sines and cosines.
    pub scale: f64,
    /// Highest frequency ω_0 in radians per row.
    pub frequency_scale: f64,
    /// Whether base/scale/frequency_scale were snapped to round values (the snapped
    /// formula fits as well as the free fit).
    pub snapped: bool,
    /// Half-open ranges of all-zero rows (padding rows), left out of the error.
    pub zero_rows: Vec<[usize; 2]>,
    /// Whether the width is odd with a zero last column.
    pub zero_last_column: bool,
    /// Median relative deviation of the pair radii sqrt(sin² + cos²) from the scale.
    pub pair_radius_spread: f64,
    /// Largest error per bin of consecutive rows (at most 512 bins), for plotting.
    pub error_by_position: Vec<ErrorBin>,
    /// Low-precision evidence.
    pub precision: PrecisionEvidence,
}

/// Largest allowed median relative deviation of pair radii before a table is
/// "clearly not a sinusoid".
const MAX_RADIUS_SPREAD: f64 = 0.1;

/// Fit the sinusoid formula family to `table` (n rows × d columns).
///
/// # Algorithm
/// 1. Zero rows (norm ≤ 1e-6 × the largest row norm) are padding; an odd width
///    needs a zero last column.
/// 2. Layout: for both pairings (interleaved `(2i, 2i+1)`, split `(i, h+i)`) compute
///    the radii `sqrt(a² + b²)`; an exact sinusoid has all radii equal to the
///    amplitude. The pairing with the smaller median relative spread wins.
/// 3. Angles: `θ_r = unwrap(atan2(a_r, b_r))` over the longest run of consecutive
///    non-zero rows (at most 256) is linear in r; a positive slope means the first
///    column is the sine (`sin_first`), a negative one the cosine.
/// 4. Frequencies: the slope gives ω_i, the intercept of the low-frequency pairs gives
///    the offset (`θ = ω(r − offset)`); each ω_i is then refined by phase tracking over
///    doubling row windows while the wrapped residual stays small.
/// 5. Base: weighted least squares of `ln ω_i = ln ω_0 − (i/D)·ln base`; both exponent
///    conventions (D = h or h − 1) explain the same slope, so each gives a base.
///    Candidates with the base rounded to two significant digits and ω_0 = 1, A = 1
///    are preferred when they fit (RMS error ≤ 2× the free fit's plus 2 half-ULPs);
///    among the conventions, the one whose base is rounder wins. The integer offset is
///    chosen among the estimate ± 3 by the smallest RMS error.
/// 6. The error is measured against [`generate`] in f64 over the non-zero rows.
///
/// # None ("clearly not a sinusoid")
/// Returned when: fewer than 3 non-zero rows, fewer than 2 pairs (d < 4), any
/// non-finite value, an odd width whose last column is not zero, or a median relative
/// radius spread above 10 % for both pairings (random and learned tables give about
/// 30 %; a table that is close to the formula but wrong stays under it and gets a fit
/// with a large `max_abs_error`, to be reported as a mismatch). An odd width with the
/// Marian layout (an unpaired middle sine column) is not supported.
///
/// `storage_half_ulp` is the storage dtype's rounding error for values in [−1, 1]
/// (see `Dtype::half_ulp_below_one` in the checkpoint module); it only feeds the precision evidence and the snapping
/// tolerance.
pub fn fit_sinusoid(table: ArrayView2<f64>, storage_half_ulp: f64) -> Option<SinusoidFit> {
    let (n, d) = table.dim();
    if n < 3 || d < 4 || table.iter().any(|v| !v.is_finite()) {
        return None;
    }
    let half_ulp = if storage_half_ulp.is_finite() && storage_half_ulp > 0.0 {
        storage_half_ulp
    } else {
        0.0
    };
    let norms: Vec<f64> = table
        .rows()
        .into_iter()
        .map(|r| r.iter().map(|v| v * v).sum::<f64>().sqrt())
        .collect();
    let max_norm = norms.iter().copied().fold(0.0, f64::max);
    if max_norm == 0.0 {
        return None;
    }
    let zero_last_column = d % 2 == 1;
    if zero_last_column {
        let tol = 1e-6 * max_norm;
        if table.column(d - 1).iter().any(|v| v.abs() > tol) {
            return None;
        }
    }
    let h = d / 2;
    let is_zero: Vec<bool> = norms.iter().map(|&x| x <= 1e-6 * max_norm).collect();
    let live: Vec<usize> = (0..n).filter(|&r| !is_zero[r]).collect();
    if live.len() < 3 {
        return None;
    }

    // Step 2: layout from the pair radii, on at most 256 evenly spread live rows.
    let sample = spread_sample(&live, 256);
    let mut best: Option<(Layout, f64, f64)> = None;
    for layout in [Layout::Interleaved, Layout::Split] {
        let mut radii = Vec::with_capacity(sample.len() * h);
        for &r in &sample {
            for i in 0..h {
                let (a, b) = pair_columns(layout, true, h, i);
                radii.push(table[[r, a]].hypot(table[[r, b]]));
            }
        }
        let amp = median(&mut radii.clone());
        if amp <= 0.0 {
            continue;
        }
        let mut dev: Vec<f64> = radii.iter().map(|x| (x / amp - 1.0).abs()).collect();
        let spread = median(&mut dev);
        if best.as_ref().is_none_or(|b| spread < b.2) {
            best = Some((layout, amp, spread));
        }
    }
    let (layout, amplitude, spread) = best?;
    if spread > MAX_RADIUS_SPREAD {
        return None;
    }

    // Step 3: angle progression per pair over the longest run of consecutive live rows.
    let run = longest_run(&is_zero, 256);
    if run.len() < 3 {
        return None;
    }
    let slopes_first: Vec<(f64, f64)> = (0..h)
        .map(|i| {
            let (a, b) = pair_columns(layout, true, h, i);
            angle_line(table, &run, a, b)
        })
        .collect();
    let mut slope_values: Vec<f64> = slopes_first.iter().map(|l| l.0).collect();
    let sin_first = median(&mut slope_values) > 0.0;
    let lines: Vec<(f64, f64)> = if sin_first {
        slopes_first
    } else {
        (0..h)
            .map(|i| {
                let (s, c) = pair_columns(layout, false, h, i);
                angle_line(table, &run, s, c)
            })
            .collect()
    };

    // Step 4: offset from the low-frequency intercepts, then refine frequencies.
    let mut offsets: Vec<f64> = lines
        .iter()
        .skip(h / 2)
        .filter(|l| l.0 > 0.0)
        .map(|l| -l.1 / l.0)
        .filter(|o| o.is_finite())
        .collect();
    let offset_estimate = if offsets.is_empty() {
        0.0
    } else {
        median(&mut offsets)
    };
    let offset_guess = offset_estimate
        .round()
        .clamp(-(i64::MAX / 4) as f64, (i64::MAX / 4) as f64) as i64;
    let mut omegas: Vec<f64> = lines.iter().map(|l| l.0).collect();
    for (i, w) in omegas.iter_mut().enumerate() {
        let (s, c) = pair_columns(layout, sin_first, h, i);
        *w = refine_frequency(table, &live, s, c, offset_guess, *w);
    }

    // Step 5: base from ln ω_i linear in i.
    let (ln_w0, slope) = robust_line(&omegas)?;
    if slope >= 0.0 {
        // Frequencies do not decrease: not the geometric progression of the formula.
        return None;
    }
    let base_for = |e: Exponent| match e {
        Exponent::TwoIOverD => (-slope * h as f64).exp(),
        Exponent::IOverHalfMinusOne => (-slope * (h.max(2) - 1) as f64).exp(),
    };
    let mut candidates: Vec<(SinusoidSpec, bool)> = Vec::new();
    for exponent in [Exponent::TwoIOverD, Exponent::IOverHalfMinusOne] {
        let free = SinusoidSpec {
            base: base_for(exponent),
            layout,
            sin_first,
            exponent,
            offset: offset_guess,
            scale: amplitude,
            frequency_scale: ln_w0.exp(),
        };
        let mut snapped = free.clone();
        snapped.base = round_two_digits(free.base);
        snapped.frequency_scale = 1.0;
        snapped.scale = round_two_digits(amplitude);
        candidates.push((free, false));
        candidates.push((snapped, true));
    }
    let eval_rows = spread_sample(&live, 512);
    let mut scored: Vec<(SinusoidSpec, bool, f64)> = candidates
        .into_iter()
        .map(|(mut spec, snapped)| {
            let mut best_rms = f64::INFINITY;
            let mut best_off = spec.offset;
            for delta in -3..=3 {
                spec.offset = offset_guess + delta;
                let rms = rms_error(table, &spec, &eval_rows);
                if rms < best_rms {
                    best_rms = rms;
                    best_off = spec.offset;
                }
            }
            spec.offset = best_off;
            (spec, snapped, best_rms)
        })
        .collect();
    let free_rms = scored
        .iter()
        .filter(|c| !c.1)
        .map(|c| c.2)
        .fold(f64::INFINITY, f64::min);
    let tolerance = 2.0 * free_rms + 2.0 * half_ulp * amplitude;
    // Prefer snapped candidates that fit; among equals, the rounder base.
    scored.sort_by(|a, b| {
        let a_ok = a.1 && a.2 <= tolerance;
        let b_ok = b.1 && b.2 <= tolerance;
        b_ok.cmp(&a_ok)
            .then(roundness(a.0.base).total_cmp(&roundness(b.0.base)))
            .then(a.2.total_cmp(&b.2))
    });
    let (chosen_snapped, chosen) = {
        let first = &scored[0];
        if first.1 && first.2 <= tolerance {
            (true, first.0.clone())
        } else {
            // No round formula fits: the free fit with the convention of the rounder base.
            let mut free: Vec<&(SinusoidSpec, bool, f64)> =
                scored.iter().filter(|c| !c.1).collect();
            free.sort_by(|a, b| roundness(a.0.base).total_cmp(&roundness(b.0.base)));
            (false, free[0].0.clone())
        }
    };
    let other = match chosen.exponent {
        Exponent::TwoIOverD => Exponent::IOverHalfMinusOne,
        Exponent::IOverHalfMinusOne => Exponent::TwoIOverD,
    };
    let base_other_convention = equivalent_base(&chosen, other, h);

    // Step 6: the error against the recomputed formula over every non-zero row.
    let row_err = row_errors(table, &chosen, &is_zero);
    let (mut max_abs_error, mut worst_row, mut sum_sq, mut count) = (0.0f64, 0usize, 0.0, 0usize);
    for (r, e) in row_err.iter().enumerate() {
        if let Some((max, sq)) = e {
            if *max > max_abs_error {
                max_abs_error = *max;
                worst_row = r;
            }
            sum_sq += sq;
            count += d;
        }
    }
    let rms = if count > 0 {
        (sum_sq / count as f64).sqrt()
    } else {
        0.0
    };
    let error_by_position = bin_errors(&row_err, n.div_ceil(512).max(1));
    let precision = precision_evidence(table, &chosen, &row_err, half_ulp, max_abs_error, rms);
    Some(SinusoidFit {
        base: chosen.base,
        layout,
        sin_first,
        offset: chosen.offset,
        max_abs_error,
        rms_error: rms,
        worst_row,
        exponent: chosen.exponent,
        base_other_convention,
        scale: chosen.scale,
        frequency_scale: chosen.frequency_scale,
        snapped: chosen_snapped,
        zero_rows: ranges_from_mask(&is_zero),
        zero_last_column,
        pair_radius_spread: spread,
        error_by_position,
        precision,
    })
}

/// Base of convention `target` that yields the same frequencies as `spec`.
pub(super) fn equivalent_base(spec: &SinusoidSpec, target: Exponent, h: usize) -> f64 {
    let d_of = |e: Exponent| match e {
        Exponent::TwoIOverD => h as f64,
        Exponent::IOverHalfMinusOne => (h.max(2) - 1) as f64,
    };
    spec.base.powf(d_of(target) / d_of(spec.exponent))
}

/// Relative distance of `x` to the nearest two-significant-digit number.
pub(super) fn roundness(x: f64) -> f64 {
    let r = round_two_digits(x);
    if r == 0.0 {
        f64::INFINITY
    } else {
        (x / r - 1.0).abs()
    }
}

pub(super) fn round_two_digits(x: f64) -> f64 {
    if !(x.is_finite() && x > 0.0) {
        return x;
    }
    let k = x.log10().floor() - 1.0;
    let unit = 10f64.powf(k);
    (x / unit).round() * unit
}

/// Per row: None for zero rows, else (max |error|, sum of squared errors).
pub(super) fn row_errors(
    table: ArrayView2<f64>,
    spec: &SinusoidSpec,
    is_zero: &[bool],
) -> Vec<Option<(f64, f64)>> {
    let d = table.ncols();
    let freqs = spec.frequencies(d);
    (0..table.nrows())
        .map(|r| {
            if is_zero[r] {
                return None;
            }
            Some(row_error(table, spec, &freqs, r, |p, w| p * w))
        })
        .collect()
}

/// (max |error|, sum of squared errors) of one row, with a custom angle function.
pub(super) fn row_error(
    table: ArrayView2<f64>,
    spec: &SinusoidSpec,
    freqs: &[f64],
    r: usize,
    angle: impl Fn(f64, f64) -> f64,
) -> (f64, f64) {
    let d = table.ncols();
    let p = r as f64 - spec.offset as f64;
    let (mut max, mut sq) = (0.0f64, 0.0);
    for (i, &w) in freqs.iter().enumerate() {
        let (cs, cc) = spec.columns(d, i);
        let (s, c) = angle(p, w).sin_cos();
        let es = table[[r, cs]] - spec.scale * s;
        let ec = table[[r, cc]] - spec.scale * c;
        max = max.max(es.abs()).max(ec.abs());
        sq += es * es + ec * ec;
    }
    if d % 2 == 1 {
        let e = table[[r, d - 1]];
        max = max.max(e.abs());
        sq += e * e;
    }
    (max, sq)
}

pub(super) fn rms_error(table: ArrayView2<f64>, spec: &SinusoidSpec, rows: &[usize]) -> f64 {
    let freqs = spec.frequencies(table.ncols());
    let mut sq = 0.0;
    for &r in rows {
        sq += row_error(table, spec, &freqs, r, |p, w| p * w).1;
    }
    (sq / (rows.len() * table.ncols()).max(1) as f64).sqrt()
}

pub(super) fn bin_errors(row_err: &[Option<(f64, f64)>], width: usize) -> Vec<ErrorBin> {
    let mut out = Vec::new();
    let mut start = 0;
    while start < row_err.len() {
        let end = (start + width).min(row_err.len());
        let max = row_err[start..end]
            .iter()
            .flatten()
            .map(|e| e.0)
            .fold(f64::NEG_INFINITY, f64::max);
        if max.is_finite() {
            out.push(ErrorBin {
                start,
                end,
                max_abs_error: max,
            });
        }
        start = end;
    }
    out
}

/// Least-squares line through the unwrapped angle atan2(table[r,s], table[r,c]) over
/// `rows` (consecutive): returns (slope, intercept) in radians per row and radians.
pub(super) fn angle_line(table: ArrayView2<f64>, rows: &[usize], s: usize, c: usize) -> (f64, f64) {
    let mut prev = f64::NAN;
    let mut acc = 0.0;
    let (mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0);
    for &r in rows {
        let raw = table[[r, s]].atan2(table[[r, c]]);
        if prev.is_nan() {
            acc = raw;
        } else {
            acc += wrap(raw - prev);
        }
        prev = raw;
        let x = r as f64;
        sx += x;
        sy += acc;
        sxx += x * x;
        sxy += x * acc;
    }
    let m = rows.len() as f64;
    let det = m * sxx - sx * sx;
    if det == 0.0 {
        return (0.0, 0.0);
    }
    let slope = (m * sxy - sx * sy) / det;
    (slope, (sy - slope * sx) / m)
}

/// Refine ω for one pair by phase tracking: with positions p = r − offset, the
/// wrapped residual res = wrap(θ_obs − ω p) corrects ω by Σ p·res / Σ p², over row
/// windows |p| ≤ 64, 256, 1024, … while the residual RMS stays below 0.3 rad.
pub(super) fn refine_frequency(
    table: ArrayView2<f64>,
    live: &[usize],
    s: usize,
    c: usize,
    offset: i64,
    start: f64,
) -> f64 {
    // (position, observed angle) once per pair, reused by every window and iteration.
    let obs: Vec<(f64, f64)> = live
        .iter()
        .map(|&r| (r as f64 - offset as f64, table[[r, s]].atan2(table[[r, c]])))
        .collect();
    let mut w = start;
    let mut limit = 64.0;
    loop {
        let mut accepted = w;
        for _ in 0..2 {
            let (mut num, mut den, mut sq, mut m) = (0.0, 0.0, 0.0, 0.0);
            for &(p, theta) in &obs {
                if p.abs() > limit {
                    continue;
                }
                let res = wrap(theta - accepted * p);
                num += p * res;
                den += p * p;
                sq += res * res;
                m += 1.0;
            }
            if den == 0.0 || (sq / m).sqrt() > 0.3 {
                return w;
            }
            accepted += num / den;
        }
        w = accepted;
        if limit > table.nrows() as f64 + offset.unsigned_abs() as f64 {
            return w;
        }
        limit *= 4.0;
    }
}

/// Robust line through (i, ln ω_i): a Theil–Sen start (median of pairwise slopes over
/// at most 512 evenly spread pairs' points), then weighted least squares (weights ω_i)
/// over the inliers, the points within 6 scaled MADs (at least 1e-9) of the start line.
/// A few corrupted columns thus cannot drag the base. Returns (intercept, slope).
pub(super) fn robust_line(omegas: &[f64]) -> Option<(f64, f64)> {
    let valid: Vec<usize> = (0..omegas.len())
        .filter(|&i| omegas[i] > 0.0 && omegas[i].is_finite())
        .collect();
    if valid.len() < 2 {
        return None;
    }
    let pts = spread_sample(&valid, 512);
    let mut slopes = Vec::with_capacity(pts.len() * pts.len() / 2);
    for (a, &i) in pts.iter().enumerate() {
        for &j in &pts[a + 1..] {
            slopes.push((omegas[j].ln() - omegas[i].ln()) / (j as f64 - i as f64));
        }
    }
    let s0 = median(&mut slopes);
    let mut icepts: Vec<f64> = valid
        .iter()
        .map(|&i| omegas[i].ln() - s0 * i as f64)
        .collect();
    let a0 = median(&mut icepts);
    let mut resid: Vec<f64> = valid
        .iter()
        .map(|&i| (omegas[i].ln() - a0 - s0 * i as f64).abs())
        .collect();
    let limit = (6.0 * 1.4826 * median(&mut resid.clone())).max(1e-9);
    resid.clear();
    let inliers: Vec<usize> = valid
        .into_iter()
        .filter(|&i| (omegas[i].ln() - a0 - s0 * i as f64).abs() <= limit)
        .collect();
    weighted_line(omegas, &inliers).or(Some((a0, s0)))
}

/// Weighted least squares of ln ω_i on i over `idx` (weights ω_i); (intercept, slope).
pub(super) fn weighted_line(omegas: &[f64], idx: &[usize]) -> Option<(f64, f64)> {
    let (mut sw, mut sx, mut sy, mut sxx, mut sxy) = (0.0, 0.0, 0.0, 0.0, 0.0);
    for &i in idx {
        let w = omegas[i];
        let (x, y) = (i as f64, w.ln());
        sw += w;
        sx += w * x;
        sy += w * y;
        sxx += w * x * x;
        sxy += w * x * y;
    }
    let det = sw * sxx - sx * sx;
    if sw == 0.0 || det <= 0.0 {
        return None;
    }
    let slope = (sw * sxy - sx * sy) / det;
    Some(((sy - slope * sx) / sw, slope))
}

pub(super) fn wrap(x: f64) -> f64 {
    let t = std::f64::consts::TAU;
    let mut y = x % t;
    if y > std::f64::consts::PI {
        y -= t;
    } else if y <= -std::f64::consts::PI {
        y += t;
    }
    y
}

pub(super) fn median(v: &mut [f64]) -> f64 {
    median_of(v).unwrap_or(f64::NAN)
}

/// At most `k` entries of `items`, evenly spread, always including the first and last.
pub(super) fn spread_sample(items: &[usize], k: usize) -> Vec<usize> {
    if items.len() <= k || k < 2 {
        return items.to_vec();
    }
    (0..k)
        .map(|j| items[j * (items.len() - 1) / (k - 1)])
        .collect()
}

/// Longest run of consecutive non-zero rows, truncated to its first `cap` rows.
pub(super) fn longest_run(is_zero: &[bool], cap: usize) -> Vec<usize> {
    let (mut best_start, mut best_len) = (0, 0);
    let mut r = 0;
    while r < is_zero.len() {
        if is_zero[r] {
            r += 1;
            continue;
        }
        let start = r;
        while r < is_zero.len() && !is_zero[r] {
            r += 1;
        }
        if r - start > best_len {
            best_start = start;
            best_len = r - start;
        }
    }
    (best_start..best_start + best_len.min(cap)).collect()
}
