//! The one seam for singular-value and eigen work.
//!
//! Every analysis that needs a decomposition calls this module and nothing else, so the
//! backend can change without touching the analyses: pure-Rust `faer` by default (a fresh
//! machine needs nothing installed), system LAPACK through `ndarray-linalg` behind the
//! `lapack` cargo feature (`gesdd` via `SVDDC` for exact SVDs, `syev` via `Eigh`/`EigValsh`
//! for symmetric eigenproblems). Both backends give the same results to rounding and the
//! test suite checks both against numpy.
//!
//! # Method and accuracy
//! The audit needs all singular values of a table but only a few leading singular
//! vectors. Instead of a full thin SVD we form the Gram matrix of the smaller side
//! (`MᵀM` where `M` is `A` or `Aᵀ`, whichever has at least as many rows as columns) with
//! faer's matrix product, and take its symmetric eigen-decomposition:
//!
//! ```text
//! MᵀM = V Λ Vᵀ        σᵢ = sqrt(max(λᵢ, 0))        U = M V Σ⁻¹
//! ```
//!
//! Forming the Gram matrix squares the condition number: a backward-stable eigensolver
//! returns λᵢ with an absolute error of order `ε·σ₁²`, so σᵢ carries an absolute error of
//! order `ε·σ₁²/σᵢ`, a *relative* error of order `ε·(σ₁/σᵢ)²` (ε = 2.2e-16). That is
//! ≈ 1e-12 at `σᵢ = 1e-2·σ₁` but ≈ 1e-4 at `σᵢ = 1e-6·σ₁`, and values below
//! `sqrt(ε)·σ₁ ≈ 1.5e-8·σ₁` are noise (measured with numpy on the 512×768 Vaswani table:
//! relative error 6e-13 for values ≥ 1e-3·σ₁, 1e-7 down to 1e-6·σ₁).
//!
//! So the small values are refined. With `τ = 2e-3·σ̂₁` (the trusted range: relative
//! error at most `ε·2.5·10⁵ ≈ 6e-11` in theory, 6e-13 measured) split the eigenvectors
//! into `V_L` (σ̂ ≥ τ) and `V_S` (σ̂ < τ); the subspaces themselves are accurate to an
//! angle of about `ε·σ₁²/τ² = 6e-11`. (τ was 1e-2 at first; the audit benchmark showed that on
//! noisy tables most values fell below it, turning the refinement into a near-full SVD.) Project the small part off the
//! large part's column space and take an exact SVD of what is left:
//!
//! ```text
//! Q_L = orth(M V_L)          B = (I − Q_L Q_Lᵀ) M V_S          σ_S = svd(B)
//! ```
//!
//! `B` holds only the small singular triplets (the leak of large directions into `M V_S`
//! is removed to second order by the projection), so an exact SVD of the n×|S| matrix `B`
//! gives them with absolute error of order `ε·σ₁`, the accuracy of a direct SVD of `A`
//! (numpy's `gesdd`). Cost: nothing extra when every σ is within a factor 500 of σ₁ (noise
//! tables), up to one exact SVD of an n×|S| matrix for smooth tables whose spectrum falls
//! off quickly. [`thin_svd`] is the plain exact path, kept for tests and callers that need
//! every singular vector.
//!
//! # Threads and determinism
//! Every result is bit-identical for every thread count. The backends always run
//! sequentially (faer with `Par::Seq`, OpenBLAS with one thread): their parallel
//! kernels split sums differently for different thread counts. The parallelism is our
//! own and coarse: [`par_map`] runs independent tasks (tiles of a product, the two
//! tables of a comparison) on up to [`threads`] scoped threads, and each task is a
//! sequential computation whose split into tiles is fixed by the shapes alone, so the
//! order of every floating-point sum does not depend on which thread ran it or how
//! many there were. [`set_threads`] sets the count (1 until it is called).

use std::cell::Cell;
use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};

use faer::linalg::matmul::matmul;
use faer::{Accum, Mat, MatRef, Par};
use ndarray::{Array1, Array2, ArrayView2, s};

mod gram;
pub use gram::{Centring, GramSpectrum, gram_spectrum};

