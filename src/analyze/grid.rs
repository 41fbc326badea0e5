//! Two-dimensional patch-position tables of vision transformers (`learned-grid-2d`).
//!
//! A vision table is a 1-D list of rows only in storage: its rows are the cells of an
//! h×w patch grid, often after a few extra rows (class, distillation tokens). Read as a
//! list, its structure is invisible. This module recovers the grid layout, then asks the
//! questions that matter for a grid: how much of the table is an additive
//! row-effect + column-effect pattern, which spatial frequencies each axis carries, how
//! patches relate to their neighbours (untrained or odd cells), and whether the table is
//! in fact the fixed 2-D sine-cosine formula rather than a learned table.

use crate::linalg;
use ndarray::{Array2, ArrayView2, Axis};
use serde::Serialize;
use std::f64::consts::PI;

/// Config hints for the grid layout, all optional.
#[derive(Debug, Clone, Default)]
pub struct GridHints {
    /// Input image size (height, width) in pixels.
    pub image_size: Option<(usize, usize)>,
    /// Patch size (height, width) in pixels.
    pub patch_size: Option<(usize, usize)>,
    /// Number of non-grid rows before the grid, when the config says it.
    pub extra_rows: Option<usize>,
}

/// How the table's rows map onto a grid.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct GridLayout {
    /// Grid rows (patches along the image height).
    pub height: usize,
    /// Grid columns (patches along the image width).
    pub width: usize,
    /// Non-grid rows before the grid (class, distillation or register tokens).
    pub extra_rows: usize,
    /// How the layout was inferred, in plain words.
    pub how: String,
}

/// Largest number of extra rows tried when looking for a square grid.
const MAX_EXTRA_ROWS: usize = 8;

/// Infers the grid layout of a table with `rows` rows.
///
/// Order of evidence:
/// 1. A 4-D shape (1, h, w, dim) gives the grid directly.
/// 2. `image_size / patch_size` (integer division, as patch embedding does) gives h×w;
///    the remaining `rows − h·w` (0–8, or the hinted count) are extra rows.
/// 3. With an `extra_rows` hint, the rest must be a square.
/// 4. Otherwise the smallest extra count in 0..=8 that leaves a square grid of side ≥ 2
///    (so 197 rows → 1 + 14², 198 → 2 + 14², 1370 → 1 + 37²; check-values §3.8–3.12).
///
/// ```text
/// rows = extra + h·w
/// ```
///
/// Returns `None` when nothing fits (the caller keeps the table 1-D).
pub fn infer_grid(rows: usize, shape: &[usize], hints: &GridHints) -> Option<GridLayout> {
    if shape.len() == 4 && shape[0] == 1 && shape[1].checked_mul(shape[2]) == Some(rows) {
        return Some(GridLayout {
            height: shape[1],
            width: shape[2],
            extra_rows: 0,
            how: format!("4-D shape (1, {}, {}, dim)", shape[1], shape[2]),
        });
    }
    let mut mismatch = String::new();
    if let (Some((ih, iw)), Some((ph, pw))) = (hints.image_size, hints.patch_size)
        && ph > 0
        && pw > 0
    {
        let (gh, gw) = (ih / ph, iw / pw);
        let cells = gh.saturating_mul(gw);
        let fits = cells > 0
            && cells <= rows
            && match hints.extra_rows {
                Some(e) => rows - cells == e,
                None => rows - cells <= MAX_EXTRA_ROWS,
            };
        if fits {
            return Some(GridLayout {
                height: gh,
                width: gw,
                extra_rows: rows - cells,
                how: format!(
                    "config image size {ih}x{iw} / patch size {ph}x{pw} = {gh}x{gw} grid, {} extra row(s)",
                    rows - cells
                ),
            });
        }
        mismatch = format!(
            "; config image size {ih}x{iw} / patch {ph}x{pw} implies {gh}x{gw} = {cells} cells, which does not fit {rows} rows"
        );
    }
    let square = |n: usize| -> Option<usize> {
        let s = (n as f64).sqrt().round() as usize;
        (s >= 2 && s * s == n).then_some(s)
    };
    if let Some(e) = hints.extra_rows
        && let Some(s) = rows.checked_sub(e).and_then(square)
    {
        return Some(GridLayout {
            height: s,
            width: s,
            extra_rows: e,
            how: format!("{e} extra row(s) from the config, square {s}x{s} grid{mismatch}"),
        });
    }
    (0..=MAX_EXTRA_ROWS.min(rows)).find_map(|e| {
        square(rows - e).map(|s| GridLayout {
            height: s,
            width: s,
            extra_rows: e,
            how: format!("square grid: {rows} rows = {e} + {s}x{s}{mismatch}"),
        })
    })
}

