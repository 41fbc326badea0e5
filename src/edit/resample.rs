//! Resampling of position tables along position (1-D) and over a patch grid (2-D).
//!
//! Source coordinates follow `torch.nn.functional.interpolate` (common practice in the
//! code that resizes position tables; its formulas restated here):
//!
//! ```text
//! align_corners=True   x = j · (n_in − 1)/(n_out − 1)        (0 when n_out = 1)
//! align_corners=False  x = (j + ½) · n_in/n_out − ½           (linear: clamped at 0)
//! linear   v = (1 − λ)·s[⌊x⌋] + λ·s[min(⌊x⌋ + 1, n_in − 1)],  λ = x − ⌊x⌋
//! cubic    v = Σ_{k=−1..2} w_k(λ) · s[clamp(⌊x⌋ + k, 0, n_in − 1)]
//!          Keys (1981) cubic convolution with a = −0.75:
//!          w(t) = (a+2)|t|³ − (a+3)|t|² + 1          for |t| ≤ 1
//!          w(t) = a|t|³ − 5a|t|² + 8a|t| − 4a        for 1 < |t| < 2
//! ```
//!
//! 1-D tables use `align_corners=True`: the first and the last source row land exactly
//! on the first and the last new row, so position 0 keeps its vector, nothing is
//! extrapolated, and new position j reads source position j·(t−1)/(N−1) ≈ j·t/N, the
//! down-scaled index of position interpolation (Chen et al. 2023). 2-D grids use
//! `align_corners=False` (each patch a cell, centres aligned), the convention of the
//! code that resizes vision position grids for a new image size (common practice, e.g.
//! a `mode="bicubic", align_corners=False` call on the (1, dim, h, w) grid). No
//! anti-aliasing is applied when a grid shrinks.

use ndarray::{Array2, ArrayView2, Axis};

/// How a 1-D table or a grid is resampled.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Interp {
    /// Linear (bilinear on a grid).
    Linear,
    /// Keys cubic convolution, a = −0.75 (bicubic on a grid).
    Cubic,
}

/// The Keys cubic-convolution coefficient `a` (the value torch uses).
pub const CUBIC_A: f64 = -0.75;

/// Source coordinate of output index `j` (see the module docs).
pub fn source_coordinate(j: usize, n_in: usize, n_out: usize, align_corners: bool) -> f64 {
    if align_corners {
        if n_out > 1 {
            j as f64 * (n_in as f64 - 1.0) / (n_out as f64 - 1.0)
        } else {
            0.0
        }
    } else {
        (j as f64 + 0.5) * n_in as f64 / n_out as f64 - 0.5
    }
}

/// The (index, weight) pairs that make output `j` from `n_in` source samples.
pub fn taps(
    j: usize,
    n_in: usize,
    n_out: usize,
    interp: Interp,
    align_corners: bool,
) -> Vec<(usize, f64)> {
    let last = n_in.saturating_sub(1) as i64;
    let clamp = |i: i64| i.clamp(0, last) as usize;
    let x = source_coordinate(j, n_in, n_out, align_corners);
    match interp {
        Interp::Linear => {
            let x = x.max(0.0);
            let i0 = (x.floor() as i64).min(last);
            let lambda = (x - i0 as f64).clamp(0.0, 1.0);
            let i1 = if i0 < last { i0 + 1 } else { i0 };
            vec![(clamp(i0), 1.0 - lambda), (clamp(i1), lambda)]
        }
        Interp::Cubic => {
            let i0 = x.floor();
            let t = x - i0;
            let i0 = i0 as i64;
            let w = cubic_weights(t);
            (0..4).map(|k| (clamp(i0 - 1 + k as i64), w[k])).collect()
        }
    }
}

/// The four Keys weights for offsets −1, 0, 1, 2 at fraction `t` ∈ [0, 1).
pub fn cubic_weights(t: f64) -> [f64; 4] {
    let a = CUBIC_A;
    let near = |x: f64| ((a + 2.0) * x - (a + 3.0)) * x * x + 1.0;
    let far = |x: f64| ((a * x - 5.0 * a) * x + 8.0 * a) * x - 4.0 * a;
    [far(t + 1.0), near(t), near(1.0 - t), far(2.0 - t)]
}

/// Resamples the rows of `src` (positions × dim) to `n_out` rows along position.
pub fn resample_rows(
    src: ArrayView2<f64>,
    n_out: usize,
    interp: Interp,
    align_corners: bool,
) -> Array2<f64> {
    let (n_in, d) = src.dim();
    let mut out = Array2::zeros((n_out, d));
    if n_in == 0 {
        return out;
    }
    for j in 0..n_out {
        let mut row = out.row_mut(j);
        for (i, w) in taps(j, n_in, n_out, interp, align_corners) {
            if w != 0.0 {
                row.scaled_add(w, &src.row(i));
            }
        }
    }
    out
}

/// Tiles the rows of `src` to `n_out` rows: row j is `src[j mod n]` (a table extended by
/// copying its trained rows, as in Beltagy et al. 2020).
pub fn tile_rows(src: ArrayView2<f64>, n_out: usize) -> Array2<f64> {
    let (n, d) = src.dim();
    let mut out = Array2::zeros((n_out, d));
    if n == 0 {
        return out;
    }
    for j in 0..n_out {
        out.row_mut(j).assign(&src.row(j % n));
    }
    out
}

