//! The spectrum of a table as the audit reports it: every singular value plus a few
//! leading singular vectors, at the cost of one Gram matrix and its eigenvalues. The
//! column-centred variant (principal components) makes no centred copy of the table.
//!
//! # Method
//! ```text
//! X̃ = X − 1·x̄ᵀ                                  (column means x̄, never stored as a copy;
//!                                                 x̄ = 0 without centring)
//! G = X̃ᵀX̃ (d×d) if n ≥ d,  else X̃X̃ᵀ (n×n)       (accumulated over blocks of 256 rows or
//!                                                 columns, in fixed tiles of 128 columns of G,
//!                                                 lower part only, then mirrored)
//! λ = eigenvalues(G)                             (tridiagonalisation, no eigenvectors)
//! σᵢ = sqrt(max(λᵢ, 0))
//! top-k eigenvectors of G                        (Lanczos with full reorthogonalisation,
//!                                                 checked against the known eigenvalues;
//!                                                 full eigen-decomposition when G is small
//!                                                 or Lanczos does not pass the check)
//! ```
//! The other singular vectors follow from `X̃v = σu` (or `X̃ᵀu = σv`), one pass over the
//! table in blocks.
//!
//! # Accuracy trade-off
//! A backward-stable product and tridiagonal eigensolver give the eigenvalues of G with
//! an absolute error of order `p·ε·λ₁` (ε = 2.2e-16, p = min(n, d)), so
//!
//! ```text
//! |σ̂ᵢ − σᵢ| ≲ p·ε·σ₁²/σᵢ        relative error ≲ p·ε·(σ₁/σᵢ)²
//! ```
//!
//! (the tests hold it against numpy's `gesdd` on sinusoid and Gaussian tables: the worst
//! error seen is 0.37 of this bound). For p = 768 that is 4e-10 relative at σ = 1e-2·σ₁
//! and 4e-2 at 1e-6·σ₁; at the *resolution* `sqrt(p·ε)·σ₁` (4e-7·σ₁ for p = 768) the error
//! is as large as the value, and values below it are rounding noise:
//! [`GramSpectrum::resolution`] reports it. Every number the audit derives from the
//! spectrum (effective rank and energy fractions over the resolved values, plots at a few
//! significant digits) is insensitive to errors of that size; a caller that needs small
//! singular values to full relative accuracy uses [`super::singular_values`], which
//! refines them (and costs up to a full SVD).
//!
//! The leading vectors are accurate to a residual `‖Gv − λv‖ ≤ 1e-11·λ₁`: their angle
//! to the exact eigenvector is at most that residual over the gap to the next eigenvalue
//! (vectors inside a cluster of equal singular values are, as with any method, one
//! basis of the cluster's subspace among many).
//!
//! # Cost and memory
//! Time: `n·min(n,d)²` for the product (half with the triangle only), `4/3·p³` for the
//! eigenvalues (p = min(n, d)), and a few dozen products `G·V` for the leading vectors:
//! a fraction of a thin SVD of the table. Memory: G (p² values) plus the eigensolver's
//! workspace (about another p²) and one block of 256 rows; the table is only read.

use faer::linalg::matmul::matmul;
use faer::{Accum, Mat, MatRef, Par};
use ndarray::{Array1, Array2, ArrayView2, Axis, s};

use super::{Decomposition, LinalgError, backend, check, default_threads, fix_signs};

/// Rows (or columns) per block when accumulating the Gram matrix.
const BLOCK: usize = 256;

/// Columns of G per tile of [`centred_gram`] (fixed: the tiling depends on the shape only).
const TILE: usize = 128;

/// Residual tolerance of the Lanczos vectors, relative to the largest eigenvalue of G.
const LANCZOS_TOLERANCE: f64 = 1e-11;

/// Whether [`gram_spectrum`] subtracts the column means first.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Centring {
    /// Decompose `X − 1·x̄ᵀ` (principal components of the rows).
    Columns,
    /// Decompose `X` as it is.
    None,
}

