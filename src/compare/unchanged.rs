//! Rows that did not change between two checkpoints, exactly or up to weight decay.
//!
//! A row that received no gradient between two checkpoints is either bit-identical or,
//! under decoupled weight decay (AdamW-style `p ← p − lr·λ·p`), the same vector shrunk by
//! one factor `c = Π(1 − lr_t·λ)` in (0, 1] that every such row shares. Finding these
//! runs tells a person which positions training never reached between the two steps.
//!
//! # Method
//! Rows are scanned in order and grouped greedily into maximal runs that fit one common
//! factor. For a run R the factor is the least-squares estimate and each row's residual
//! is measured against it:
//!
//! ```text
//! c_R  = Σ_{i∈R} ⟨a_i, b_i⟩ / Σ_{i∈R} ⟨a_i, a_i⟩           (1.0 when every a_i = 0)
//! accept R when  0 < c_R ≤ 1 + tol  and every entry  |b_ij − c_R a_ij| ≤ tol·|c_R a_ij| + abs
//! r_i  = ‖b_i − c_R a_i‖₂ / ‖b_i‖₂      (reported row residual; 0 when a_i = b_i = 0)
//! ```
//!
//! A row joins the current run when its entries fit the run's current `c_R` within
//! the bound; otherwise the run is closed and the row may start a new one (alone, with
//! its own factor). So a run splits where the factor changes by more than about `tol`.
//! On closing, `c_R` is re-estimated over the whole run and every row re-checked; a run
//! that fails the re-check is not reported (only its bit-identical sub-runs are).
//!
//! # Guard against false "unchanged"
//! A trained row fits `b = c·a` only if its update is parallel to the row itself, which
//! for d ≥ 2 has probability zero; at the tolerance below a trained row is never
//! accepted. For very narrow tables (d = 1 every shrinking row fits its own factor), a
//! run that is not bit-identical must hold at least [`MIN_SCALED_ELEMENTS`] entries.
//! Rows whose factor would exceed 1 (they grew) or be ≤ 0 (zeroed or flipped) are changed.
//!
//! # Tolerance: accumulated rounding of many decay steps
//! The check is elementwise, because rounding is: each stored entry is rounded relative
//! to itself. With `c` the run's factor, entry j of a row passes when
//!
//! ```text
//! |b_j − c·a_j| ≤ tol·|c·a_j| + abs            (abs: the storage type's smallest subnormal)
//! ```
//!
//! Two sources of deviation are modelled:
//! - **storage**: `a` and `b` each rounded once to a format with `m` explicit mantissa
//!   bits, at most `2u = 2^-m` together (u = 2^-(m+1) the unit roundoff; IEEE 754 /
//!   bfloat16: m = 23 for F32, 10 for F16, 7 for BF16), [`rounding_tolerance`];
//! - **accumulated decay rounding**: decoupled weight decay multiplies a row that gets no
//!   gradient by `float32(1 − lr_t·λ)` once per step, and each product is rounded to
//!   float32 again. The factor is the same for every entry (it is "one common factor"),
//!   but every entry collects its own rounding, at most 2^-24 relative per step. After n
//!   steps that is at most n·2^-24 (all roundings of one sign) and typically a random
//!   walk: std ≈ 0.43·√n·2^-24 per entry (half-ulp relative errors, mantissas spread
//!   log-uniformly), so the largest of N entries sits near 0.43·√n·√(2 ln N)·2^-24.
//!
//! n, the number of steps between two checkpoints, is not in the checkpoints. The
//! tolerance therefore allows [`DECAY_ROUNDING_STEPS`] = 512 float32 rounding steps
//! (2^-15 ≈ 3.05e-5 relative) on top of the storage rounding. Measured on the committed
//! training fixtures (`fixtures/training/`, torch AdamW, weight decay 0.1): the
//! never-trained rows sit at most 22, 43, 31 steps from their common factor after 200,
//! 400, 200 steps, 53 after 800 (rms 6.0 after 200 and 12.0 after 800 steps, as the
//! random-walk model predicts: 0.43·√200 = 6.1, 0.43·√800 = 12.2); trained rows are at
//! least 9.6e5 steps away (a gradient moves every entry by about the learning rate under
//! Adam, ≥ 1e-3 of the entry here). 512 keeps a tenfold margin over the 800-step
//! measurement, covers the random-walk maximum of about 40 000 steps between checkpoints
//! for a 2^24-entry table (about 75 000 for 10^4 entries; 512 steps if every rounding had
//! the same sign), and stays 2000 times below the nearest trained row. Checkpoints
//! further apart can leave decay-only rows reported as changed; the elementwise
//! deviation of each range is reported (`max_deviation`, `rms_deviation`) so a reader
//! sees how close to the bound it was.
//!
//! Beyond one storage rounding, a bound this loose could also hold a small additive step
//! (a tiny learning rate), so a run must in addition show deviations that grow with the
//! entries' size, as rounding does ([`deviation_scaling`], slope ≥ 0.5 on a log-log
//! scale: rounding gives about 1, an additive step about 0). Without enough entries
//! spread over more than one binade to tell, only runs within one storage rounding are
//! accepted.
//!
//! An additive update (a gradient step) is large relative to the small entries of a row
//! even when it is small against the row's norm, so the elementwise test rejects it
//! where a row-norm residual might not: rounding scales with each entry, a step does not.
//!
//! The training arithmetic is taken as float32 for F32, F16 and BF16 storage (master
//! weights in float32, the usual mixed-precision setup) and float64 for F64. A run that
//! keeps its weights and does the decay in bf16 or f16 accumulates far more rounding per
//! step; such rows are likely reported as changed.

