//! Periodic structure along position: autocorrelation, and tables built by copying a
//! shorter block.
//!
//! Extending a table by tiling the rows of a shorter trained one leaves rows that repeat
//! with the old length as period, exactly at first and approximately after further
//! training (check-values §3.14, the table-extension recipes). Autocorrelation gives the
//! softer picture of how far along position a table stays self-similar.

use ndarray::{Array2, ArrayView2};
use serde::Serialize;

/// Mean autocorrelation of the table's columns against lag.
#[derive(Debug, Clone, Serialize)]
pub struct Autocorrelation {
    /// Lags 1..=max_lag, in rows.
    pub lags: Vec<usize>,
    /// Mean over the used columns of their autocorrelation at each lag, in [−1, 1].
    pub mean: Vec<f64>,
    /// Number of columns averaged (finite, non-constant).
    pub columns_used: usize,
}

/// Mean over dimensions of the centred, normalised autocorrelation at lags 1..=`max_lag`
/// (clamped to n − 1).
///
/// ```text
/// c_j(i) = x[i, j] − mean_i x[i, j]
/// r_j(k) = Σ_{i=0}^{n−1−k} c_j(i)·c_j(i+k) / Σ_i c_j(i)²      (Box & Jenkins estimator)
/// r(k)   = mean_j r_j(k)
/// ```
///
/// The sums over lags come from one FFT per pair of columns ([`super::lagged`]), so the
/// cost does not grow with `max_lag`. Columns holding non-finite values or with zero
/// variance are skipped. Returns None when no column is usable or the table has fewer
/// than 2 rows.
pub fn autocorrelation(table: ArrayView2<f64>, max_lag: usize) -> Option<Autocorrelation> {
    let (n, d) = table.dim();
    let kmax = max_lag.min(n.saturating_sub(1));
    if kmax == 0 {
        return None;
    }
    // Column means and sums of squares in row order (the table is stored row by row).
    let mut mean = vec![0.0; d];
    let mut finite = vec![true; d];
    for row in table.rows() {
        for (j, v) in row.iter().enumerate() {
            finite[j] &= v.is_finite();
            mean[j] += v;
        }
    }
    mean.iter_mut().for_each(|m| *m /= n as f64);
    let mut denom = vec![0.0; d];
    for row in table.rows() {
        for (j, v) in row.iter().enumerate() {
            denom[j] += (v - mean[j]) * (v - mean[j]);
        }
    }
    // Scale each usable column to unit sum of squares so its lagged sums are r_j(k).
    let scale: Vec<f64> = (0..d)
        .map(|j| {
            if finite[j] && denom[j] > 0.0 {
                1.0 / denom[j].sqrt()
            } else {
                0.0
            }
        })
        .collect();
    let used = scale.iter().filter(|&&s| s > 0.0).count();
    if used == 0 {
        return None;
    }
    let sums = super::lagged::lagged_sums(
        n,
        d,
        |i, j| {
            if scale[j] > 0.0 {
                (table[[i, j]] - mean[j]) * scale[j]
            } else {
                0.0
            }
        },
        kmax,
    );
    Some(Autocorrelation {
        lags: (1..=kmax).collect(),
        mean: sums[1..].iter().map(|s| s / used as f64).collect(),
        columns_used: used,
    })
}

/// A stretch of rows made of copies of one block.
#[derive(Debug, Clone, Serialize)]
pub struct RepeatedBlock {
    /// Length of the repeated block, in rows.
    pub period: usize,
    /// First row of the stretch.
    pub start: usize,
    /// One past the last row of the stretch (half-open `[start, end)`).
    pub end: usize,
    /// Rows covered, `end − start` (at least `2·period`).
    pub rows_covered: usize,
    /// Largest |x[i, j] − x[i + period, j]| over the stretch, in the table's units.
    pub max_abs_difference: f64,
}

/// Recent rows remembered per sketch cell when looking for a row's earlier copies.
const PARTNERS: usize = 8;

