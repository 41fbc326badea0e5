//! Is a stored table really the fixed sine/cosine formula, and which variant of it?
//!
//! Checkpoints store sinusoid tables in several published variants: interleaved
//! sin/cos columns with Vaswani's `2i/d` exponent, split halves with the `i/(d/2-1)`
//! log-timescale exponent, a zeroed padding row, a zero last column for odd widths,
//! and sometimes angles computed in a low-precision dtype. This module recovers the
//! variant from the numbers alone (nothing is assumed about base, layout or offset),
//! measures how far the table is from the recomputed formula, and says whether that
//! distance looks like angles computed in bf16/f16. It also offers a cheap probe the
//! detector uses to recognise an unnamed tensor as an exact sinusoid.
//!
//! # The formula family
//! ```text
//! h          = number of (sin, cos) column pairs = floor(d/2)
//! ω_i        = frequency_scale · base^(−i/D),   i = 0..h−1
//!              D = h      for exponent "2i/d"       (Vaswani 2017 §3.5, Marian, RoFormer)
//!              D = h − 1  for exponent "i/(d/2-1)"  (tensor2tensor, fairseq, Whisper)
//! angle(r,i) = (r − offset) · ω_i                    r = table row
//! interleaved: column 2i = A·sin(angle), column 2i+1 = A·cos(angle)   (sin_first)
//! split:       column i  = A·sin(angle), column h+i  = A·cos(angle)   (sin_first)
//! odd d:       the last column is zero (tensor2tensor / fairseq padding)
//! ```
//! `sin_first = false` swaps the sine and cosine columns of each pair. Zero rows (a
//! padding row, e.g. fairseq's `padding_idx`) are reported and left out of the error.

use ndarray::{Array2, ArrayView1, ArrayView2};
use serde::Serialize;

/// How the sine and cosine columns are arranged.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Layout {
    /// Pairs sit in adjacent columns (2i, 2i+1).
    Interleaved,
    /// One half of the columns holds sines, the other half cosines (i, h+i).
    Split,
}

/// Which exponent convention turns the base into frequencies.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Exponent {
    /// ω_i = base^(−2i/d) (Vaswani 2017 §3.5; HF Marian/RoFormer).
    #[serde(rename = "2i/d")]
    TwoIOverD,
    /// ω_i = base^(−i/(d/2−1)) (tensor2tensor `get_timing_signal_1d`, fairseq, Whisper).
    #[serde(rename = "i/(d/2-1)")]
    IOverHalfMinusOne,
}

/// All parameters of one member of the formula family (see the module docs).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SinusoidSpec {
    /// Base of the geometric frequency progression (10000 in most code).
    pub base: f64,
    /// Column layout.
    pub layout: Layout,
    /// Whether the sine column comes first in each pair.
    pub sin_first: bool,
    /// Exponent convention.
    pub exponent: Exponent,
    /// Number of rows before the row whose angle is zero (may be negative).
    pub offset: i64,
    /// Amplitude A of every sine and cosine (1 for all published variants).
    pub scale: f64,
    /// Highest frequency ω_0 in radians per row (1 for all published variants).
    pub frequency_scale: f64,
}

impl SinusoidSpec {
    /// The frequencies ω_i (radians per row) for a table of width `d`.
    pub fn frequencies(&self, d: usize) -> Vec<f64> {
        let h = d / 2;
        let denom = match self.exponent {
            Exponent::TwoIOverD => h as f64,
            Exponent::IOverHalfMinusOne => (h.max(2) - 1) as f64,
        };
        (0..h)
            .map(|i| self.frequency_scale * self.base.powf(-(i as f64) / denom))
            .collect()
    }

    /// Column indices (sine column, cosine column) of pair `i` in a width-`d` table.
    fn columns(&self, d: usize, i: usize) -> (usize, usize) {
        pair_columns(self.layout, self.sin_first, d / 2, i)
    }
}

fn pair_columns(layout: Layout, sin_first: bool, h: usize, i: usize) -> (usize, usize) {
    let (first, second) = match layout {
        Layout::Interleaved => (2 * i, 2 * i + 1),
        Layout::Split => (i, h + i),
    };
    if sin_first {
        (first, second)
    } else {
        (second, first)
    }
}

/// Build the table `rows × d` of a formula variant, in f64.
///
/// This is the one place the formula is evaluated: the fit measures its error against
/// this, and the tests check it against published reference rows.
///
/// ```text
/// table[r, sin col of pair i] = A·sin((r − offset)·ω_i)
/// table[r, cos col of pair i] = A·cos((r − offset)·ω_i)
/// odd d: table[r, d−1] = 0
/// ```
pub fn generate(spec: &SinusoidSpec, rows: usize, d: usize) -> Array2<f64> {
    let freqs = spec.frequencies(d);
    let mut out = Array2::zeros((rows, d));
    for r in 0..rows {
        let p = r as f64 - spec.offset as f64;
        for (i, w) in freqs.iter().enumerate() {
            let (cs, cc) = spec.columns(d, i);
            let (s, c) = (p * w).sin_cos();
            out[[r, cs]] = spec.scale * s;
            out[[r, cc]] = spec.scale * c;
        }
    }
    out
}

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