use ndarray::{ArrayView1, ArrayView2};
use serde::Serialize;

use super::{CompareError, check_pair};

/// Least number of table entries a run that is not bit-identical must hold.
pub const MIN_SCALED_ELEMENTS: usize = 4;

/// Float32 rounding steps (units of 2^-24 relative) that accumulated weight-decay
/// rounding may leave between an entry and the common factor (see the module docs for
/// why 512).
pub const DECAY_ROUNDING_STEPS: f64 = 512.0;

/// Storage rounding tolerance for tables stored with `mantissa_bits` explicit bits.
///
/// ```text
/// tol = 2^-m   (machine epsilon of the storage format = 2 × unit roundoff)
/// ```
///
/// m = 23 (F32) gives 1.19e-7, m = 10 (F16) 9.77e-4, m = 7 (BF16) 7.81e-3; the F32/F16/
/// BF16 epsilons are those listed in check-values.md §7.1. For F64 storage (m = 52) the
/// f64 arithmetic of the check itself dominates, so the result is floored at
/// `64·f64::EPSILON` (1.4e-14).
pub fn rounding_tolerance(mantissa_bits: u32) -> f64 {
    let eps = 2f64.powi(-(mantissa_bits.min(1000) as i32));
    eps.max(64.0 * f64::EPSILON)
}

/// The unit roundoff of the arithmetic that applied weight decay to a table stored with
/// `mantissa_bits`: float32 (2^-24) for F32 and narrower storage, float64 (2^-53) for F64.
pub fn decay_unit_roundoff(mantissa_bits: u32) -> f64 {
    if mantissa_bits > 23 {
        2f64.powi(-53)
    } else {
        2f64.powi(-24)
    }
}

/// Relative elementwise tolerance of the unchanged test: storage rounding plus
/// [`DECAY_ROUNDING_STEPS`] rounding steps of the decay arithmetic.
///
/// ```text
/// tol = 2^-m + 512 · u_decay       (u_decay = 2^-24, or 2^-53 for F64 storage)
/// ```
///
/// F32: 1.19e-7 + 3.05e-5 = 3.063e-5; F16: 1.007e-3; BF16: 7.843e-3.
pub fn decay_tolerance(mantissa_bits: u32) -> f64 {
    rounding_tolerance(mantissa_bits) + DECAY_ROUNDING_STEPS * decay_unit_roundoff(mantissa_bits)
}