/// Finds the longest stretch in which row `i` equals row `i + P` within `tolerance`
/// (max-abs difference), over every period P with at least two full copies.
///
/// ```text
/// match_P(i)  ⇔  max_j |x[i, j] − x[i+P, j]| ≤ tolerance,  rows i and i+P finite and non-zero
/// stretch     = [s, e) with match_P(i) for every i in [s, e − P),  e − s ≥ 2P
/// result      = the stretch with the most rows; ties go to the smaller P
/// ```
///
/// `tolerance` 0 asks for bit-exact copies (up to ±0). Each row is reduced to four fixed
/// random projections (a necessary condition for a match, since
/// |pᵀ(a − b)| ≤ ‖p‖₁·max|a − b|). Rows are bucketed by their first projection in cells as
/// wide as its slack, so a row's possible copies lie in its own or a neighbouring cell;
/// each cell remembers its [`PARTNERS`] (8) most recent rows. Runs of rows whose partner
/// lies at the same lag P give the candidate stretches, which are then checked on the
/// full rows, longest first. Zero rows never match (they are reported by the hygiene
/// check, not as copies). Returns None when no stretch qualifies, for tables with fewer
/// than 2 rows, or for a negative or NaN tolerance.
///
/// Cost: O(n·d) for the projections, O(n·PARTNERS) hash-map steps for the candidates and
/// at most O(n·PARTNERS·d) to verify them: near-linear in the table's size (an earlier
/// version tried every period against every row, O(n²)). The bound is by sampling: a row
/// is compared only with the 8 most recent rows of its neighbourhood, so a copy whose
/// lag is longer than 8 nearer look-alikes (a block in which many rows agree within the
/// tolerance) is seen through those nearer rows instead; exact tilings of distinct rows
/// are always found.
pub fn repeated_block(table: ArrayView2<f64>, tolerance: f64) -> Option<RepeatedBlock> {
    use std::collections::HashMap;
    let (n, d) = table.dim();
    if n < 2 || d == 0 || tolerance.is_nan() || tolerance < 0.0 {
        return None;
    }
    // Fixed pseudo-random projections (xorshift64, invented seed), values in [−1, 1].
    const M: usize = 4;
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let proj = Array2::from_shape_fn((d, M), |_| {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 52) as f64 - 1.0
    });
    let l1: Vec<f64> = proj
        .columns()
        .into_iter()
        .map(|c| c.iter().map(|v| v.abs()).sum())
        .collect();
    let usable: Vec<bool> = table
        .rows()
        .into_iter()
        .map(|r| r.iter().all(|v| v.is_finite()) && r.iter().any(|&v| v != 0.0))
        .collect();
    let sketch = table.dot(&proj);
    // Rounding of the projections themselves: allow a few ulps of each sketch value.
    let biggest = max_abs(table);
    let slack: Vec<f64> = (0..M)
        .map(|m| tolerance * l1[m] + 8.0 * f64::EPSILON * l1[m] * biggest)
        .collect();
    let maybe = |i: usize, j: usize| {
        usable[i]
            && usable[j]
            && (0..M).all(|m| (sketch[[i, m]] - sketch[[j, m]]).abs() <= slack[m])
    };
    let width = slack[0];
    if !(width.is_finite() && width > 0.0) {
        return None;
    }
    let cell_of = |i: usize| (sketch[[i, 0]] / width).floor() as i64;
    // Candidate stretches (covered, period, start) from runs of rows with a partner at
    // the same lag.
    let mut cands: Vec<(usize, usize, usize)> = Vec::new();
    let mut cells: HashMap<i64, Vec<usize>> = HashMap::new();
    // Active runs: lag → first (later) row of the run.
    let mut active: HashMap<usize, usize> = HashMap::new();
    let mut next: HashMap<usize, usize> = HashMap::new();
    let close = |lag: usize, a: usize, b: usize, cands: &mut Vec<(usize, usize, usize)>| {
        // Later rows a..=b match rows a−lag..=b−lag: stretch [a − lag, b + 1).
        let covered = b + 1 - a + lag;
        if covered >= 2 * lag {
            cands.push((covered, lag, a - lag));
        }
    };
    #[allow(clippy::needless_range_loop)] // `i` is also the row compared with earlier rows
    for i in 0..n {
        next.clear();
        if usable[i] {
            let c = cell_of(i);
            for cell in [c.saturating_sub(1), c, c.saturating_add(1)] {
                if let Some(rows) = cells.get(&cell) {
                    for &j in rows {
                        let lag = i - j;
                        if lag <= n / 2 && maybe(i, j) {
                            let start = active.get(&lag).copied().unwrap_or(i);
                            next.insert(lag, start);
                        }
                    }
                }
            }
            let slot = cells.entry(c).or_default();
            if slot.len() == PARTNERS {
                slot.remove(0);
            }
            slot.push(i);
        }
        for (&lag, &a) in &active {
            if !next.contains_key(&lag) {
                close(lag, a, i - 1, &mut cands);
            }
        }
        std::mem::swap(&mut active, &mut next);
    }
    for (&lag, &a) in &active {
        close(lag, a, n - 1, &mut cands);
    }
    cands.sort_by(|a, b| b.0.cmp(&a.0).then(a.1.cmp(&b.1)).then(a.2.cmp(&b.2)));
    let mut best: Option<RepeatedBlock> = None;
    for (covered, p, s) in cands {
        if best.as_ref().is_some_and(|b| {
            b.rows_covered > covered || (b.rows_covered == covered && b.period <= p)
        }) {
            break;
        }
        // Verify on full rows: split the candidate into true runs.
        let e = s + covered - p; // last i (exclusive) of the run
        let mut i = s;
        while i < e {
            if row_diff(table, i, i + p) > tolerance {
                i += 1;
                continue;
            }
            let rs = i;
            let mut worst = 0.0f64;
            while i < e {
                let diff = row_diff(table, i, i + p);
                if diff > tolerance {
                    break;
                }
                worst = worst.max(diff);
                i += 1;
            }
            let cov = i - rs + p;
            let better = best
                .as_ref()
                .is_none_or(|b| cov > b.rows_covered || (cov == b.rows_covered && p < b.period));
            if cov >= 2 * p && better {
                best = Some(RepeatedBlock {
                    period: p,
                    start: rs,
                    end: rs + cov,
                    rows_covered: cov,
                    max_abs_difference: worst,
                });
            }
        }
    }
    best
}