#[cfg(not(feature = "lapack"))]
mod faer_backend;
#[cfg(not(feature = "lapack"))]
use faer_backend as backend;
#[cfg(feature = "lapack")]
mod lapack_backend;
#[cfg(feature = "lapack")]
use lapack_backend as backend;

/// Name of the backend compiled in: `"faer"` or `"lapack"`.
pub const BACKEND: &str = if cfg!(feature = "lapack") {
    "lapack"
} else {
    "faer"
};

/// Exact thin SVD parts from a backend: values (non-increasing), U (n×p), V (d×p).
type SvdParts = (Vec<f64>, Array2<f64>, Array2<f64>);

/// Relative threshold below which Gram-matrix singular values are refined (see module doc).
const REFINE_BELOW: f64 = 2e-3;

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

static THREADS_SET: AtomicBool = AtomicBool::new(false);
static THREADS: AtomicUsize = AtomicUsize::new(1);

thread_local! {
    /// Set inside a [`par_map`] worker, so nested calls run sequentially in it.
    static IN_WORKER: Cell<bool> = const { Cell::new(false) };
}

/// Sets the number of threads [`par_map`] may use (1 = sequential, the default); `0`
/// is treated as 1. Results do not depend on it (module doc, "Threads and
/// determinism"); the backends themselves always run on one thread.
pub fn set_threads(n: usize) {
    THREADS.store(n.max(1), Ordering::Relaxed);
    default_threads();
}

/// The thread count set by [`set_threads`] (1 until then).
pub fn threads() -> usize {
    THREADS.load(Ordering::Relaxed).max(1)
}

/// The number of cores this process may use (1 when it cannot be told).
pub fn available_threads() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// The backends run sequentially, always (see the module doc).
fn default_threads() {
    if !THREADS_SET.swap(true, Ordering::Relaxed) {
        faer::set_global_parallelism(Par::Seq);
        backend::set_threads(1);
    }
}

/// `f(0), …, f(count − 1)` in index order, computed on up to [`threads`] scoped
/// threads (each takes the next unclaimed index). Each `f(i)` runs on one thread with
/// sequential backends, so the results are those of a sequential loop, bit for bit.
/// Called inside a worker, it runs sequentially there.
pub fn par_map<T: Send>(count: usize, f: impl Fn(usize) -> T + Sync) -> Vec<T> {
    default_threads();
    let workers = if IN_WORKER.with(Cell::get) {
        1
    } else {
        threads().min(count)
    };
    if workers <= 1 {
        return (0..count).map(f).collect();
    }
    let next = AtomicUsize::new(0);
    let slots: Vec<Mutex<Option<T>>> = (0..count).map(|_| Mutex::new(None)).collect();
    std::thread::scope(|scope| {
        for _ in 0..workers {
            scope.spawn(|| {
                IN_WORKER.with(|w| w.set(true));
                loop {
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    if i >= count {
                        break;
                    }
                    let value = f(i);
                    if let Ok(mut slot) = slots[i].lock() {
                        *slot = Some(value);
                    }
                }
            });
        }
    });
    slots
        .into_iter()
        .enumerate()
        .map(|(i, slot)| match slot.into_inner().ok().flatten() {
            Some(v) => v,
            // Only reachable if a worker panicked, which `scope` re-raises first.
            None => f(i),
        })
        .collect()
}

/// Columns per tile of the parallel products: fixed, so the tiling (and every sum's
/// order) depends on the shapes only.
const TILE: usize = 128;

