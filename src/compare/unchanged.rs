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
//! r_i  = ‖b_i − c_R a_i‖₂ / ‖b_i‖₂                         (0 when a_i = b_i = 0)
//! accept R when  0 < c_R ≤ 1 + tol  and  max_{i∈R} r_i ≤ tol
//! ```
//!
//! A row joins the current run when its residual against the run's current `c_R` is
//! within `tol`; otherwise the run is closed and the row may start a new one (alone, with
//! its own factor). So a run splits where the factor changes by more than about `tol`.
//! On closing, `c_R` is re-estimated over the whole run and every row re-checked; a run
//! that fails the re-check is not reported (only its bit-identical sub-runs are).
//!
//! # Guard against false "unchanged"
//! A trained row fits `b = c·a` only if its update is parallel to the row itself, which
//! for d ≥ 2 has probability zero; at the storage tolerance a trained row is never
//! accepted. For very narrow tables (d = 1 every shrinking row fits its own factor), a
//! run that is not bit-identical must hold at least [`MIN_SCALED_ELEMENTS`] entries.
//! Rows whose factor would exceed 1 (they grew) or be ≤ 0 (zeroed or flipped) are changed.
//!
//! # Tolerance
//! If `a` is stored exactly and `b = round(c·a)` in a format with `m` explicit mantissa
//! bits, each entry's rounding error is at most the unit roundoff `u = 2^-(m+1)` relative
//! to itself, so with the exact `c` the row residual is at most `u` (and the least-squares
//! `c` can only lower it). Training with f32 master weights stored in a smaller format
//! adds the rounding of `a`, up to about `2u`. [`rounding_tolerance`] therefore returns
//! `2u = 2^-m`, the machine epsilon of the storage format (IEEE 754 / bfloat16 formats:
//! m = 23 for F32, 10 for F16, 7 for BF16). A step smaller than that relative to the row
//! is below what the storage format can record at all.

use ndarray::{ArrayView1, ArrayView2};
use serde::Serialize;

use super::{CompareError, check_pair};

/// Least number of table entries a run that is not bit-identical must hold.
pub const MIN_SCALED_ELEMENTS: usize = 4;

/// Relative residual tolerance for tables stored with `mantissa_bits` explicit bits.
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
/// `tolerance` is the accepted relative row residual, normally [`rounding_tolerance`] of
/// the storage dtype. Returns the runs in row order, non-overlapping.
///
/// Errors: [`CompareError::Empty`], [`CompareError::NonFinite`],
/// [`CompareError::ShapeMismatch`], and [`CompareError::InvalidOption`] for a tolerance
/// that is negative, NaN or ≥ 1.
pub fn unchanged_ranges(
    a: ArrayView2<f64>,
    b: ArrayView2<f64>,
    tolerance: f64,
) -> Result<Vec<UnchangedRange>, CompareError> {
    check_pair(a, b)?;
    if !(0.0..1.0).contains(&tolerance) {
        return Err(CompareError::InvalidOption(format!(
            "unchanged tolerance {tolerance} is not in [0, 1)"
        )));
    }
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
            if c > 0.0 && c <= 1.0 + tolerance && residual(ra, rb, c) <= tolerance {
                run.sum_aa += aa;
                run.sum_ab += ab;
                run.all_bit &= bits[i];
                continue;
            }
            let done = cur.take().expect("checked above");
            close(done, i, a, b, &bits, tolerance, &mut out);
        }
        // Try to start a new run at row i on its own.
        let starts = if bits[i] {
            true
        } else if aa > 0.0 {
            let c = ab / aa;
            c > 0.0 && c <= 1.0 + tolerance && residual(ra, rb, c) <= tolerance
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
        close(run, n, a, b, &bits, tolerance, &mut out);
    }
    Ok(out)
}

/// Re-checks a finished run with its final factor and records it (or, when it fails,
/// only its bit-identical sub-runs).
fn close(
    run: Run,
    end: usize,
    a: ArrayView2<f64>,
    b: ArrayView2<f64>,
    bits: &[bool],
    tol: f64,
    out: &mut Vec<UnchangedRange>,
) {
    if run.all_bit {
        out.push(UnchangedRange {
            start: run.start,
            end,
            scale: 1.0,
            bit_identical: true,
            residual: 0.0,
        });
        return;
    }
    let c = run.scale();
    let worst = (run.start..end)
        .map(|i| residual(a.row(i), b.row(i), c))
        .fold(0.0_f64, f64::max);
    let elements = (end - run.start) * a.ncols();
    if c > 0.0 && c <= 1.0 + tol && worst <= tol && elements >= MIN_SCALED_ELEMENTS {
        out.push(UnchangedRange {
            start: run.start,
            end,
            scale: c,
            bit_identical: false,
            residual: worst,
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
            out.push(UnchangedRange {
                start: s,
                end: i,
                scale: 1.0,
                bit_identical: true,
                residual: 0.0,
            });
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
        let r = unchanged_ranges(a.view(), b.view(), rounding_tolerance(23)).unwrap();
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
        let r = unchanged_ranges(a, b.view(), rounding_tolerance(7)).unwrap();
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
        let r = unchanged_ranges(a.view(), b.view(), rounding_tolerance(23)).unwrap();
        assert!(r.is_empty(), "{r:?}");
    }

    #[test]
    fn grown_zeroed_and_narrow_rows_are_changed() {
        // Invented 1-column table: each row shrinks by its own factor. With d = 1 every
        // row fits a factor alone; different factors must not be reported unchanged.
        let a = ndarray::array![[1.0], [2.0], [3.0], [4.0], [5.0]];
        let b = ndarray::array![[0.5], [1.2], [2.9], [1.0], [4.0]];
        let r = unchanged_ranges(a.view(), b.view(), 1e-7).unwrap();
        assert!(r.is_empty(), "{r:?}");
        // grew by 1.01 / became zero
        let a = ndarray::array![[1.0, 2.0], [1.0, 2.0]];
        let b = ndarray::array![[1.01, 2.02], [0.0, 0.0]];
        assert!(
            unchanged_ranges(a.view(), b.view(), 1e-7)
                .unwrap()
                .is_empty()
        );
        // zero rows that stay zero are bit-identical
        let z = Array2::<f64>::zeros((3, 2));
        let r = unchanged_ranges(z.view(), z.view(), 1e-7).unwrap();
        assert_eq!(range_pairs(&r), vec![[0, 3]]);
        assert!(matches!(
            unchanged_ranges(z.view(), z.view(), f64::NAN),
            Err(CompareError::InvalidOption(_))
        ));
    }
}
