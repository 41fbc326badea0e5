//! Audits of the kinds that are not 1-D tables: patch grids, relative-bias tables,
//! rotary frequencies and position-id buffers. Each function turns the pure analysis of
//! its kind into the table's verdict and findings.

use ndarray::{Array2, ArrayView1};

use crate::analyze::grid::{self, GridHints};
use crate::analyze::position_ids;
use crate::analyze::relative::{self, RelativeHints};
use crate::analyze::rotary::{self, LayerAgreement, RotaryAnalysis, RotaryHints, Scaling};
use crate::config::ConfigHints;
use crate::model::audit::{ConfigRotary, TableAudit};
use crate::model::{Finding, FindingCode};

fn hint_usize(h: &Option<crate::config::Hint<u64>>) -> Option<usize> {
    h.as_ref().and_then(|h| usize::try_from(h.value).ok())
}

/// Audits a patch-position grid.
pub fn grid(audit: &mut TableAudit, table: &Array2<f64>, config: Option<&ConfigHints>) {
    let hints = GridHints {
        image_size: config
            .and_then(|c| hint_usize(&c.image_size))
            .map(|s| (s, s)),
        patch_size: config
            .and_then(|c| hint_usize(&c.patch_size))
            .map(|s| (s, s)),
        extra_rows: None,
    };
    let Some(layout) = grid::infer_grid(table.nrows(), &audit.shape, &hints) else {
        audit.verdict = format!("no grid layout fits {} rows", table.nrows());
        audit.findings.push(
            Finding::warning(
                FindingCode::GridLayoutUnknown,
                format!(
                    "No square grid (with 0-8 extra rows) or config image/patch size fits {} rows.",
                    table.nrows()
                ),
            )
            .evidence(format!("shape {:?}", audit.shape))
            .limits("Non-square grids need image_size and patch_size in config.json."),
        );
        return;
    };
    let init_std = config.and_then(|c| c.initializer_range.as_ref().map(|h| h.value));
    let a = grid::analyze_grid_init(table.view(), &layout, init_std);
    let extra = layout.extra_rows;
    let mut verdict = format!(
        "{}x{} grid + {} extra row(s)",
        layout.height, layout.width, extra
    );
    if let Some(fixed) = &a.fixed_sincos
        && fixed.matches
    {
        {
            verdict = format!(
                "{verdict}; fixed 2-D sin-cos grid (first half of the columns encodes the {} index, max error {:.2e})",
                fixed.first_half_axis, fixed.max_abs_error
            );
            audit.findings.push(Finding::info(FindingCode::FixedGrid, format!(
                    "The grid is the fixed 2-D sin-cos formula, not learned; the first half of the columns encodes the {} index.",
                    fixed.first_half_axis
                ))
.rows([extra, table.nrows()])
.evidence(format!(
                    "max abs error {:.2e} against the formula (tolerance {:.1e}); {:.2e} with the axes swapped",
                    fixed.max_abs_error, fixed.tolerance, fixed.max_abs_error_other_order
                ))
.limits("A fixed grid is not trained: nothing about training can be read from it."));
        }
    }
    if let Some(s) = &a.separability {
        verdict = format!(
            "{verdict}; additive row+column model explains {:.0}%",
            100.0 * s.additive
        );
    }
    let outliers: Vec<usize> = a
        .odd_patches
        .iter()
        .filter(|p| p.reason == "norm-outlier")
        .map(|p| p.table_row)
        .collect();
    if !outliers.is_empty() {
        audit.findings.push(
            Finding::info(
                FindingCode::NormOutlier,
                format!(
                    "{} patch(es) have a norm far from the others (table rows {:?}).",
                    outliers.len(),
                    outliers
                ),
            )
            .ranges(outliers.iter().map(|&r| [r, r + 1]))
            .evidence(format!(
                "median patch norm {:.4}; more than 5 robust standard deviations away",
                a.norm_median.unwrap_or(f64::NAN)
            ))
            .limits("A norm outlier moved far from the init: it was trained, not left untrained."),
        );
    }
    let untrained_patches: Vec<&grid::OddPatch> = a
        .odd_patches
        .iter()
        .filter(|p| p.reason != "norm-outlier")
        .collect();
    if !untrained_patches.is_empty() {
        let rows: Vec<usize> = untrained_patches.iter().map(|p| p.table_row).collect();
        let first = rows.iter().min().copied().unwrap_or(extra);
        let last = rows.iter().max().copied().unwrap_or(extra) + 1;
        let noise_like = a.noise_like_fraction.unwrap_or(0.0);
        audit.findings.push(Finding::warning(FindingCode::UntrainedRows, format!(
                "{} of {} patches look unlike their grid neighbours (e.g. patch ({}, {}): {}).",
                untrained_patches.len(),
                layout.height * layout.width,
                untrained_patches.first().map(|p| p.row).unwrap_or(0),
                untrained_patches.first().map(|p| p.col).unwrap_or(0),
                untrained_patches.first().map(|p| p.reason.as_str()).unwrap_or("")
            ))
.rows([first, last])
.evidence(format!("noise-like share of patches {:.2}; median patch norm {:.4}", noise_like, a.norm_median.unwrap_or(f64::NAN)))
.limits("Patches at image borders are often less trained; check with images whose content reaches the edges before re-initialising."));
    }
    audit.positions = Some(layout.height * layout.width);
    audit.verdict = verdict;
    audit.grid = Some(a);
}