/// `xᵀ·y` for row-major `x` (r×p) and `y` (r×q), p×q, over fixed tiles of 128 columns
/// of `y` run by [`par_map`]: bit-identical for every thread count.
pub fn cross_product(x: ArrayView2<f64>, y: ArrayView2<f64>) -> Array2<f64> {
    default_threads();
    let (xs, ys) = (standard(x), standard(y));
    let (r, p, q) = (x.nrows(), x.ncols(), y.ncols());
    let xm = MatRef::from_row_major_slice(&xs, r, p);
    let ym = MatRef::from_row_major_slice(&ys, r, q);
    let tiles = q.div_ceil(TILE);
    let parts = par_map(tiles, |t| {
        let (j0, w) = (t * TILE, TILE.min(q - t * TILE));
        let mut out = Mat::<f64>::zeros(p, w);
        matmul(
            out.as_mut(),
            Accum::Replace,
            xm.transpose(),
            ym.subcols(j0, w),
            1.0,
            Par::Seq,
        );
        out
    });
    let mut out = Array2::<f64>::zeros((p, q));
    for (t, part) in parts.iter().enumerate() {
        for i in 0..p {
            for j in 0..part.ncols() {
                out[[i, t * TILE + j]] = part[(i, j)];
            }
        }
    }
    out
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

/// A contiguous row-major copy unless `a` already is one.
fn standard<'a>(a: ArrayView2<'a, f64>) -> std::borrow::Cow<'a, [f64]> {
    match a.to_slice() {
        Some(s) => std::borrow::Cow::Borrowed(s),
        None => std::borrow::Cow::Owned(a.iter().copied().collect()),
    }
}

fn faer_to_ndarray(m: MatRef<'_, f64>) -> Array2<f64> {
    Array2::from_shape_fn((m.nrows(), m.ncols()), |(i, j)| m[(i, j)])
}

/// `lhsᵀ·rhs` with faer's matrix product (much faster than ndarray's `dot` on big
/// tables), for row-major `lhs` (r×p) and `rhs` (r×q); the result is p×q.
fn tr_times(lhs: ArrayView2<f64>, rhs: ArrayView2<f64>) -> Array2<f64> {
    let (l, r) = (standard(lhs), standard(rhs));
    let lm = MatRef::from_row_major_slice(&l, lhs.nrows(), lhs.ncols());
    let rm = MatRef::from_row_major_slice(&r, rhs.nrows(), rhs.ncols());
    let mut out = Mat::<f64>::zeros(lhs.ncols(), rhs.ncols());
    matmul(
        out.as_mut(),
        Accum::Replace,
        lm.transpose(),
        rm,
        1.0,
        Par::Seq,
    );
    faer_to_ndarray(out.as_ref())
}

/// `lhs·rhs` with faer's matrix product; `lhs` r×p, `rhs` p×q.
fn times(lhs: ArrayView2<f64>, rhs: ArrayView2<f64>) -> Array2<f64> {
    let (l, r) = (standard(lhs), standard(rhs));
    let lm = MatRef::from_row_major_slice(&l, lhs.nrows(), lhs.ncols());
    let rm = MatRef::from_row_major_slice(&r, rhs.nrows(), rhs.ncols());
    let mut out = Mat::<f64>::zeros(lhs.nrows(), rhs.ncols());
    matmul(out.as_mut(), Accum::Replace, lm, rm, 1.0, Par::Seq);
    faer_to_ndarray(out.as_ref())
}

/// `a` if it has at least as many rows as columns, else `aᵀ`, as an owned row-major
/// matrix `M`, and whether it was transposed.
fn tall(a: ArrayView2<f64>) -> (Array2<f64>, bool) {
    if a.nrows() >= a.ncols() {
        (a.as_standard_layout().into_owned(), false)
    } else {
        (a.t().as_standard_layout().into_owned(), true)
    }
}

/// Symmetric eigen-decomposition of `g` (square, symmetric): eigenvalues in
/// non-increasing order and the matching eigenvectors as columns.
///
/// Returns [`LinalgError::Empty`] for a 0×0 input and [`LinalgError::NonFinite`] when
/// `g` holds NaN or infinities.
pub fn symmetric_eigen(g: ArrayView2<f64>) -> Result<(Array1<f64>, Array2<f64>), LinalgError> {
    check(g)?;
    default_threads();
    let (values, vectors) = backend::eigh(g)?;
    Ok((Array1::from(values), vectors))
}

