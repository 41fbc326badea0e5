//! The findings of a comparison: unchanged rows, shape changes, missing tables and
//! non-finite values, each with its evidence and limits.

use crate::model::compare::{CompareFinding, StepEntry};
use crate::model::{Finding, FindingCode};
use crate::text::range;

/// Most `unchanged-rows` findings per step; further ranges are summed up in one more.
pub const MAX_RANGE_FINDINGS: usize = 4;

const UNCHANGED_LIMITS: &str = "Identical up to a scale means never updated, only decayed: no gradient reached these rows between the two checkpoints, and decoupled weight decay alone shrank them by the common factor (exactly 1 means untouched or frozen). It says nothing about whether they were trained before the earlier checkpoint. The bound allows 512 float32 rounding steps per entry, what roughly 40 000 decay steps accumulate as random-walk rounding; decay-only rows of checkpoints much further apart, or of a run that applies the decay in bf16/f16, can exceed it and be reported as changed.";

/// The labels of the checkpoints `v` (their indices where no label is given).
fn list(v: &[usize], labels: &[String]) -> String {
    v.iter()
        .map(|&i| labels.get(i).cloned().unwrap_or_else(|| i.to_string()))
        .collect::<Vec<_>>()
        .join(", ")
}

/// `table-missing`: the table is absent from the checkpoints `missing`, held by `held`
/// (indices into `labels`, the checkpoints' labels).
pub fn table_missing(
    name: &str,
    missing: &[usize],
    held: &[usize],
    labels: &[String],
) -> CompareFinding {
    let message = format!(
        "`{name}` is missing from checkpoint{} {}; {}",
        if missing.len() == 1 { "" } else { "s" },
        list(missing, labels),
        if held.len() == 1 {
            format!(
                "it exists only in checkpoint {}, so nothing was compared.",
                list(held, labels)
            )
        } else {
            format!(
                "it was compared across checkpoints {} only.",
                list(held, labels)
            )
        }
    );
    CompareFinding {
        finding: Finding::warning(FindingCode::TableMissing, message)
            .evidence("no tensor of that name, and no single unmatched table of the same kind and shape, in those checkpoints")
            .limits("A table renamed and reshaped at once cannot be matched; compare it explicitly with --table."),
        step: None,
    }
}

/// `shape-changed`: the table is `a` rows × columns before and `b` after.
pub fn shape_changed(
    a: &[usize; 2],
    b: &[usize; 2],
    step: &StepEntry,
    where_: &str,
) -> CompareFinding {
    CompareFinding {
        finding: Finding::warning(
            FindingCode::ShapeChanged,
            format!(
                "The table changed shape ({}x{} → {}x{}) between {where_}.",
                a[0], a[1], b[0], b[1]
            ),
        )
        .evidence(step.note.clone().unwrap_or_default())
        .limits("Rows are assumed to keep their positions (a table extended or cut at the end); a table re-interpolated to a new length cannot be compared row by row."),
        step: Some([step.from, step.to]),
    }
}

/// `non-finite`: the table of checkpoint `idx` (labelled `label`) holds `count` NaN or
/// infinite values; `where_` names the two checkpoints of the step ("a and b").
pub fn non_finite(
    (idx, label): (usize, &str),
    count: usize,
    where_: &str,
    reason: &str,
    step: [usize; 2],
) -> CompareFinding {
    CompareFinding {
        finding: Finding::error(
            FindingCode::NonFinite,
            format!(
                "The table in checkpoint {label} (#{idx}) holds {count} NaN or infinite values; the step between {where_} was not compared."
            ),
        )
        .evidence(reason)
        .limits("Run `posaudit audit` on that checkpoint to see which rows."),
        step: Some(step),
    }
}

/// `unchanged-rows`: one finding per unchanged range of the step (at most
/// [`MAX_RANGE_FINDINGS`], then one for the rest).
pub fn unchanged(step: &StepEntry, dtype: &str, where_: &str) -> Vec<CompareFinding> {
    let mut out = Vec::new();
    let tol = step.unchanged_tolerance.unwrap_or(0.0);
    let unit = step.decay_unit_roundoff.unwrap_or(2f64.powi(-24));
    for r in step.unchanged_detail.iter().take(MAX_RANGE_FINDINGS) {
        let rows = r.end - r.start;
        let message = if r.bit_identical {
            format!(
                "Rows {} ({rows} rows) are bit-identical between {where_}.",
                range([r.start, r.end])
            )
        } else {
            format!(
                "Rows {} ({rows} rows) are unchanged up to weight decay between {where_}: the earlier rows times one common scale factor ×{:.6}, which is what weight decay alone does to rows that got no gradient.",
                range([r.start, r.end]),
                r.scale
            )
        };
        let largest = step.change[r.start..r.end.min(step.change.len())]
            .iter()
            .copied()
            .fold(0.0, f64::max);
        let zero = if r.zero_rows > 0 {
            format!(
                "; {} of these rows are zero in both checkpoints (they fit any factor)",
                r.zero_rows
            )
        } else {
            String::new()
        };
        let evidence = if r.bit_identical {
            format!(
                "every entry bit-identical; largest L2 change among these rows {largest:.3e}{zero}"
            )
        } else {
            format!(
                "scale factor {:.9}; entries deviate from it by at most {:.1} (rms {:.1}) rounding steps of the decay arithmetic (unit {unit:.3e}), bound {tol:.2e} relative = {dtype} storage rounding plus 512 such steps; largest relative row residual {:.2e}; largest L2 change among these rows {largest:.3e}{zero}",
                r.scale,
                r.max_deviation / unit,
                r.rms_deviation / unit,
                r.residual
            )
        };
        out.push(CompareFinding {
            finding: Finding::info(FindingCode::UnchangedRows, message)
                .rows([r.start, r.end])
                .evidence(evidence)
                .limits(UNCHANGED_LIMITS),
            step: Some([step.from, step.to]),
        });
    }
    let rest = &step.unchanged_detail[step.unchanged_detail.len().min(MAX_RANGE_FINDINGS)..];
    if !rest.is_empty() {
        let rows: usize = rest.iter().map(|r| r.end - r.start).sum();
        out.push(CompareFinding {
            finding: Finding::info(
                FindingCode::UnchangedRows,
                format!(
                    "{} more unchanged ranges ({rows} rows) between {where_}; all are listed in the step's `unchanged_detail`.",
                    rest.len()
                ),
            )
            .ranges(rest.iter().map(|r| [r.start, r.end]))
            .evidence(format!(
                "scale factors from {:.6} to {:.6}",
                rest.iter().map(|r| r.scale).fold(f64::INFINITY, f64::min),
                rest.iter().map(|r| r.scale).fold(0.0, f64::max)
            ))
            .limits(UNCHANGED_LIMITS),
            step: Some([step.from, step.to]),
        });
    }
    out
}