/// Smallest positive (subnormal) value of the storage format: the absolute part of the
/// elementwise bound, since a subnormal's rounding is absolute, not relative. F32 2^-149,
/// F16 2^-24, BF16 2^-133, F64 (and exact types) 0.
pub fn subnormal_floor(mantissa_bits: u32) -> f64 {
    match mantissa_bits {
        23 => 2f64.powi(-149),
        10 => 2f64.powi(-24),
        7 => 2f64.powi(-133),
        _ => 0.0,
    }
}

/// The bounds of the unchanged test.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct UnchangedBounds {
    /// Accepted relative elementwise deviation from the common factor.
    pub relative: f64,
    /// Absolute part of the elementwise bound.
    pub absolute: f64,
    /// Deviation that one storage rounding explains: a run within it needs no further
    /// evidence; a run beyond it (accumulated rounding) must also show deviations that
    /// grow with the entries ([`deviation_scaling`]).
    pub single_rounding: f64,
}

impl UnchangedBounds {
    /// Bounds for a table stored with `mantissa_bits` explicit bits:
    /// [`decay_tolerance`], [`subnormal_floor`], [`rounding_tolerance`].
    pub fn storage(mantissa_bits: u32) -> Self {
        UnchangedBounds {
            relative: decay_tolerance(mantissa_bits),
            absolute: subnormal_floor(mantissa_bits),
            single_rounding: rounding_tolerance(mantissa_bits),
        }
    }

    /// One relative bound `tol` for everything (no accumulated rounding allowed beyond
    /// it, no absolute part).
    pub fn single(tol: f64) -> Self {
        UnchangedBounds {
            relative: tol,
            absolute: 0.0,
            single_rounding: tol,
        }
    }
}

/// A maximal run of unchanged rows.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct UnchangedRange {
    /// First row of the run.
    pub start: usize,
    /// One past the last row of the run.
    pub end: usize,
    /// Common factor c with b_i = c·a_i over the run; exactly 1.0 when bit-identical.
    pub scale: f64,
    /// Every row of the run is bit-identical between the two tables.
    pub bit_identical: bool,
    /// Largest relative row residual ‖b_i − c·a_i‖ / ‖b_i‖ over the run (0 when bit-identical).
    pub residual: f64,
    /// Not bit-identical: the rows are the earlier rows times one common factor, what
    /// decoupled weight decay alone does to rows that got no gradient.
    pub decay_only: bool,
    /// Largest elementwise relative deviation |b_j − c·a_j| / |c·a_j| over the run
    /// (entries where the subnormal floor dominates left out); 0 when bit-identical.
    pub max_deviation: f64,
    /// Root mean square of the same deviations.
    pub rms_deviation: f64,
    /// Rows of the run that are zero in both tables (they fit any factor).
    pub zero_rows: usize,
    /// Slope of log deviation against log entry size ([`deviation_scaling`]): about 1
    /// for rounding; null when bit-identical or too few entries deviate.
    pub deviation_scaling: Option<f64>,
}

/// The `[start, end)` pairs of the ranges, as the compare contract writes them.
pub fn range_pairs(ranges: &[UnchangedRange]) -> Vec<[usize; 2]> {
    ranges.iter().map(|r| [r.start, r.end]).collect()
}

fn residual(a: ArrayView1<f64>, b: ArrayView1<f64>, c: f64) -> f64 {
    let mut num = 0.0;
    let mut den = 0.0;
    for (&x, &y) in a.iter().zip(b.iter()) {
        let e = y - c * x;
        num += e * e;
        den += y * y;
    }
    if den > 0.0 {
        (num / den).sqrt()
    } else if num == 0.0 {
        0.0
    } else {
        f64::INFINITY
    }
}

/// Bounds of the elementwise test.
#[derive(Debug, Clone, Copy)]
struct Bound {
    rel: f64,
    abs: f64,
    single: f64,
}

/// Every entry within `|b_j − c·a_j| ≤ rel·|c·a_j| + abs`.
fn fits(a: ArrayView1<f64>, b: ArrayView1<f64>, c: f64, t: Bound) -> bool {
    a.iter()
        .zip(b.iter())
        .all(|(&x, &y)| (y - c * x).abs() <= t.rel * (c * x).abs() + t.abs)
}

