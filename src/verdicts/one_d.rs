//! Audit of 1-D position tables (`learned-absolute` and `fixed-sinusoidal`): runs the
//! profile analyses, the untrained-row detection or the formula fit, and turns their
//! numbers into a verdict and findings with evidence and limits.

use std::borrow::Cow;

use ndarray::Array2;
use serde::Serialize;

use crate::analyze::ranges::ranges_from_rows;
use crate::analyze::stats::median;
use crate::analyze::untrained::{self, UntrainedHints};
use crate::analyze::{hygiene, neighbours, norms, periodicity, sinusoid, spectrum, waves};
use crate::checkpoint::Dtype;
use crate::config::ConfigHints;
use crate::detect::Kind;
use crate::model::audit::{Profile, TableAudit, TrainedRowsProfile};
use crate::model::{Finding, FindingCode, Severity};
use crate::text::rows as range_text;

/// Leading principal components kept for plots and waves.
pub const COMPONENTS: usize = 8;
/// Largest side of the downsampled position-by-position cosine matrix.
pub const COSINE_MATRIX_SIDE: usize = 256;
/// Largest distance of the locality profile.
pub const LOCALITY_DISTANCE: usize = 128;
/// Largest lag of the autocorrelation (longer periods show in the waves of the leading
/// components).
pub const AUTOCORRELATION_LAGS: usize = 512;

/// Rows reserved before position 0 by a model family's indexing (never indexed, or
/// used only for padding), from the config's model type: OPT and BART offset by 2
/// (check-values §3.4, §3.5); RoBERTa-style models start at pad_token_id + 1 (§3.3).
pub fn reserved_rows(config: Option<&ConfigHints>) -> usize {
    let Some(c) = config else { return 0 };
    match c.model_type.as_deref() {
        Some("opt" | "bart" | "mbart" | "blenderbot" | "marian-learned") => 2,
        Some(
            "roberta" | "xlm-roberta" | "camembert" | "longformer" | "xlm-roberta-xl"
            | "data2vec-text" | "mpnet",
        ) => c
            .pad_token_id
            .as_ref()
            .and_then(|p| usize::try_from(p.value + 1).ok())
            .unwrap_or(2),
        _ => 0,
    }
}

/// Rows the config says the table should have, and the key it came from.
fn declared_rows(name: &str, config: Option<&ConfigHints>) -> Option<(usize, String)> {
    let c = config?;
    let lower = name.to_ascii_lowercase();
    let hint = if lower.contains("encoder") && c.max_source_positions.is_some() {
        c.max_source_positions.as_ref()
    } else {
        c.max_positions.as_ref()
    }?;
    let declared = usize::try_from(hint.value).ok()?;
    let offset = match c.model_type.as_deref() {
        Some("opt" | "bart" | "mbart" | "blenderbot") => 2,
        _ => 0,
    };
    let why = if offset > 0 {
        format!(
            "{} {} + {offset} reserved rows ({})",
            hint.key,
            hint.value,
            c.model_type.as_deref().unwrap_or("")
        )
    } else {
        format!("{} {}", hint.key, hint.value)
    };
    Some((declared + offset, why))
}

fn profile<'a>(
    table: &'a Array2<f64>,
    dtype: &Dtype,
) -> (Profile, Cow<'a, Array2<f64>>, Vec<usize>) {
    let hygiene = hygiene::hygiene(table.view());
    // Copy the table only when some rows must be dropped.
    let (t, kept) = if hygiene.non_finite_count == 0 {
        (Cow::Borrowed(table), (0..table.nrows()).collect())
    } else {
        let finite = hygiene::finite_rows(table.view());
        (Cow::Owned(finite.table), finite.indices)
    };
    let n = t.nrows();
    let profile = Profile {
        analysed_rows: n,
        norms: norms::norm_profile_stored(t.view(), dtype.half_ulp_below_one()),
        neighbour_cosine: neighbours::adjacent_cosines(t.view()),
        locality: neighbours::locality_profile(
            t.view(),
            LOCALITY_DISTANCE.min(n.saturating_sub(1)),
        ),
        cosine_matrix: neighbours::cosine_matrix(t.view(), COSINE_MATRIX_SIDE),
        waves: Vec::new(),
        autocorrelation: periodicity::autocorrelation(
            t.view(),
            (n / 2).clamp(1, AUTOCORRELATION_LAGS),
        ),
        repeated_block: periodicity::repeated_block(t.view(), 1e-6),
        hygiene,
    };
    (profile, t, kept)
}

