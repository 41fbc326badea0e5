//! Phase boundary: a sharp change of the trained rows' statistics (e.g. a table trained
//! mostly at a shorter length, then at a longer one).

use ndarray::ArrayView2;

use super::{PhaseBoundary, median};

/// Rows on each side of a split for the linear fits of ln ‖x_r‖.
const WINDOW: usize = 32;
/// Rows on each side of a split for the confirming quadratic fits.
const WINDOW_QUADRATIC: usize = 48;
/// Rows left out on each side of the split: the last row of a short phase is often a
/// norm spike (the end-of-sequence position of every full-length sequence).
const GAP: usize = 2;
/// Smallest step in ln ‖x_r‖ reported (a norm change of about 10 %).
const MIN_LOG_STEP: f64 = 0.1;
/// Smallest effect of the linear model, and of the quadratic confirmation.
const MIN_EFFECT: f64 = 8.0;
const MIN_EFFECT_QUADRATIC: f64 = 4.0;
/// Rows on each side of the split whose medians must carry half of the step.
const CLOSE: usize = 4;

/// Sharp change of trained-row statistics between rows `start` and `end`.
///
/// Two statistics per row: ln ‖x_r‖ and smoothness `cos(x_r, x_{r+1})`.
///
/// ln norm: for every split m, a line is fitted to the w = 32 rows on each side (leaving
/// out 2 rows next to the split); the step is the difference of the two lines at the
/// split, its effect the step over its standard error:
///
/// ```text
/// step(m) = â(m − ½) − b̂(m − ½)         (after-line minus before-line at the split)
/// se      = s·√(8/w)                     (each end-point extrapolation has variance ≈ 4s²/w)
/// s       = 1.4826·MAD of the residuals  (robust: a spike row does not inflate it)
/// ```
///
/// A table whose norm only trends gives lines that meet at the split, so only steps
/// above 0.1 (about 10 % in norm) with effect above 8 count. Two more checks keep wavy
/// or curving profiles out: the step must survive quadratic fits over 48 rows at a
/// split within 3 rows (step above 0.1, effect above 4, se = s·√(18/w) for a
/// quadratic's end point), and the medians of the 4 rows on either side of the split
/// must differ by at least half the step (the jump is local).
/// Smoothness: the mean over 32 rows on each side (leaving out the value that
/// straddles the split) in units of the pooled sd, effect above 8, change above 0.05.
/// Needs at least 64 rows. Change-point heuristic (common practice; the fits are
/// ordinary least squares), weaker than the untrained verdicts.
pub(super) fn phase_boundary(
    table: ArrayView2<f64>,
    norms: &[f64],
    valid: &[bool],
    start: usize,
    end: usize,
) -> Option<PhaseBoundary> {
    let end = end.min(table.nrows());
    if end <= start || end - start < 64 {
        return None;
    }
    let rows: Vec<usize> = (start..end).filter(|&r| valid[r]).collect();
    if rows.len() < 64 {
        return None;
    }
    let log_norm: Vec<f64> = rows.iter().map(|&r| norms[r].ln()).collect();
    let median_norm =
        |idx: &[usize]| median(idx.iter().map(|&r| norms[r]).collect()).unwrap_or(f64::NAN);
    let mut best: Option<PhaseBoundary> = None;
    let w = WINDOW.min(rows.len() / 2 - GAP);
    for m in w + GAP..=log_norm.len() - w - GAP {
        let Some((step, effect)) = step_at(&log_norm, m, w, 1) else {
            continue;
        };
        if step.abs() <= MIN_LOG_STEP || effect <= MIN_EFFECT {
            continue;
        }
        if best.as_ref().is_some_and(|b| effect <= b.effect) {
            continue;
        }
        // A step happens at the split: the median of the CLOSE rows just after it minus
        // that of the CLOSE rows just before it carries at least half of the step (a
        // wavy or curving norm profile parts the fitted lines without any local jump).
        let local = median(log_norm[m..m + CLOSE].to_vec()).unwrap_or(f64::NAN)
            - median(log_norm[m - CLOSE..m].to_vec()).unwrap_or(f64::NAN);
        let carries_half = local * step.signum() >= 0.5 * step.abs();
        if !carries_half {
            continue;
        }
        let wq = WINDOW_QUADRATIC
            .min(m.saturating_sub(GAP))
            .min(log_norm.len() - m - GAP);
        let confirmed = (m.saturating_sub(3)..=m + 3).any(|q| {
            step_at(&log_norm, q, wq, 2).is_some_and(|(s, e)| {
                s.abs() > MIN_LOG_STEP && e > MIN_EFFECT_QUADRATIC && s.signum() == step.signum()
            })
        });
        if !confirmed {
            continue;
        }
        // The fits leave GAP rows out on each side, so a clean step scores alike at the
        // splits around it: the run of splits next to m (within 2·GAP) that pass the same
        // thresholds holds the step.
        let near = |q: usize| {
            step_at(&log_norm, q, w, 1).is_some_and(|(s, e)| {
                e > MIN_EFFECT && s.abs() > MIN_LOG_STEP && s.signum() == step.signum()
            })
        };
        let mut lo = m;
        while lo > m.saturating_sub(2 * GAP) && near(lo - 1) {
            lo -= 1;
        }
        let mut hi = m;
        while hi < m + 2 * GAP && near(hi + 1) {
            hi += 1;
        }
        // Within that run, the split of the least absolute deviation from two levels
        // (each side's median) over the rows the windows cover.
        let (from, to) = (lo.saturating_sub(w), (hi + w).min(log_norm.len()));
        let cost = |q: usize| {
            let side = |a: usize, b: usize| {
                let v = &log_norm[a..b];
                let med = median(v.to_vec()).unwrap_or(0.0);
                v.iter().map(|x| (x - med).abs()).sum::<f64>()
            };
            // The row on each side of the split is left out: a spike or a transitional
            // row.
            side(from, q - 1) + side(q + 1, to)
        };
        // Of the tied splits, the middle one.
        let costs: Vec<(usize, f64)> = (lo.max(1)..=hi).map(|q| (q, cost(q))).collect();
        // Costs closer than one row's typical deviation (the robust sd of ln norm about
        // its local level) are ties.
        let least = costs.iter().map(|c| c.1).fold(f64::INFINITY, f64::min);
        let spread = step_at(&log_norm, m, w, 1).map_or(0.0, |(st, e)| st.abs() / e)
            / (8.0 / w as f64).sqrt();
        let tied: Vec<usize> = costs
            .iter()
            .filter(|c| c.1 <= least + spread)
            .map(|c| c.0)
            .collect();
        let m = tied.get(tied.len() / 2).copied().unwrap_or(m);
        let (before, after) =
            fit_at(&log_norm, m, w, 1).map_or((f64::NAN, f64::NAN), |f| (f.2, f.3));
        best = Some(PhaseBoundary {
            row: rows[m],
            statistic: "log_norm".into(),
            before,
            after,
            effect,
            window: w,
            median_norm_before: median_norm(&rows[m - GAP - w..m - GAP]),
            median_norm_after: median_norm(&rows[m + GAP..m + GAP + w]),
        });
    }
    // Smoothness between adjacent rows; the larger effect of the two statistics wins.
    let smooth: Vec<f64> = rows
        .windows(2)
        .map(|p| table.row(p[0]).dot(&table.row(p[1])) / (norms[p[0]] * norms[p[1]]))
        .collect();
    let w = WINDOW.min(rows.len() / 4);
    // The value at index m−1 compares rows m−1 and m, straddling the split: left out.
    for m in w + 1..=smooth.len() - w {
        let (mb, vb) = mean_var(&smooth[m - 1 - w..m - 1]);
        let (ma, va) = mean_var(&smooth[m..m + w]);
        let effect = (ma - mb).abs() / ((vb + va) / 2.0).sqrt().max(1e-12);
        if effect > MIN_EFFECT
            && (ma - mb).abs() > 0.05
            && best.as_ref().is_none_or(|b| effect > b.effect)
        {
            best = Some(PhaseBoundary {
                row: rows[m],
                statistic: "smoothness".into(),
                before: mb,
                after: ma,
                effect,
                window: w,
                median_norm_before: median_norm(&rows[m - w..m]),
                median_norm_after: median_norm(&rows[m..m + w]),
            });
        }
    }
    best
}