fn max_abs(t: ArrayView2<f64>) -> f64 {
    t.iter()
        .filter(|v| v.is_finite())
        .fold(0.0f64, |m, v| m.max(v.abs()))
}

fn row_diff(t: ArrayView2<f64>, i: usize, j: usize) -> f64 {
    t.row(i)
        .iter()
        .zip(t.row(j).iter())
        .fold(0.0f64, |m, (a, b)| m.max((a - b).abs()))
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, array};

    fn noise(n: usize, d: usize, seed: u64) -> Array2<f64> {
        let mut s = seed;
        Array2::from_shape_fn((n, d), |_| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        })
    }

    #[test]
    fn finds_a_tiled_block_after_two_junk_rows() {
        // Invented, shaped like the tiling recipe of check-values §3.14: two junk rows, then
        // a 16-row block copied 5 times (82 rows in all).
        let block = noise(16, 8, 1);
        let junk = noise(2, 8, 2);
        let mut t = Array2::zeros((82, 8));
        t.slice_mut(ndarray::s![..2, ..]).assign(&junk);
        for c in 0..5 {
            t.slice_mut(ndarray::s![2 + 16 * c..2 + 16 * (c + 1), ..])
                .assign(&block);
        }
        let r = repeated_block(t.view(), 0.0).unwrap();
        assert_eq!((r.period, r.start, r.end, r.rows_covered), (16, 2, 82, 80));
        assert_eq!(r.max_abs_difference, 0.0);
        // After a small perturbation exact matching fails but a tolerance finds it again.
        t[[40, 3]] += 1e-4;
        let exact = repeated_block(t.view(), 0.0).unwrap();
        assert!(exact.rows_covered < 80);
        let loose = repeated_block(t.view(), 1e-3).unwrap();
        assert_eq!((loose.period, loose.rows_covered), (16, 80));
        assert!((loose.max_abs_difference - 1e-4).abs() < 1e-12);
    }

    #[test]
    fn random_rows_have_no_repeated_block_and_tiny_inputs_are_fine() {
        assert!(repeated_block(noise(50, 4, 3).view(), 1e-9).is_none());
        assert!(repeated_block(Array2::<f64>::zeros((0, 3)).view(), 0.0).is_none());
        assert!(repeated_block(array![[1.0]].view(), 0.0).is_none());
        assert!(repeated_block(Array2::<f64>::zeros((10, 3)).view(), 0.0).is_none());
        assert!(repeated_block(array![[1.0], [1.0]].view(), f64::NAN).is_none());
        let two = repeated_block(array![[1.0], [1.0]].view(), 0.0).unwrap();
        assert_eq!((two.period, two.rows_covered), (1, 2));
    }

    #[test]
    fn long_single_column_tables_stay_near_linear() {
        // 400,000 x 1 (the size that took a minute with the quadratic search): noise has no
        // copies; the same noise tiled with period 1000 is found whole. No timing asserted;
        // the test only has to finish (cost O(n·8)).
        let t = noise(400_000, 1, 5);
        assert!(repeated_block(t.view(), 1e-6).is_none());
        let block = noise(1000, 1, 6);
        let tiled = Array2::from_shape_fn((400_000, 1), |(i, _)| block[[i % 1000, 0]]);
        let r = repeated_block(tiled.view(), 0.0).unwrap();
        assert_eq!((r.period, r.start, r.end), (1000, 0, 400_000));
        // A constant column: every row copies the previous one, period 1 covers it all.
        let flat = Array2::from_elem((200_000, 1), 0.25);
        let r = repeated_block(flat.view(), 0.0).unwrap();
        assert_eq!((r.period, r.rows_covered), (1, 200_000));
    }

    #[test]
    fn a_block_with_an_internal_repeat_is_still_found_at_its_period() {
        // Invented: a 12-row block whose rows 3 and 7 are equal, tiled 4 times. The nearest
        // look-alike of row 7 of each copy is row 3 (lag 4), but the lag-12 partner is also
        // remembered, so the whole tiling is found.
        let mut block = noise(12, 3, 7);
        let r3 = block.row(3).to_owned();
        block.row_mut(7).assign(&r3);
        let t = Array2::from_shape_fn((48, 3), |(i, j)| block[[i % 12, j]]);
        let r = repeated_block(t.view(), 0.0).unwrap();
        assert_eq!((r.period, r.start, r.end), (12, 0, 48));
    }

    #[test]
    fn autocorrelation_of_an_alternating_column_is_minus_one_at_odd_lags() {
        // Column (−1)^i over 1000 rows, centred mean 0: r(k) = (−1)^k (n−k)/n (by hand).
        let t = Array2::from_shape_fn((1000, 1), |(i, _)| if i % 2 == 0 { 1.0 } else { -1.0 });
        let a = autocorrelation(t.view(), 3).unwrap();
        assert_eq!(a.lags, vec![1, 2, 3]);
        for (k, r) in a.lags.iter().zip(&a.mean) {
            let want = (-1f64).powi(*k as i32) * (1000 - k) as f64 / 1000.0;
            assert!((r - want).abs() < 1e-12);
        }
        assert!(autocorrelation(Array2::<f64>::zeros((5, 2)).view(), 3).is_none());
        assert!(autocorrelation(array![[1.0, 2.0]].view(), 3).is_none());
        let nan = array![[f64::NAN, 1.0], [0.0, 2.0], [0.0, 1.0]];
        assert_eq!(autocorrelation(nan.view(), 5).unwrap().columns_used, 1);
    }
}