/// Audits one 1-D table (rows × dim) of the given storage type.
pub fn audit_table(
    audit: &mut TableAudit,
    table: &Array2<f64>,
    dtype: &Dtype,
    config: Option<&ConfigHints>,
    warnings: &mut Vec<String>,
) {
    let (n, d) = table.dim();
    audit.positions = Some(n);
    audit.dim = Some(d);
    let (mut prof, finite, kept) = profile(table, dtype);
    let h = &prof.hygiene;
    if h.non_finite_count > 0 {
        for r in &h.non_finite_rows {
            audit.findings.push(Finding::error(FindingCode::NonFinite, format!("{} {} NaN or infinite values; the analysis continues on the {} finite rows.", range_text(*r), if r[1] == r[0] + 1 { "holds" } else { "hold" }, kept.len()))
.rows(*r)
.evidence(format!("{} non-finite values in all", h.non_finite_count))
.limits("Any forward pass that reads these rows produces NaN; they must be repaired or the run restarted from an earlier checkpoint."));
        }
    }
    if !h.duplicate_groups.is_empty() {
        let first = &h.duplicate_groups[0];
        audit.findings.push(Finding::warning(FindingCode::DuplicateRows, format!("{} group(s) of bit-identical rows, e.g. rows {:?}.", h.duplicate_groups.len(), first))
.ranges(ranges_from_rows(h.duplicate_groups.iter().flatten().copied()))
.evidence(format!("groups: {:?}", h.duplicate_groups.iter().take(5).collect::<Vec<_>>()))
.limits("Identical rows make those positions indistinguishable to the model; a copy-based extension or a bug in a conversion script are the usual causes."));
    }
    if finite.nrows() < 2 {
        audit.verdict = "too few finite rows to analyse".into();
        audit.profile = Some(prof);
        return;
    }
    match spectrum::spectrum(finite.view(), COMPONENTS) {
        Ok(sp) => {
            prof.waves = sp
                .components
                .iter()
                .map(|c| waves::dominant_wave(ndarray::ArrayView1::from(c.as_slice())))
                .collect();
            audit.spectrum = Some(sp);
        }
        Err(e) => warnings.push(format!("{}: spectrum not computed: {e}", audit.name)),
    }
    // A period of one row is a run of duplicates, reported as duplicate-rows.
    if let Some(b) = prof.repeated_block.as_ref().filter(|b| b.period >= 2) {
        audit.findings.push(Finding::info(FindingCode::RepeatedBlock, format!("Rows {}..{} repeat with a period of {} rows: the table was extended by copying a shorter one.", b.start, b.end, b.period))
.rows([b.start, b.end])
.evidence(format!("{} rows covered, max abs difference {:.2e}", b.rows_covered, b.max_abs_difference))
.limits("Copies that were trained afterwards drift apart; an exact repeat means the copied rows were not trained since."));
    }
    if let Some((expected, why)) = declared_rows(&audit.name, config)
        && expected != n
    {
        audit.findings.push(Finding::warning(FindingCode::LengthMismatch, format!("The table has {n} rows but the config implies {expected}."))
.evidence(why)
.limits("Some families add reserved rows this tool does not know; check how the model computes position indices."));
    }
    // A fixed table that is its formula (exactly, or as the simulated low-precision
    // computation reproduces it) has every row norm sqrt(d/2) by construction
    // (check-values §1.3): differences between its norms are rounding, not outliers.
    let matches_formula = match audit.kind {
        Kind::FixedSinusoidal => fixed(audit, &finite, dtype),
        _ => {
            learned(audit, &finite, &kept, &prof, config);
            false
        }
    };
    // Zero rows: padding rows are normal in fixed tables and RoBERTa-style learned ones.
    let zero = &prof.hygiene.zero_rows;
    if !zero.is_empty() {
        let pad = config
            .and_then(|c| c.pad_token_id.as_ref())
            .map(|p| p.value);
        let at_pad =
            pad.is_some_and(|p| zero.len() == 1 && zero[0] == [p as usize, p as usize + 1]);
        audit.findings.push(Finding::info(FindingCode::ZeroRows, format!(
                "{} all-zero row(s): {}{}.",
                prof.hygiene.zero_row_count,
                crate::text::row_list(zero, 6),
                if at_pad { " (the padding row of pad_token_id)" } else { "" }
            ))
.ranges(zero.iter().copied())
.evidence("every value exactly 0.0")
.limits("A zero padding row is the usual convention; a zero row that real positions index carries no position information."));
    }
    let outliers: Vec<usize> = prof
        .norms
        .outliers
        .iter()
        .map(|&i| kept[i])
        .filter(|r| {
            !audit
                .untrained
                .as_ref()
                .is_some_and(|u| u.ranges.iter().any(|x| x[0] <= *r && *r < x[1]))
        })
        .filter(|r| !zero.iter().any(|x| x[0] <= *r && *r < x[1]))
        .collect();
    // A handful of outliers is informative; a fifth of the rows "out" means the norms
    // are simply spread (common in trained tables), so say nothing.
    if !matches_formula && !outliers.is_empty() && outliers.len() <= (n / 50).max(1) {
        audit.findings.push(Finding::info(FindingCode::NormOutlier, format!("{} row(s) have a norm far from the others (robust z > 3.5), e.g. rows {:?}.", outliers.len(), &outliers[..outliers.len().min(6)]))
.ranges(ranges_from_rows(outliers.iter().copied()))
.evidence(format!("median row norm {:.4}", prof.norms.median.unwrap_or(f64::NAN)))
.limits("Row 0 is often an outlier in trained tables (it is seen by every sequence); by itself this is not a defect."));
    }
    audit.profile = Some(prof);
}