/// Singular values and leading singular vectors of a table, centred or not.
#[derive(Debug, Clone)]
pub struct GramSpectrum {
    /// The column means that were subtracted (length d; zeros without centring).
    pub mean: Array1<f64>,
    /// Values and the `k` leading vector pairs of `X − 1·x̄ᵀ` (see [`Decomposition`]).
    pub decomposition: Decomposition,
    /// Singular values below this are rounding noise of the Gram route (`sqrt(p·ε)·σ₁`,
    /// p = min(n, d)); values above it carry the relative error of the module doc.
    pub resolution: f64,
    /// How the leading vectors were found: `"lanczos"`, `"full-eigen"` or `"none"` (k = 0).
    pub vector_method: &'static str,
}

/// Spectrum of `a` (n×d), after subtracting each column's mean when `centring` says so,
/// with the `k` leading singular vector pairs; method, accuracy and cost in the module
/// doc.
///
/// `k` is clamped to min(n, d). Vectors of a zero singular value are zero columns; signs
/// are fixed so that the largest-magnitude entry of each left vector is positive.
/// Errors: [`LinalgError::Empty`], [`LinalgError::NonFinite`],
/// [`LinalgError::NoConvergence`].
pub fn gram_spectrum(
    a: ArrayView2<f64>,
    k: usize,
    centring: Centring,
) -> Result<GramSpectrum, LinalgError> {
    check(a)?;
    default_threads();
    let (n, d) = a.dim();
    let mean = match centring {
        Centring::Columns => a.mean_axis(Axis(0)).ok_or(LinalgError::Empty(n, d))?,
        Centring::None => Array1::zeros(d),
    };
    let tall = n >= d;
    let p = n.min(d);
    let k = k.min(p);
    let g = centred_gram(a, &mean, tall);
    // Lanczos pays off when few vectors of a large G are wanted; otherwise one full
    // eigen-decomposition gives values and vectors together.
    let (eigenvalues, vectors, vector_method) = if k == 0 {
        (backend::eigvalsh(g.view())?, Array2::zeros((p, 0)), "none")
    } else if p > 128 && 10 * k < p {
        let eigenvalues = backend::eigvalsh(g.view())?;
        match lanczos_or_none(g.view(), k, &eigenvalues) {
            Some(v) => (eigenvalues, v, "lanczos"),
            None => {
                let (_, vectors) = backend::eigh(g.view())?;
                (
                    eigenvalues,
                    vectors.slice(s![.., ..k]).to_owned(),
                    "full-eigen",
                )
            }
        }
    } else {
        let (eigenvalues, vectors) = backend::eigh(g.view())?;
        (
            eigenvalues,
            vectors.slice(s![.., ..k]).to_owned(),
            "full-eigen",
        )
    };
    let sigma: Vec<f64> = eigenvalues.iter().map(|l| l.max(0.0).sqrt()).collect();
    let resolution = ((p as f64) * f64::EPSILON).sqrt() * sigma[0];
    drop(g);
    // The other side: X̃v = σu (tall) or X̃ᵀu = σv (wide).
    let other = centred_times(a, &mean, vectors.view(), tall);
    let mut other_side = Array2::<f64>::zeros(other.dim());
    let mut gram_side = vectors;
    for (j, &s) in sigma.iter().enumerate().take(k) {
        if s > 0.0 {
            other_side
                .column_mut(j)
                .assign(&other.column(j).mapv(|x| x / s));
        } else {
            gram_side.column_mut(j).fill(0.0);
        }
    }
    let (mut left, mut right) = if tall {
        (other_side, gram_side)
    } else {
        (gram_side, other_side)
    };
    fix_signs(&mut left, &mut right);
    Ok(GramSpectrum {
        mean,
        decomposition: Decomposition {
            singular_values: sigma,
            left,
            right,
        },
        resolution,
        vector_method,
    })
}

