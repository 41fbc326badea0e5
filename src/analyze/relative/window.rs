//! Window-style ((2h−1)(2w−1), heads) tables: the window index, index buffers, and the
//! per-head offset maps.

use ndarray::ArrayView2;

use super::*;

/// Largest window (cells) whose index is built: 32×32, far above published windows.
const MAX_WINDOW_CELLS: usize = 1024;

/// Window relative-position index (Liu et al. 2021, Swin; check-values §5.2), flattened
/// row-major over (query, key), each of the `wh·ww` window cells numbered `y·ww + x`.
///
/// ```text
/// index[i, j] = (y_i − y_j + wh − 1)·(2ww − 1) + (x_i − x_j + ww − 1)
/// ```
///
/// Check values for window 7: 169 distinct entries, diagonal 84, `idx[0,1] = 83`,
/// `idx[1,0] = 85`. Edge cases: a zero-sized window, or one with more than 1024 cells
/// (the index would hold over a million entries), gives an empty vector.
pub fn swin_relative_index(wh: usize, ww: usize) -> Vec<usize> {
    let n = wh.saturating_mul(ww);
    if n == 0 || n > MAX_WINDOW_CELLS {
        return Vec::new();
    }
    let mut out = Vec::with_capacity(n * n);
    for i in 0..n {
        let (yi, xi) = (i / ww, i % ww);
        for j in 0..n {
            let (yj, xj) = (j / ww, j % ww);
            out.push((yi + wh - 1 - yj) * (2 * ww - 1) + (xi + ww - 1 - xj));
        }
    }
    out
}

/// Recognises an integer buffer equal to [`swin_relative_index`] for some window.
///
/// Accepts shapes (N, N), (1, N, N) or (N²,) with N = wh·ww and returns `(wh, ww)`,
/// trying square windows first:
///
/// ```text
/// max(values) + 1 = (2wh − 1)(2ww − 1)   and   values = swin_relative_index(wh, ww)
/// ```
/// Edge cases: other shapes, N > 1024, or a mismatch
/// give `None`.
pub fn is_swin_index(values: &[i64], shape: &[usize]) -> Option<(usize, usize)> {
    let dims: Vec<usize> = shape.iter().copied().filter(|&d| d != 1).collect();
    let n = match dims.as_slice() {
        [a, b] if a == b => *a,
        [l] => {
            let r = (*l as f64).sqrt().round() as usize;
            (r * r == *l).then_some(r)?
        }
        _ => return None,
    };
    if n == 0 || n > MAX_WINDOW_CELLS || values.len() != n * n {
        return None;
    }
    let max = *values.iter().max()?;
    let mut candidates: Vec<(usize, usize)> = (1..=n)
        .filter(|wh| n.is_multiple_of(*wh))
        .map(|wh| (wh, n / wh))
        .filter(|&(wh, ww)| i64::try_from((2 * wh - 1) * (2 * ww - 1)).ok() == Some(max + 1))
        .collect();
    candidates.sort_by_key(|&(wh, ww)| wh.abs_diff(ww));
    candidates.into_iter().find(|&(wh, ww)| {
        swin_relative_index(wh, ww)
            .iter()
            .zip(values)
            .all(|(a, b)| i64::try_from(*a).ok() == Some(*b))
    })
}

/// Analyses a window-style ((2h−1)(2w−1), heads) bias table.
///
/// ```text
/// row r ↦ (dy, dx) = (r div (2w−1) − (h−1),  r mod (2w−1) − (w−1))
/// map_head[dy + h − 1][dx + w − 1] = table[r, head]
/// ```
///
/// The window is `window` when given, else the square window with
/// `2w − 1 = √rows`. Row r holds offset `dy = r / (2w−1) − (h−1)`,
/// `dx = r mod (2w−1) − (w−1)` (query − key, check-values §5.2), so each head's column
/// reshapes to a (2h−1)×(2w−1) map. Per head: Spearman correlation of bias with offset
/// length √(dy² + dx²) (negative = decay) and the autocorrelation between
/// horizontally and vertically neighbouring offsets. Every row is used by the index
/// (§5.2), so `unreachable` is empty.
///
/// Edge cases: a row count that is not (2h−1)(2w−1), too few rows, or non-finite values
/// set `problem`.
pub fn analyze_swin(
    table: ArrayView2<f64>,
    window: Option<(usize, usize)>,
    init_std: Option<f64>,
) -> RelativeAnalysis {
    let (rows, heads) = table.dim();
    let mut a = RelativeAnalysis::new("window-2d", rows, heads);
    a.bidirectional_source = "window tables are bidirectional".into();
    if let Some(p) = check_table(&table) {
        a.problem = Some(p);
        return a;
    }
    let (wh, ww) = match window {
        Some(w) => w,
        None => {
            let s = (rows as f64).sqrt().round() as usize;
            if s * s != rows || s.is_multiple_of(2) {
                a.problem = Some(format!(
                    "{rows} rows is not (2w−1)² for a square window and no window size was given"
                ));
                return a;
            }
            a.notes
                .push("square window inferred from the row count".into());
            (s.div_ceil(2), s.div_ceil(2))
        }
    };
    let (mh, mw) = (
        wh.saturating_mul(2).saturating_sub(1),
        ww.saturating_mul(2).saturating_sub(1),
    );
    if mh.checked_mul(mw) != Some(rows) || wh == 0 || ww == 0 {
        a.problem = Some(format!(
            "window {wh}x{ww} needs (2h−1)(2w−1) rows, table has {rows}"
        ));
        return a;
    }
    a.window = Some((wh, ww));
    a.offset_maps = (0..heads)
        .map(|h| {
            (0..mh)
                .map(|r| (0..mw).map(|c| table[[r * mw + c, h]]).collect())
                .collect()
        })
        .collect();
    let dist: Vec<f64> = (0..rows)
        .map(|r| {
            let dy = (r / mw) as f64 - (wh as f64 - 1.0);
            let dx = (r % mw) as f64 - (ww as f64 - 1.0);
            (dy * dy + dx * dx).sqrt()
        })
        .collect();
    for h in 0..heads {
        let col: Vec<f64> = table.column(h).to_vec();
        let sp = spearman(&dist, &col);
        // Neighbour pairs along both axes of the offset map.
        let m = col.iter().sum::<f64>() / rows as f64;
        let var: f64 = col.iter().map(|v| (v - m).powi(2)).sum::<f64>() / rows as f64;
        let (mut s, mut k) = (0.0, 0usize);
        for r in 0..mh {
            for c in 0..mw {
                let v = col[r * mw + c] - m;
                if c + 1 < mw {
                    s += v * (col[r * mw + c + 1] - m);
                    k += 1;
                }
                if r + 1 < mh {
                    s += v * (col[(r + 1) * mw + c] - m);
                    k += 1;
                }
            }
        }
        let ac = (k > 1 && var > 0.0).then(|| s / k as f64 / var);
        let std = var.sqrt();
        let corrs = [sp];
        let untrained = untrained_verdict(&corrs, ac, std, init_std);
        if untrained {
            a.untrained_heads.push(h);
        }
        a.head_trends.push(HeadTrend {
            head: h,
            spearman_before: sp,
            spearman_after: None,
            decreasing_step_fraction: None,
            neighbour_autocorrelation: ac,
            std,
            trend: trend_word(&corrs),
            looks_untrained: untrained,
        });
    }
    a
}