/// All singular values of `a`, non-negative and in non-increasing order.
///
/// Gram-matrix eigenvalues with the refinement of small values described in the module
/// docs: values ≥ 1e-6·σ₁ agree with a direct SVD (numpy) to about 1e-10 relative or
/// better. Errors: [`LinalgError::Empty`], [`LinalgError::NonFinite`],
/// [`LinalgError::NoConvergence`].
pub fn singular_values(a: ArrayView2<f64>) -> Result<Vec<f64>, LinalgError> {
    check(a)?;
    default_threads();
    let (m, _) = tall(a);
    let g = tr_times(m.view(), m.view());
    let values = backend::eigvalsh(g.view())?;
    let sigma: Vec<f64> = values.iter().map(|l| l.max(0.0).sqrt()).collect();
    let tau = REFINE_BELOW * sigma[0];
    if sigma.iter().all(|&s| s >= tau) || sigma[0] == 0.0 {
        return Ok(sigma);
    }
    // Some values are in the inaccurate range: redo with vectors and refine.
    Ok(gram_decomposition(m.view(), g.view(), 0)?.singular_values)
}

/// Gram eigen-decomposition of a tall `m` plus the refinement of small singular values;
/// returns all values and the `k` leading pairs (left: rows of `m`, right: columns).
fn gram_decomposition(
    m: ArrayView2<f64>,
    g: ArrayView2<f64>,
    k: usize,
) -> Result<Decomposition, LinalgError> {
    let (r, c) = m.dim();
    let (eigvals, eigvecs) = backend::eigh(g)?;
    let mut sigma: Vec<f64> = eigvals.iter().map(|l| l.max(0.0).sqrt()).collect();
    let tau = REFINE_BELOW * sigma[0];
    let n_large = if sigma[0] > 0.0 {
        sigma.iter().take_while(|&&s| s >= tau).count()
    } else {
        0
    };
    let k = k.min(c);
    let mut left = Array2::<f64>::zeros((r, k));
    let mut right = Array2::<f64>::zeros((c, k));
    // Large part: U = M V Σ⁻¹ for the leading min(k, n_large) pairs.
    let k_large = k.min(n_large);
    if k_large > 0 {
        let v = eigvecs.slice(s![.., ..k_large]);
        let mv = times(m, v);
        for (j, &sj) in sigma.iter().enumerate().take(k_large) {
            left.column_mut(j).assign(&mv.column(j).mapv(|x| x / sj));
            right.column_mut(j).assign(&v.column(j));
        }
    }
    if n_large < c && sigma[0] > 0.0 {
        let v_l = eigvecs.slice(s![.., ..n_large]);
        let v_s = eigvecs.slice(s![.., n_large..]);
        let mut b = times(m, v_s);
        if n_large > 0 {
            let q = backend::orthonormal_columns(times(m, v_l).view())?;
            // Project twice: one classical Gram–Schmidt pass leaves O(ε·κ) residue.
            for _ in 0..2 {
                let coef = tr_times(q.view(), b.view());
                b -= &times(q.view(), coef.view());
            }
        }
        let small = backend::thin_svd(b.view())?;
        for (i, s) in small.0.iter().enumerate() {
            sigma[n_large + i] = *s;
        }
        for j in k_large..k {
            let idx = j - n_large;
            left.column_mut(j).assign(&small.1.column(idx));
            right
                .column_mut(j)
                .assign(&times(v_s, small.2.slice(s![.., idx..idx + 1])).column(0));
        }
    }
    // Values from the refinement are not above τ, but keep the order guarantee exactly.
    sigma.sort_by(|x, y| y.total_cmp(x));
    Ok(Decomposition {
        singular_values: sigma,
        left,
        right,
    })
}

/// All singular values of `a` and its `k` leading singular vector pairs.
///
/// `k` is clamped to min(n, d). Singular values as in [`singular_values`]. Vectors
/// belonging to a zero singular value are returned as zero columns (they span no
/// direction of the data). Signs are fixed so that the largest-magnitude entry of each
/// left vector is positive, which makes results reproducible across backends.
pub fn leading_components(a: ArrayView2<f64>, k: usize) -> Result<Decomposition, LinalgError> {
    check(a)?;
    default_threads();
    let (m, transposed) = tall(a);
    let g = tr_times(m.view(), m.view());
    let mut dec = gram_decomposition(m.view(), g.view(), k)?;
    if transposed {
        std::mem::swap(&mut dec.left, &mut dec.right);
    }
    for j in 0..dec.left.ncols() {
        if dec.singular_values[j] == 0.0 {
            dec.left.column_mut(j).fill(0.0);
            dec.right.column_mut(j).fill(0.0);
        }
    }
    fix_signs(&mut dec.left, &mut dec.right);
    Ok(dec)
}