/// The Gram matrix of the centred table, p×p (row-major, symmetric), accumulated over
/// blocks so that no centred copy of the table exists.
///
/// `G = Σ_s v_s v_sᵀ` over the samples s (tall: the centred rows, p = d; wide: the
/// centred columns, p = n), in blocks of 256 samples in order. The columns of G are cut
/// into fixed tiles of 128 ([`super::par_map`] runs them on the threads): tile `[j0, j1)`
/// accumulates `G[j0.., j0..j1]` over every block itself, centring the entries it needs
/// into its own buffer. The tiling depends on the shape only, so G is bit-identical for
/// every thread count.
fn centred_gram(a: ArrayView2<f64>, mean: &Array1<f64>, tall: bool) -> Array2<f64> {
    let (n, d) = a.dim();
    let p = n.min(d);
    let samples = if tall { n } else { d };
    // Entry j of sample s of the centred table.
    let entry = |s: usize, j: usize| {
        if tall {
            a[[s, j]] - mean[j]
        } else {
            a[[j, s]] - mean[s]
        }
    };
    let tiles = p.div_ceil(TILE);
    let parts = super::par_map(tiles, |t| {
        let j0 = t * TILE;
        let w = TILE.min(p - j0);
        let h = p - j0;
        let mut out = Mat::<f64>::zeros(h, w);
        // Column-major h × b: column i is sample (start + i), entries j0..p.
        let mut buf = vec![0.0; BLOCK.min(samples) * h];
        for start in (0..samples).step_by(BLOCK) {
            let b = BLOCK.min(samples - start);
            if tall {
                for i in 0..b {
                    let row = a.row(start + i);
                    for (dst, (x, m)) in buf[i * h..(i + 1) * h]
                        .iter_mut()
                        .zip(row.slice(s![j0..]).iter().zip(mean.slice(s![j0..])))
                    {
                        *dst = x - m;
                    }
                }
            } else {
                for j in 0..h {
                    for i in 0..b {
                        buf[i * h + j] = entry(start + i, j0 + j);
                    }
                }
            }
            let bt = MatRef::from_column_major_slice(&buf[..b * h], h, b);
            matmul(
                out.as_mut(),
                Accum::Add,
                bt,
                bt.subrows(0, w).transpose(),
                1.0,
                Par::Seq,
            );
        }
        out
    });
    let mut g = Array2::<f64>::zeros((p, p));
    for (t, part) in parts.iter().enumerate() {
        let j0 = t * TILE;
        for jj in 0..part.ncols() {
            for ii in jj..part.nrows() {
                let (i, j) = (j0 + ii, j0 + jj);
                g[[i, j]] = part[(ii, jj)];
                g[[j, i]] = part[(ii, jj)];
            }
        }
    }
    g
}

/// `X̃·v` (tall: v is d×k, result n×k) or `X̃ᵀ·u` (wide: u is n×k, result d×k), computed
/// over blocks of rows of the table.
fn centred_times(
    a: ArrayView2<f64>,
    mean: &Array1<f64>,
    vectors: ArrayView2<f64>,
    tall: bool,
) -> Array2<f64> {
    let (n, d) = a.dim();
    let k = vectors.ncols();
    let par = Par::Seq;
    let vec_data: Vec<f64> = vectors.t().iter().copied().collect();
    // Column-major (rows(vectors) × k).
    let vm = MatRef::from_column_major_slice(&vec_data, vectors.nrows(), k);
    let mut out = Mat::<f64>::zeros(if tall { n } else { d }, k);
    let mut buf = vec![0.0; BLOCK.min(n) * d];
    for start in (0..n).step_by(BLOCK) {
        let b = BLOCK.min(n - start);
        for (i, row) in a
            .slice(s![start..start + b, ..])
            .rows()
            .into_iter()
            .enumerate()
        {
            for (dst, (x, m)) in buf[i * d..(i + 1) * d].iter_mut().zip(row.iter().zip(mean)) {
                *dst = x - m;
            }
        }
        // Bᵀ as a column-major d×b matrix.
        let bt = MatRef::from_column_major_slice(&buf[..b * d], d, b);
        if tall {
            matmul(
                out.as_mut().subrows_mut(start, b),
                Accum::Replace,
                bt.transpose(),
                vm,
                1.0,
                par,
            );
        } else {
            matmul(out.as_mut(), Accum::Add, bt, vm.subrows(start, b), 1.0, par);
        }
    }
    Array2::from_shape_fn(out.shape(), |(i, j)| out[(i, j)])
}