fn learned(
    audit: &mut TableAudit,
    table: &Array2<f64>,
    kept: &[usize],
    prof: &Profile,
    config: Option<&ConfigHints>,
) {
    let n_all = audit.positions.unwrap_or(table.nrows());
    // Rows before the first indexed position: known from the model family, or inferred
    // when the row at pad_token_id (0..3) is the all-zero padding row of a table whose
    // positions start after it (padding_idx + 1, the RoBERTa-style rule).
    let family_reserved = reserved_rows(config);
    let pad = config
        .and_then(|c| c.pad_token_id.as_ref())
        .and_then(|p| usize::try_from(p.value).ok());
    let inferred = family_reserved == 0
        && pad.is_some_and(|p| {
            p <= 3 && p + 1 < n_all && prof.hygiene.zero_rows.iter().any(|z| z[0] <= p && p < z[1])
        });
    let reserved = if inferred {
        pad.unwrap_or(0) + 1
    } else {
        family_reserved
    };
    let offset_source = if inferred {
        format!(
            "inferred: row {} is the all-zero padding row of pad_token_id {}, so positions start at row {reserved}",
            pad.unwrap_or(0),
            pad.unwrap_or(0)
        )
    } else {
        format!(
            "the {} family starts positions at row {reserved}",
            config.and_then(|c| c.model_type.as_deref()).unwrap_or("?")
        )
    };
    let hints = UntrainedHints {
        init_std: config
            .and_then(|c| c.initializer_range.as_ref())
            .map(|h| h.value),
        reserved_rows: reserved,
        declared_positions: declared_rows(&audit.name, config).map(|x| x.0),
    };
    let report = untrained::detect_untrained(table.view(), &hints);
    // Map analysed-row indices back to table rows when non-finite rows were dropped.
    let to_table = |r: [usize; 2]| -> [usize; 2] {
        let start = kept.get(r[0]).copied().unwrap_or(n_all);
        let end = if r[1] == 0 {
            0
        } else {
            kept.get(r[1] - 1).map(|x| x + 1).unwrap_or(n_all)
        };
        [start, end]
    };
    let ev = &report.evidence;
    let decay_text = match &ev.decay {
        Some(dk) => format!(
            "; their RMS is {:.4} x the init std (95 % interval {:.4}..{:.4}, {} rows{}){}",
            dk.factor,
            dk.interval[0],
            dk.interval[1],
            dk.rows,
            if dk.rows_agree {
                ", one common factor"
            } else {
                "; the rows do NOT agree on one factor"
            },
            if dk.interval[0] <= 1.0 && 1.0 <= dk.interval[1] {
                ": the init scale itself, no sign of weight decay"
            } else if dk.interval[1] < 1.0 {
                ": shrunk by one factor, as decoupled weight decay alone shrinks rows that never get a gradient"
            } else {
                ": above the init scale, which decay cannot produce (another init than the config's?)"
            }
        ),
        None => String::new(),
    };
    let init_text = match (ev.init_std_hint, ev.init_std_estimate) {
        (Some(h), Some(e)) => format!("{h} from config, {e:.4} estimated"),
        (Some(h), None) => format!("{h} from config"),
        (None, Some(e)) => format!("{e:.4} estimated"),
        _ => "unknown".into(),
    };
    let trained_text = format!(
        "trained rows: median neighbour cosine {}, rms {}, subspace energy {}",
        fmt_opt(ev.trained.median_neighbour_cosine),
        fmt_opt(ev.trained.median_rms),
        fmt_opt(ev.trained.median_subspace_energy),
    );
    // The numbers of a finding's own rows (analysed-row range), beside the trained rows'
    // and what independent noise gives: each finding carries the evidence for its rows.
    let signals = &report.signals;
    let own = |r: [usize; 2], with_decay: bool| -> String {
        let pick = |v: &Vec<f64>| -> Option<f64> {
            let part: Vec<f64> = v
                .get(r[0]..r[1].min(v.len()))
                .unwrap_or(&[])
                .iter()
                .copied()
                .filter(|x| x.is_finite())
                .collect();
            median(&part)
        };
        format!(
            "{}: median neighbour cosine {} (independent rows give a median of {:.3}: the largest of up to 6 cosines, each ~ N(0, 1/{})), median rms {}, median energy in the trained rows' leading subspace {} (noise gives {}); {trained_text}; init std {init_text}{}",
            if r[1] == r[0] + 1 {
                "this row"
            } else {
                "these rows"
            },
            fmt_opt(pick(&signals.neighbour_cosine)),
            ev.noise_neighbour_cosine_median,
            ev.dim,
            fmt_opt(pick(&signals.rms)),
            fmt_opt(pick(&signals.subspace_energy)),
            fmt_opt(ev.subspace_noise_expected),
            if with_decay { decay_text.as_str() } else { "" },
        )
    };
    // Table rows back to analysed rows (the inverse of `to_table` on kept rows).
    let to_analysed = |r: [usize; 2]| -> [usize; 2] {
        [
            kept.partition_point(|&k| k < r[0]),
            kept.partition_point(|&k| k < r[1]),
        ]
    };
    let limits = "Evidence from the weights alone: these rows look like initial noise (one common scale at or below the init std, Gaussian values, off the trained rows' subspace, unrelated to their neighbours). Confirm on held-out sequences that reach these positions before re-initialising, truncating or extending from them.";
    // The fading stretch, in table rows, up to the start of the untrained tail when one
    // follows it: short untrained runs inside that region are the noisy edge of the fade
    // (a weakly trained row crosses the per-row threshold by chance), so they are told in
    // the partially-trained finding instead of as separate warnings. Short: at most 3
    // rows, or a sixteenth of the region.
    let tail_start = report
        .ranges
        .last()
        .map(|r| to_table(*r))
        .filter(|r| r[1] == n_all)
        .map(|r| r[0]);
    let fading_span = (!report.fading.is_empty()).then(|| {
        let start = to_table(report.fading[0])[0];
        let end = to_table(report.fading[report.fading.len() - 1])[1];
        [start, tail_start.filter(|&t| t >= end).unwrap_or(end)]
    });
    let short_in_fade = fading_span.map_or(0, |f| ((f[1] - f[0]) / 16).max(3));
    let mut within_fade: Vec<[usize; 2]> = Vec::new();
    for r in &report.ranges {
        let r_analysed = *r;
        let r = to_table(*r);
        let tail = r[1] == n_all;
        let in_reserved = r[1] <= reserved;
        if !tail
            && r[1] - r[0] <= short_in_fade
            && fading_span.is_some_and(|f| f[0] <= r[0] && r[1] <= f[1])
        {
            within_fade.push(r);
            continue;
        }
        audit.findings.push(Finding::new(if in_reserved { Severity::Info } else { Severity::Warning }, if tail { FindingCode::UntrainedTail } else { FindingCode::UntrainedRows }, if tail {
                if r[0] <= reserved {
                    format!("No row of the table shows training: rows {}..{} all look like the initialization (a checkpoint saved before training, or a table training never reached).", r[0], r[1])
                } else if reserved > 0 {
                    format!("Rows {}..{} ({} rows; token positions {}..{}) look untrained: training probably never used sequences longer than {} tokens (positions start at row {reserved}).", r[0], r[1], r[1] - r[0], r[0] - reserved, r[1] - reserved, r[0] - reserved)
                } else {
                    format!("Positions {}..{} ({} rows) look untrained: training probably never used sequences longer than {} tokens.", r[0], r[1], r[1] - r[0], r[0])
                }
            } else if in_reserved {
                format!(
                    "{} {} untrained, as expected: never indexed, since positions start at row {reserved} ({offset_source}).",
                    range_text(r),
                    if r[1] == r[0] + 1 { "looks" } else { "look" }
                )
            } else {
                format!(
                    "{} {} untrained: never indexed, or only very rarely.",
                    range_text(r),
                    if r[1] == r[0] + 1 { "looks" } else { "look" }
                )
            })
.rows(r)
.evidence(own(r_analysed, !in_reserved))
.limits(limits));
    }
    // The span the partially-trained finding names, for the verdict line too.
    let mut partial_span: Option<[usize; 2]> = None;
    if !report.fading.is_empty() {
        // One finding for the whole fading stretch, however fragmented the rows are.
        let pieces: Vec<[usize; 2]> = report.fading.iter().map(|r| to_table(*r)).collect();
        // The finding covers the fade and the untrained runs at its edge told in it.
        let end = within_fade
            .iter()
            .map(|x| x[1])
            .fold(pieces[pieces.len() - 1][1], usize::max);
        let r = [pieces[0][0], end];
        partial_span = Some(r);
        let rows: usize = pieces.iter().map(|p| p[1] - p[0]).sum();
        // Every row the finding is about: the fading rows and the short untrained runs
        // told in it (the trained rows between them are not part of it).
        let covered = ranges_from_rows(
            pieces
                .iter()
                .chain(within_fade.iter())
                .flat_map(|x| x[0]..x[1]),
        );
        audit.findings.push(Finding::info(FindingCode::PartiallyTrained, format!(
                "{rows} rows between {} and {} move gradually from trained structure towards noise ({}): trained on few sequences that long.{}",
                r[0],
                r[1],
                crate::text::row_list(&pieces, 6),
                if within_fade.is_empty() {
                    String::new()
                } else {
                    let n: usize = within_fade.iter().map(|x| x[1] - x[0]).sum();
                    format!(
                        " Within it, {n} row(s) look untrained on their own ({}), as expected at the noisy edge of a fade.",
                        crate::text::row_list(&within_fade, 8)
                    )
                }
            ))
.ranges(covered)
.evidence(format!("across rows {}..{}: {}", r[0], r[1], own(to_analysed(r), false).trim_start_matches("these rows: ")))
.limits("A fading range is the expected footprint of a length distribution with a thin tail; it is not a defect by itself."));
    }
    if let Some(p) = &report.phase_boundary {
        let row = kept.get(p.row).copied().unwrap_or(p.row);
        audit.findings.push(Finding::info(FindingCode::PhaseBoundary, format!("The table's statistics change at row {row}: a model trained mostly at a shorter length, or a table extended later."))
.rows([row, n_all])
.evidence(format!("{} {:.4} before vs {:.4} after (effect {:.2}, window {})", p.statistic, p.before, p.after, p.effect, p.window))
.limits("The rows after the boundary are still trained; they may be less reliable than the rows before it."));
    }
    let smooth = prof
        .neighbour_cosine
        .iter()
        .flatten()
        .copied()
        .collect::<Vec<f64>>();
    let median_cos = median(&smooth);
    // Never-indexed rows before the first position are told apart, not counted.
    let in_reserved: usize = report
        .ranges
        .iter()
        .map(|r| to_table(*r))
        .filter(|r| r[1] <= reserved)
        .map(|r| r[1] - r[0])
        .sum();
    audit.verdict = match report.first {
        Some(f) => {
            let start = to_table([f, f + 1])[0];
            let tail = n_all - start;
            let in_fade: usize = within_fade.iter().map(|x| x[1] - x[0]).sum();
            let others = report
                .count
                .saturating_sub(report.ranges.last().map_or(0, |r| r[1] - r[0]))
                .saturating_sub(in_fade)
                .saturating_sub(in_reserved);
            let first_trained = reserved.min(start);
            let mut text = if start <= reserved {
                format!(
                    "no row shows training: all {tail} rows from row {start} look like the initialization"
                )
            } else if reserved > 0 {
                format!(
                    "trained rows {first_trained}..{start} ({} token positions; rows before {reserved} are never indexed), untrained tail from row {start} ({tail} rows)",
                    start - first_trained
                )
            } else {
                format!("trained rows 0..{start}, untrained tail from row {start} ({tail} rows)")
            };
            if let Some(f) = partial_span {
                text.push_str(&format!("; partially trained rows {}..{}", f[0], f[1]));
            }
            if others > 0 {
                text.push_str(&format!("; {others} more untrained row(s) before it"));
            }
            text
        }
        None if report.count > 0 => {
            let others = report.count.saturating_sub(in_reserved);
            if others == 0 {
                format!(
                    "rows {reserved}..{n_all} trained ({} token positions); {in_reserved} row(s) before row {reserved} never indexed, as expected",
                    n_all - reserved
                )
            } else {
                format!("{others} untrained row(s) outside a tail; the rest trained")
            }
        }
        None => format!(
            "all {n_all} rows look trained (median neighbour cosine {})",
            fmt_opt(median_cos)
        ),
    };
    // With an untrained tail, the whole-table spectrum and locality mix trained rows with
    // noise: the trained rows' own numbers are given beside them.
    if let Some(f) = report.first {
        let start = reserved.min(f);
        if f >= start + 8 {
            let rows = table.slice(ndarray::s![start..f, ..]);
            audit.trained_rows_profile = Some(TrainedRowsProfile {
                rows: [to_table([start, start + 1])[0], to_table([f, f + 1])[0]],
                spectrum: spectrum::spectrum(rows, COMPONENTS).ok(),
                locality: neighbours::locality_profile(rows, LOCALITY_DISTANCE.min(f - start - 1)),
            });
        }
    }
    audit.untrained = Some(report);
}