/// Fits a polynomial of `degree` (1 or 2) to the `w` values before and after split `m`
/// (leaving out GAP values on each side) and returns (step, effect) at the split and
/// the two fits' values there (before, after).
fn fit_at(y: &[f64], m: usize, w: usize, degree: usize) -> Option<(f64, f64, f64, f64)> {
    if w < 8 || m < w + GAP || m + GAP + w > y.len() {
        return None;
    }
    let before = &y[m - GAP - w..m - GAP];
    let after = &y[m + GAP..m + GAP + w];
    // x measured from the split (m − ½), so the fitted value at the split is the intercept.
    let xb: Vec<f64> = (0..w)
        .map(|i| (i + m - GAP - w) as f64 - (m as f64 - 0.5))
        .collect();
    let xa: Vec<f64> = (0..w)
        .map(|i| (i + m + GAP) as f64 - (m as f64 - 0.5))
        .collect();
    let (cb, rb) = polyfit(&xb, before, degree)?;
    let (ca, ra) = polyfit(&xa, after, degree)?;
    let (ib, ia) = (cb[0], ca[0]);
    let mut res: Vec<f64> = rb.iter().chain(&ra).map(|r| r.abs()).collect();
    let s = 1.4826 * median(std::mem::take(&mut res))?;
    let var_factor = if degree == 1 { 8.0 } else { 18.0 };
    let se = s * (var_factor / w as f64).sqrt();
    let step = ia - ib;
    Some((step, step.abs() / se.max(1e-12), ib, ia))
}