/// Fills rows `start..end` of `table` by linear interpolation along position between
/// row `start − 1` and row `end` (both must exist): row r = (1−λ)·a + λ·b with
/// λ = (r − start + 1)/(end − start + 1).
pub fn fill_gap_linear(table: &mut Array2<f64>, start: usize, end: usize) {
    assert!(start >= 1 && end < table.nrows() && start <= end);
    let a = table.row(start - 1).to_owned();
    let b = table.row(end).to_owned();
    let span = (end - start + 1) as f64;
    for r in start..end {
        let lambda = (r - start + 1) as f64 / span;
        let mut row = table.row_mut(r);
        row.assign(&a);
        row *= 1.0 - lambda;
        row.scaled_add(lambda, &b);
    }
}

/// Resizes a patch grid: `grid` holds `h·w` rows in row-major order (row index
/// `y·w + x`, as a `(1, h, w, dim)` grid flattens), the result `h2·w2` rows in the same
/// order. Separable: along the width, then along the height, `align_corners=False`.
pub fn resize_grid(
    grid: ArrayView2<f64>,
    h: usize,
    w: usize,
    h2: usize,
    w2: usize,
    interp: Interp,
) -> Array2<f64> {
    let d = grid.ncols();
    assert_eq!(grid.nrows(), h * w);
    // Along the width: each of the h rows of patches (w × d) to w2 × d.
    let mut wide = Array2::zeros((h * w2, d));
    for y in 0..h {
        let line = grid.slice(ndarray::s![y * w..(y + 1) * w, ..]);
        let r = resample_rows(line, w2, interp, false);
        wide.slice_mut(ndarray::s![y * w2..(y + 1) * w2, ..])
            .assign(&r);
    }
    // Along the height: each of the w2 columns (h × d) to h2 × d.
    let mut out = Array2::zeros((h2 * w2, d));
    for x in 0..w2 {
        let column = wide.select(Axis(0), &(0..h).map(|y| y * w2 + x).collect::<Vec<_>>());
        let r = resample_rows(column.view(), h2, interp, false);
        for y in 0..h2 {
            out.row_mut(y * w2 + x).assign(&r.row(y));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn keys_weights_sum_to_one_and_interpolate_samples() {
        // Keys (1981): the kernel is 1 at 0 and 0 at ±1, ±2, and its weights sum to 1.
        for t in [0.0, 0.1, 0.25, 0.5, 0.9] {
            let w = cubic_weights(t);
            assert!((w.iter().sum::<f64>() - 1.0).abs() < 1e-15, "{t}: {w:?}");
        }
        assert_eq!(cubic_weights(0.0), [0.0, 1.0, 0.0, 0.0]);
    }

    #[test]
    fn align_corners_keeps_the_end_rows_and_a_linear_ramp_is_exact() {
        // A ramp (row r = r·[1, 2]) is reproduced exactly by linear interpolation; Keys'
        // kernel reproduces degree-1 polynomials only for a = −0.5 (Keys 1981), so with
        // torch's a = −0.75 only constants are exact. Both keep the end rows.
        let src = Array2::from_shape_fn((9, 2), |(r, c)| r as f64 * (c + 1) as f64);
        for interp in [Interp::Linear, Interp::Cubic] {
            let out = resample_rows(src.view(), 33, interp, true);
            assert_eq!(out.row(0), src.row(0));
            assert_eq!(out.row(32), src.row(8));
        }
        let out = resample_rows(src.view(), 33, Interp::Linear, true);
        for j in 0..33 {
            let x = j as f64 * 8.0 / 32.0;
            assert!((out[[j, 1]] - 2.0 * x).abs() < 1e-12, "{j}");
        }
        let flat = Array2::from_elem((9, 2), 0.375);
        let out = resample_rows(flat.view(), 20, Interp::Cubic, true);
        assert!(out.iter().all(|v| (v - 0.375).abs() < 1e-15));
    }

    #[test]
    fn tiling_and_gap_filling() {
        let src = array![[1.0], [2.0], [3.0]];
        assert_eq!(
            tile_rows(src.view(), 7).column(0).to_vec(),
            vec![1.0, 2.0, 3.0, 1.0, 2.0, 3.0, 1.0]
        );
        let mut t = array![[0.0], [9.0], [9.0], [9.0], [4.0]];
        fill_gap_linear(&mut t, 1, 4);
        assert_eq!(t.column(0).to_vec(), vec![0.0, 1.0, 2.0, 3.0, 4.0]);
    }

    #[test]
    fn grid_resize_of_a_separable_ramp_is_exact_inside() {
        // value(y, x) = y + 10x: bilinear with align_corners=False reproduces it at
        // every output whose source coordinates are inside the grid.
        let (h, w) = (4, 5);
        let g = Array2::from_shape_fn((h * w, 1), |(r, _)| (r / w) as f64 + 10.0 * (r % w) as f64);
        let out = resize_grid(g.view(), h, w, 8, 10, Interp::Linear);
        for y in 0..8 {
            for x in 0..10 {
                let sy = source_coordinate(y, h, 8, false);
                let sx = source_coordinate(x, w, 10, false);
                if sy >= 0.0 && sy <= (h - 1) as f64 && sx >= 0.0 && sx <= (w - 1) as f64 {
                    assert!((out[[y * 10 + x, 0]] - (sy + 10.0 * sx)).abs() < 1e-12);
                }
            }
        }
        // Same size: the identity.
        assert_eq!(resize_grid(g.view(), h, w, h, w, Interp::Cubic), g);
    }
}