/// The formula fit of a fixed table; true when the table is its formula (exact, or the
/// reproduced low-precision computation of it).
fn fixed(audit: &mut TableAudit, table: &Array2<f64>, dtype: &Dtype) -> bool {
    let half_ulp = dtype.half_ulp_below_one().unwrap_or(2f64.powi(-25));
    let Some(fit) = sinusoid::fit_sinusoid(table.view(), half_ulp) else {
        audit.verdict = "not a sine/cosine table".into();
        audit.findings.push(Finding::error(FindingCode::SinusoidMismatch, "The table is named or shaped as a fixed sinusoid but its columns are not sine/cosine pairs of any base, layout or offset.")
.rows([0, table.nrows()])
.evidence("no pairing of columns has sin² + cos² constant across rows (median radius spread above 10%)")
.limits("If the table is meant to be learned, this is expected; if it is meant to be the formula, it was overwritten or trained."));
        return false;
    };
    let mismatch_tolerance = (16.0 * half_ulp * fit.scale.max(1e-12)).max(1e-2 * fit.scale);
    let describe = format!(
        "base {}, {} layout, {} first, exponent {}, offset {}, max error {:.2e}",
        fmt_num(fit.base),
        serde_plain(&fit.layout),
        if fit.sin_first { "sin" } else { "cos" },
        serde_plain(&fit.exponent),
        fit.offset,
        fit.max_abs_error
    );
    let p = &fit.precision;
    let matches;
    if p.computed_in_low_precision {
        matches = true;
        audit.verdict = format!(
            "sinusoid computed in {}: {describe}",
            p.best_match.as_deref().unwrap_or("low precision")
        );
        let by_range = p
            .error_by_range
            .iter()
            .map(|b| format!("{:.3} at rows {}..{}", b.max_abs_error, b.start, b.end))
            .collect::<Vec<_>>()
            .join(", ");
        audit.findings.push(Finding::warning(FindingCode::LowPrecision, format!(
                "The angles were computed in {} before the sine/cosine: errors grow with position far beyond the storage rounding.",
                p.best_match.as_deref().unwrap_or("a low-precision type")
            ))
.rows([0, table.nrows()])
.evidence(format!(
                "max error {:.3} = {:.0}x the {} half-ULP; by range: {by_range}; the simulated {} computation reproduces the table",
                fit.max_abs_error,
                p.error_to_half_ulp,
                audit.dtype,
                p.best_match.as_deref().unwrap_or("?")
            ))
.limits("A model trained with this table has learned around its errors; recomputing it exactly changes what the model sees. Fix it for new training runs."));
    } else if fit.max_abs_error > mismatch_tolerance {
        matches = false;
        audit.verdict = format!("not the formula it resembles: {describe}");
        audit.findings.push(Finding::error(FindingCode::SinusoidMismatch, format!("The table resembles a sinusoid but differs from the best-fitting formula by up to {:.3} (worst at row {}).", fit.max_abs_error, fit.worst_row))
.rows([fit.worst_row, fit.worst_row + 1])
.evidence(format!("best fit: {describe}; tolerance {mismatch_tolerance:.2e}"))
.limits("A fixed table that was trained, edited or resized by interpolation drifts from the formula; compare with the code that builds it."));
    } else {
        matches = true;
        audit.verdict = format!("exact sinusoid: {describe}");
    }
    audit.sinusoid = Some(fit);
    matches
}