/// Variance shares of the two-way (row effect + column effect) decomposition.
#[derive(Debug, Clone, Serialize)]
pub struct Separability {
    /// (SS_row + SS_col) / SS_total: share explained by the additive model, in [0, 1].
    pub additive: f64,
    /// SS_row / SS_total (effects that depend only on the grid row y).
    pub row_effect: f64,
    /// SS_col / SS_total (effects that depend only on the grid column x).
    pub column_effect: f64,
    /// Remaining share (interaction of row and column).
    pub interaction: f64,
}

/// One leading component of an axis-effect curve.
#[derive(Debug, Clone, Serialize)]
pub struct AxisComponent {
    /// Component index (0 = leading).
    pub component: usize,
    /// σ²_j / Σσ² of the effect matrix.
    pub energy_fraction: f64,
    /// Dominant frequency of the component's curve, in cycles across the axis (1..=n/2).
    pub cycles: usize,
    /// Share of the curve's non-constant DFT power at that frequency.
    pub power_fraction: f64,
}

/// Dominant spatial frequencies along each axis.
#[derive(Debug, Clone, Serialize)]
pub struct AxisFrequencies {
    /// Components of the row effect r_y (varies along the height).
    pub along_height: Vec<AxisComponent>,
    /// Components of the column effect c_x (varies along the width).
    pub along_width: Vec<AxisComponent>,
}

/// Cosine similarity of one patch with every patch.
#[derive(Debug, Clone, Serialize)]
pub struct SimilarityMap {
    /// `centre`, `top-left`, `top-edge`, … .
    pub label: String,
    /// Grid row of the reference patch.
    pub row: usize,
    /// Grid column of the reference patch.
    pub col: usize,
    /// `cosines[y][x]`: cosine with patch (y, x); 0 where a norm is zero.
    pub cosines: Vec<Vec<f64>>,
}

/// A patch that stands out.
#[derive(Debug, Clone, Serialize)]
pub struct OddPatch {
    /// Grid row.
    pub row: usize,
    /// Grid column.
    pub col: usize,
    /// Table row index (extra rows included).
    pub table_row: usize,
    /// `noise-like` (unrelated to all grid neighbours), `norm-outlier` or `zero`.
    pub reason: String,
    /// Largest |cosine| with its 4-neighbours.
    pub neighbour_cosine_max_abs: f64,
    /// Row norm.
    pub norm: f64,
}

/// Comparison with the fixed 2-D sine-cosine grid (check-values §2.6).
#[derive(Debug, Clone, Serialize)]
pub struct FixedGridCheck {
    /// True when the grid rows equal the formula within `tolerance`.
    pub matches: bool,
    /// Which axis the first dim/2 columns encode: `column (w)` or `row (h)`.
    pub first_half_axis: String,
    /// Largest |table − formula| for that ordering.
    pub max_abs_error: f64,
    /// Same for the other ordering.
    pub max_abs_error_other_order: f64,
    /// Tolerance used (covers bf16 storage: half-ULP 1.95e-3, check-values §7.2).
    pub tolerance: f64,
    /// True when all extra rows are exactly zero (the class row of the formula is zero).
    pub extra_rows_zero: bool,
}