/// Audits a relative-bias table: T5 buckets or a windowed (Swin-style) offset table.
pub fn relative(audit: &mut TableAudit, table: &Array2<f64>, config: Option<&ConfigHints>) {
    let lower = audit.name.to_ascii_lowercase();
    let swin = lower.contains("relative_position_bias_table");
    let a = if swin {
        let window = config
            .and_then(|c| hint_usize(&c.window_size))
            .map(|w| (w, w));
        let init = config
            .and_then(|c| c.initializer_range.as_ref().map(|h| h.value))
            .or(Some(0.02));
        relative::analyze_swin(table.view(), window, init)
    } else {
        let bidirectional = if lower.contains("decoder") {
            Some(false)
        } else if lower.contains("encoder") {
            Some(true)
        } else {
            None
        };
        // HF T5's own module (`…SelfAttention.relative_attention_bias`, a t5 model type
        // or an initializer_factor) initialises the bias with
        // normal(0, initializer_factor·d_model^-0.5), factor 1.0 by default
        // (check-values §5.1); other families (MPNet: `encoder.relative_attention_bias`)
        // use the config's initializer_range.
        let t5_rule = audit.name.contains("SelfAttention.relative_attention_bias")
            || config.is_some_and(|c| {
                c.initializer_factor.is_some()
                    || c.model_type
                        .as_ref()
                        .is_some_and(|m| m.to_ascii_lowercase().contains("t5"))
            });
        let t5_std = config.and_then(|c| {
            let factor = c.initializer_factor.as_ref().map_or(1.0, |f| f.value);
            c.hidden_size
                .as_ref()
                .map(|h| factor * (h.value as f64).powf(-0.5))
        });
        let range = config.and_then(|c| c.initializer_range.as_ref().map(|h| h.value));
        let init_std = if t5_rule {
            t5_std.or(range)
        } else {
            range.or(t5_std)
        };
        relative::analyze_t5(
            table.view(),
            &RelativeHints {
                bidirectional,
                num_buckets: config.and_then(|c| hint_usize(&c.relative_buckets)),
                max_distance: config.and_then(|c| hint_usize(&c.relative_max_distance)),
                init_std,
                name: Some(audit.name.clone()),
            },
        )
    };
    if let Some(p) = &a.problem {
        audit.findings.push(Finding::warning(
            FindingCode::AnalysisProblem,
            format!("The relative-bias analysis could not run fully: {p}."),
        ));
    }
    let factor_text = |e: &crate::analyze::decay::DecayEstimate| {
        format!(
            "common factor f = {:.3} (95% interval {:.3}..{:.3}) of the init std {:.4}",
            e.factor, e.interval[0], e.interval[1], e.init_std
        )
    };
    if !a.looks_like_init && !a.never_trained_ranges.is_empty() {
        let describe = |r: &relative::NeverTrainedRange| {
            let d = |x: i64| format!("{x}");
            let span = match r.farthest_distance {
                Some(f) if r.nearest_distance < 0 => {
                    format!("distances {}..={}", d(f), d(r.nearest_distance))
                }
                Some(f) => format!("distances {}..={}", d(r.nearest_distance), d(f)),
                None if r.nearest_distance < 0 => format!("distances ≤ {}", r.nearest_distance),
                None => format!("distances ≥ {}", r.nearest_distance),
            };
            format!("buckets {}..{} ({span})", r.start, r.end)
        };
        let parts: Vec<String> = a.never_trained_ranges.iter().map(describe).collect();
        let shortest = a
            .never_trained_ranges
            .iter()
            .map(|r| r.nearest_distance.unsigned_abs())
            .min()
            .unwrap_or(0);
        let est = a.never_trained_factor.as_ref();
        audit.findings.push(
            Finding::warning(
                FindingCode::UntrainedRows,
                format!(
                    "Relative-bias {} never trained: training probably never used sequences longer than {} tokens (no distance of {} or more).",
                    parts.join(" and "),
                    shortest,
                    shortest
                ),
            )
            .ranges(a.never_trained_ranges.iter().map(|r| [r.start, r.end]))
            .evidence(format!(
                "{} buckets at the far end of their direction hold zero-mean noise of one common scale, {}; the nearer buckets are far from it (mean or spread beyond the 0.999 quantile of that noise)",
                a.never_trained.len(),
                est.map(factor_text).unwrap_or_default()
            ))
            .limits("Decided from the values alone: a bucket trained for very few steps can still look like its init. f < 1 is expected from weight decay; f is estimated from a few values per bucket."),
        );
    }
    for row in &a.unreachable_rows {
        let shrink = row
            .rms_over_init_std
            .map(|f| format!("{f:.3}"))
            .unwrap_or_else(|| "unknown".into());
        let agree = match (row.factor_z_vs_never_trained, &a.never_trained_factor) {
            (Some(z), Some(e)) => format!(
                "; never-trained buckets' factor {:.3}, disagreement z {z:.2}",
                e.factor
            ),
            _ => String::new(),
        };
        match row.looks_like_init {
            Some(false) => audit.findings.push(Finding::warning(FindingCode::UnreachableBucketAltered, format!(
                    "Bucket {} is never produced by the bucket function, so it cannot have been trained, yet it is not noise of the init's shape at any scale.",
                    row.bucket
                ))
.rows([row.bucket, row.bucket + 1])
.evidence(format!(
                    "rms {:.4}, mean {:.4} (mean statistic h·mean²/rms² {:.2}, noise: below 10.8); reachable rows' median rms {:.4}; rms / init std {shrink}{agree}",
                    row.rms,
                    row.mean,
                    row.mean_statistic,
                    row.reachable_rms_median,
                ))
.limits("The row was written by something other than training (a conversion, a different init, or an edit); it has no effect on attention.")),
            Some(true) => audit.findings.push(Finding::info(FindingCode::UnreachableBucket, format!("Bucket {} is never produced by the bucket function and still holds its initial values (init noise times a factor {shrink}{}), as expected.", row.bucket, if row.rms_over_init_std.is_some_and(|f| f < 1.0) { "; weight decay shrinks values that never get a gradient" } else { "" }))
.rows([row.bucket, row.bucket + 1])
.evidence(format!("rms {:.4}, mean {:.4}, rms / init std {shrink}{agree}", row.rms, row.mean))
.limits("Expected for this bucket layout; nothing to do.")),
            None => {}
        }
    }
    if !a.untrained_heads.is_empty() {
        let message = if a.looks_like_init {
            format!(
                "The whole table looks like its initialization: every reachable bucket is zero-mean noise of one scale ({}); heads {:?} are untrained.",
                a.never_trained_factor
                    .as_ref()
                    .map(factor_text)
                    .unwrap_or_default(),
                a.untrained_heads
            )
        } else {
            format!(
                "Head(s) {:?} show no trend with distance and look like initial noise.",
                a.untrained_heads
            )
        };
        let mut f = Finding::warning(FindingCode::UntrainedHeads, message);
        if a.looks_like_init {
            f = f.ranges(a.never_trained_ranges.iter().map(|r| [r.start, r.end]));
        }
        audit.findings.push(f
.evidence(a
                .head_trends
                .iter()
                .filter(|h| h.looks_untrained)
                .map(|h| format!("head {}: {} (std {:.4})", h.head, h.trend, h.std))
                .collect::<Vec<_>>()
                .join("; "))
.limits("A head can legitimately ignore distance; confirm with attention patterns on real inputs."));
    }
    let decaying = a
        .head_trends
        .iter()
        .filter(|h| h.trend.contains("decay"))
        .count();
    audit.verdict = format!(
        "{} table, {} buckets x {} heads, {}; {} of {} heads decay with distance",
        a.style,
        a.buckets,
        a.heads,
        if a.bidirectional {
            "bidirectional"
        } else {
            "causal"
        },
        decaying,
        a.heads
    );
    audit.positions = Some(a.buckets);
    audit.dim = Some(a.heads);
    audit.relative = Some(a);
}

