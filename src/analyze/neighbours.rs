//! How each position relates to its neighbours: cosine with the next row, mean cosine
//! against distance, and the position-by-position cosine matrix for plotting.
//!
//! Trained and fixed tables are smooth in position (adjacent cosine near +1; 0.97336 for
//! the d=768 sinusoid, check-values §1.3) while rows left at random initial values are
//! unrelated to their neighbours (cosine about N(0, 1/d), check-values §8.2).

use ndarray::{Array2, ArrayView2};
use serde::Serialize;

pub use super::stats::cosine;

/// Cosine of each row with the next one: `n − 1` values for `n` rows.
///
/// ```text
/// c_i = cos(x[i, ·], x[i+1, ·]),   i = 0 .. n−2
/// ```
///
/// Entries are None where either row is zero or holds non-finite values. Fewer than two
/// rows give an empty list.
pub fn adjacent_cosines(table: ArrayView2<f64>) -> Vec<Option<f64>> {
    (1..table.nrows())
        .map(|i| cosine(table.row(i - 1), table.row(i)))
        .collect()
}

/// Mean cosine between rows at each distance.
#[derive(Debug, Clone, Serialize)]
pub struct LocalityProfile {
    /// Distances k = 1..=K, in rows.
    pub distances: Vec<usize>,
    /// Mean of cos(x_i, x_{i+k}) over the pairs where it is defined; None when no pair is.
    pub mean_cosine: Vec<Option<f64>>,
    /// Number of pairs that entered each mean.
    pub pairs: Vec<usize>,
}

/// Mean cosine against distance for k = 1..=`max_distance` (clamped to n − 1).
///
/// ```text
/// m_k = mean_{i = 0 .. n−1−k} cos(x_i, x_{i+k})
///     = Σ_i Σ_j x̂[i, j]·x̂[i+k, j] / #pairs        x̂_i = x_i / ‖x_i‖
/// ```
///
/// For an exact sinusoid table `m_k = mean_i cos(k·ω_i)` (check-values §1.3). The sums
/// over pairs come from one FFT per pair of columns of the row-normalised table
/// ([`super::lagged`]; rounding of order 1e-15 per cosine), so the cost does not grow
/// with `max_distance`. Pairs with a zero or non-finite row are skipped. Fewer than two
/// rows give empty lists.
pub fn locality_profile(table: ArrayView2<f64>, max_distance: usize) -> LocalityProfile {
    let (n, d) = table.dim();
    let kmax = max_distance.min(n.saturating_sub(1));
    if kmax == 0 {
        return LocalityProfile {
            distances: Vec::new(),
            mean_cosine: Vec::new(),
            pairs: Vec::new(),
        };
    }
    let (norms, ok) = row_norms(table);
    let sums = super::lagged::lagged_sums(
        n,
        d,
        |i, j| if ok[i] { table[[i, j]] / norms[i] } else { 0.0 },
        kmax,
    );
    let distances: Vec<usize> = (1..=kmax).collect();
    let pairs: Vec<usize> = distances
        .iter()
        .map(|&k| (0..n - k).filter(|&i| ok[i] && ok[i + k]).count())
        .collect();
    let mean_cosine = pairs
        .iter()
        .zip(&sums[1..])
        .map(|(&count, s)| (count > 0).then(|| (s / count as f64).clamp(-1.0, 1.0)))
        .collect();
    LocalityProfile {
        distances,
        mean_cosine,
        pairs,
    }
}

/// Position-by-position cosine matrix, downsampled for plotting.
#[derive(Debug, Clone, Serialize)]
pub struct CosineMatrix {
    /// Table rows kept, increasing; the matrix is indexed by these.
    pub positions: Vec<usize>,
    /// `values[a][b] = cos(x[positions[a]], x[positions[b]])`; None where undefined.
    pub values: Vec<Vec<Option<f64>>>,
}

