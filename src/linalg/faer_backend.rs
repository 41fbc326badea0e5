//! Pure-Rust backend of the linalg seam (faer): the default, needs nothing installed.

use faer::{Mat, MatRef, Side};
use ndarray::{Array2, ArrayView2};

use super::{LinalgError, SvdParts, faer_to_ndarray, standard};

/// faer runs with `Par::Seq`, set once by the seam (`super::set_threads`); nothing to do.
pub(super) fn set_threads(_n: usize) {}

fn view<'a>(data: &'a [f64], a: ArrayView2<f64>) -> MatRef<'a, f64> {
    MatRef::from_row_major_slice(data, a.nrows(), a.ncols())
}

/// Eigenvalues (non-increasing) and eigenvectors (columns) of a symmetric matrix.
pub(super) fn eigh(g: ArrayView2<f64>) -> Result<(Vec<f64>, Array2<f64>), LinalgError> {
    let data = standard(g);
    let evd = view(&data, g)
        .self_adjoint_eigen(Side::Lower)
        .map_err(|_| LinalgError::NoConvergence)?;
    let n = g.nrows();
    let s = evd.S().column_vector();
    let u = evd.U();
    // faer sorts in non-decreasing order; we hand out the largest first.
    let values = (0..n).map(|i| s[n - 1 - i]).collect();
    let vectors = Array2::from_shape_fn((n, n), |(r, c)| u[(r, n - 1 - c)]);
    Ok((values, vectors))
}

/// Eigenvalues of a symmetric matrix, non-increasing.
pub(super) fn eigvalsh(g: ArrayView2<f64>) -> Result<Vec<f64>, LinalgError> {
    let data = standard(g);
    let mut values = view(&data, g)
        .self_adjoint_eigenvalues(Side::Lower)
        .map_err(|_| LinalgError::NoConvergence)?;
    values.reverse();
    Ok(values)
}

/// Exact thin SVD: values (non-increasing), U (n×p) and V (d×p), p = min(n, d).
pub(super) fn thin_svd(a: ArrayView2<f64>) -> Result<SvdParts, LinalgError> {
    let data = standard(a);
    let svd = view(&data, a)
        .thin_svd()
        .map_err(|_| LinalgError::NoConvergence)?;
    let s = svd.S().column_vector();
    let values = (0..s.nrows()).map(|i| s[i]).collect();
    Ok((values, faer_to_ndarray(svd.U()), faer_to_ndarray(svd.V())))
}

/// Singular values only (non-increasing), by the exact SVD without vectors.
pub(super) fn svd_values(a: ArrayView2<f64>) -> Result<Vec<f64>, LinalgError> {
    let data = standard(a);
    view(&data, a)
        .singular_values()
        .map_err(|_| LinalgError::NoConvergence)
}

/// An orthonormal basis of the column space of a full-column-rank `a` (thin Q of QR).
pub(super) fn orthonormal_columns(a: ArrayView2<f64>) -> Result<Array2<f64>, LinalgError> {
    let data = standard(a);
    let q: Mat<f64> = view(&data, a).qr().compute_thin_Q();
    Ok(faer_to_ndarray(q.as_ref()))
}