fn rotary_hints(config: Option<&ConfigHints>, len: usize) -> RotaryHints {
    let original = config
        .and_then(|c| c.rope_scaling.as_ref())
        .and_then(|h| h.value.get("original_max_position_embeddings"))
        .and_then(|v| v.as_u64())
        .and_then(|v| usize::try_from(v).ok());
    let head_dim = config.and_then(|c| {
        hint_usize(&c.head_dim)
            .or_else(|| Some(hint_usize(&c.hidden_size)? / hint_usize(&c.num_heads)?.max(1)))
    });
    let partial = config
        .and_then(|c| c.partial_rotary_factor.as_ref())
        .map(|h| h.value)
        .unwrap_or(1.0);
    let rotary_dim = head_dim
        .map(|h| ((h as f64) * partial).round() as usize)
        .filter(|d| d.div_ceil(2) == len);
    RotaryHints {
        declared_context: config.and_then(|c| hint_usize(&c.max_positions)),
        original_context: original,
        config_theta: config.and_then(|c| c.rope_theta.as_ref()).map(|h| h.value),
        rotary_dim,
    }
}

/// Findings and verdict shared by stored and config-derived rotary analyses.
pub fn rotary_findings(a: &RotaryAnalysis) -> (String, Vec<Finding>) {
    let mut findings = Vec::new();
    let base = a
        .base
        .map(|b| {
            if (b - b.round()).abs() < 1e-6 * b.abs().max(1.0) {
                format!("{b:.0}")
            } else {
                format!("{b:.4}")
            }
        })
        .unwrap_or_else(|| "unknown".into());
    let mut verdict = format!("base {base}, scaling {}", a.scaling);
    if a.scaling != Scaling::None {
        verdict = format!("{verdict} (factor {:.4})", a.factor);
        let detail = if let Some(r) = &a.ramp {
            format!(
                "frequencies {}..{} kept, {}..{} smoothed, {}..{} divided; original context {}",
                r.unchanged.0,
                r.unchanged.1,
                r.smoothed.0,
                r.smoothed.1,
                r.divided.0,
                r.divided.1,
                r.original_context
                    .map(|c| format!("{c:.0}"))
                    .unwrap_or_else(|| "unknown".into())
            )
        } else if let Some(alpha) = a.ntk_alpha {
            format!(
                "base enlarged by NTK alpha {alpha:.4} from {}",
                a.original_base.map(|b| format!("{b}")).unwrap_or_default()
            )
        } else {
            format!("factor {:.4}", a.factor)
        };
        findings.push(Finding::info(FindingCode::RotaryScaled, format!("Rotary frequencies are rescaled ({}), implying a context extension by {:.4}x.", a.scaling, a.factor))
.evidence(detail)
.limits("The recipe is read from the frequencies alone; the fine-tuning that should accompany it is not visible here."));
    }
    if let Some(p) = &a.low_precision {
        let worst = p
            .phase_error
            .iter()
            .map(|e| format!("{:.2} rad at {}", e.radians, e.position))
            .collect::<Vec<_>>()
            .join(", ");
        findings.push(Finding::warning(FindingCode::LowPrecision, format!("The stored frequencies are exactly the {} rounding of the exact ones: they were cast to {} at some point.", p.dtype, p.dtype))
.evidence(format!(
                "{} of {} entries equal the rounded exact value; max relative error {:.2e}; phase error {}",
                p.entries_matching_rounded_exact, p.entries, p.max_rel_error, worst
            ))
.limits("Inference code that recomputes the frequencies in f32 is unaffected; code that uses the stored buffer inherits the phase error."));
    }
    if let Some(w) = &a.wavelengths
        && let (Some(ctx), Some(beyond)) = (w.context, w.beyond_context)
        && beyond > 0
    {
        verdict =
            format!("{verdict}; {beyond} frequencies never complete a turn within {ctx} tokens");
    }
    if let Some(p) = &a.problem {
        findings.push(Finding::warning(
            FindingCode::AnalysisProblem,
            format!("The rotary analysis could not run fully: {p}."),
        ));
    }
    (verdict, findings)
}