/// Cosine matrix over at most `max_side` evenly spaced positions.
///
/// ```text
/// m = min(n, max_side);  positions_a = round(a·(n−1)/(m−1)), a = 0..m−1  (first and last kept)
/// values[a][b] = cos(x[positions_a], x[positions_b])
/// ```
///
/// `max_side` 0 or an empty table give an empty matrix; `max_side` 1 keeps row 0.
pub fn cosine_matrix(table: ArrayView2<f64>, max_side: usize) -> CosineMatrix {
    let n = table.nrows();
    let m = n.min(max_side);
    let positions: Vec<usize> = match m {
        0 => vec![],
        1 => vec![0],
        _ => {
            let mut p: Vec<usize> = (0..m)
                .map(|a| ((a as f64) * (n - 1) as f64 / (m - 1) as f64).round() as usize)
                .collect();
            p.dedup();
            p
        }
    };
    let sub: Array2<f64> = table.select(ndarray::Axis(0), &positions);
    let (norms, ok) = row_norms(sub.view());
    let gram = sub.dot(&sub.t());
    let values = (0..positions.len())
        .map(|a| {
            (0..positions.len())
                .map(|b| {
                    (ok[a] && ok[b])
                        .then(|| (gram[[a, b]] / (norms[a] * norms[b])).clamp(-1.0, 1.0))
                })
                .collect()
        })
        .collect();
    CosineMatrix { positions, values }
}

/// Norm of each row and whether the row is usable (finite and non-zero).
fn row_norms(table: ArrayView2<f64>) -> (Vec<f64>, Vec<bool>) {
    let norms: Vec<f64> = table
        .rows()
        .into_iter()
        .map(|r| r.iter().map(|v| v * v).sum::<f64>().sqrt())
        .collect();
    let ok = norms.iter().map(|v| v.is_finite() && *v > 0.0).collect();
    (norms, ok)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn orthogonal_and_parallel_rows() {
        let t = array![[1.0, 0.0], [0.0, 2.0], [0.0, 5.0], [0.0, 0.0]];
        let c = adjacent_cosines(t.view());
        assert_eq!(c, vec![Some(0.0), Some(1.0), None]);
        let l = locality_profile(t.view(), 10);
        assert_eq!(l.distances, vec![1, 2, 3]);
        assert_eq!(l.pairs, vec![2, 1, 0]);
        assert_eq!(l.mean_cosine, vec![Some(0.5), Some(0.0), None]);
    }

    #[test]
    fn cosine_matrix_keeps_first_and_last_positions() {
        let t = Array2::from_shape_fn((10, 3), |(i, j)| (i + j) as f64 + 1.0);
        let m = cosine_matrix(t.view(), 4);
        assert_eq!(m.positions, vec![0, 3, 6, 9]);
        assert_eq!(m.values.len(), 4);
        assert!((m.values[2][2].unwrap() - 1.0).abs() < 1e-15);
        let want = cosine(t.row(3), t.row(9)).unwrap();
        assert!((m.values[1][3].unwrap() - want).abs() < 1e-15);
        assert_eq!(cosine_matrix(t.view(), 100).positions.len(), 10);
    }

    #[test]
    fn degenerate_inputs_give_empty_or_none() {
        let e = Array2::<f64>::zeros((0, 3));
        assert!(adjacent_cosines(e.view()).is_empty());
        assert!(locality_profile(e.view(), 5).distances.is_empty());
        assert!(cosine_matrix(e.view(), 5).positions.is_empty());
        let one = array![[1.0, 2.0]];
        assert!(adjacent_cosines(one.view()).is_empty());
        assert_eq!(cosine_matrix(one.view(), 0).positions.len(), 0);
        let self_cos = cosine_matrix(one.view(), 1).values[0][0].unwrap();
        assert!((self_cos - 1.0).abs() < 1e-15);
        let nan = array![[f64::NAN, 1.0], [1.0, 1.0]];
        assert_eq!(adjacent_cosines(nan.view()), vec![None]);
        assert_eq!(locality_profile(nan.view(), 1).mean_cosine, vec![None]);
    }
}