/// Everything the grid analysis found.
#[derive(Debug, Clone, Serialize)]
pub struct GridAnalysis {
    /// Grid rows.
    pub height: usize,
    /// Grid columns.
    pub width: usize,
    /// Extra rows before the grid.
    pub extra_rows: usize,
    /// How the layout was inferred.
    pub how: String,
    /// Embedding width.
    pub dim: usize,
    /// Two-way decomposition shares, `None` when the grid has no variance.
    pub separability: Option<Separability>,
    /// Leading components of the axis effects and their frequencies.
    pub axis_frequencies: Option<AxisFrequencies>,
    /// Similarity maps of the centre, corner and edge-midpoint patches.
    pub similarity_maps: Vec<SimilarityMap>,
    /// Mean cosine between 4-neighbour patches.
    pub neighbour_cosine_mean: Option<f64>,
    /// Share of patches unrelated to all their neighbours (≈ 1 for an untrained grid).
    pub noise_like_fraction: Option<f64>,
    /// Odd patches (first 256).
    pub odd_patches: Vec<OddPatch>,
    /// Number of odd patches in total.
    pub odd_patch_count: usize,
    /// Median patch norm.
    pub norm_median: Option<f64>,
    /// Norms of the extra rows.
    pub extra_row_norms: Vec<f64>,
    /// Comparison with the fixed 2-D sine-cosine formula, `None` when dim % 4 ≠ 0.
    pub fixed_sincos: Option<FixedGridCheck>,
    /// Why no analysis was possible, if so.
    pub problem: Option<String>,
}

/// The fixed 2-D sine-cosine grid (check-values §2.6), rows = h·w patches in row-major
/// order, no extra rows.
///
/// ```text
/// ω_k = 1 / 10000^(k/(D/4)),  k = 0..D/4
/// e(p) = [sin(p·ω) | cos(p·ω)]                       (D/2 values)
/// row(y, x) = [e(x) | e(y)]   when column_first (the published code's order), else [e(y) | e(x)]
/// ```
///
/// Returns `None` when `dim` is not a positive multiple of 4 or the size overflows.
pub fn sincos_2d(
    height: usize,
    width: usize,
    dim: usize,
    column_first: bool,
) -> Option<Array2<f64>> {
    let cells = height.checked_mul(width)?;
    if dim == 0 || !dim.is_multiple_of(4) || cells.checked_mul(dim).is_none() {
        return None;
    }
    let q = dim / 4;
    let omega: Vec<f64> = (0..q)
        .map(|k| 1.0 / 10000f64.powf(k as f64 / q as f64))
        .collect();
    Some(Array2::from_shape_fn((cells, dim), |(p, c)| {
        let (y, x) = (p / width.max(1), p % width.max(1));
        let (first, second) = if column_first { (x, y) } else { (y, x) };
        let pos = if c < 2 * q { first } else { second } as f64;
        let k = c % (2 * q);
        if k < q {
            (pos * omega[k]).sin()
        } else {
            (pos * omega[k - q]).cos()
        }
    }))
}

fn cosine(a: ndarray::ArrayView1<f64>, b: ndarray::ArrayView1<f64>, na: f64, nb: f64) -> f64 {
    if na > 0.0 && nb > 0.0 {
        a.dot(&b) / (na * nb)
    } else {
        0.0
    }
}

/// Dominant non-constant DFT frequency of a curve: (cycles, power share).
fn dominant_frequency(curve: &[f64]) -> Option<(usize, f64)> {
    let n = curve.len();
    if n < 2 {
        return None;
    }
    let powers: Vec<f64> = (1..=n / 2)
        .map(|k| {
            let (mut re, mut im) = (0.0, 0.0);
            for (t, v) in curve.iter().enumerate() {
                let ang = 2.0 * PI * (k * t) as f64 / n as f64;
                re += v * ang.cos();
                im -= v * ang.sin();
            }
            re * re + im * im
        })
        .collect();
    let total: f64 = powers.iter().sum();
    if total <= 0.0 {
        return None;
    }
    let (i, p) = powers
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))?;
    Some((i + 1, p / total))
}

