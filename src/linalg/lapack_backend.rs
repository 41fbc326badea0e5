//! System-LAPACK backend of the linalg seam (`lapack` feature, ndarray-linalg over
//! OpenBLAS): `gesdd` (`SVDDC`, thin, never the full U) and `syev` (`Eigh`, `EigValsh`).

use ndarray::{Array2, ArrayView2, s};
use ndarray_linalg::{EigValsh, Eigh, JobSvd, QR, SVDDC, UPLO};

use super::{LinalgError, SvdParts};

unsafe extern "C" {
    fn openblas_set_num_threads(num_threads: std::ffi::c_int);
}

/// Sets OpenBLAS's thread count.
pub(super) fn set_threads(n: usize) {
    let n = std::ffi::c_int::try_from(n).unwrap_or(std::ffi::c_int::MAX);
    // SAFETY: plain OpenBLAS entry point taking an int; linked in by the
    // `openblas-system` feature of ndarray-linalg, which this backend requires.
    unsafe { openblas_set_num_threads(n) }
}

fn err(_: ndarray_linalg::error::LinalgError) -> LinalgError {
    LinalgError::NoConvergence
}

/// Eigenvalues (non-increasing) and eigenvectors (columns) of a symmetric matrix.
pub(super) fn eigh(g: ArrayView2<f64>) -> Result<(Vec<f64>, Array2<f64>), LinalgError> {
    let (vals, vecs) = g.eigh(UPLO::Lower).map_err(err)?;
    let n = vals.len();
    let values = (0..n).map(|i| vals[n - 1 - i]).collect();
    let vectors = vecs.slice(s![.., ..;-1]).to_owned();
    Ok((values, vectors))
}

/// Eigenvalues of a symmetric matrix, non-increasing.
pub(super) fn eigvalsh(g: ArrayView2<f64>) -> Result<Vec<f64>, LinalgError> {
    let vals = g.eigvalsh(UPLO::Lower).map_err(err)?;
    Ok(vals.iter().rev().copied().collect())
}

/// Exact thin SVD via `gesdd`: values (non-increasing), U (n×p) and V (d×p).
pub(super) fn thin_svd(a: ArrayView2<f64>) -> Result<SvdParts, LinalgError> {
    let (u, sv, vt) = a.svddc(JobSvd::Some).map_err(err)?;
    let (Some(u), Some(vt)) = (u, vt) else {
        return Err(LinalgError::NoConvergence);
    };
    Ok((sv.to_vec(), u, vt.t().to_owned()))
}

/// Singular values only (non-increasing), by `gesdd` without vectors.
pub(super) fn svd_values(a: ArrayView2<f64>) -> Result<Vec<f64>, LinalgError> {
    let (_, sv, _) = a.svddc(JobSvd::None).map_err(err)?;
    Ok(sv.to_vec())
}

/// An orthonormal basis of the column space of a full-column-rank `a` (thin Q of QR).
pub(super) fn orthonormal_columns(a: ArrayView2<f64>) -> Result<Array2<f64>, LinalgError> {
    let (q, _r) = a.qr().map_err(err)?;
    Ok(q)
}