/// All singular values of `a` by the exact SVD without vectors (absolute error of
/// order `p·ε·σ₁`, as numpy's `gesdd`); cheaper than [`thin_svd`] by the vectors.
pub fn exact_singular_values(a: ArrayView2<f64>) -> Result<Vec<f64>, LinalgError> {
    check(a)?;
    default_threads();
    let mut values = backend::svd_values(a)?;
    values.sort_by(|x, y| y.total_cmp(x));
    Ok(values)
}

/// The exact thin SVD (all singular vectors), the slow path: `gesdd` with the `lapack`
/// feature, faer's SVD otherwise.
pub fn thin_svd(a: ArrayView2<f64>) -> Result<Decomposition, LinalgError> {
    check(a)?;
    default_threads();
    let (singular_values, mut left, mut right) = backend::thin_svd(a)?;
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
    fn refined_small_values_of_a_graded_matrix_are_accurate() {
        // diag(1, 1e-3, 1e-6, 1e-9) rotated by an orthogonal matrix on each side has exactly
        // these singular values (definition of the SVD). The Gram path alone would give
        // 1e-9 with a relative error near 1 and 1e-6 with about 1e-4.
        let q = |n: usize, t: f64| {
            // Householder reflection I − 2wwᵀ/wᵀw with w_i = cos(t·(i+1)): orthogonal.
            let w: Vec<f64> = (0..n).map(|i| (t * (i + 1) as f64).cos()).collect();
            let ww: f64 = w.iter().map(|x| x * x).sum();
            Array2::from_shape_fn((n, n), |(i, j)| {
                f64::from(u8::from(i == j)) - 2.0 * w[i] * w[j] / ww
            })
        };
        let d = [1.0, 1e-3, 1e-6, 1e-9];
        let sigma = Array2::from_shape_fn((6, 4), |(i, j)| if i == j { d[i] } else { 0.0 });
        let a = q(6, 0.7).dot(&sigma).dot(&q(4, 1.3));
        for s in [
            singular_values(a.view()).unwrap(),
            leading_components(a.view(), 4).unwrap().singular_values,
        ] {
            for (got, want) in s.iter().zip(d) {
                assert!((got - want).abs() <= 1e-14, "{got} vs {want}");
            }
        }
        let dec = leading_components(a.view(), 4).unwrap();
        // A v_j = σ_j u_j for every returned pair, including the refined ones.
        for j in 0..4 {
            let av = a.dot(&dec.right.column(j));
            let su = dec.left.column(j).mapv(|x| x * dec.singular_values[j]);
            assert!((&av - &su).iter().all(|e| e.abs() < 1e-14));
        }
    }

    #[test]
    fn rejects_empty_and_non_finite_input() {
        let empty = Array2::<f64>::zeros((0, 3));
        assert_eq!(singular_values(empty.view()), Err(LinalgError::Empty(0, 3)));
        let bad = array![[1.0, f64::NAN]];
        assert!(leading_components(bad.view(), 1).is_err());
    }

    #[test]
    fn all_zero_and_wide_matrices_work() {
        let z = Array2::<f64>::zeros((3, 5));
        assert_eq!(singular_values(z.view()).unwrap(), vec![0.0; 3]);
        let dec = leading_components(z.view(), 2).unwrap();
        assert!(dec.left.iter().all(|&v| v == 0.0));
        let wide = array![[1.0, 0.0, 0.0], [0.0, 2.0, 0.0]];
        let dec = leading_components(wide.view(), 2).unwrap();
        assert_eq!(dec.left.dim(), (2, 2));
        assert_eq!(dec.right.dim(), (3, 2));
        assert!((dec.singular_values[0] - 2.0).abs() < 1e-15);
        assert!((dec.right[[1, 0]].abs() - 1.0).abs() < 1e-15);
    }
}