fn axis_components(effect: &Array2<f64>) -> Vec<AxisComponent> {
    let Ok(dec) = linalg::leading_components(effect.view(), 3) else {
        return Vec::new();
    };
    let energy: f64 = dec.singular_values.iter().map(|s| s * s).sum();
    if energy <= 0.0 {
        return Vec::new();
    }
    (0..dec.left.ncols())
        .filter(|&j| dec.singular_values[j] > 0.0)
        .filter_map(|j| {
            let curve: Vec<f64> = dec.left.column(j).to_vec();
            dominant_frequency(&curve).map(|(cycles, power_fraction)| AxisComponent {
                component: j,
                energy_fraction: dec.singular_values[j].powi(2) / energy,
                cycles,
                power_fraction,
            })
        })
        .collect()
}

/// Analyses a grid table (`rows × dim`, rows = extra + h·w in row-major grid order).
///
/// * **Separability** (two-way ANOVA per dimension, summed over dimensions): with grid
///   values P[y, x, k], grand mean m_k, row effect r_yk = mean_x P − m, column effect
///   c_xk = mean_y P − m,
///   ```text
///   SS_total = Σ (P − m)²,  SS_row = w·Σ r²,  SS_col = h·Σ c²
///   additive = (SS_row + SS_col) / SS_total
///   ```
///   1 for a purely additive table (the fixed sine-cosine grid), near 0 for a table
///   whose structure is all row×column interaction or noise.
/// * **Axis frequencies**: the effect matrices R (h×dim) and C (w×dim) are decomposed
///   with [`linalg::leading_components`]; each leading component's curve over the axis
///   gets its dominant DFT frequency (cycles across the grid).
/// * **Similarity maps**: cosine of the centre, four corners and four edge midpoints
///   against every patch.
/// * **Odd patches**: a patch whose cosine with every 4-neighbour is within 4/√dim of 0
///   behaves like independent noise (cosines of independent vectors are ≈ N(0, 1/dim),
///   check-values §8.2) — only tested when dim ≥ 16; a norm more than 5 robust
///   standard deviations (1.4826·MAD) from the median is an outlier; a zero row is `zero`.
/// * **Fixed grid**: compared with [`sincos_2d`] in both axis orders.
///
/// Edge cases: a layout that does not match the row count, dim 0 or non-finite values
/// set `problem`; constant grids give `separability: None`.
pub fn analyze_grid(table: ArrayView2<f64>, layout: &GridLayout) -> GridAnalysis {
    analyze_grid_init(table, layout, None)
}