fn serde_plain<T: Serialize>(v: &T) -> String {
    serde_json::to_value(v)
        .ok()
        .and_then(|v| v.as_str().map(str::to_string))
        .unwrap_or_default()
}

fn fmt_num(x: f64) -> String {
    if x.fract() == 0.0 && x.abs() < 1e15 {
        format!("{x:.0}")
    } else {
        format!("{x:.6}")
    }
}

fn fmt_opt(x: Option<f64>) -> String {
    x.map(|v| format!("{v:.3}")).unwrap_or_else(|| "n/a".into())
}

/// Adds what the optimizer's second moment (`tensor`, the table's shape) says: rows
/// that never received a gradient, as direct evidence, checked against the untrained
/// verdict of the statistics.
pub fn optimizer_moments(audit: &mut TableAudit, tensor: &str, second_moment: &Array2<f64>) {
    let untrained: Vec<[usize; 2]> = audit
        .untrained
        .as_ref()
        .map(|u| u.ranges.clone())
        .unwrap_or_default();
    let ev = crate::analyze::moments::evidence(tensor, second_moment.view(), &untrained);
    let list = |r: &[[usize; 2]]| {
        r.iter()
            .take(4)
            .map(|x| range_text(*x))
            .collect::<Vec<_>>()
            .join(", ")
    };
    if !ev.no_gradient_rows.is_empty() {
        let rows: usize = ev.no_gradient_rows.iter().map(|r| r[1] - r[0]).sum();
        let agreement = if ev.missed_by_statistics.is_empty() {
            "The statistical untrained verdict finds every one of them.".to_string()
        } else {
            format!(
                "The statistics alone missed {} of them.",
                list(&ev.missed_by_statistics)
            )
        };
        let severity = if ev.missed_by_statistics.is_empty() {
            Severity::Info
        } else {
            Severity::Warning
        };
        audit.findings.push(
            Finding::new(
                severity,
                FindingCode::NoGradientRows,
                format!(
                    "{} ({rows} rows) never received a gradient: the optimizer's second moment `{tensor}` is exactly zero there (direct evidence from the training state). {agreement}",
                    list(&ev.no_gradient_rows)
                ),
            )
            .ranges(ev.no_gradient_rows.iter().copied())
            .evidence(format!(
                "Adam/AdamW keep v = β₂·v + (1 − β₂)·g² from v = 0: a row keeps v = 0 exactly only if its gradient was zero at every step; rows with v > 0 elsewhere: {}",
                second_moment.nrows() - rows
            ))
            .limits("Covers the steps since this optimizer state was created (a restart with a fresh optimizer forgets earlier steps); the match of moment to table is by shape, the only parameter of this shape in the state."),
        );
    }
    if !ev.contradicted_by_moments.is_empty() {
        audit.findings.push(
            Finding::warning(
                FindingCode::NoGradientRows,
                format!(
                    "{} look untrained to the statistics but received gradients (the optimizer's second moment `{tensor}` is nonzero there): trust the optimizer state.",
                    list(&ev.contradicted_by_moments)
                ),
            )
            .ranges(ev.contradicted_by_moments.iter().copied())
            .evidence("second moment > 0 in these rows")
            .limits("Rows can receive tiny gradients and still look like initial noise; they were indexed, if rarely."),
        );
    }
    audit.optimizer = Some(ev);
}
