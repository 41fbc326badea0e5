//! T5-style (buckets, heads) tables: the bucket function, unreachable buckets, and the
//! per-head analysis with never-trained buckets.

use ndarray::ArrayView2;

use super::*;

/// T5 relative-position bucket (Raffel et al. 2020; HF `_relative_position_bucket`,
/// check-values §5.1), with `relative_position = key − query`.
///
/// ```text
/// if bidirectional: nb = nb/2; ret = (rp > 0)·nb; rp = |rp|   else: ret = 0; rp = max(−rp, 0)
/// max_exact = nb/2
/// bucket = rp                                                          if rp < max_exact
///        = min(max_exact + ⌊ln(rp/max_exact)/ln(max_distance/max_exact)·(nb − max_exact)⌋, nb − 1)
/// return ret + bucket
/// ```
///
/// The logarithm is evaluated in f32 as the reference code does, so boundary distances
/// land in the same buckets. Edge cases: `num_buckets` < 2 or `max_distance ≤ max_exact`
/// put every non-exact distance in the last bucket of its side; nothing panics.
pub fn t5_bucket(
    relative_position: i64,
    bidirectional: bool,
    num_buckets: usize,
    max_distance: usize,
) -> usize {
    let mut nb = num_buckets;
    let mut ret = 0usize;
    let rp: u64 = if bidirectional {
        nb /= 2;
        if relative_position > 0 {
            ret = nb;
        }
        relative_position.unsigned_abs()
    } else if relative_position < 0 {
        relative_position.unsigned_abs()
    } else {
        0
    };
    if nb == 0 {
        return ret.min(num_buckets.saturating_sub(1));
    }
    let max_exact = nb / 2;
    if rp < max_exact as u64 {
        return ret + rp as usize;
    }
    if max_exact == 0 || max_distance <= max_exact {
        return ret + nb - 1;
    }
    let ratio = (rp as f32 / max_exact as f32).ln();
    let scale = ((max_distance as f64) / (max_exact as f64)).ln() as f32;
    let large = max_exact + (ratio / scale * (nb - max_exact) as f32) as usize;
    ret + large.min(nb - 1)
}

/// Largest |distance| enumerated: beyond `max_distance` every distance shares a bucket.
fn enumeration_limit(num_buckets: usize, max_distance: usize) -> i64 {
    let r = max_distance
        .saturating_mul(2)
        .saturating_add(num_buckets)
        .saturating_add(2);
    r.min(1_000_000) as i64
}

/// Buckets that no distance reaches, for the given bucket function settings.
///
/// ```text
/// unreachable = {0..num_buckets} \ {t5_bucket(rp) : |rp| ≤ 2·max_distance + num_buckets + 2}
/// ```
///
/// Distances beyond `max_distance` all fall in the last bucket of their side, so this
/// enumeration covers every reachable bucket (enumeration is capped at 10⁶).
/// Check value (§5.1): bidirectional, 32 buckets, max 128 → `[16]`.
pub fn t5_unreachable(bidirectional: bool, num_buckets: usize, max_distance: usize) -> Vec<usize> {
    let limit = enumeration_limit(num_buckets, max_distance);
    let mut used = vec![false; num_buckets];
    for rp in -limit..=limit {
        if let Some(u) = used.get_mut(t5_bucket(rp, bidirectional, num_buckets, max_distance)) {
            *u = true;
        }
    }
    (0..num_buckets).filter(|&b| !used[b]).collect()
}

/// Buckets visited in order of growing |distance| on one side (−1: key before query,
/// +1: key after), consecutive repeats removed.
fn side_sequence(sign: i64, bidirectional: bool, nb: usize, md: usize) -> Vec<usize> {
    let limit = enumeration_limit(nb, md);
    let mut seq: Vec<usize> = Vec::new();
    for k in 0..=limit {
        let b = t5_bucket(sign * k, bidirectional, nb, md);
        if seq.last() != Some(&b) && b < nb {
            seq.push(b);
        }
    }
    seq
}