/// Error of the formula recomputed after simulating angle computation in one dtype.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SimulatedDtype {
    /// `"bf16"` or `"f16"`.
    pub dtype: String,
    /// Largest |table − simulated table| over non-zero rows.
    pub max_abs_residual: f64,
    /// Root mean square of the same residual.
    pub rms_residual: f64,
}

/// Evidence on whether the table's angles were computed in a low-precision dtype.
///
/// Published pattern (check-values §7.2): computing `angle = round(round(pos)·round(ω))`
/// in bf16 or f16 gives errors far above the storage rounding error that grow with
/// position, while merely storing an exact table in a low dtype keeps the error within
/// half an ULP of the stored values.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PrecisionEvidence {
    /// Half-ULP of the storage dtype for values in [−1, 1], as given by the caller.
    pub storage_half_ulp: f64,
    /// max_abs_error / (storage_half_ulp · scale).
    pub error_to_half_ulp: f64,
    /// Largest error over row ranges [0,64), [64,128), [128,256), … (doubling).
    pub error_by_range: Vec<ErrorBin>,
    /// Whether the error of the last range is more than twice that of the first.
    pub grows_with_position: bool,
    /// Residuals of the formula with angles computed in bf16 and in f16.
    pub simulated: Vec<SimulatedDtype>,
    /// The dtype whose simulation reproduces the table, when the verdict is positive.
    pub best_match: Option<String>,
    /// The verdict: error ≫ half-ULP (> 16×), growing with position, and one simulated
    /// dtype reproduces the table with at most a quarter of the exact formula's RMS error.
    pub computed_in_low_precision: bool,
    /// Dtypes (`"bf16"`, `"f16"`, `"f32"`) that hold every value of the table exactly.
    pub representable_in: Vec<String>,
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
        zero_rows: ranges_of(&is_zero),
        zero_last_column,
        pair_radius_spread: spread,
        error_by_position,
        precision,
    })
}

/// Base of convention `target` that yields the same frequencies as `spec`.
fn equivalent_base(spec: &SinusoidSpec, target: Exponent, h: usize) -> f64 {
    let d_of = |e: Exponent| match e {
        Exponent::TwoIOverD => h as f64,
        Exponent::IOverHalfMinusOne => (h.max(2) - 1) as f64,
    };
    spec.base.powf(d_of(target) / d_of(spec.exponent))
}

/// Relative distance of `x` to the nearest two-significant-digit number.
fn roundness(x: f64) -> f64 {
    let r = round_two_digits(x);
    if r == 0.0 {
        f64::INFINITY
    } else {
        (x / r - 1.0).abs()
    }
}

fn round_two_digits(x: f64) -> f64 {
    if !(x.is_finite() && x > 0.0) {
        return x;
    }
    let k = x.log10().floor() - 1.0;
    let unit = 10f64.powf(k);
    (x / unit).round() * unit
}