/// Audits stored rotary frequencies (inverse frequencies, or GGUF per-dimension divisors).
pub fn rotary(audit: &mut TableAudit, values: ArrayView1<f64>, config: Option<&ConfigHints>) {
    let hints = rotary_hints(config, values.len());
    let lower = audit.name.to_ascii_lowercase();
    let divisors = lower.contains("rope_freqs")
        || lower.contains("rope_factors")
        || lower.contains("rope.freqs") && values.iter().all(|v| *v >= 1.0);
    let a = if divisors {
        let base = hints.config_theta.unwrap_or(10000.0);
        rotary::analyze_rope_factors(values, base, &hints)
    } else {
        rotary::analyze_inv_freq(values, &hints)
    };
    let (verdict, findings) = rotary_findings(&a);
    audit.verdict = verdict;
    audit.findings.extend(findings);
    audit.positions = None;
    audit.dim = Some(a.rotary_dim);
    audit.rotary = Some(a);
}

/// The config-derived rotary entry with its verdict and findings, when the config names
/// a rotary base (and no frequency tensor is stored: the caller checks).
pub fn config_rotary(config: Option<&ConfigHints>) -> Option<ConfigRotary> {
    let analysis = rotary_from_config(config)?;
    let (mut verdict, mut findings) = rotary_findings(&analysis);
    // A base the file does not state (a format's documented default) is said to be assumed
    // in the verdict itself, not only in the config's hint list.
    if let Some(h) = config.and_then(|c| c.rope_theta.as_ref())
        && h.key.contains("assumed")
    {
        verdict = format!("{verdict}; base assumed, not stated ({})", h.key);
    }
    findings.sort_by_key(|f| std::cmp::Reverse(f.severity));
    Some(ConfigRotary {
        analysis,
        verdict,
        findings,
    })
}