/// The `k` leading eigenvectors of `g` by [`lanczos`] (`k` ≥ 1, G not all zero), or None.
fn lanczos_or_none(g: ArrayView2<f64>, k: usize, eigenvalues: &[f64]) -> Option<Array2<f64>> {
    if k == 0 || eigenvalues[0] <= 0.0 {
        return None;
    }
    let steps = (10 * k).max(96).min(g.nrows() - 1);
    lanczos(g, k, steps, eigenvalues)
}

/// Lanczos with full reorthogonalisation (Golub & Van Loan, *Matrix Computations*, §10.1)
/// for the `k` largest eigenpairs of `g`, at most `max_steps` steps.
///
/// ```text
/// w = G·v_j − α_j·v_j − β_{j−1}·v_{j−1},  α_j = v_jᵀG·v_j
/// w ← w − V_j(V_jᵀw)  (twice: "twice is enough")      β_j = ‖w‖,  v_{j+1} = w/β_j
/// T_m = tridiag(β, α, β) = S Θ Sᵀ                      Ritz pairs (θ_i, V_m·s_i)
/// residual_i = ‖G·V_m·s_i − θ_i·V_m·s_i‖ = β_m·|S[m−1, i]|
/// ```
///
/// Accepted when every residual of the top k is at most 1e-11·λ₁ *and* every Ritz value
/// matches the known eigenvalue of the same rank (to 1e-9·λ₁): single-vector Lanczos can
/// miss a copy of a repeated eigenvalue, and this check catches it. `None` (the caller
/// falls back to the full eigen-decomposition) when that is not reached in `max_steps`
/// or the Krylov space closes early. Every loop is bounded.
fn lanczos(
    g: ArrayView2<f64>,
    k: usize,
    max_steps: usize,
    eigenvalues: &[f64],
) -> Option<Array2<f64>> {
    let p = g.nrows();
    let par = Par::Seq;
    let data = g.as_slice()?;
    // Symmetric: the row-major buffer read column-major is the same matrix.
    let gm = MatRef::from_column_major_slice(data, p, p);
    let lambda1 = eigenvalues[0];
    let tolerance = LANCZOS_TOLERANCE * lambda1;
    let mut basis = Mat::<f64>::zeros(p, max_steps + 1);
    // A fixed start vector with no special structure (deterministic results): the
    // splitmix64 sequence mapped to [−0.5, 0.5).
    let mut state: u64 = 0x5EED_0FC0_FFEE;
    let mut norm2 = 0.0;
    for i in 0..p {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        let x = (z >> 11) as f64 / 2f64.powi(53) - 0.5;
        basis[(i, 0)] = x;
        norm2 += x * x;
    }
    let scale = 1.0 / norm2.sqrt();
    for i in 0..p {
        basis[(i, 0)] *= scale;
    }
    let mut alpha: Vec<f64> = Vec::with_capacity(max_steps);
    let mut beta: Vec<f64> = Vec::with_capacity(max_steps);
    let mut w = Mat::<f64>::zeros(p, 1);
    let mut coef = Mat::<f64>::zeros(max_steps + 1, 1);
    for j in 0..max_steps {
        matmul(
            w.as_mut(),
            Accum::Replace,
            gm,
            basis.as_ref().subcols(j, 1),
            1.0,
            par,
        );
        let vj = basis.as_ref().subcols(j, 1);
        let a: f64 = (0..p).map(|i| vj[(i, 0)] * w[(i, 0)]).sum();
        alpha.push(a);
        // Full reorthogonalisation against v_0..v_j, twice (it also removes α_j·v_j and
        // β_{j−1}·v_{j−1}, the three-term recurrence's terms).
        let done = basis.as_ref().subcols(0, j + 1);
        for _ in 0..2 {
            let mut c = coef.as_mut().subrows_mut(0, j + 1);
            matmul(
                c.as_mut(),
                Accum::Replace,
                done.transpose(),
                w.as_ref(),
                1.0,
                par,
            );
            matmul(w.as_mut(), Accum::Add, done, c.as_ref(), -1.0, par);
        }
        let b = (0..p).map(|i| w[(i, 0)] * w[(i, 0)]).sum::<f64>().sqrt();
        beta.push(b);
        let m = j + 1;
        let closed = b <= 1e-14 * lambda1;
        let check = m >= k + 8 && (m % 8 == 0 || m == max_steps) || closed;
        if check
            && let Some(v) = ritz_vectors(
                &alpha,
                &beta,
                basis.as_ref().subcols(0, m),
                k,
                tolerance,
                eigenvalues,
            )
        {
            return Some(v);
        }
        if closed {
            return None;
        }
        for i in 0..p {
            basis[(i, j + 1)] = w[(i, 0)] / b;
        }
    }
    None
}