/// [`fit_at`]'s step and effect.
fn step_at(y: &[f64], m: usize, w: usize, degree: usize) -> Option<(f64, f64)> {
    fit_at(y, m, w, degree).map(|(s, e, _, _)| (s, e))
}

/// Least-squares polynomial of degree 1 or 2 through (x, y): the intercept (value at
/// x = 0) and the residuals. Normal equations solved by Cramer's rule (3×3 at most).
fn polyfit(x: &[f64], y: &[f64], degree: usize) -> Option<([f64; 3], Vec<f64>)> {
    let k = degree + 1;
    let mut a = [[0.0f64; 3]; 3];
    let mut b = [0.0f64; 3];
    for (&xi, &yi) in x.iter().zip(y) {
        let p = [1.0, xi, xi * xi];
        for i in 0..k {
            b[i] += p[i] * yi;
            for j in 0..k {
                a[i][j] += p[i] * p[j];
            }
        }
    }
    let coef = solve(&a, &b, k)?;
    let residuals = x
        .iter()
        .zip(y)
        .map(|(&xi, &yi)| yi - (coef[0] + coef[1] * xi + coef[2] * xi * xi))
        .collect();
    Some((coef, residuals))
}

/// Solves the k×k system (k = 2 or 3) by Gaussian elimination with partial pivoting.
fn solve(a: &[[f64; 3]; 3], b: &[f64; 3], k: usize) -> Option<[f64; 3]> {
    let mut m = [[0.0f64; 4]; 3];
    for i in 0..k {
        m[i][..k].copy_from_slice(&a[i][..k]);
        m[i][3] = b[i];
    }
    for c in 0..k {
        let p = (c..k).max_by(|&i, &j| m[i][c].abs().total_cmp(&m[j][c].abs()))?;
        if m[p][c].abs() < 1e-300 {
            return None;
        }
        m.swap(c, p);
        for i in 0..k {
            if i != c {
                let f = m[i][c] / m[c][c];
                let pivot = m[c];
                for (x, p) in m[i].iter_mut().zip(pivot).skip(c) {
                    *x -= f * p;
                }
            }
        }
    }
    let mut out = [0.0f64; 3];
    for i in 0..k {
        out[i] = m[i][3] / m[i][i];
    }
    Some(out)
}

fn mean_var(x: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let m = x.iter().sum::<f64>() / n;
    let v = x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (n - 1.0).max(1.0);
    (m, v)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn polyfit_recovers_an_exact_quadratic() {
        // y = 2 − 0.5x + 0.25x² exactly: intercept 2, residuals 0 (algebra).
        let x: Vec<f64> = (-5..=5).map(f64::from).collect();
        let y: Vec<f64> = x.iter().map(|x| 2.0 - 0.5 * x + 0.25 * x * x).collect();
        let (c, r) = polyfit(&x, &y, 2).unwrap();
        assert!((c[0] - 2.0).abs() < 1e-12 && (c[1] + 0.5).abs() < 1e-12);
        assert!(r.iter().all(|r| r.abs() < 1e-12));
        // The least-squares line through y = x² on x = −1, 0, 1 is y = 2/3 (algebra).
        let (c, _) = polyfit(&[-1.0, 0.0, 1.0], &[1.0, 0.0, 1.0], 1).unwrap();
        assert!((c[0] - 2.0 / 3.0).abs() < 1e-12);
    }
}
