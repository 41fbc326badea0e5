//! Per-position change between two versions of one table.
//!
//! The first thing to know about two checkpoints is which positions moved and by how
//! much; the absolute change, the change relative to the row's size, and the change of
//! direction (cosine) answer different questions, so all three are kept.

use ndarray::ArrayView2;
use serde::Serialize;

use super::{CompareError, check_pair};

/// Change of every row between table `a` (earlier) and table `b` (later).
#[derive(Debug, Clone, Serialize)]
pub struct RowChange {
    /// ‖b_i − a_i‖₂ per row, in the table's own units.
    pub change: Vec<f64>,
    /// ‖b_i − a_i‖₂ / ‖a_i‖₂ per row (dimensionless); `Some(0.0)` for a zero row that
    /// stayed zero, `None` for a zero row that became non-zero.
    pub relative_change: Vec<Option<f64>>,
    /// cos(a_i, b_i) per row, in [−1, 1]; `None` when either row is all zeros.
    pub cosine: Vec<Option<f64>>,
}

/// One of the rows that moved most.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct MovedRow {
    /// Row index in the table.
    pub position: usize,
    /// ‖b_i − a_i‖₂, table units.
    pub change: f64,
    /// ‖b_i − a_i‖₂ / ‖a_i‖₂, dimensionless (null for a row that was zero).
    pub relative_change: Option<f64>,
}

/// L2 change, relative change and cosine of each row.
///
/// ```text
/// change_i   = ‖b_i − a_i‖₂
/// relative_i = ‖b_i − a_i‖₂ / ‖a_i‖₂          (0 when a_i = b_i = 0, None when only a_i = 0)
/// cosine_i   = ⟨a_i, b_i⟩ / (‖a_i‖₂ ‖b_i‖₂)    (None when a_i = 0 or b_i = 0), clamped to [−1, 1]
/// ```
///
/// Each row pair is divided by its largest absolute entry before squaring, so no sum
/// over- or underflows; `change_i` is infinite only when the difference itself exceeds
/// the f64 range. Errors: [`CompareError::Empty`], [`CompareError::NonFinite`],
/// [`CompareError::ShapeMismatch`].
pub fn row_change(a: ArrayView2<f64>, b: ArrayView2<f64>) -> Result<RowChange, CompareError> {
    check_pair(a, b)?;
    let n = a.nrows();
    let mut change = Vec::with_capacity(n);
    let mut relative_change = Vec::with_capacity(n);
    let mut cosine = Vec::with_capacity(n);
    for (ra, rb) in a.rows().into_iter().zip(b.rows()) {
        // Work in units of the row pair's largest entry so no square over- or underflows.
        let m = ra
            .iter()
            .chain(rb.iter())
            .fold(0.0_f64, |m, v| m.max(v.abs()));
        let m = if m > 0.0 { m } else { 1.0 };
        let (mut aa, mut bb, mut ab, mut dd) = (0.0, 0.0, 0.0, 0.0);
        for (&x, &y) in ra.iter().zip(rb.iter()) {
            let (x, y) = (x / m, y / m);
            aa += x * x;
            bb += y * y;
            ab += x * y;
            dd += (y - x) * (y - x);
        }
        let d = dd.sqrt() * m;
        change.push(d);
        relative_change.push(if aa > 0.0 {
            Some(dd.sqrt() / aa.sqrt())
        } else if d == 0.0 {
            Some(0.0)
        } else {
            None
        });
        cosine.push(if aa > 0.0 && bb > 0.0 {
            Some((ab / (aa.sqrt() * bb.sqrt())).clamp(-1.0, 1.0))
        } else {
            None
        });
    }
    Ok(RowChange {
        change,
        relative_change,
        cosine,
    })
}

/// The `top` rows with the largest change, largest first (ties: lower position first).
///
/// `relative` must be the matching relative changes (same length as `change`); a shorter
/// slice gives `None` for the missing entries. NaN changes are never listed. Returns an
/// empty list for `top == 0` or an empty `change`.
pub fn most_moved(change: &[f64], relative: &[Option<f64>], top: usize) -> Vec<MovedRow> {
    let mut order: Vec<usize> = (0..change.len()).filter(|&i| !change[i].is_nan()).collect();
    order.sort_by(|&i, &j| change[j].total_cmp(&change[i]).then(i.cmp(&j)));
    order
        .into_iter()
        .take(top)
        .map(|i| MovedRow {
            position: i,
            change: change[i],
            relative_change: relative.get(i).copied().flatten(),
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn hand_computed_rows_give_the_expected_change_relative_change_and_cosine() {
        // Invented 3x2 tables; values worked by hand:
        // row 0: a=(3,4), b=(3,4)  -> change 0, relative 0, cosine 1
        // row 1: a=(1,0), b=(0,1)  -> change sqrt(2), relative sqrt(2), cosine 0
        // row 2: a=(0,0), b=(0,2)  -> change 2, relative None, cosine None
        let a = array![[3.0, 4.0], [1.0, 0.0], [0.0, 0.0]];
        let b = array![[3.0, 4.0], [0.0, 1.0], [0.0, 2.0]];
        let r = row_change(a.view(), b.view()).unwrap();
        assert_eq!(r.change[0], 0.0);
        assert!((r.change[1] - 2f64.sqrt()).abs() < 1e-15);
        assert_eq!(r.change[2], 2.0);
        assert_eq!(r.relative_change[0], Some(0.0));
        assert!((r.relative_change[1].unwrap() - 2f64.sqrt()).abs() < 1e-15);
        assert_eq!(r.relative_change[2], None);
        assert!((r.cosine[0].unwrap() - 1.0).abs() < 1e-15);
        assert!(r.cosine[1].unwrap().abs() < 1e-15);
        assert_eq!(r.cosine[2], None);

        let top = most_moved(&r.change, &r.relative_change, 2);
        assert_eq!(top.len(), 2);
        assert_eq!(top[0].position, 2);
        assert_eq!(top[1].position, 1);
    }

    #[test]
    fn rejects_mismatched_empty_and_non_finite_tables() {
        let a = array![[1.0, 2.0]];
        let b = array![[1.0, 2.0, 3.0]];
        assert!(matches!(
            row_change(a.view(), b.view()),
            Err(CompareError::ShapeMismatch { .. })
        ));
        let e = ndarray::Array2::<f64>::zeros((0, 2));
        assert!(matches!(
            row_change(e.view(), e.view()),
            Err(CompareError::Empty { .. })
        ));
        let nan = array![[1.0, f64::NAN]];
        assert!(matches!(
            row_change(a.view(), nan.view()),
            Err(CompareError::NonFinite {
                which: "second",
                count: 1
            })
        ));
    }
}
