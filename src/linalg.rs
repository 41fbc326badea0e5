//! The one seam for singular-value and eigen work.
//!
//! Every analysis that needs a decomposition calls this module and nothing else, so the
//! backend can change (pure-Rust `faer` by default, system LAPACK behind the `lapack`
//! feature) without touching the analyses.
//!
//! # Method and accuracy
//! The audit needs all singular values of a table but only a few leading singular
//! vectors. Instead of a full thin SVD we form the Gram matrix of the smaller side
//! (`AᵀA` when rows ≥ columns, else `AAᵀ`) and take its symmetric eigen-decomposition:
//!
//! ```text
//! AᵀA = V Σ² Vᵀ        σᵢ = sqrt(max(λᵢ, 0))        U = A V Σ⁻¹
//! ```
//!
//! Forming the Gram matrix squares the condition number, so a singular value σᵢ is
//! recovered with an absolute error of about `ε·σ₁²/σᵢ` (ε the f64 machine epsilon):
//! values above `1e-6·σ₁` keep about 10 significant digits, smaller ones are only
//! reliable to within `sqrt(ε)·σ₁ ≈ 1.5e-8·σ₁`. Effective rank, energy fractions and the
//! leading components depend on the large values and are unaffected in practice.
//! [`thin_svd`] is the exact (one-sided Jacobi/bidiagonal) path, kept for tests and for
//! callers that need the small values accurately.

use faer::{Mat, MatRef, Side};
use ndarray::{Array1, Array2, ArrayView2};

/// Why a decomposition could not be computed.
#[derive(Debug, thiserror::Error, Clone, PartialEq)]
pub enum LinalgError {
    /// The input has no rows or no columns.
    #[error("empty matrix ({0}x{1})")]
    Empty(usize, usize),
    /// The input holds NaN or infinite values.
    #[error("matrix holds non-finite values")]
    NonFinite,
    /// The iterative solver did not converge.
    #[error("decomposition did not converge")]
    NoConvergence,
}

/// Singular values and the leading singular vectors of a matrix `A` (n×d).
#[derive(Debug, Clone)]
pub struct Decomposition {
    /// All min(n, d) singular values, non-negative, in non-increasing order.
    pub singular_values: Vec<f64>,
    /// Leading left singular vectors as columns (n×k): the components as functions of row.
    pub left: Array2<f64>,
    /// Leading right singular vectors as columns (d×k): the directions in embedding space.
    pub right: Array2<f64>,
}

fn check(a: ArrayView2<f64>) -> Result<(), LinalgError> {
    if a.nrows() == 0 || a.ncols() == 0 {
        return Err(LinalgError::Empty(a.nrows(), a.ncols()));
    }
    if a.iter().any(|v| !v.is_finite()) {
        return Err(LinalgError::NonFinite);
    }
    Ok(())
}

fn to_faer(a: ArrayView2<f64>) -> Mat<f64> {
    Mat::from_fn(a.nrows(), a.ncols(), |i, j| a[[i, j]])
}

fn to_ndarray(m: MatRef<'_, f64>) -> Array2<f64> {
    Array2::from_shape_fn((m.nrows(), m.ncols()), |(i, j)| m[(i, j)])
}

/// Symmetric eigen-decomposition of `g` (square, symmetric): eigenvalues in
/// non-increasing order and the matching eigenvectors as columns.
///
/// Returns [`LinalgError::Empty`] for a 0×0 input and [`LinalgError::NonFinite`] when
/// `g` holds NaN or infinities.
pub fn symmetric_eigen(g: ArrayView2<f64>) -> Result<(Array1<f64>, Array2<f64>), LinalgError> {
    check(g)?;
    let m = to_faer(g);
    let evd = m
        .self_adjoint_eigen(Side::Lower)
        .map_err(|_| LinalgError::NoConvergence)?;
    let n = g.nrows();
    let s = evd.S();
    let u = evd.U();
    // faer sorts in non-decreasing order; we hand out the largest first.
    let values = Array1::from_shape_fn(n, |i| s.column_vector()[n - 1 - i]);
    let vectors = Array2::from_shape_fn((n, n), |(r, c)| u[(r, n - 1 - c)]);
    Ok((values, vectors))
}

/// All singular values of `a`, non-negative and in non-increasing order.
///
/// Uses the Gram-matrix eigenvalues (see the module docs for the accuracy trade-off).
pub fn singular_values(a: ArrayView2<f64>) -> Result<Vec<f64>, LinalgError> {
    check(a)?;
    let g = gram_of_smaller_side(a);
    let m = to_faer(g.view());
    let mut values = m
        .self_adjoint_eigenvalues(Side::Lower)
        .map_err(|_| LinalgError::NoConvergence)?;
    values.reverse();
    Ok(values.into_iter().map(|l| l.max(0.0).sqrt()).collect())
}