/// (sum of squared relative deviations, their count, their max) over entries where the
/// relative part of the bound dominates.
fn deviations(a: ArrayView1<f64>, b: ArrayView1<f64>, c: f64, t: Bound) -> (f64, usize, f64) {
    let (mut sq, mut n, mut max) = (0.0, 0, 0.0_f64);
    for (&x, &y) in a.iter().zip(b.iter()) {
        let base = (c * x).abs();
        if base > 0.0 && t.rel * base >= t.abs {
            let d = (y - c * x).abs() / base;
            sq += d * d;
            n += 1;
            max = max.max(d);
        }
    }
    (sq, n, max)
}

/// Least number of entries with a non-zero deviation the scaling test needs.
pub const MIN_SCALING_ENTRIES: usize = 8;

/// Slope of ln|b_j − c·a_j| against ln|c·a_j| over the rows `start..end` (entries with a
/// non-zero deviation where the relative bound dominates); `None` with fewer than
/// [`MIN_SCALING_ENTRIES`] such entries or magnitudes within about one binade.
///
/// Rounding errors are relative to each entry: their size grows with the entry, slope
/// about 1 on this log-log scale (0 for the relative deviation). An additive step
/// (a gradient) does not depend on the entry's size: slope about 0.
pub fn deviation_scaling(
    a: ArrayView2<f64>,
    b: ArrayView2<f64>,
    start: usize,
    end: usize,
    c: f64,
    absolute: f64,
    tolerance: f64,
) -> Option<f64> {
    let (mut n, mut sx, mut sy, mut sxx, mut sxy) = (0usize, 0.0, 0.0, 0.0, 0.0);
    for i in start..end.min(a.nrows()) {
        for (&x, &y) in a.row(i).iter().zip(b.row(i).iter()) {
            let base = (c * x).abs();
            let e = (y - c * x).abs();
            if base > 0.0 && e > 0.0 && tolerance * base >= absolute {
                let (lx, ly) = (base.ln(), e.ln());
                n += 1;
                sx += lx;
                sy += ly;
                sxx += lx * lx;
                sxy += lx * ly;
            }
        }
    }
    if n < MIN_SCALING_ENTRIES {
        return None;
    }
    let nf = n as f64;
    let var = sxx / nf - (sx / nf).powi(2);
    let cov = sxy / nf - (sx / nf) * (sy / nf);
    // Within one binade the spacing of representable values is constant, so rounding
    // errors do not grow with the entry there: the test needs entries spread over more
    // than one binade (std of ln|entry| ≥ ln 2; a Gaussian's is π/√8 ≈ 1.11).
    (var >= std::f64::consts::LN_2 * std::f64::consts::LN_2).then(|| cov / var)
}

/// Slope of [`deviation_scaling`] below which the deviations look like an additive step,
/// not rounding: the midpoint of the two models' slopes (1 and 0).
pub const SCALING_SLOPE_MIN: f64 = 0.5;

fn bit_identical(a: ArrayView1<f64>, b: ArrayView1<f64>) -> bool {
    a.iter()
        .zip(b.iter())
        .all(|(x, y)| x.to_bits() == y.to_bits())
}

struct Run {
    start: usize,
    sum_ab: f64,
    sum_aa: f64,
    all_bit: bool,
}

impl Run {
    fn scale(&self) -> f64 {
        if self.sum_aa > 0.0 {
            self.sum_ab / self.sum_aa
        } else {
            1.0
        }
    }
}