/// The top-`k` Ritz vectors of a Lanczos run of `m = alpha.len()` steps when they pass
/// the acceptance test of [`lanczos`].
fn ritz_vectors(
    alpha: &[f64],
    beta: &[f64],
    basis: MatRef<'_, f64>,
    k: usize,
    tolerance: f64,
    eigenvalues: &[f64],
) -> Option<Array2<f64>> {
    let m = alpha.len();
    if m < k {
        return None;
    }
    let t = Mat::<f64>::from_fn(m, m, |i, j| {
        if i == j {
            alpha[i]
        } else if i == j + 1 {
            beta[j]
        } else if j == i + 1 {
            beta[i]
        } else {
            0.0
        }
    });
    let evd = t.self_adjoint_eigen(faer::Side::Lower).ok()?;
    let theta = evd.S().column_vector();
    let s_mat = evd.U();
    // faer sorts eigenvalues in non-decreasing order: the top k are the last k.
    let residual_scale = beta[m - 1];
    for r in 0..k {
        let c = m - 1 - r;
        if residual_scale * s_mat[(m - 1, c)].abs() > tolerance
            || (theta[c] - eigenvalues[r]).abs() > 1e-9 * eigenvalues[0]
        {
            return None;
        }
    }
    let top = Mat::<f64>::from_fn(m, k, |i, r| s_mat[(i, m - 1 - r)]);
    let v = basis * top;
    Some(Array2::from_shape_fn((basis.nrows(), k), |(i, r)| {
        v[(i, r)]
    }))
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    /// Exact spectrum of a centred matrix from the slow path, for comparison.
    fn exact(a: &Array2<f64>) -> Decomposition {
        let mean = a.mean_axis(Axis(0)).unwrap();
        super::super::thin_svd((a - &mean).view()).unwrap()
    }

    #[test]
    fn tiled_gram_is_bit_identical_for_every_thread_count_and_equals_the_plain_product() {
        // Several tiles of 128 columns and blocks of 256 samples, tall and wide. The
        // reference is the plain product X̃ᵀX̃ of an explicitly centred copy (ndarray's
        // `dot`), equal to rounding; across thread counts the bits must be equal.
        let tall = Array2::from_shape_fn((600, 300), |(i, j)| {
            ((i * 31 + j * 17) % 97) as f64 / 97.0 + (i as f64 * 0.01 * (j % 7) as f64).cos()
        });
        for (a, is_tall) in [(tall.clone(), true), (tall.t().to_owned(), false)] {
            let mean = a.mean_axis(Axis(0)).unwrap();
            let runs: Vec<Array2<f64>> = [1, 2, 3]
                .iter()
                .map(|&n| {
                    super::super::set_threads(n);
                    centred_gram(a.view(), &mean, is_tall)
                })
                .collect();
            super::super::set_threads(1);
            assert!(runs.iter().all(|g| *g == runs[0]), "tall {is_tall}");
            let c = &a - &mean;
            let plain = if is_tall {
                c.t().dot(&c)
            } else {
                c.dot(&c.t())
            };
            let scale = plain.iter().fold(0.0f64, |m, v| m.max(v.abs()));
            let worst = (&plain - &runs[0])
                .iter()
                .fold(0.0f64, |m, v| m.max(v.abs()));
            assert!(worst <= 1e-12 * scale, "tall {is_tall}: {worst} vs {scale}");
            let m = if is_tall { c.view() } else { c.t() };
            let cross = super::super::cross_product(m, m);
            assert!((&cross - &plain).iter().all(|v| v.abs() <= 1e-12 * scale));
        }
    }

    #[test]
    fn centring_is_done_without_changing_the_input_and_matches_the_slow_path() {
        // A small invented table with a large common offset (the mean must be removed
        // exactly) and two clear directions.
        let a = Array2::from_shape_fn((300, 40), |(i, j)| {
            100.0
                + (i as f64 * 0.05 * (j % 5 + 1) as f64).sin()
                + 0.01 * ((i * 7 + j * 3) % 11) as f64
        });
        let before = a.clone();
        let got = gram_spectrum(a.view(), 4, Centring::Columns).unwrap();
        assert_eq!(a, before);
        let want = exact(&a);
        let s1 = want.singular_values[0];
        for (g, w) in got
            .decomposition
            .singular_values
            .iter()
            .zip(&want.singular_values)
        {
            // module doc: |σ̂ − σ| ≲ p·ε·σ₁²/σ with p = 40 values
            if *w > got.resolution {
                assert!(
                    (g - w).abs() <= 40.0 * f64::EPSILON * s1 * s1 / w,
                    "{g} vs {w}"
                );
            }
        }
        for j in 0..4 {
            for i in 0..300 {
                assert!((got.decomposition.left[[i, j]] - want.left[[i, j]]).abs() < 1e-8);
            }
        }
    }

    #[test]
    fn wide_tables_take_the_row_gram() {
        // Invented 30x200 table with distinct leading singular values (69.5, 59.9, 50.3,
        // 21.8 by numpy), so each leading vector is well defined.
        let a = Array2::from_shape_fn((30, 200), |(i, j)| {
            ((i + 1) as f64 * (j + 1) as f64 * 0.0021).sin() * (1.0 + 0.01 * j as f64)
                + 0.05 * ((i * 7 + j * 13) % 17) as f64
        });
        let got = gram_spectrum(a.view(), 3, Centring::Columns).unwrap();
        let want = exact(&a);
        assert_eq!(got.decomposition.singular_values.len(), 30);
        assert_eq!(got.decomposition.left.dim(), (30, 3));
        assert_eq!(got.decomposition.right.dim(), (200, 3));
        for j in 0..3 {
            assert!(
                (got.decomposition.singular_values[j] - want.singular_values[j]).abs()
                    < 1e-10 * want.singular_values[0]
            );
            for i in 0..200 {
                assert!((got.decomposition.right[[i, j]] - want.right[[i, j]]).abs() < 1e-8);
            }
        }
    }

    #[test]
    fn without_centring_the_values_are_those_of_the_table() {
        // [[3, 0], [4, 5]] has singular values sqrt(45) and sqrt(5) (worked by hand:
        // AᵀA = [[25, 20], [20, 25]] has eigenvalues 45 and 5).
        let a = array![[3.0, 0.0], [4.0, 5.0]];
        let got = gram_spectrum(a.view(), 2, Centring::None).unwrap();
        assert!((got.decomposition.singular_values[0] - 45f64.sqrt()).abs() < 1e-14);
        assert!((got.decomposition.singular_values[1] - 5f64.sqrt()).abs() < 1e-14);
        assert!(got.mean.iter().all(|&m| m == 0.0));
    }

    #[test]
    fn constant_and_one_row_tables_centre_to_zero() {
        let c = array![[1.0, 2.0], [1.0, 2.0], [1.0, 2.0]];
        let got = gram_spectrum(c.view(), 2, Centring::Columns).unwrap();
        assert!(got.decomposition.singular_values.iter().all(|&s| s == 0.0));
        assert!(got.decomposition.left.iter().all(|&v| v == 0.0));
        let one = array![[1.0, 2.0, 3.0]];
        let got = gram_spectrum(one.view(), 1, Centring::Columns).unwrap();
        assert_eq!(got.decomposition.singular_values, vec![0.0]);
    }
}