/// [`analyze_grid`] with the initializer's std σ (config `initializer_range`). Trained
/// patches of small, briefly trained grids are not smooth, so "unrelated to every
/// neighbour" alone does not make a patch untrained: with σ known, a noise-like patch
/// must also be at the init scale (RMS ≤ `INIT_SCALE_MAX`·σ; farther ones moved, so
/// they were trained) and on the common scale that never-trained patches share
/// (|ln RMS − common| ≤ `SCALE_Z`/√(2·dim), the common scale being the mode of the
/// candidates' ln RMS), as in [`crate::analyze::untrained`].
pub fn analyze_grid_init(
    table: ArrayView2<f64>,
    layout: &GridLayout,
    init_std: Option<f64>,
) -> GridAnalysis {
    let (rows, dim) = table.dim();
    let (h, w, e) = (layout.height, layout.width, layout.extra_rows);
    let mut out = GridAnalysis {
        height: h,
        width: w,
        extra_rows: e,
        how: layout.how.clone(),
        dim,
        separability: None,
        axis_frequencies: None,
        similarity_maps: Vec::new(),
        neighbour_cosine_mean: None,
        noise_like_fraction: None,
        odd_patches: Vec::new(),
        odd_patch_count: 0,
        norm_median: None,
        extra_row_norms: Vec::new(),
        fixed_sincos: None,
        problem: None,
    };
    let cells = h.checked_mul(w).and_then(|c| c.checked_add(e));
    if cells != Some(rows) || h == 0 || w == 0 || dim == 0 {
        out.problem = Some(format!(
            "layout {e} + {h}x{w} does not match a table of {rows}x{dim}"
        ));
        return out;
    }
    if table.iter().any(|v| !v.is_finite()) {
        out.problem = Some("table holds non-finite values".into());
        return out;
    }
    let grid = table.slice(ndarray::s![e.., ..]);
    let norms: Vec<f64> = grid.rows().into_iter().map(|r| r.dot(&r).sqrt()).collect();
    out.extra_row_norms = (0..e)
        .map(|i| table.row(i).dot(&table.row(i)).sqrt())
        .collect();
    let at = |y: usize, x: usize| y * w + x;

    // Two-way decomposition.
    let mean = grid
        .mean_axis(Axis(0))
        .unwrap_or_else(|| ndarray::Array1::zeros(dim));
    let mut row_eff = Array2::<f64>::zeros((h, dim));
    let mut col_eff = Array2::<f64>::zeros((w, dim));
    for y in 0..h {
        for x in 0..w {
            let r = grid.row(at(y, x));
            for k in 0..dim {
                let v = r[k] - mean[k];
                row_eff[[y, k]] += v / w as f64;
                col_eff[[x, k]] += v / h as f64;
            }
        }
    }
    let ss_total: f64 = grid
        .rows()
        .into_iter()
        .map(|r| {
            r.iter()
                .zip(mean.iter())
                .map(|(a, m)| (a - m).powi(2))
                .sum::<f64>()
        })
        .sum();
    let ss_row = w as f64 * row_eff.iter().map(|v| v * v).sum::<f64>();
    let ss_col = h as f64 * col_eff.iter().map(|v| v * v).sum::<f64>();
    if ss_total > 0.0 {
        let (fr, fc) = (ss_row / ss_total, ss_col / ss_total);
        out.separability = Some(Separability {
            additive: (fr + fc).min(1.0),
            row_effect: fr,
            column_effect: fc,
            interaction: (1.0 - fr - fc).max(0.0),
        });
        out.axis_frequencies = Some(AxisFrequencies {
            along_height: axis_components(&row_eff),
            along_width: axis_components(&col_eff),
        });
    }

    // Similarity maps.
    let (cy, cx) = (h / 2, w / 2);
    let refs = [
        ("centre", cy, cx),
        ("top-left", 0, 0),
        ("top-right", 0, w - 1),
        ("bottom-left", h - 1, 0),
        ("bottom-right", h - 1, w - 1),
        ("top-edge", 0, cx),
        ("bottom-edge", h - 1, cx),
        ("left-edge", cy, 0),
        ("right-edge", cy, w - 1),
    ];
    let mut seen = Vec::new();
    for (label, y, x) in refs {
        if seen.contains(&(y, x)) {
            continue;
        }
        seen.push((y, x));
        let p = at(y, x);
        let cosines = (0..h)
            .map(|yy| {
                (0..w)
                    .map(|xx| {
                        let q = at(yy, xx);
                        cosine(grid.row(p), grid.row(q), norms[p], norms[q])
                    })
                    .collect()
            })
            .collect();
        out.similarity_maps.push(SimilarityMap {
            label: label.into(),
            row: y,
            col: x,
            cosines,
        });
    }

    // Neighbour cosines, noise-like patches and norm outliers.
    let mut sorted = norms.clone();
    sorted.sort_by(|a, b| a.total_cmp(b));
    let median = sorted[sorted.len() / 2];
    let mut dev: Vec<f64> = norms.iter().map(|n| (n - median).abs()).collect();
    dev.sort_by(|a, b| a.total_cmp(b));
    let mad = dev[dev.len() / 2] * 1.4826;
    out.norm_median = Some(median);
    let noise_bound = 4.0 / (dim as f64).sqrt();
    let (mut cos_sum, mut cos_n, mut noise_like, mut tested) = (0.0, 0usize, 0usize, 0usize);
    let mut max_abs_of = vec![0.0f64; h * w];
    let mut any_of = vec![false; h * w];
    for y in 0..h {
        for x in 0..w {
            let p = at(y, x);
            let neighbours = [
                (y.wrapping_sub(1), x),
                (y + 1, x),
                (y, x.wrapping_sub(1)),
                (y, x + 1),
            ];
            for (ny, nx) in neighbours {
                if ny < h && nx < w {
                    let c = cosine(
                        grid.row(p),
                        grid.row(at(ny, nx)),
                        norms[p],
                        norms[at(ny, nx)],
                    );
                    max_abs_of[p] = max_abs_of[p].max(c.abs());
                    cos_sum += c;
                    cos_n += 1;
                    any_of[p] = true;
                }
            }
        }
    }
    // Noise-like patches: unrelated to every neighbour and, with an init scale, neither
    // moved above it nor off the candidates' common scale.
    let init = init_std.filter(|s| s.is_finite() && *s > 0.0);
    let ln_rms: Vec<f64> = norms
        .iter()
        .map(|n| (n / (dim.max(1) as f64).sqrt()).ln())
        .collect();
    let unrelated: Vec<bool> = (0..h * w)
        .map(|p| dim >= 16 && any_of[p] && max_abs_of[p] <= noise_bound && norms[p] > 0.0)
        .collect();
    let noise: Vec<bool> = match init {
        None => unrelated.clone(),
        Some(s) => {
            let limit = (crate::analyze::untrained::INIT_SCALE_MAX * s).ln();
            let cand: Vec<usize> = (0..h * w)
                .filter(|&p| unrelated[p] && ln_rms[p] <= limit)
                .collect();
            let tol = crate::analyze::untrained::SCALE_Z / (2.0 * dim as f64).sqrt();
            let common = crate::analyze::untrained::common_log_scale(
                &cand.iter().map(|&p| ln_rms[p]).collect::<Vec<_>>(),
                tol,
            );
            let mut m = vec![false; h * w];
            for p in cand {
                m[p] = common.is_some_and(|c| (ln_rms[p] - c).abs() <= tol);
            }
            m
        }
    };
    for y in 0..h {
        for x in 0..w {
            let p = at(y, x);
            let (max_abs, any) = (max_abs_of[p], any_of[p]);
            let reason = if norms[p] == 0.0 {
                Some("zero")
            } else if noise[p] {
                Some("noise-like")
            } else if (mad > 0.0 && (norms[p] - median).abs() > 5.0 * mad)
                || (mad == 0.0 && (norms[p] - median).abs() > 1e-6 * median.max(1e-300))
            {
                Some("norm-outlier")
            } else {
                None
            };
            if dim >= 16 && any {
                tested += 1;
                if noise[p] {
                    noise_like += 1;
                }
            }
            if let Some(r) = reason {
                out.odd_patch_count += 1;
                if out.odd_patches.len() < 256 {
                    out.odd_patches.push(OddPatch {
                        row: y,
                        col: x,
                        table_row: e + p,
                        reason: r.into(),
                        neighbour_cosine_max_abs: max_abs,
                        norm: norms[p],
                    });
                }
            }
        }
    }
    out.neighbour_cosine_mean = (cos_n > 0).then(|| cos_sum / cos_n as f64);
    out.noise_like_fraction = (tested > 0).then(|| noise_like as f64 / tested as f64);

    // Fixed 2-D sine-cosine grid.
    if let (Some(cf), Some(rf)) = (sincos_2d(h, w, dim, true), sincos_2d(h, w, dim, false)) {
        let err = |f: &Array2<f64>| {
            grid.iter()
                .zip(f.iter())
                .map(|(a, b)| (a - b).abs())
                .fold(0.0, f64::max)
        };
        let (ecf, erf) = (err(&cf), err(&rf));
        let tolerance = 4e-3;
        let column_first = ecf <= erf;
        let (best, other) = if column_first { (ecf, erf) } else { (erf, ecf) };
        out.fixed_sincos = Some(FixedGridCheck {
            matches: best < tolerance,
            first_half_axis: if column_first {
                "column (w)"
            } else {
                "row (h)"
            }
            .into(),
            max_abs_error: best,
            max_abs_error_other_order: other,
            tolerance,
            extra_rows_zero: (0..e).all(|i| table.row(i).iter().all(|v| *v == 0.0)),
        });
    }
    out
}

#[cfg(test)]
mod tests;