/// Maximal runs of rows unchanged between `a` and `b`, bit-identical or up to one common
/// scale factor per run (see the module docs for the method and the tolerance).
///
/// `bounds` are normally [`UnchangedBounds::storage`] of the storage dtype. Returns the
/// runs in row order, non-overlapping.
///
/// Errors: [`CompareError::Empty`], [`CompareError::NonFinite`],
/// [`CompareError::ShapeMismatch`], and [`CompareError::InvalidOption`] for a tolerance
/// that is negative, NaN or ≥ 1, or an absolute bound that is negative or not finite.
pub fn unchanged_ranges(
    a: ArrayView2<f64>,
    b: ArrayView2<f64>,
    bounds: &UnchangedBounds,
) -> Result<Vec<UnchangedRange>, CompareError> {
    let (tolerance, absolute) = (bounds.relative, bounds.absolute);
    check_pair(a, b)?;
    if !(0.0..1.0).contains(&bounds.single_rounding) {
        return Err(CompareError::InvalidOption(format!(
            "single-rounding tolerance {} is not in [0, 1)",
            bounds.single_rounding
        )));
    }
    if !(0.0..1.0).contains(&tolerance) {
        return Err(CompareError::InvalidOption(format!(
            "unchanged tolerance {tolerance} is not in [0, 1)"
        )));
    }
    if !(absolute.is_finite() && absolute >= 0.0) {
        return Err(CompareError::InvalidOption(format!(
            "unchanged absolute bound {absolute} is not a finite non-negative number"
        )));
    }
    let bound = Bound {
        rel: tolerance,
        abs: absolute,
        single: bounds.single_rounding,
    };
    let n = a.nrows();
    let bits: Vec<bool> = (0..n).map(|i| bit_identical(a.row(i), b.row(i))).collect();
    let mut out = Vec::new();
    let mut cur: Option<Run> = None;
    for i in 0..n {
        let (ra, rb) = (a.row(i), b.row(i));
        let aa = ra.dot(&ra);
        let ab = ra.dot(&rb);
        if let Some(run) = cur.as_mut() {
            let c = run.scale();
            if c > 0.0 && c <= 1.0 + tolerance && fits(ra, rb, c, bound) {
                run.sum_aa += aa;
                run.sum_ab += ab;
                run.all_bit &= bits[i];
                continue;
            }
            let done = cur.take().expect("checked above");
            close(done, i, a, b, &bits, bound, &mut out);
        }
        // Try to start a new run at row i on its own.
        let starts = if bits[i] {
            true
        } else if aa > 0.0 {
            let c = ab / aa;
            c > 0.0 && c <= 1.0 + tolerance && fits(ra, rb, c, bound)
        } else {
            false
        };
        if starts {
            cur = Some(Run {
                start: i,
                sum_ab: if bits[i] { aa } else { ab },
                sum_aa: aa,
                all_bit: bits[i],
            });
        }
    }
    if let Some(run) = cur.take() {
        close(run, n, a, b, &bits, bound, &mut out);
    }
    Ok(out)
}

fn zero_rows(a: ArrayView2<f64>, b: ArrayView2<f64>, start: usize, end: usize) -> usize {
    (start..end)
        .filter(|&i| a.row(i).iter().chain(b.row(i).iter()).all(|v| *v == 0.0))
        .count()
}