/// `AᵀA` when `a` has at least as many rows as columns, else `AAᵀ`.
fn gram_of_smaller_side(a: ArrayView2<f64>) -> Array2<f64> {
    if a.nrows() >= a.ncols() {
        a.t().dot(&a)
    } else {
        a.dot(&a.t())
    }
}

/// All singular values of `a` and its `k` leading singular vector pairs.
///
/// `k` is clamped to min(n, d). Vectors belonging to a zero singular value are returned
/// as zero columns on the side that has to be reconstructed (they span no direction of
/// the data). Signs are fixed so that the largest-magnitude entry of each left vector is
/// positive, which makes results reproducible across backends.
pub fn leading_components(a: ArrayView2<f64>, k: usize) -> Result<Decomposition, LinalgError> {
    check(a)?;
    let (n, d) = a.dim();
    let k = k.min(n.min(d));
    let g = gram_of_smaller_side(a);
    let (eigvals, eigvecs) = symmetric_eigen(g.view())?;
    let singular_values: Vec<f64> = eigvals.iter().map(|l| l.max(0.0).sqrt()).collect();
    let top = eigvecs.slice(ndarray::s![.., ..k]).to_owned();
    let mut left;
    let mut right;
    if n >= d {
        right = top;
        left = a.dot(&right);
        for (j, mut col) in left.columns_mut().into_iter().enumerate() {
            let s = singular_values[j];
            if s > 0.0 {
                col.mapv_inplace(|v| v / s);
            } else {
                col.fill(0.0);
            }
        }
    } else {
        left = top;
        right = a.t().dot(&left);
        for (j, mut col) in right.columns_mut().into_iter().enumerate() {
            let s = singular_values[j];
            if s > 0.0 {
                col.mapv_inplace(|v| v / s);
            } else {
                col.fill(0.0);
            }
        }
    }
    fix_signs(&mut left, &mut right);
    Ok(Decomposition {
        singular_values,
        left,
        right,
    })
}

/// The exact thin SVD (all singular vectors), the slow path.
pub fn thin_svd(a: ArrayView2<f64>) -> Result<Decomposition, LinalgError> {
    check(a)?;
    let m = to_faer(a);
    let svd = m.thin_svd().map_err(|_| LinalgError::NoConvergence)?;
    let s = svd.S().column_vector();
    let singular_values: Vec<f64> = (0..s.nrows()).map(|i| s[i]).collect();
    let mut left = to_ndarray(svd.U());
    let mut right = to_ndarray(svd.V());
    fix_signs(&mut left, &mut right);
    Ok(Decomposition {
        singular_values,
        left,
        right,
    })
}

fn fix_signs(left: &mut Array2<f64>, right: &mut Array2<f64>) {
    for j in 0..left.ncols() {
        let col = left.column(j);
        let biggest = col
            .iter()
            .copied()
            .fold(0.0_f64, |acc, v| if v.abs() > acc.abs() { v } else { acc });
        if biggest < 0.0 {
            left.column_mut(j).mapv_inplace(|v| -v);
            right.column_mut(j).mapv_inplace(|v| -v);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn singular_values_of_a_small_matrix_match_the_hand_computed_ones() {
        // [[3, 0], [4, 5]] has singular values sqrt(45) and sqrt(5): AᵀA = [[25, 20], [20, 25]]
        // has eigenvalues 45 and 5 (worked by hand from the characteristic polynomial).
        let a = array![[3.0, 0.0], [4.0, 5.0]];
        let s = singular_values(a.view()).unwrap();
        assert!((s[0] - 45f64.sqrt()).abs() < 1e-12);
        assert!((s[1] - 5f64.sqrt()).abs() < 1e-12);
        let exact = thin_svd(a.view()).unwrap();
        assert!((exact.singular_values[0] - 45f64.sqrt()).abs() < 1e-12);
    }

    #[test]
    fn leading_components_reconstruct_a_rank_one_matrix() {
        let a = array![[1.0, 2.0, 3.0], [2.0, 4.0, 6.0]];
        let dec = leading_components(a.view(), 1).unwrap();
        let u = dec.left.column(0);
        let v = dec.right.column(0);
        for i in 0..2 {
            for j in 0..3 {
                let r = dec.singular_values[0] * u[i] * v[j];
                assert!((r - a[[i, j]]).abs() < 1e-10);
            }
        }
    }

    #[test]
    fn rejects_empty_and_non_finite_input() {
        let empty = Array2::<f64>::zeros((0, 3));
        assert_eq!(singular_values(empty.view()), Err(LinalgError::Empty(0, 3)));
        let bad = array![[1.0, f64::NAN]];
        assert!(leading_components(bad.view(), 1).is_err());
    }
}