/// `rotary-layers-differ`, when the stored per-layer rotary vectors do not agree.
pub fn rotary_layers(agreement: &LayerAgreement) -> Option<Finding> {
    if agreement.identical {
        return None;
    }
    Some(
        Finding::warning(
            FindingCode::RotaryLayersDiffer,
            format!(
                "{} of {} stored rotary vectors differ from the first one.",
                agreement.differing.len(),
                agreement.count
            ),
        )
        .evidence(
            agreement
                .differing
                .iter()
                .take(3)
                .map(|d| format!("{}: max rel diff {:.2e}", d.name, d.max_rel_diff))
                .collect::<Vec<_>>()
                .join("; "),
        )
        .limits(
            "Layers may legitimately use different bases (e.g. local and global attention layers).",
        ),
    )
}

/// The rotary analysis implied by the config's `rope_theta` / `rope_scaling`.
fn rotary_from_config(config: Option<&ConfigHints>) -> Option<RotaryAnalysis> {
    let c = config?;
    let theta = c.rope_theta.as_ref()?.value;
    let head_dim = hint_usize(&c.head_dim)
        .or_else(|| Some(hint_usize(&c.hidden_size)? / hint_usize(&c.num_heads)?.max(1)))?;
    let partial = c
        .partial_rotary_factor
        .as_ref()
        .map(|h| h.value)
        .unwrap_or(1.0);
    let rotary_dim = ((head_dim as f64) * partial).round() as usize;
    Some(rotary::rotary_from_config(
        theta,
        rotary_dim,
        c.rope_scaling.as_ref().map(|h| &h.value),
        hint_usize(&c.max_positions),
    ))
}

/// Audits an integer position-id buffer.
pub fn position_ids(audit: &mut TableAudit, values: &[i64], table_rows: Option<usize>) {
    let check = position_ids::check_position_ids(values);
    if check.contiguous {
        audit.verdict = format!("0..{} consecutive (offset {})", check.length, check.offset);
    } else {
        audit.verdict = "not a consecutive index".into();
        audit.findings.push(Finding::warning(FindingCode::PositionIdsMismatch, format!(
                "The buffer is not the consecutive index offset..offset+n; first mismatch at element {}.",
                check.first_mismatch.map(|i| i.to_string()).unwrap_or_else(|| "?".into())
            ))
.ranges(check.first_mismatch.map(|i| [i, check.length]))
.evidence(format!("values range {:?}, length {}", check.value_range, check.length))
.limits("Some models build position ids at run time and never read this buffer."));
    }
    if let Some(rows) = table_rows
        && check.contiguous
        && check.length as u64 + check.offset.max(0) as u64 > rows as u64
    {
        audit.findings.push(
            Finding::warning(
                FindingCode::LengthMismatch,
                format!(
                    "The buffer indexes up to {} but the position table has {rows} rows.",
                    check.length as i64 + check.offset
                ),
            )
            .evidence(format!(
                "buffer length {}, offset {}",
                check.length, check.offset
            ))
            .limits("Indices past the table would fail at run time if this buffer were used."),
        );
    }
    audit.positions = Some(check.length);
    audit.position_ids = Some(check);
}