/// Re-checks a finished run with its final factor and records it (or, when it fails,
/// only its bit-identical sub-runs).
fn close(
    run: Run,
    end: usize,
    a: ArrayView2<f64>,
    b: ArrayView2<f64>,
    bits: &[bool],
    bound: Bound,
    out: &mut Vec<UnchangedRange>,
) {
    let identical = |s: usize, e: usize| UnchangedRange {
        start: s,
        end: e,
        scale: 1.0,
        bit_identical: true,
        residual: 0.0,
        decay_only: false,
        max_deviation: 0.0,
        rms_deviation: 0.0,
        zero_rows: zero_rows(a, b, s, e),
        deviation_scaling: None,
    };
    if run.all_bit {
        out.push(identical(run.start, end));
        return;
    }
    let c = run.scale();
    let all_fit = (run.start..end).all(|i| fits(a.row(i), b.row(i), c, bound));
    let elements = (end - run.start) * a.ncols();
    let slope = deviation_scaling(a, b, run.start, end, c, bound.abs, bound.rel);
    // Within one storage rounding nothing else is needed; beyond it the deviations must
    // grow with the entries as rounding does (a small additive step does not).
    let single = Bound {
        rel: bound.single,
        ..bound
    };
    let within_single = (run.start..end).all(|i| fits(a.row(i), b.row(i), c, single));
    let scales_like_rounding = within_single || slope.is_some_and(|k| k >= SCALING_SLOPE_MIN);
    if c > 0.0
        && c <= 1.0 + bound.rel
        && all_fit
        && elements >= MIN_SCALED_ELEMENTS
        && scales_like_rounding
    {
        let worst = (run.start..end)
            .map(|i| residual(a.row(i), b.row(i), c))
            .fold(0.0_f64, f64::max);
        let (mut sq, mut count, mut max) = (0.0, 0usize, 0.0_f64);
        for i in run.start..end {
            let (s, n, m) = deviations(a.row(i), b.row(i), c, bound);
            sq += s;
            count += n;
            max = max.max(m);
        }
        out.push(UnchangedRange {
            start: run.start,
            end,
            scale: c,
            bit_identical: false,
            residual: worst,
            decay_only: true,
            max_deviation: max,
            rms_deviation: if count > 0 {
                (sq / count as f64).sqrt()
            } else {
                0.0
            },
            zero_rows: zero_rows(a, b, run.start, end),
            deviation_scaling: slope,
        });
        return;
    }
    let mut i = run.start;
    while i < end {
        if bits[i] {
            let s = i;
            while i < end && bits[i] {
                i += 1;
            }
            out.push(identical(s, i));
        } else {
            i += 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::super::testutil::{Rng, gaussian_table, round_f32};
    use super::*;
    use ndarray::{Array2, s};

    #[test]
    fn tolerance_is_the_storage_machine_epsilon() {
        // check-values.md §7.1: eps F32 = 1.1920929e-7, F16 = 2^-10, BF16 = 2^-7.
        assert!((rounding_tolerance(23) - 1.1920929e-7).abs() < 1e-14);
        assert_eq!(rounding_tolerance(10), 9.765625e-4);
        assert_eq!(rounding_tolerance(7), 7.8125e-3);
        assert_eq!(rounding_tolerance(52), 64.0 * f64::EPSILON);
    }

    /// Invented setting: a 96x24 f32 table; rows 0..20 trained (random step), rows
    /// 20..50 decayed by 0.999, rows 50..60 bit-identical, rows 60..80 decayed by 0.9,
    /// rows 80..96 trained. Every value is rounded to f32 as a real f32 checkpoint stores it.
    fn decay_fixture() -> (Array2<f64>, Array2<f64>) {
        let mut rng = Rng::new(7);
        let a = gaussian_table(&mut rng, 96, 24, 0.02).mapv(round_f32);
        let step = gaussian_table(&mut rng, 96, 24, 1e-3);
        let mut b = a.clone();
        for i in 0..96 {
            for j in 0..24 {
                let x = a[[i, j]];
                b[[i, j]] = round_f32(match i {
                    20..50 => 0.999 * x,
                    50..60 => x,
                    60..80 => 0.9 * x,
                    _ => x + step[[i, j]],
                });
            }
        }
        (a, b)
    }

    #[test]
    fn decay_only_rows_are_unchanged_with_their_factor_and_split_where_it_changes() {
        let (a, b) = decay_fixture();
        let r = unchanged_ranges(
            a.view(),
            b.view(),
            &UnchangedBounds::single(rounding_tolerance(23)),
        )
        .unwrap();
        assert_eq!(range_pairs(&r), vec![[20, 50], [50, 60], [60, 80]], "{r:?}");
        assert!(
            !r[0].bit_identical && (r[0].scale - 0.999).abs() < 1e-7,
            "{r:?}"
        );
        assert!(r[1].bit_identical && r[1].scale == 1.0 && r[1].residual == 0.0);
        assert!(
            !r[2].bit_identical && (r[2].scale - 0.9).abs() < 1e-7,
            "{r:?}"
        );
        // Residuals sit at f32 rounding level: below eps, well above f64 rounding.
        assert!(r[0].residual < rounding_tolerance(23) && r[0].residual > 1e-12);
    }

    #[test]
    fn same_rows_stored_in_bf16_are_found_at_the_bf16_tolerance() {
        // Invented: the fixture rounded to bfloat16 (round-to-nearest-even on the top 16
        // bits of the f32 pattern, the bfloat16 definition).
        let (a, b) = decay_fixture();
        let (a, b) = (a.mapv(round_bf16), b.mapv(round_bf16));
        let (a, b) = (a.slice(s![..80, ..]), b.slice(s![..80, ..]));
        let b = {
            let mut b = b.to_owned();
            // re-derive the decayed rows from the stored bf16 `a`, as training would
            for i in 20..50 {
                for j in 0..24 {
                    b[[i, j]] = round_bf16(0.999 * a[[i, j]]);
                }
            }
            for i in 60..80 {
                for j in 0..24 {
                    b[[i, j]] = round_bf16(0.9 * a[[i, j]]);
                }
            }
            b
        };
        let r =
            unchanged_ranges(a, b.view(), &UnchangedBounds::single(rounding_tolerance(7))).unwrap();
        // A 0.999 shrink is below bf16's half-ulp (1e-3 < 2^-9 relative), so rows 20..50
        // round back to the stored values: rows 20..60 are one bit-identical run. The
        // 0.9 rows are split off with their factor. Rows 0..20 (trained, relative step
        // ~5%) stay changed.
        assert_eq!(range_pairs(&r), vec![[20, 60], [60, 80]], "{r:?}");
        assert!(r[0].bit_identical && !r[1].bit_identical, "{r:?}");
        assert!((r[1].scale - 0.9).abs() < 2e-3, "{r:?}");
    }

    fn round_bf16(x: f64) -> f64 {
        let bits = (x as f32).to_bits();
        let rounded = (bits + 0x7fff + ((bits >> 16) & 1)) & 0xffff_0000;
        f32::from_bits(rounded) as f64
    }

    #[test]
    fn trained_rows_with_a_tiny_step_are_never_reported_unchanged() {
        // Invented: every row takes a step 1e-5 of its size (a warm-up step), with a
        // common shrink of 0.999 on top; relative residual ~1e-5 >> f32 eps.
        let mut rng = Rng::new(11);
        let a = gaussian_table(&mut rng, 200, 16, 0.02).mapv(round_f32);
        let noise = gaussian_table(&mut rng, 200, 16, 0.02 * 1e-5);
        let b = (&a * 0.999 + &noise).mapv(round_f32);
        let r = unchanged_ranges(
            a.view(),
            b.view(),
            &UnchangedBounds::single(rounding_tolerance(23)),
        )
        .unwrap();
        assert!(r.is_empty(), "{r:?}");
        // Also at the decay tolerance (2^-15 relative per entry, 3x the step against the
        // row): an additive step is large against the row's small entries.
        let r = unchanged_ranges(a.view(), b.view(), &UnchangedBounds::storage(23)).unwrap();
        assert!(r.is_empty(), "{r:?}");
    }

    #[test]
    fn decay_tolerance_is_storage_rounding_plus_512_float32_steps() {
        // 2^-23 + 512·2^-24 = 2^-23 + 2^-15 (F32); F16/BF16 add the same float32 part to
        // their epsilon (check-values.md §7.1); F64 storage decays in float64.
        assert_eq!(decay_tolerance(23), 2f64.powi(-23) + 2f64.powi(-15));
        assert_eq!(decay_tolerance(10), 2f64.powi(-10) + 2f64.powi(-15));
        assert_eq!(decay_tolerance(7), 2f64.powi(-7) + 2f64.powi(-15));
        assert_eq!(decay_tolerance(52), 64.0 * f64::EPSILON + 2f64.powi(-44));
        assert_eq!(subnormal_floor(23), f32::from_bits(1) as f64);
    }

    /// Invented 256x32 table decayed as torch's AdamW does it for rows without a gradient
    /// (`p.mul_(1 - lr*wd)` in float32 once per step; fixtures/training/README.md
    /// checks that this reproduces the real run bit for bit): rows 0..64 also take an
    /// Adam-like step of ±lr per entry each step, rows 64..256 only decay. Invented
    /// schedule: n steps of lr 1e-3 .. 3e-3, wd 0.1.
    fn decayed_run(n: usize) -> (Array2<f64>, Array2<f64>, f64) {
        let mut rng = Rng::new(5);
        let a = gaussian_table(&mut rng, 256, 32, 0.02).mapv(round_f32);
        let mut w: Vec<f32> = a.iter().map(|&v| v as f32).collect();
        let mut exact = 1.0f64;
        for t in 0..n {
            let lr = 1e-3 + 2e-3 * ((t % 97) as f64 / 96.0);
            let f = (1.0 - lr * 0.1) as f32;
            exact *= 1.0 - lr * 0.1;
            for (k, v) in w.iter_mut().enumerate() {
                *v *= f;
                if k < 64 * 32 {
                    let sign = if rng.uniform() < 0.5 { 1.0 } else { -1.0 };
                    *v -= (lr * sign) as f32;
                }
            }
        }
        let b = Array2::from_shape_vec((256, 32), w.iter().map(|&v| v as f64).collect()).unwrap();
        (a, b, exact)
    }

    #[test]
    fn hundreds_of_float32_decay_steps_fit_the_decay_tolerance_not_the_storage_one() {
        let (a, b, exact) = decayed_run(800);
        // One storage rounding step is not enough after 800 multiplications (the bug).
        let strict = unchanged_ranges(
            a.view(),
            b.view(),
            &UnchangedBounds::single(rounding_tolerance(23)),
        )
        .unwrap();
        assert!(range_pairs(&strict) != vec![[64, 256]], "{strict:?}");
        let r = unchanged_ranges(a.view(), b.view(), &UnchangedBounds::storage(23)).unwrap();
        assert_eq!(range_pairs(&r), vec![[64, 256]], "{r:?}");
        assert!(r[0].decay_only && !r[0].bit_identical);
        // The least-squares factor against the float64 product of the schedule.
        assert!(
            (r[0].scale / exact - 1.0).abs() < 1e-5,
            "{} vs {exact}",
            r[0].scale
        );
        // Accumulated rounding is visible (several float32 steps), and within the bound.
        let steps = r[0].max_deviation / 2f64.powi(-24);
        assert!(steps > 2.0 && steps < DECAY_ROUNDING_STEPS, "{steps}");
        assert!(r[0].rms_deviation > 0.0 && r[0].rms_deviation <= r[0].max_deviation);
    }

    #[test]
    fn a_single_adam_like_step_is_changed_at_the_decay_tolerance() {
        // One step of ±lr per entry with a small lr (1e-5: relative 5e-4 of a 0.02 entry),
        // on top of the decay of that step: every row got a gradient.
        let mut rng = Rng::new(13);
        let a = gaussian_table(&mut rng, 128, 32, 0.02).mapv(round_f32);
        let b = a.mapv(|v| {
            let sign = if rng.uniform() < 0.5 { 1.0 } else { -1.0 };
            round_f32(v * (1.0 - 1e-6) - 1e-5 * sign)
        });
        let r = unchanged_ranges(a.view(), b.view(), &UnchangedBounds::storage(23)).unwrap();
        assert!(r.is_empty(), "{r:?}");
    }

    #[test]
    fn grown_zeroed_and_narrow_rows_are_changed() {
        // Invented 1-column table: each row shrinks by its own factor. With d = 1 every
        // row fits a factor alone; different factors must not be reported unchanged.
        let a = ndarray::array![[1.0], [2.0], [3.0], [4.0], [5.0]];
        let b = ndarray::array![[0.5], [1.2], [2.9], [1.0], [4.0]];
        let r = unchanged_ranges(a.view(), b.view(), &UnchangedBounds::single(1e-7)).unwrap();
        assert!(r.is_empty(), "{r:?}");
        // grew by 1.01 / became zero
        let a = ndarray::array![[1.0, 2.0], [1.0, 2.0]];
        let b = ndarray::array![[1.01, 2.02], [0.0, 0.0]];
        assert!(
            unchanged_ranges(a.view(), b.view(), &UnchangedBounds::single(1e-7))
                .unwrap()
                .is_empty()
        );
        // zero rows that stay zero are bit-identical
        let z = Array2::<f64>::zeros((3, 2));
        let r = unchanged_ranges(z.view(), z.view(), &UnchangedBounds::single(1e-7)).unwrap();
        assert_eq!(range_pairs(&r), vec![[0, 3]]);
        assert!(matches!(
            unchanged_ranges(z.view(), z.view(), &UnchangedBounds::single(f64::NAN)),
            Err(CompareError::InvalidOption(_))
        ));
    }
}