/// Per row: None for zero rows, else (max |error|, sum of squared errors).
fn row_errors(
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
fn row_error(
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

fn rms_error(table: ArrayView2<f64>, spec: &SinusoidSpec, rows: &[usize]) -> f64 {
    let freqs = spec.frequencies(table.ncols());
    let mut sq = 0.0;
    for &r in rows {
        sq += row_error(table, spec, &freqs, r, |p, w| p * w).1;
    }
    (sq / (rows.len() * table.ncols()).max(1) as f64).sqrt()
}

fn bin_errors(row_err: &[Option<(f64, f64)>], width: usize) -> Vec<ErrorBin> {
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

fn precision_evidence(
    table: ArrayView2<f64>,
    spec: &SinusoidSpec,
    row_err: &[Option<(f64, f64)>],
    half_ulp: f64,
    max_abs_error: f64,
    rms: f64,
) -> PrecisionEvidence {
    let n = table.nrows();
    // Doubling ranges [0,64), [64,128), [128,256), ...
    let mut error_by_range = Vec::new();
    let (mut start, mut end) = (0usize, 64usize);
    while start < n {
        let e = end.min(n);
        let max = row_err[start..e]
            .iter()
            .flatten()
            .map(|x| x.0)
            .fold(f64::NEG_INFINITY, f64::max);
        if max.is_finite() {
            error_by_range.push(ErrorBin {
                start,
                end: e,
                max_abs_error: max,
            });
        }
        start = end;
        end *= 2;
    }
    let grows_with_position = match (error_by_range.first(), error_by_range.last()) {
        (Some(a), Some(b)) if error_by_range.len() >= 2 => b.max_abs_error > 2.0 * a.max_abs_error,
        _ => false,
    };
    let unit = half_ulp * spec.scale.abs();
    let error_to_half_ulp = if unit > 0.0 {
        max_abs_error / unit
    } else {
        f64::INFINITY
    };
    let freqs = spec.frequencies(table.ncols());
    let simulated: Vec<SimulatedDtype> = [
        ("bf16", round_bf16 as fn(f64) -> f64),
        ("f16", round_f16 as fn(f64) -> f64),
    ]
    .into_iter()
    .map(|(name, rd)| {
        let (mut max, mut sq, mut count) = (0.0f64, 0.0, 0usize);
        for (r, e) in row_err.iter().enumerate() {
            if e.is_none() {
                continue;
            }
            let (m, s) = row_error(table, spec, &freqs, r, |p, w| rd(rd(p) * rd(w)));
            max = max.max(m);
            sq += s;
            count += table.ncols();
        }
        SimulatedDtype {
            dtype: name.to_string(),
            max_abs_residual: max,
            rms_residual: (sq / count.max(1) as f64).sqrt(),
        }
    })
    .collect();
    let best = simulated
        .iter()
        .min_by(|a, b| a.rms_residual.total_cmp(&b.rms_residual));
    let computed_in_low_precision = error_to_half_ulp > 16.0
        && grows_with_position
        && best.is_some_and(|b| b.rms_residual <= 0.25 * rms);
    let best_match = if computed_in_low_precision {
        best.map(|b| b.dtype.clone())
    } else {
        None
    };
    let mut representable_in = Vec::new();
    for (name, rd) in [
        ("bf16", round_bf16 as fn(f64) -> f64),
        ("f16", round_f16 as fn(f64) -> f64),
        ("f32", |x: f64| x as f32 as f64),
    ] {
        if table.iter().all(|&v| rd(v) == v) {
            representable_in.push(name.to_string());
        }
    }
    PrecisionEvidence {
        storage_half_ulp: half_ulp,
        error_to_half_ulp,
        error_by_range,
        grows_with_position,
        simulated,
        best_match,
        computed_in_low_precision,
        representable_in,
    }
}

/// Round to the nearest bf16 value (ties to even), correctly rounded from f64.
///
/// `half` 2.7's `bf16::from_f64` drops the low 32 mantissa bits before rounding and
/// `f16::from_f64` goes through f32 on x86, so both can round twice and miss the nearest
/// value by a hair; the check "error ≤ half-ULP" needs the exact rounding, done here by
/// scaling with the value's quantum (a power of two, so the division is exact).
fn round_bf16(x: f64) -> f64 {
    round_to_format(x, 7, -126, half::bf16::MAX.to_f64())
}

/// Round to the nearest f16 value (ties to even), correctly rounded from f64.
fn round_f16(x: f64) -> f64 {
    round_to_format(x, 10, -14, half::f16::MAX.to_f64())
}

/// Nearest value with `mant_bits` stored mantissa bits, minimum normal exponent
/// `min_exp` (subnormals below it) and largest finite value `max`; beyond it ±∞.
fn round_to_format(x: f64, mant_bits: i32, min_exp: i32, max: f64) -> f64 {
    if !x.is_finite() || x == 0.0 {
        return x;
    }
    let biased = ((x.to_bits() >> 52) & 0x7ff) as i32;
    let exp = (biased - 1023).max(min_exp);
    let quantum = 2f64.powi(exp - mant_bits);
    let r = (x / quantum).round_ties_even() * quantum;
    if r.abs() > max {
        f64::INFINITY.copysign(x)
    } else {
        r
    }
}

/// Least-squares line through the unwrapped angle atan2(table[r,s], table[r,c]) over
/// `rows` (consecutive): returns (slope, intercept) in radians per row and radians.
fn angle_line(table: ArrayView2<f64>, rows: &[usize], s: usize, c: usize) -> (f64, f64) {
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
fn refine_frequency(
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
fn robust_line(omegas: &[f64]) -> Option<(f64, f64)> {
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
fn weighted_line(omegas: &[f64], idx: &[usize]) -> Option<(f64, f64)> {
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

fn wrap(x: f64) -> f64 {
    let t = std::f64::consts::TAU;
    let mut y = x % t;
    if y > std::f64::consts::PI {
        y -= t;
    } else if y <= -std::f64::consts::PI {
        y += t;
    }
    y
}

fn median(v: &mut [f64]) -> f64 {
    if v.is_empty() {
        return f64::NAN;
    }
    v.sort_by(f64::total_cmp);
    let m = v.len() / 2;
    if v.len() % 2 == 1 {
        v[m]
    } else {
        0.5 * (v[m - 1] + v[m])
    }
}

/// At most `k` entries of `items`, evenly spread, always including the first and last.
fn spread_sample(items: &[usize], k: usize) -> Vec<usize> {
    if items.len() <= k || k < 2 {
        return items.to_vec();
    }
    (0..k)
        .map(|j| items[j * (items.len() - 1) / (k - 1)])
        .collect()
}

/// Longest run of consecutive non-zero rows, truncated to its first `cap` rows.
fn longest_run(is_zero: &[bool], cap: usize) -> Vec<usize> {
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

/// Verdict of [`probe_rows`]: the sampled rows are an exact sine/cosine table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ProbeVerdict {
    /// The pairing under which every pair has the same radius.
    pub layout: Layout,
    /// The common radius sqrt(sin² + cos²) (1 for published tables).
    pub amplitude: f64,
    /// Largest |radius / amplitude − 1| over all pairs of all non-zero rows.
    pub max_radius_deviation: f64,
    /// Number of non-zero rows checked.
    pub rows_checked: usize,
    /// Row indices (as given) of all-zero rows (padding rows).
    pub zero_rows: Vec<usize>,
}

/// Largest radius deviation [`probe_rows`] accepts: bf16 storage moves a radius by at
/// most about 2^-8 relative, so 2 % leaves room while random data never gets close.
const PROBE_TOLERANCE: f64 = 0.02;

/// Cheap content check on a few sampled rows (row index, row values): are they rows of
/// an exact sinusoid table?
///
/// Every row of an exact table has the same norm `A·sqrt(d/2)` (check-values §1.3),
/// and more strongly every (sin, cos) pair has radius exactly A:
///
/// ```text
/// accept ⇔ ∃ pairing ∈ {interleaved, split}:  max_{rows, i} |sqrt(a_i² + b_i²)/A − 1| ≤ 0.02
/// ```
///
/// with A the median radius. For i.i.d. or learned rows the radii of `d/2` pairs are
/// spread like a Rayleigh variable (about 50 % relative spread), so the chance that all
/// of them fall within 2 % is negligible once d ≥ 8. All-zero rows are allowed (padding)
/// and listed. Returns None for: no rows, rows of different lengths, d < 4, non-finite
/// values, fewer than 2 non-zero rows, an odd width whose last value is not zero.
pub fn probe_rows(rows: &[(usize, ArrayView1<f64>)]) -> Option<ProbeVerdict> {
    let d = rows.first()?.1.len();
    if d < 4 || rows.iter().any(|(_, r)| r.len() != d) {
        return None;
    }
    if rows.iter().any(|(_, r)| r.iter().any(|v| !v.is_finite())) {
        return None;
    }
    let h = d / 2;
    let max_abs = rows
        .iter()
        .flat_map(|(_, r)| r.iter())
        .fold(0.0f64, |m, v| m.max(v.abs()));
    if max_abs == 0.0 {
        return None;
    }
    let mut zero_rows = Vec::new();
    let mut live = Vec::new();
    for (idx, r) in rows {
        if r.iter().all(|v| v.abs() <= 1e-6 * max_abs) {
            zero_rows.push(*idx);
        } else {
            if d % 2 == 1 && r[d - 1].abs() > 1e-6 * max_abs {
                return None;
            }
            live.push(r);
        }
    }
    if live.len() < 2 {
        return None;
    }
    let mut best: Option<ProbeVerdict> = None;
    for layout in [Layout::Interleaved, Layout::Split] {
        let mut radii = Vec::with_capacity(live.len() * h);
        for r in &live {
            for i in 0..h {
                let (a, b) = pair_columns(layout, true, h, i);
                radii.push(r[a].hypot(r[b]));
            }
        }
        let amp = median(&mut radii.clone());
        if amp <= 0.0 {
            continue;
        }
        let dev = radii
            .iter()
            .fold(0.0f64, |m, x| m.max((x / amp - 1.0).abs()));
        if best.as_ref().is_none_or(|b| dev < b.max_radius_deviation) {
            best = Some(ProbeVerdict {
                layout,
                amplitude: amp,
                max_radius_deviation: dev,
                rows_checked: live.len(),
                zero_rows: zero_rows.clone(),
            });
        }
    }
    best.filter(|b| b.max_radius_deviation <= PROBE_TOLERANCE)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array1;

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

    fn vaswani(base: f64) -> SinusoidSpec {
        SinusoidSpec {
            base,
            layout: Layout::Interleaved,
            sin_first: true,
            exponent: Exponent::TwoIOverD,
            offset: 0,
            scale: 1.0,
            frequency_scale: 1.0,
        }
    }

    fn t2t() -> SinusoidSpec {
        SinusoidSpec {
            layout: Layout::Split,
            exponent: Exponent::IOverHalfMinusOne,
            ..vaswani(10000.0)
        }
    }

    fn to_f32(a: &Array2<f64>) -> Array2<f64> {
        a.mapv(|v| v as f32 as f64)
    }

    fn assert_row(table: &Array2<f64>, r: usize, expected: &[f64], tol: f64) {
        for (j, e) in expected.iter().enumerate() {
            let got = table[[r, j]];
            assert!((got - e).abs() <= tol, "row {r} col {j}: {got} vs {e}");
        }
    }

    #[test]
    fn generator_reproduces_the_published_d8_vaswani_rows() {
        // check-values §1.2 (a-calc from Vaswani 2017 §3.5): d=8, ω = [1, 0.1, 0.01, 0.001].
        let t = generate(&vaswani(10000.0), 3, 8);
        assert_row(&t, 0, &[0., 1., 0., 1., 0., 1., 0., 1.], 1e-12);
        let pos1 = [
            0.841470985,
            0.540302306,
            0.099833417,
            0.995004165,
            0.009999833,
            0.99995,
            0.001,
            0.9999995,
        ];
        assert_row(&t, 1, &pos1, 1e-9);
        let pos2 = [
            0.909297427,
            -0.416146837,
            0.198669331,
            0.980066578,
            0.019998667,
            0.999800007,
            0.001999999,
            0.999998,
        ];
        assert_row(&t, 2, &pos2, 1e-9);
    }

    #[test]
    fn generator_reproduces_the_published_fairseq_and_marian_rows() {
        // check-values §2.2 (a-calc from fairseq get_embedding(4, 8, padding_idx=1)):
        // split, sin first, ω_i = 10000^(−i/3); row 1 zeroed as the padding row.
        let mut t = generate(&t2t(), 4, 8);
        t.row_mut(1).fill(0.0);
        assert_row(&t, 0, &[0., 0., 0., 0., 1., 1., 1., 1.], 1e-12);
        assert_row(&t, 1, &[0.0; 8], 0.0);
        let row2 = [
            0.909297427,
            0.092698501,
            0.004308856,
            0.0002,
            -0.416146837,
            0.995694224,
            0.999990717,
            0.99999998,
        ];
        assert_row(&t, 2, &row2, 1e-9);
        // check-values §2.4 (a-calc from HF Marian): split halves with Vaswani frequencies.
        let marian = SinusoidSpec {
            layout: Layout::Split,
            ..vaswani(10000.0)
        };
        let m = generate(&marian, 2, 8);
        let pos1 = [
            0.841470985,
            0.099833417,
            0.009999833,
            0.001,
            0.540302306,
            0.995004165,
            0.99995,
            0.9999995,
        ];
        assert_row(&m, 1, &pos1, 1e-9);
    }

    #[test]
    fn generator_matches_the_published_frequencies_and_row_norm() {
        // check-values §1.1 and §2.1 (a-calc): d=512 ω_1 Vaswani 0.96466162, t2t 0.96452553;
        // ω_255 = 1.036633e-4; §1.3: every row has norm sqrt(d/2) = 19.5959 for d=768.
        let v = vaswani(10000.0).frequencies(512);
        assert!((v[1] - 0.96466162).abs() < 1e-8);
        assert!((v[255] - 1.036633e-4).abs() < 1e-9);
        let t = t2t().frequencies(512);
        assert!((t[1] - 0.96452553).abs() < 1e-8);
        assert!((t[255] - 1e-4).abs() < 1e-15);
        let table = generate(&vaswani(10000.0), 64, 768);
        for r in table.rows() {
            let norm = r.dot(&r).sqrt();
            assert!((norm - 19.5959).abs() < 1e-4);
        }
    }

    fn check_fit(fit: &SinusoidFit, spec: &SinusoidSpec, max_err: f64) {
        assert_eq!(fit.layout, spec.layout, "{fit:?}");
        assert_eq!(fit.sin_first, spec.sin_first, "{fit:?}");
        assert_eq!(fit.exponent, spec.exponent, "{fit:?}");
        assert_eq!(fit.offset, spec.offset, "{fit:?}");
        assert!((fit.base / spec.base - 1.0).abs() < 1e-9, "{fit:?}");
        assert!(fit.max_abs_error <= max_err, "{}", fit.max_abs_error);
        assert!(!fit.precision.computed_in_low_precision);
    }

    #[test]
    fn recovers_vaswani_interleaved_stored_as_f32() {
        // Vaswani 2017 §3.5 (check-values §1.1); f32 storage error ≤ 2^-25 for |v| ≤ 1.
        let spec = vaswani(10000.0);
        let table = to_f32(&generate(&spec, 512, 768));
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        check_fit(&fit, &spec, 2f64.powi(-24));
        assert!(fit.snapped);
        assert!(fit.zero_rows.is_empty());
        assert!(fit.precision.representable_in.contains(&"f32".to_string()));
        assert!(fit.error_by_position.len() <= 512);
    }

    #[test]
    fn recovers_the_whisper_t2t_split_convention() {
        // Whisper `sinusoids(1500, 384)` = tensor2tensor convention (check-values §2.1, §2.3).
        let spec = t2t();
        let table = to_f32(&generate(&spec, 1500, 384));
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        check_fit(&fit, &spec, 2f64.powi(-24));
        // The same frequencies with the other exponent need base 10000^(192/191).
        assert!((fit.base_other_convention / 10000f64.powf(192.0 / 191.0) - 1.0).abs() < 1e-9);
    }

    #[test]
    fn recovers_marian_split_with_vaswani_exponent() {
        // HF Marian (check-values §2.4): split halves, 2i/d, offset 0, 1024 rows.
        let spec = SinusoidSpec {
            layout: Layout::Split,
            ..vaswani(10000.0)
        };
        let table = to_f32(&generate(&spec, 1024, 512));
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        check_fit(&fit, &spec, 2f64.powi(-24));
    }

    #[test]
    fn recovers_fairseq_with_padding_row_and_odd_width() {
        // fairseq get_embedding (check-values §2.2): num_embeddings = 1024 + 1 + 1, row 1
        // zeroed (padding_idx=1), odd d gets a zero last column. Row 0 keeps angle 0, so
        // the row encoding angle 0 is row 0 and the offset is 0.
        let spec = t2t();
        let mut table = Array2::zeros((1026, 513));
        table
            .slice_mut(ndarray::s![.., ..512])
            .assign(&generate(&spec, 1026, 512));
        table.row_mut(1).fill(0.0);
        let table = to_f32(&table);
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        check_fit(&fit, &spec, 2f64.powi(-24));
        assert_eq!(fit.zero_rows, vec![[1, 2]]);
        assert!(fit.zero_last_column);
    }

    #[test]
    fn recovers_a_shifted_table_cos_first() {
        // Invented variant: two rows before position 0 (angle (r − 2)·ω) and cosines first.
        let spec = SinusoidSpec {
            offset: 2,
            sin_first: false,
            ..vaswani(10000.0)
        };
        let table = to_f32(&generate(&spec, 300, 256));
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        check_fit(&fit, &spec, 2f64.powi(-24));
        // A table starting at position 5 (negative offset), t2t split.
        let spec = SinusoidSpec {
            offset: -5,
            ..t2t()
        };
        let table = to_f32(&generate(&spec, 200, 128));
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        check_fit(&fit, &spec, 2f64.powi(-24));
    }

    #[test]
    fn fits_an_unusual_base_without_assuming_10000() {
        // Invented: base 500 (not a published table), Vaswani layout.
        let spec = vaswani(500.0);
        let table = to_f32(&generate(&spec, 256, 64));
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        check_fit(&fit, &spec, 2f64.powi(-24));
    }

    #[test]
    fn a_nearly_right_table_gives_a_fit_with_a_large_error() {
        // Invented corruption: 8 of the 384 pairs use the wrong frequency.
        let spec = vaswani(10000.0);
        let mut table = generate(&spec, 512, 768);
        let freqs = spec.frequencies(768);
        for i in 100..108 {
            for r in 0..512 {
                let (s, c) = (r as f64 * freqs[i] * 1.5).sin_cos();
                table[[r, 2 * i]] = s;
                table[[r, 2 * i + 1]] = c;
            }
        }
        let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
        assert_eq!(fit.layout, Layout::Interleaved);
        assert!((fit.base - 10000.0).abs() < 1e-6, "{fit:?}");
        assert!(fit.max_abs_error > 0.1, "{}", fit.max_abs_error);
    }

    #[test]
    fn random_and_learned_like_tables_are_not_sinusoids() {
        // Invented: i.i.d. N(0, 0.02²) table, and a smooth learned-like table (a few smooth
        // waves along position times random directions, plus small noise).
        let mut rng = Rng(7);
        let random = Array2::from_shape_fn((256, 128), |_| 0.02 * rng.normal());
        assert!(fit_sinusoid(random.view(), 2f64.powi(-25)).is_none());
        let smooth = smooth_table(&mut rng, 256, 128);
        assert!(fit_sinusoid(smooth.view(), 2f64.powi(-25)).is_none());
        for r in [0usize, 17, 100, 255] {
            let rows: Vec<(usize, ArrayView1<f64>)> = [r, r + 1]
                .iter()
                .map(|&i| (i % 256, random.row(i % 256)))
                .collect();
            assert!(probe_rows(&rows).is_none());
            let rows: Vec<(usize, ArrayView1<f64>)> = [r, (r + 50) % 256]
                .iter()
                .map(|&i| (i, smooth.row(i)))
                .collect();
            assert!(probe_rows(&rows).is_none());
        }
    }

    fn smooth_table(rng: &mut Rng, n: usize, d: usize) -> Array2<f64> {
        let dirs: Vec<Array1<f64>> = (0..6)
            .map(|_| Array1::from_shape_fn(d, |_| rng.normal() * 0.05))
            .collect();
        let phases: Vec<f64> = (0..6)
            .map(|_| rng.uniform() * std::f64::consts::TAU)
            .collect();
        Array2::from_shape_fn((n, d), |(r, j)| {
            let t = r as f64 / n as f64;
            let mut v = 0.0;
            for k in 0..6 {
                v += dirs[k][j] * (std::f64::consts::PI * (k as f64 + 1.0) * t + phases[k]).cos();
            }
            v + 0.002 * rng.normal()
        })
    }

    fn low_precision_table(n: usize, d: usize, rd: fn(f64) -> f64) -> Array2<f64> {
        // check-values §7.2: angle = round(round(pos)·round(ω)) in the low dtype, then
        // sin/cos (evaluated here in f64 and stored as f32).
        let spec = vaswani(10000.0);
        let freqs = spec.frequencies(d);
        let mut t = Array2::zeros((n, d));
        for r in 0..n {
            for (i, w) in freqs.iter().enumerate() {
                let (s, c) = rd(rd(r as f64) * rd(*w)).sin_cos();
                t[[r, 2 * i]] = s as f32 as f64;
                t[[r, 2 * i + 1]] = c as f32 as f64;
            }
        }
        t
    }

    fn max_err_below(table: &Array2<f64>, exact: &Array2<f64>, rows: usize) -> f64 {
        let mut m = 0.0f64;
        for r in 0..rows {
            for j in 0..table.ncols() {
                m = m.max((table[[r, j]] - exact[[r, j]]).abs());
            }
        }
        m
    }

    #[test]
    fn low_precision_simulation_reproduces_the_published_errors() {
        // check-values §7.2 (a-calc, numpy/ml_dtypes), Vaswani d=768.
        let exact = generate(&vaswani(10000.0), 512, 768);
        let bf = low_precision_table(512, 768, round_bf16);
        for (rows, want) in [(64, 0.214), (128, 0.423), (256, 0.861), (512, 1.94)] {
            let got = max_err_below(&bf, &exact, rows);
            assert!(
                (got - want).abs() < 0.006 * want.max(1.0),
                "bf16 {rows}: {got}"
            );
        }
        let f = low_precision_table(512, 768, round_f16);
        for (rows, want) in [(64, 0.026), (128, 0.059), (256, 0.117), (512, 0.233)] {
            let got = max_err_below(&f, &exact, rows);
            assert!((got - want).abs() < 0.006, "f16 {rows}: {got}");
        }
    }

    #[test]
    fn flags_angles_computed_in_bf16_and_f16() {
        let bf = low_precision_table(512, 768, round_bf16);
        let fit = fit_sinusoid(bf.view(), 2f64.powi(-25)).unwrap();
        assert_eq!(fit.layout, Layout::Interleaved);
        assert!((fit.base - 10000.0).abs() < 1e-6, "{}", fit.base);
        assert!(fit.max_abs_error > 1.0);
        let p = &fit.precision;
        assert!(p.computed_in_low_precision, "{p:?}");
        assert_eq!(p.best_match.as_deref(), Some("bf16"));
        assert!(p.grows_with_position);
        let f = low_precision_table(512, 768, round_f16);
        let fit = fit_sinusoid(f.view(), 2f64.powi(-25)).unwrap();
        assert!(
            fit.precision.computed_in_low_precision,
            "{:?}",
            fit.precision
        );
        assert_eq!(fit.precision.best_match.as_deref(), Some("f16"));
    }

    #[test]
    fn an_exact_table_merely_stored_in_bf16_is_not_flagged() {
        // check-values §7.2: rounding an exact table to bf16 errs by at most 1.95e-3.
        let spec = vaswani(10000.0);
        let table = generate(&spec, 512, 768).mapv(round_bf16);
        let fit = fit_sinusoid(
            table.view(),
            crate::checkpoint::Dtype::BF16.half_ulp_below_one().unwrap(),
        )
        .unwrap();
        check_fit(&fit, &spec, 1.96e-3);
        assert!(
            fit.precision.error_to_half_ulp <= 1.0 + 1e-9,
            "{:?} {} {}",
            fit.precision.error_to_half_ulp,
            fit.scale,
            fit.max_abs_error
        );
        assert!(fit.precision.representable_in.contains(&"bf16".to_string()));
        let table = generate(&spec, 512, 768).mapv(round_f16);
        let fit = fit_sinusoid(
            table.view(),
            crate::checkpoint::Dtype::F16.half_ulp_below_one().unwrap(),
        )
        .unwrap();
        check_fit(&fit, &spec, 2.45e-4);
    }

    #[test]
    fn probe_accepts_sampled_rows_of_exact_tables() {
        // §1.3: every pair has radius 1; padding rows are zero (§2.2).
        let mut fairseq = generate(&t2t(), 64, 64);
        fairseq.row_mut(1).fill(0.0);
        let rows: Vec<(usize, ArrayView1<f64>)> = [0usize, 1, 5, 40]
            .iter()
            .map(|&i| (i, fairseq.row(i)))
            .collect();
        let v = probe_rows(&rows).unwrap();
        assert_eq!(v.layout, Layout::Split);
        assert_eq!(v.zero_rows, vec![1]);
        let bf = generate(&vaswani(10000.0), 512, 768).mapv(round_bf16);
        let rows: Vec<(usize, ArrayView1<f64>)> =
            [3usize, 200, 511].iter().map(|&i| (i, bf.row(i))).collect();
        let v = probe_rows(&rows).unwrap();
        assert_eq!(v.layout, Layout::Interleaved);
        assert!((v.amplitude - 1.0).abs() < 1e-2);
    }

    #[test]
    fn low_dtype_rounding_matches_published_values_and_half() {
        // check-values §7.3 (a-calc with ml_dtypes): bf16 of the θ=1e4, d=128 inv_freq.
        let f32_vals = [
            1.0, 0.86596435, 0.74989420, 0.64938164, 0.56234133, 0.48696753,
        ];
        let bf16_vals = [1.0, 0.8671875, 0.75, 0.6484375, 0.5625, 0.486328125];
        for (x, want) in f32_vals.iter().zip(bf16_vals) {
            assert_eq!(round_bf16(*x), want);
        }
        // §7.3: 2.455e-6 is subnormal in f16 and is stored as 2.4438e-6.
        assert!((round_f16(2.4551408e-6) - 2.4438e-6).abs() < 1e-10);
        // §7.1: f16 max 65504; integers exact up to 2048 (f16) and 256 (bf16).
        assert_eq!(round_f16(65504.0), 65504.0);
        assert!(round_f16(70000.0).is_infinite());
        assert_eq!(round_f16(2049.0), 2048.0);
        assert_eq!(round_bf16(257.0), 256.0);
        // On f32 inputs `half` rounds correctly, so both must agree exactly.
        let mut rng = Rng(3);
        for _ in 0..10_000 {
            let x = (rng.normal() * 3.0) as f32;
            assert_eq!(round_bf16(x as f64), half::bf16::from_f32(x).to_f64());
            assert_eq!(round_f16(x as f64), half::f16::from_f32(x).to_f64());
        }
    }

    #[test]
    fn degenerate_inputs_give_none_without_panicking() {
        assert!(fit_sinusoid(Array2::<f64>::zeros((0, 0)).view(), 1e-8).is_none());
        assert!(fit_sinusoid(Array2::<f64>::zeros((10, 8)).view(), 1e-8).is_none());
        assert!(fit_sinusoid(Array2::<f64>::ones((1, 8)).view(), 1e-8).is_none());
        let mut t = generate(&vaswani(10000.0), 16, 8);
        t[[3, 3]] = f64::NAN;
        assert!(fit_sinusoid(t.view(), 1e-8).is_none());
        assert!(probe_rows(&[]).is_none());
        let c = Array1::from_elem(8, 0.5);
        assert!(probe_rows(&[(0, c.view())]).is_none());
        // A constant table: radii are equal but the angles do not progress.
        let constant = Array2::from_elem((20, 8), 0.5);
        assert!(fit_sinusoid(constant.view(), 1e-8).is_none());
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
        /// Never panics, whatever the shape and values (NaN, ±∞, zeros, huge numbers).
        #[test]
        fn never_panics_on_arbitrary_tables(
            n in 0usize..24,
            d in 0usize..24,
            seed in proptest::prelude::any::<u64>(),
            ulp in proptest::prelude::prop_oneof![proptest::prelude::Just(0.0), proptest::prelude::Just(f64::NAN), 1e-9f64..1e-2],
        ) {
            let mut rng = Rng(seed);
            let specials = [0.0, f64::NAN, f64::INFINITY, -1e300, 1.0, -1.0];
            let t = Array2::from_shape_fn((n, d), |_| {
                if rng.uniform() < 0.1 { specials[(rng.next_u64() % 6) as usize] } else { rng.normal() }
            });
            let _ = fit_sinusoid(t.view(), ulp);
            let rows: Vec<(usize, ArrayView1<f64>)> = (0..n).map(|r| (r, t.row(r))).collect();
            let _ = probe_rows(&rows);
            // A clean sinusoid of the same shape with random zeroed rows must not panic either.
            if d >= 4 {
                let mut s = generate(&vaswani(10000.0), n, d);
                for r in 0..n {
                    if rng.uniform() < 0.3 { s.row_mut(r).fill(0.0); }
                }
                let _ = fit_sinusoid(s.view(), ulp);
            }
        }
    }
}
