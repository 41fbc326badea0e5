//! Basic hygiene of a table before any statistics: zero rows, bit-identical duplicate
//! rows and non-finite values.
//!
//! These are facts about the stored bytes, not statistics, so they are exact. A table with
//! NaN or infinities cannot be decomposed; [`finite_rows`] gives the rows that remain
//! usable so the other analyses can continue on them and say which rows they left out.

use std::collections::HashMap;

use ndarray::{Array2, ArrayView2, Axis};
use serde::Serialize;

use super::ranges::ranges_from_mask;

/// Zero rows, duplicate rows and non-finite values of one table.
#[derive(Debug, Clone, Serialize)]
pub struct Hygiene {
    /// Number of rows inspected.
    pub rows: usize,
    /// Rows whose every value is exactly 0.0 (or -0.0), as half-open ranges `[start, end)`.
    pub zero_rows: Vec<[usize; 2]>,
    /// Number of rows in `zero_rows`.
    pub zero_row_count: usize,
    /// Groups of two or more non-zero rows with bit-identical values; each group lists
    /// its row indices in increasing order, groups ordered by their first row.
    pub duplicate_groups: Vec<Vec<usize>>,
    /// Rows holding at least one NaN or infinity, as half-open ranges `[start, end)`.
    pub non_finite_rows: Vec<[usize; 2]>,
    /// Number of NaN or infinite values in the whole table.
    pub non_finite_count: usize,
}

/// Inspects every row of `table` (positions × dim) for zeros, exact duplicates and
/// non-finite values.
///
/// ```text
/// zero row       : x[i, j] == 0.0 for every j   (a row with no columns counts as zero)
/// duplicate      : bits(x[i, ·]) == bits(x[k, ·]), i ≠ k, row not zero
/// non-finite row : some x[i, j] is NaN or ±inf
/// ```
///
/// Duplicates compare the IEEE bit patterns, so `0.0` and `-0.0` differ there and NaN
/// rows with the same payload match (common practice for "bit-identical"); for the zero
/// test `-0.0` counts as zero. Empty tables give
/// empty lists.
pub fn hygiene(table: ArrayView2<f64>) -> Hygiene {
    let rows = table.nrows();
    let mut zero = vec![false; rows];
    let mut bad = vec![false; rows];
    let mut non_finite_count = 0usize;
    // Rows are bucketed by a 64-bit fingerprint of their bit patterns (FNV-1a over the
    // words), then each bucket is split by exact comparison: memory O(rows), not a copy
    // of the table.
    let mut buckets: HashMap<u64, Vec<usize>> = HashMap::new();
    for (i, row) in table.axis_iter(Axis(0)).enumerate() {
        zero[i] = row.iter().all(|&v| v == 0.0);
        let nf = row.iter().filter(|v| !v.is_finite()).count();
        non_finite_count += nf;
        bad[i] = nf > 0;
        if !zero[i] {
            let fingerprint = row.iter().fold(0xcbf2_9ce4_8422_2325_u64, |h, v| {
                (h ^ v.to_bits()).wrapping_mul(0x0000_0100_0000_01b3)
            });
            buckets.entry(fingerprint).or_default().push(i);
        }
    }
    let same = |a: usize, b: usize| {
        table
            .row(a)
            .iter()
            .zip(table.row(b).iter())
            .all(|(x, y)| x.to_bits() == y.to_bits())
    };
    let mut duplicate_groups: Vec<Vec<usize>> = Vec::new();
    for members in buckets.into_values().filter(|m| m.len() > 1) {
        let mut groups: Vec<Vec<usize>> = Vec::new();
        for i in members {
            match groups.iter_mut().find(|g| same(g[0], i)) {
                Some(g) => g.push(i),
                None => groups.push(vec![i]),
            }
        }
        duplicate_groups.extend(groups.into_iter().filter(|g| g.len() > 1));
    }
    duplicate_groups.sort_by_key(|g| g[0]);
    let zero_rows = ranges_from_mask(&zero);
    Hygiene {
        rows,
        zero_row_count: zero.iter().filter(|&&z| z).count(),
        zero_rows,
        duplicate_groups,
        non_finite_rows: ranges_from_mask(&bad),
        non_finite_count,
    }
}

/// The rows of a table that hold only finite values: their indices and a copy of them.
#[derive(Debug, Clone, Serialize)]
pub struct FiniteRows {
    /// Original row indices of the kept rows, increasing.
    pub indices: Vec<usize>,
    /// The kept rows (indices.len() × dim), in the same order; not serialised (the
    /// report names rows, it does not copy them).
    #[serde(skip)]
    pub table: Array2<f64>,
}

/// Keeps the rows of `table` whose values are all finite.
///
/// ```text
/// keep i  ⇔  x[i, j] is finite for every j
/// ```
///
/// Returns a 0 × dim table when no row survives; never fails.
pub fn finite_rows(table: ArrayView2<f64>) -> FiniteRows {
    let indices: Vec<usize> = table
        .axis_iter(Axis(0))
        .enumerate()
        .filter(|(_, r)| r.iter().all(|v| v.is_finite()))
        .map(|(i, _)| i)
        .collect();
    let table = table.select(Axis(0), &indices);
    FiniteRows { indices, table }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, array};

    #[test]
    fn finds_zero_duplicate_and_non_finite_rows() {
        // Invented table: rows 1-2 zero, rows 0 and 4 identical, row 3 holds NaN and inf.
        let t = array![
            [1.0, 2.0],
            [0.0, -0.0],
            [0.0, 0.0],
            [f64::NAN, f64::INFINITY],
            [1.0, 2.0],
            [1.0, 2.5],
        ];
        let h = hygiene(t.view());
        assert_eq!(h.rows, 6);
        assert_eq!(h.zero_rows, vec![[1, 3]]);
        assert_eq!(h.zero_row_count, 2);
        assert_eq!(h.duplicate_groups, vec![vec![0, 4]]);
        assert_eq!(h.non_finite_rows, vec![[3, 4]]);
        assert_eq!(h.non_finite_count, 2);
        let f = finite_rows(t.view());
        assert_eq!(f.indices, vec![0, 1, 2, 4, 5]);
        assert_eq!(f.table.nrows(), 5);
        assert_eq!(f.table[[4, 1]], 2.5);
    }

    #[test]
    fn empty_and_single_row_tables_are_handled() {
        let e = Array2::<f64>::zeros((0, 4));
        let h = hygiene(e.view());
        assert_eq!(h.rows, 0);
        assert!(h.zero_rows.is_empty() && h.duplicate_groups.is_empty());
        assert_eq!(finite_rows(e.view()).table.dim(), (0, 4));
        let one = array![[f64::NAN, 1.0]];
        let f = finite_rows(one.view());
        assert!(f.indices.is_empty());
        assert_eq!(f.table.dim(), (0, 2));
    }
}