fn path_cost(table: &ArrayView2<f64>, path: &[usize]) -> f64 {
    if path.len() < 2 {
        return f64::INFINITY;
    }
    let total: f64 = path
        .windows(2)
        .map(|w| {
            table
                .row(w[0])
                .iter()
                .zip(table.row(w[1]).iter())
                .map(|(a, b)| (a - b).powi(2))
                .sum::<f64>()
        })
        .sum();
    total / (path.len() - 1) as f64
}

/// Analyses a T5-style (buckets, heads) table.
///
/// Steps: decide the direction mode (config hint, then the name — `encoder` is
/// bidirectional, `decoder` is not — else the mode whose far-to-near bucket path through
/// the table is smoother, said in `bidirectional_source`); list unreachable buckets with
/// [`t5_unreachable`] and compare each such row with the init scale; sample each head's
/// bias over signed distances −max_distance..=max_distance; per head, Spearman
/// correlation of bias with distance on each side (negative = decay), fraction of
/// decreasing steps, and lag-1 autocorrelation along distance.
///
/// Never-trained buckets (init scale σ known). Decoupled weight decay (Loshchilov &
/// Hutter 2019) leaves a bucket that never gets a gradient at `init × f`, one common
/// f ≤ 1, so a row is never-trained when it is noise of the init's shape at scale f·σ:
///
/// ```text
/// noise(x, s):  n·mean²/s² ≤ χ²₁(0.999)   and   χ²_n(0.001) ≤ Σx²/s² ≤ χ²_n(0.999)
/// run_side  = longest far-end run of the side's buckets with noise(row, σ)
/// repeat:   f = pooled rms(runs)/σ; cut each run at its first row failing noise(row, f·σ)
/// accept when stable and f ≤ exp(3·se(ln f))
/// ```
///
/// An unreachable row "looks like init" (untrained, possibly shrunk) when, with h heads,
/// it is zero-mean noise at its own scale (`h·mean²/rms² ≤ χ²₁(0.999)`, spread
/// `Σ(x−mean)²/rms² ≥ χ²_{h−1}(0.001)`), not larger than the init
/// (`rms/σ ≤ 1 + 4/√(2h)`), and its factor agrees with the never-trained buckets' one
/// (z ≤ 4, [`crate::analyze::decay::disagreement`]). χ² quantiles: Wilson–Hilferty.
///
/// A head "looks untrained" when the whole table looks like its initialization, or when
/// |Spearman| < 0.6 on every side, the lag-1 autocorrelation is < 0.5, with σ known its
/// spread is within [0.5, 2]·σ and its values on the trained buckets are noise(·, σ).
///
/// Edge cases: fewer than 2 rows, no heads or non-finite values set `problem`.
pub fn analyze_t5(table: ArrayView2<f64>, hints: &RelativeHints) -> RelativeAnalysis {
    let (nb, heads) = table.dim();
    let mut a = RelativeAnalysis::new("t5-buckets", nb, heads);
    if let Some(p) = check_table(&table) {
        a.problem = Some(p);
        return a;
    }
    if let Some(h) = hints.num_buckets.filter(|h| *h != nb) {
        a.notes.push(format!(
            "config says {h} buckets but the table has {nb} rows; using {nb}"
        ));
    }
    let md = hints.max_distance.unwrap_or(128);
    if hints.max_distance.is_none() {
        a.notes
            .push("max_distance not given: the T5 default 128 is assumed".into());
    }
    a.max_distance = Some(md);

    let name = hints.name.as_deref().unwrap_or("").to_ascii_lowercase();
    let (bidirectional, source) = if let Some(b) = hints.bidirectional {
        (b, "config".to_string())
    } else if name.contains("encoder") {
        (true, "name".to_string())
    } else if name.contains("decoder") {
        (false, "name".to_string())
    } else {
        let mut bi_path = side_sequence(-1, true, nb, md);
        bi_path.reverse();
        bi_path.extend(side_sequence(1, true, nb, md).into_iter().skip(1));
        let mut uni_path = side_sequence(-1, false, nb, md);
        uni_path.reverse();
        let (cb, cu) = (path_cost(&table, &bi_path), path_cost(&table, &uni_path));
        (
            cb <= cu,
            format!(
                "inferred: mean squared step along the bidirectional bucket path {cb:.4e} vs the causal path {cu:.4e}"
            ),
        )
    };
    a.bidirectional = bidirectional;
    a.bidirectional_source = source;

    a.unreachable = t5_unreachable(bidirectional, nb, md);
    let reachable: Vec<usize> = (0..nb).filter(|b| !a.unreachable.contains(b)).collect();
    let rms_of = |r: usize| -> f64 {
        (table.row(r).iter().map(|v| v * v).sum::<f64>() / heads as f64).sqrt()
    };
    let row_vals = |b: usize| -> Vec<f64> { table.row(b).to_vec() };
    let init = hints.init_std.filter(|s| s.is_finite() && *s > 0.0);
    let before = side_sequence(-1, bidirectional, nb, md);
    let after = side_sequence(1, bidirectional, nb, md);
    let sides: Vec<&Vec<usize>> = if bidirectional {
        vec![&before, &after]
    } else {
        vec![&before]
    };

    // Never-trained buckets: far-end runs of each side that are noise at the init scale,
    // then shrunk to rows that are noise at the common scale f·σ of the run.
    if let Some(sigma) = init {
        let mut runs: Vec<Vec<usize>> = sides
            .iter()
            .map(|seq| {
                seq.iter()
                    .rev()
                    .take_while(|&&b| noise_at_scale(&row_vals(b), sigma))
                    .copied()
                    .collect()
            })
            .collect();
        for _ in 0..nb + 1 {
            let mut cand: Vec<usize> = runs.iter().flatten().copied().collect();
            cand.sort_unstable();
            cand.dedup();
            let rms: Vec<f64> = cand.iter().map(|&b| rms_of(b)).collect();
            let Some(est) = crate::analyze::decay::estimate(&rms, heads, sigma) else {
                break;
            };
            let s = sigma * est.factor;
            let shrunk: Vec<Vec<usize>> = runs
                .iter()
                .map(|run| {
                    run.iter()
                        .take_while(|&&b| noise_at_scale(&row_vals(b), s))
                        .copied()
                        .collect()
                })
                .collect();
            if shrunk == runs {
                // One common factor f ≤ 1 (within 3 standard errors): decay only shrinks.
                if est.factor <= (3.0 * est.log_standard_error).exp() {
                    a.never_trained = cand;
                    a.never_trained_factor = Some(est);
                }
                break;
            }
            runs = shrunk;
        }
    } else {
        a.notes
            .push("no init scale known: never-trained buckets are not looked for".into());
    }
    a.looks_like_init = !reachable.is_empty() && a.never_trained.len() == reachable.len();
    let limit = enumeration_limit(nb, md);
    let mut i = 0;
    while i < a.never_trained.len() {
        let mut j = i;
        while j + 1 < a.never_trained.len() && a.never_trained[j + 1] == a.never_trained[j] + 1 {
            j += 1;
        }
        let (start, end) = (a.never_trained[i], a.never_trained[j] + 1);
        let dists: Vec<i64> = (-limit..=limit)
            .filter(|&rp| (start..end).contains(&t5_bucket(rp, bidirectional, nb, md)))
            .collect();
        let nearest = dists.iter().copied().min_by_key(|d| d.unsigned_abs());
        let farthest = dists.iter().copied().max_by_key(|d| d.unsigned_abs());
        if let (Some(n), Some(f)) = (nearest, farthest) {
            a.never_trained_ranges.push(NeverTrainedRange {
                start,
                end,
                nearest_distance: n,
                farthest_distance: (f.abs() < limit).then_some(f),
            });
        }
        i = j + 1;
    }

    let mut reach_rms: Vec<f64> = reachable.iter().map(|&r| rms_of(r)).collect();
    reach_rms.sort_by(|x, y| x.total_cmp(y));
    let reach_median = reach_rms.get(reach_rms.len() / 2).copied().unwrap_or(0.0);
    for &b in &a.unreachable {
        let rms = rms_of(b);
        let vals = row_vals(b);
        let mean = vals.iter().sum::<f64>() / heads as f64;
        let h = heads as f64;
        let mean_statistic = if rms > 0.0 {
            h * mean * mean / (rms * rms)
        } else {
            h
        };
        let deviation = if rms > 0.0 {
            vals.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (rms * rms)
        } else {
            0.0
        };
        let own = init.and_then(|s| crate::analyze::decay::estimate(&[rms], heads, s));
        let z = match (&own, &a.never_trained_factor) {
            (Some(o), Some(p)) => Some(crate::analyze::decay::disagreement(o, p)),
            _ => None,
        };
        let looks = init.map(|s| {
            let spread = 4.0 / (2.0 * h).sqrt();
            rms > 0.0
                && mean_statistic <= chi2_upper(1)
                && (heads < 2 || deviation >= chi2_lower(heads - 1))
                && rms / s <= 1.0 + spread
                && z.is_none_or(|z| z <= 4.0)
        });
        a.unreachable_rows.push(UnreachableRow {
            bucket: b,
            rms,
            mean,
            reachable_rms_median: reach_median,
            rms_over_init_std: init.map(|s| rms / s),
            mean_statistic,
            factor_z_vs_never_trained: z,
            looks_like_init: looks,
        });
    }

    let md_i = i64::try_from(md.min(4096)).unwrap_or(4096);
    a.distances = (-md_i..=md_i).collect();
    a.curves = (0..heads)
        .map(|h| {
            a.distances
                .iter()
                .map(|&d| table[[t5_bucket(d, bidirectional, nb, md).min(nb - 1), h]])
                .collect()
        })
        .collect();

    let trained: Vec<usize> = reachable
        .iter()
        .copied()
        .filter(|b| !a.never_trained.contains(b))
        .collect();
    for h in 0..heads {
        let vals = |seq: &[usize]| -> Vec<f64> { seq.iter().map(|&b| table[[b, h]]).collect() };
        let side_corr = |seq: &[usize]| -> Option<f64> {
            let v = vals(seq);
            let x: Vec<f64> = (0..v.len()).map(|i| i as f64).collect();
            spearman(&x, &v)
        };
        let sb = side_corr(&before);
        let sa = if bidirectional {
            side_corr(&after)
        } else {
            None
        };
        let mut seqs = vec![vals(&before)];
        if bidirectional {
            seqs.push(vals(&after));
        }
        let steps: Vec<bool> = seqs
            .iter()
            .flat_map(|s| s.windows(2).map(|w| w[1] < w[0]).collect::<Vec<_>>())
            .collect();
        let dec = (!steps.is_empty())
            .then(|| steps.iter().filter(|x| **x).count() as f64 / steps.len() as f64);
        let ac = pooled_autocorrelation(&seqs);
        let reach_vals: Vec<f64> = reachable.iter().map(|&b| table[[b, h]]).collect();
        let std = std_of(&reach_vals);
        let corrs = [sb, sa];
        // A head is init noise only if its trained buckets are noise at the init scale
        // (zero mean, χ² spread); trained heads of a briefly trained table can be rough.
        let noise_ok = init.is_none_or(|s| {
            let v: Vec<f64> = trained.iter().map(|&b| table[[b, h]]).collect();
            v.is_empty() || noise_at_scale(&v, s)
        });
        let untrained = a.looks_like_init || (untrained_verdict(&corrs, ac, std, init) && noise_ok);
        if untrained {
            a.untrained_heads.push(h);
        }
        a.head_trends.push(HeadTrend {
            head: h,
            spearman_before: sb,
            spearman_after: sa,
            decreasing_step_fraction: dec,
            neighbour_autocorrelation: ac,
            std,
            trend: trend_word(&corrs),
            looks_untrained: untrained,
        });
    }
    a
}
