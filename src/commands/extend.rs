//! `posaudit extend`: write an extended or repaired position table into a new checkpoint.
//!
//! The one command that writes, and only into its new output folder: it audits the
//! input (read-only), plans the edit from what the audit knows (trained rows, reserved
//! rows before position 0, the grid, the fitted formula), computes the new table with
//! the pure numerics of [`crate::edit`], writes the new safetensors file(s) through
//! [`crate::checkpoint::write`] (every other tensor a byte copy, streamed), updates
//! `config.json`, and audits the new checkpoint. `dry_run` stops after the plan.

use std::path::{Path, PathBuf};

use ndarray::{Array2, s};
use serde_json::Value;

use crate::checkpoint::write::{self, Replacement, WrittenFile};
use crate::checkpoint::{Checkpoint, Format};
use crate::detect::Kind;
use crate::edit::resample::{self, Interp};
use crate::edit::{encode, init};
use crate::error::{Error, Result};
use crate::model::CheckpointSummary;
use crate::model::audit::{AuditReport, TableAudit};
use crate::model::extend::{
    AlsoRewritten, ConfigChange, EXTEND_SCHEMA, EditPlan, ExtendReport, GridChange, InitStd,
    RowMove, TableState,
};

/// How the new rows are made.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// Learned 1-D: resample the trained rows linearly along position.
    Interpolate,
    /// Learned 1-D: resample the trained rows with cubic convolution.
    Cubic,
    /// Learned 1-D: tile the trained rows.
    Copy,
    /// Learned 1-D: keep the trained rows, draw the others from N(0, std²).
    Reinit,
    /// Grid: bilinear resize.
    Bilinear,
    /// Grid: bicubic resize.
    Bicubic,
    /// Fixed sinusoid: evaluate the fitted formula in f64, round once.
    Regenerate,
}

impl Method {
    /// The option value.
    pub fn as_str(self) -> &'static str {
        match self {
            Method::Interpolate => "interpolate",
            Method::Cubic => "cubic",
            Method::Copy => "copy",
            Method::Reinit => "reinit",
            Method::Bilinear => "bilinear",
            Method::Bicubic => "bicubic",
            Method::Regenerate => "regenerate",
        }
    }
}

/// What `extend` needs.
#[derive(Debug, Clone)]
pub struct ExtendOptions {
    /// The input checkpoint (safetensors file or folder).
    pub path: PathBuf,
    /// The weight file to read when `path` is a folder holding several.
    pub file: Option<String>,
    /// The table to edit.
    pub table: String,
    /// New number of positions (rows after the reserved rows) of a 1-D table.
    pub to: Option<usize>,
    /// New grid height and width.
    pub grid: Option<(usize, usize)>,
    /// How.
    pub method: Method,
    /// Replace only the rows the audit calls untrained.
    pub untrained_only: bool,
    /// Std of drawn rows (`reinit`); default from the config or the audit.
    pub std: Option<f64>,
    /// Seed of drawn rows.
    pub seed: u64,
    /// The new checkpoint folder.
    pub out: PathBuf,
    /// Only plan.
    pub dry_run: bool,
    /// Write into an existing folder, replacing files of the same names.
    pub force: bool,
    /// Threads for the audits.
    pub threads: usize,
}

/// The metadata key added to each written safetensors file's `__metadata__`.
pub const METADATA_KEY: &str = "posaudit_extend";

/// Largest other file of the input folder copied into the new one.
const MAX_SIDECAR_BYTES: u64 = 256 << 20;

fn usage(msg: String) -> Error {
    Error::Usage(msg)
}

/// Runs `extend`.
pub fn run(options: &ExtendOptions) -> Result<ExtendReport> {
    crate::linalg::set_threads(options.threads.max(1));
    let ckpt = super::open(&options.path, options.file.as_deref())?;
    let shown_in = options.path.display().to_string();
    if ckpt.format != Format::Safetensors {
        return Err(usage(format!(
            "{shown_in}: extend writes safetensors and reads only safetensors checkpoints; this one is {} (convert it to safetensors first)",
            ckpt.format
        )));
    }
    crate::detect::check_forced(&ckpt, std::slice::from_ref(&options.table))?;
    let input_dir = input_folder(&ckpt);
    check_output(&options.out, &input_dir, options.force)?;

    let before = super::audit::audit_opened(
        &ckpt,
        std::slice::from_ref(&options.table),
        &mut |_, _, _| {},
    )?;
    let audit = before
        .tables
        .iter()
        .find(|t| t.name == options.table)
        .ok_or_else(|| {
            usage(format!(
                "{shown_in}: `{}` was not analysed as a position table",
                options.table
            ))
        })?;
    let info = ckpt
        .tensor(&options.table)
        .ok_or_else(|| usage(format!("{shown_in}: no tensor `{}`", options.table)))?;
    let table = ckpt.read_table(info)?;
    let config = read_config_json(&input_dir);
    let edit = plan(options, &ckpt, audit, &table, config.as_ref(), &shown_in)?;
    if !encode::encodable(&info.dtype) {
        return Err(usage(format!(
            "{shown_in}: `{}` is stored as {}; extend writes F64, F32, F16 or BF16 tables",
            options.table, info.dtype
        )));
    }
    let mut plan = edit.plan;
    let mut replacements = vec![Replacement {
        name: options.table.clone(),
        shape: plan.new_shape.clone(),
        bytes: encode::encode(edit.values.iter().copied(), &info.dtype).unwrap_or_default(),
    }];
    // A consecutive position-id buffer as long as the table's rows is rewritten to match.
    let (old_rows, new_rows) = (table.nrows(), edit.values.nrows());
    let mut warnings = Vec::new();
    if old_rows != new_rows {
        for t in before.tables.iter().filter(|t| t.kind == Kind::PositionIds) {
            let (Some(check), Some(ti)) = (&t.position_ids, ckpt.tensor(&t.name)) else {
                continue;
            };
            let related = common_prefix_parts(&t.name, &options.table) > 0;
            if !(related
                && check.contiguous
                && check.length == old_rows
                && ti.shape.last() == Some(&old_rows))
            {
                if related {
                    warnings.push(format!("{}: not rewritten (not a consecutive buffer of {old_rows} ids); check it matches the new table", t.name));
                }
                continue;
            }
            let mut shape = ti.shape.clone();
            if let Some(last) = shape.last_mut() {
                *last = new_rows;
            }
            let ids = (0..new_rows as i64).map(|i| i + check.offset);
            let Some(bytes) = encode::encode_ids(ids, &ti.dtype) else {
                warnings.push(format!(
                    "{}: not rewritten ({} ids cannot be written)",
                    t.name, ti.dtype
                ));
                continue;
            };
            plan.also.push(AlsoRewritten {
                name: t.name.clone(),
                old_shape: ti.shape.clone(),
                new_shape: shape.clone(),
                what: format!(
                    "consecutive ids {}..{}",
                    check.offset,
                    check.offset + new_rows as i64
                ),
            });
            replacements.push(Replacement {
                name: t.name.clone(),
                shape,
                bytes,
            });
        }
    }
    let new_config = config
        .as_ref()
        .map(|c| apply_config(c, &plan.config_changes));
    let out_shown = options.out.display().to_string();
    let mut cautions = cautions(&plan);
    let mut report = ExtendReport {
        schema: EXTEND_SCHEMA,
        input: CheckpointSummary::of(&ckpt),
        output: out_shown.clone(),
        dry_run: options.dry_run,
        plan,
        written: Vec::new(),
        copied: Vec::new(),
        before: state(&shown_in, audit),
        after: None,
        cautions: Vec::new(),
        warnings,
    };
    if options.dry_run {
        report.cautions = cautions;
        return Ok(report);
    }

    // Write: folder, weight files, index, config, other files.
    create_output(&options.out, options.force)?;
    let provenance = provenance(&report.plan);
    let metadata = [(METADATA_KEY.to_string(), provenance)];
    for (i, file) in ckpt.files.iter().enumerate() {
        let tensors: Vec<_> = ckpt.tensors.iter().filter(|t| t.file == i).collect();
        let mine: Vec<Replacement> = replacements
            .iter()
            .filter(|r| tensors.iter().any(|t| t.name == r.name))
            .cloned()
            .collect();
        let dest = options.out.join(file.display_name());
        report.written.push(write::write_copy(
            file,
            &tensors,
            &mine,
            &metadata,
            &dest,
            options.force,
        )?);
    }
    if ckpt.files.len() > 1
        && let Some((name, text)) =
            rewrite_index(&input_dir, &ckpt, &report.written, &replacements)?
    {
        write::write_new_text(&options.out.join(&name), &text, options.force)?;
        report.copied.push(format!("{name} (total_size updated)"));
    }
    if let Some(c) = &new_config {
        let text = serde_json::to_string_pretty(c)? + "\n";
        write::write_new_text(&options.out.join("config.json"), &text, options.force)?;
    }
    report.copied.extend(copy_sidecars(
        &input_dir,
        &options.out,
        options.force,
        &mut report.warnings,
    )?);
    if let Some(folder) = &ckpt.folder {
        for other in &folder.others {
            report.warnings.push(format!(
                "{other}: another weight file of the input folder, not read and not copied"
            ));
        }
    }

    // The new checkpoint, audited as the user would.
    let new_ckpt = Checkpoint::open(&options.out)?;
    let after: AuditReport = super::audit::audit_opened(
        &new_ckpt,
        std::slice::from_ref(&options.table),
        &mut |_, _, _| {},
    )?;
    if let Some(t) = after.tables.iter().find(|t| t.name == options.table) {
        report.after = Some(state(&out_shown, t));
        let gone: Vec<&str> = report
            .before
            .findings
            .iter()
            .map(|f| f.code.as_str())
            .filter(|c| !t.findings.iter().any(|g| g.code.as_str() == *c))
            .collect();
        if !gone.is_empty() {
            let why = if report.plan.kind == Kind::FixedSinusoidal {
                "the stored table is the fitted formula now"
            } else {
                "that is what the edit was for; it is not evidence that the synthesised rows are good"
            };
            cautions.push(format!(
                "Findings of the input table that the new one no longer has: {}; {why}.",
                gone.join(", ")
            ));
        }
    }
    report.warnings.extend(after.warnings);
    report.cautions = cautions;
    Ok(report)
}

/// The plan and the new table's values (rows × dim, in the table's row order).
struct Edit {
    plan: EditPlan,
    values: Array2<f64>,
}

fn plan(
    o: &ExtendOptions,
    ckpt: &Checkpoint,
    audit: &TableAudit,
    table: &Array2<f64>,
    config: Option<&Value>,
    shown_in: &str,
) -> Result<Edit> {
    let (rows, _) = table.dim();
    let info = ckpt.tensor(&o.table).expect("checked");
    let base = EditPlan {
        table: o.table.clone(),
        kind: audit.kind,
        method: o.method.as_str().into(),
        rows: if o.untrained_only { "untrained" } else { "all" }.into(),
        dtype: info.dtype.to_string(),
        old_shape: info.shape.clone(),
        new_shape: info.shape.clone(),
        reserved_rows: 0,
        source_rows: None,
        kept: Vec::new(),
        synthesised: Vec::new(),
        how: String::new(),
        init_std: None,
        seed: None,
        grid: None,
        also: Vec::new(),
        config_changes: Vec::new(),
        config_notes: Vec::new(),
    };
    let wrong = |allowed: &str| {
        usage(format!(
            "{shown_in}: `{}` is {}; --method {} does not apply (use {allowed})",
            o.table,
            audit.kind.as_str(),
            o.method.as_str()
        ))
    };
    let mut edit = match audit.kind {
        Kind::LearnedAbsolute => {
            if !matches!(
                o.method,
                Method::Interpolate | Method::Cubic | Method::Copy | Method::Reinit
            ) {
                return Err(wrong("interpolate, cubic, copy or reinit"));
            }
            learned(o, audit, table, config, base, shown_in)?
        }
        Kind::LearnedGrid2d => {
            if !matches!(o.method, Method::Bilinear | Method::Bicubic) {
                return Err(wrong("bilinear or bicubic, with --grid HxW"));
            }
            grid(o, audit, table, config, base, shown_in)?
        }
        Kind::FixedSinusoidal => {
            if o.method != Method::Regenerate {
                return Err(wrong("regenerate: a fixed table is its formula"));
            }
            sinusoid(o, audit, table, config, base, shown_in)?
        }
        other => {
            return Err(usage(format!(
                "{shown_in}: `{}` is {}; extend edits learned-absolute, fixed-sinusoidal and learned-grid-2d tables",
                o.table,
                other.as_str()
            )));
        }
    };
    if edit.values.nrows() != rows || audit.kind == Kind::LearnedGrid2d {
        edit.plan.new_shape = new_shape(
            &info.shape,
            rows,
            edit.values.nrows(),
            edit.plan.grid.as_ref(),
        );
    }
    Ok(edit)
}

/// The stored shape with the row dimension (or the grid's two) changed.
fn new_shape(
    shape: &[usize],
    old_rows: usize,
    new_rows: usize,
    grid: Option<&GridChange>,
) -> Vec<usize> {
    let mut s = shape.to_vec();
    if let Some(g) = grid
        && s.len() == 4
        && s[1] == g.from[0]
        && s[2] == g.from[1]
    {
        s[1] = g.to[0];
        s[2] = g.to[1];
        return s;
    }
    let n = s.len();
    if n >= 2 && s[n - 2] == old_rows {
        s[n - 2] = new_rows;
    }
    s
}

fn learned(
    o: &ExtendOptions,
    audit: &TableAudit,
    table: &Array2<f64>,
    config: Option<&Value>,
    mut p: EditPlan,
    shown_in: &str,
) -> Result<Edit> {
    let (rows, dim) = table.dim();
    let untrained = audit.untrained.as_ref();
    let reserved = untrained
        .map(|u| u.evidence.reserved_rows)
        .unwrap_or(0)
        .min(rows);
    let tail = untrained
        .and_then(|u| u.first)
        .filter(|&f| f > reserved)
        .unwrap_or(rows);
    let trained = tail - reserved;
    let old_positions = rows - reserved;
    let positions = o.to.unwrap_or(old_positions);
    if positions == 0 {
        return Err(usage(format!("{shown_in}: --to 0 leaves no position")));
    }
    let new_rows = reserved + positions;
    p.reserved_rows = reserved;
    let name = &o.table;
    let ranges_text = crate::text::rows;
    let mut values = Array2::zeros((new_rows, dim));
    values
        .slice_mut(s![..reserved, ..])
        .assign(&table.slice(s![..reserved, ..]));
    if reserved > 0 {
        p.kept.push(RowMove {
            from: [0, reserved],
            to: [0, reserved],
        });
    }
    let source = table.slice(s![reserved..tail, ..]);
    p.source_rows = Some([reserved, tail]);
    let shrink_refused = |what: &str| {
        usage(format!(
            "{shown_in}: --to {positions} is fewer than the {trained} trained positions of `{name}`; {what} would drop trained rows (interpolate can shrink a table)"
        ))
    };
    let std_choice = |p: &mut EditPlan| -> Result<f64> {
        let (value, from) = if let Some(s) = o.std {
            (s, "--std".to_string())
        } else if let Some(h) = config
            .and_then(|c| c.get("initializer_range"))
            .and_then(Value::as_f64)
        {
            (h, "config.json: initializer_range".to_string())
        } else if let Some(e) = untrained.and_then(|u| u.evidence.init_std_estimate) {
            (
                e,
                "estimated by the audit from the untrained rows".to_string(),
            )
        } else {
            return Err(usage(format!(
                "{shown_in}: no initializer std for `{name}` (no initializer_range in config.json, no untrained rows to estimate it from); give --std"
            )));
        };
        if !(value.is_finite() && value > 0.0) {
            return Err(usage(format!(
                "{shown_in}: initializer std {value} ({from}) is not a positive number"
            )));
        }
        p.init_std = Some(InitStd { value, from });
        p.seed = Some(o.seed);
        Ok(value)
    };
    if o.untrained_only {
        let ranges: Vec<[usize; 2]> = untrained
            .map(|u| {
                u.ranges
                    .iter()
                    .filter(|r| r[1] > reserved)
                    .map(|r| [r[0].max(reserved), r[1]])
                    .collect()
            })
            .unwrap_or_default();
        if ranges.is_empty() && positions <= old_positions {
            return Err(usage(format!(
                "{shown_in}: the audit finds no untrained rows in `{name}`; nothing to replace"
            )));
        }
        if positions < old_positions {
            return Err(shrink_refused("--rows untrained"));
        }
        let mut target: Vec<[usize; 2]> = ranges.clone();
        if new_rows > rows {
            match target.last_mut() {
                Some(last) if last[1] == rows => last[1] = new_rows,
                _ => target.push([rows, new_rows]),
            }
        }
        values.slice_mut(s![..rows, ..]).assign(table);
        match o.method {
            Method::Reinit => {
                let std = std_choice(&mut p)?;
                let count: usize = target.iter().map(|r| r[1] - r[0]).sum();
                let drawn = init::normal_rows(count, dim, std, o.seed);
                let mut k = 0;
                for r in &target {
                    for row in r[0]..r[1] {
                        values.row_mut(row).assign(&drawn.row(k));
                        k += 1;
                    }
                }
                p.how = format!(
                    "every row the audit calls untrained (and every new row) drawn from N(0, {std}²), seed {}; other rows kept",
                    o.seed
                );
                p.source_rows = None;
            }
            Method::Copy => {
                if target.len() != 1 || target[0][1] != new_rows {
                    return Err(usage(format!(
                        "{shown_in}: the untrained rows of `{name}` ({}) are not one tail; copy tiles the trained rows after them, so use --method interpolate for gaps or reinit",
                        target
                            .iter()
                            .map(|r| ranges_text(*r))
                            .collect::<Vec<_>>()
                            .join(", ")
                    )));
                }
                let start = target[0][0];
                let src = table.slice(s![reserved..start, ..]);
                let tiled = resample::tile_rows(src, new_rows - reserved);
                values
                    .slice_mut(s![start.., ..])
                    .assign(&tiled.slice(s![start - reserved.., ..]));
                p.source_rows = Some([reserved, start]);
                p.how = format!(
                    "the trained {} tiled over the untrained tail: row r gets trained row {reserved} + ((r − {reserved}) mod {})",
                    ranges_text([reserved, start]),
                    start - reserved
                );
            }
            Method::Interpolate => {
                if new_rows > rows {
                    return Err(usage(format!(
                        "{shown_in}: --rows untrained with interpolate fills gaps between trained rows and cannot add rows; use --rows all to resample the trained rows to {positions} positions"
                    )));
                }
                for r in &target {
                    if r[0] <= reserved || r[1] >= rows {
                        return Err(usage(format!(
                            "{shown_in}: the untrained {} of `{name}` have no trained row on one side (nothing after a tail to interpolate toward); use --method copy or reinit for it, or --rows all to resample the trained rows over every position",
                            ranges_text(*r)
                        )));
                    }
                    resample::fill_gap_linear(&mut values, r[0], r[1]);
                }
                p.source_rows = None;
                p.how = "each untrained gap filled linearly between the trained rows on either side of it; other rows kept".into();
            }
            Method::Cubic => {
                return Err(usage(format!(
                    "{shown_in}: --rows untrained fills gaps linearly; use --method interpolate (cubic applies to --rows all)"
                )));
            }
            _ => unreachable!(),
        }
        let mut at = reserved;
        for r in &target {
            if r[0] > at {
                p.kept.push(RowMove {
                    from: [at, r[0]],
                    to: [at, r[0]],
                });
            }
            at = r[1];
        }
        if at < rows.min(new_rows) {
            p.kept.push(RowMove {
                from: [at, rows],
                to: [at, rows],
            });
        }
        p.synthesised = target;
    } else {
        if trained < 1 || (trained < 2 && matches!(o.method, Method::Interpolate | Method::Cubic)) {
            return Err(usage(format!(
                "{shown_in}: `{name}` has {trained} trained rows, too few to build a table from"
            )));
        }
        match o.method {
            Method::Interpolate | Method::Cubic => {
                let interp = if o.method == Method::Cubic {
                    Interp::Cubic
                } else {
                    Interp::Linear
                };
                let r = resample::resample_rows(source, positions, interp, true);
                values.slice_mut(s![reserved.., ..]).assign(&r);
                p.synthesised = vec![[reserved, new_rows]];
                p.how = format!(
                    "the {trained} trained positions ({}) resampled to {positions} positions along position, {} interpolation with align_corners=True: new position j reads trained position j·{}/{} (the first and last trained rows kept exactly)",
                    ranges_text([reserved, tail]),
                    if interp == Interp::Cubic {
                        "cubic (Keys, a = −0.75)"
                    } else {
                        "linear"
                    },
                    trained - 1,
                    positions.saturating_sub(1).max(1)
                );
            }
            Method::Copy => {
                if positions < trained {
                    return Err(shrink_refused("copy"));
                }
                if positions == old_positions && tail == rows {
                    return Err(usage(format!(
                        "{shown_in}: `{name}` has no untrained tail and --to does not add positions; nothing to copy"
                    )));
                }
                values
                    .slice_mut(s![reserved.., ..])
                    .assign(&resample::tile_rows(source, positions));
                p.kept.push(RowMove {
                    from: [reserved, tail],
                    to: [reserved, tail],
                });
                p.synthesised = vec![[tail, new_rows]];
                p.how = format!(
                    "the {trained} trained {} tiled: row r gets trained row {reserved} + ((r − {reserved}) mod {trained})",
                    ranges_text([reserved, tail])
                );
            }
            Method::Reinit => {
                if positions < trained {
                    return Err(shrink_refused("reinit"));
                }
                if positions == old_positions && tail == rows {
                    return Err(usage(format!(
                        "{shown_in}: `{name}` has no untrained tail and --to does not add positions; nothing to re-initialise"
                    )));
                }
                let std = std_choice(&mut p)?;
                values.slice_mut(s![reserved..tail, ..]).assign(&source);
                let drawn = init::normal_rows(new_rows - tail, dim, std, o.seed);
                values.slice_mut(s![tail.., ..]).assign(&drawn);
                p.kept.push(RowMove {
                    from: [reserved, tail],
                    to: [reserved, tail],
                });
                p.synthesised = vec![[tail, new_rows]];
                p.how = format!(
                    "the trained {} kept, {} drawn from N(0, {std}²), seed {}",
                    ranges_text([reserved, tail]),
                    ranges_text([tail, new_rows]),
                    o.seed
                );
            }
            _ => unreachable!(),
        }
    }
    if let Some(c) = config {
        positions_config(c, &audit.name, rows, new_rows, &mut p);
    }
    Ok(Edit { plan: p, values })
}

/// Keys of the declared maximum positions (as `config.rs` reads them).
const POSITION_KEYS: [&str; 11] = [
    "max_position_embeddings",
    "n_positions",
    "n_ctx",
    "max_seq_len",
    "max_sequence_length",
    "seq_length",
    "max_target_positions",
    "context_length",
    "max_positions",
    "block_size",
    "num_positions",
];

/// The config keys of declared positions, changed by the change in rows (so the
/// relation between rows and the value, e.g. OPT's 2 offset rows, is kept).
fn positions_config(c: &Value, table: &str, old_rows: usize, new_rows: usize, p: &mut EditPlan) {
    if old_rows == new_rows {
        return;
    }
    let encoder = table.to_ascii_lowercase().contains("encoder")
        && lookup_int(c, "max_source_positions").is_some();
    let keys: Vec<&str> = if encoder {
        vec!["max_source_positions"]
    } else {
        POSITION_KEYS.to_vec()
    };
    let mut found = false;
    for prefix in ["", "text_config.", "vision_config.", "encoder."] {
        for k in &keys {
            let key = format!("{prefix}{k}");
            let Some(old) = lookup_int(c, &key) else {
                continue;
            };
            found = true;
            let new = old as i64 + new_rows as i64 - old_rows as i64;
            if new <= 0 {
                p.config_notes.push(format!(
                    "{key} {old}: not changed (the new value would be {new})"
                ));
                continue;
            }
            p.config_changes.push(ConfigChange {
                key,
                from: Value::from(old),
                to: Value::from(new),
            });
        }
    }
    if !found {
        p.config_notes
            .push("config.json declares no maximum positions: nothing changed".into());
    }
}

fn grid(
    o: &ExtendOptions,
    audit: &TableAudit,
    table: &Array2<f64>,
    config: Option<&Value>,
    mut p: EditPlan,
    shown_in: &str,
) -> Result<Edit> {
    let name = &o.table;
    let g = audit.grid.as_ref().ok_or_else(|| {
        usage(format!(
            "{shown_in}: the audit found no grid layout for `{name}`"
        ))
    })?;
    let (h2, w2) = o.grid.ok_or_else(|| {
        usage(format!(
            "{shown_in}: `{name}` is a {}x{} grid; give the new size with --grid HxW",
            g.height, g.width
        ))
    })?;
    if h2 == 0 || w2 == 0 {
        return Err(usage(format!("{shown_in}: --grid {h2}x{w2} is empty")));
    }
    if o.to.is_some() || o.untrained_only {
        return Err(usage(format!(
            "{shown_in}: a grid is resized with --grid HxW (not --to or --rows)"
        )));
    }
    let (h, w, extra) = (g.height, g.width, g.extra_rows);
    let dim = table.ncols();
    if table.nrows() != extra + h * w {
        return Err(usage(format!(
            "{shown_in}: `{name}` has {} rows, not {extra} + {h}x{w}",
            table.nrows()
        )));
    }
    let interp = if o.method == Method::Bicubic {
        Interp::Cubic
    } else {
        Interp::Linear
    };
    let resized = resample::resize_grid(table.slice(s![extra.., ..]), h, w, h2, w2, interp);
    let mut values = Array2::zeros((extra + h2 * w2, dim));
    values
        .slice_mut(s![..extra, ..])
        .assign(&table.slice(s![..extra, ..]));
    values.slice_mut(s![extra.., ..]).assign(&resized);
    p.reserved_rows = extra;
    if extra > 0 {
        p.kept.push(RowMove {
            from: [0, extra],
            to: [0, extra],
        });
    }
    p.source_rows = Some([extra, extra + h * w]);
    p.synthesised = vec![[extra, extra + h2 * w2]];
    p.grid = Some(GridChange {
        from: [h, w],
        to: [h2, w2],
        extra_rows: extra,
    });
    p.how = format!(
        "the {h}x{w} grid rows resized to {h2}x{w2} by {} interpolation with align_corners=False (no anti-aliasing), the {extra} extra row(s) before the grid kept",
        if interp == Interp::Cubic {
            "bicubic (Keys, a = −0.75)"
        } else {
            "bilinear"
        }
    );
    if let Some(c) = config {
        let mut found = false;
        for prefix in ["", "vision_config."] {
            let key = format!("{prefix}image_size");
            let Some(old) = lookup(c, &key) else { continue };
            found = true;
            let patch = lookup_int(c, &format!("{prefix}patch_size"));
            let old_sides: Option<(u64, u64)> = match old {
                Value::Array(a) if a.len() == 2 => a[0].as_u64().zip(a[1].as_u64()),
                v => v.as_u64().map(|x| (x, x)),
            };
            let (Some(patch), Some((oh, ow))) = (patch, old_sides) else {
                p.config_notes.push(format!(
                    "{key}: not changed (no patch_size to compute it from)"
                ));
                continue;
            };
            if oh != h as u64 * patch || ow != w as u64 * patch {
                p.config_notes.push(format!("{key} {old}: not changed (it is not the old grid {h}x{w} times patch_size {patch})"));
                continue;
            }
            let (nh, nw) = (h2 as u64 * patch, w2 as u64 * patch);
            let to = match old {
                Value::Array(_) => Value::from(vec![nh, nw]),
                _ if nh == nw => Value::from(nh),
                _ => {
                    p.config_notes.push(format!("{key} {old}: not changed (one number; the new grid {h2}x{w2} is not square)"));
                    continue;
                }
            };
            p.config_changes.push(ConfigChange {
                key,
                from: old.clone(),
                to,
            });
        }
        if !found {
            p.config_notes
                .push("config.json has no image_size: nothing changed".into());
        }
    }
    Ok(Edit { plan: p, values })
}

fn sinusoid(
    o: &ExtendOptions,
    audit: &TableAudit,
    table: &Array2<f64>,
    config: Option<&Value>,
    mut p: EditPlan,
    shown_in: &str,
) -> Result<Edit> {
    let name = &o.table;
    let fit = audit.sinusoid.as_ref().ok_or_else(|| {
        usage(format!(
            "{shown_in}: no sine/cosine formula fits `{name}`; nothing to regenerate"
        ))
    })?;
    if o.untrained_only || o.grid.is_some() {
        return Err(usage(format!("{shown_in}: regenerate takes --to N only")));
    }
    let (rows, dim) = table.dim();
    let lead = fit.offset.max(0) as usize;
    let new_rows = o.to.map(|n| lead + n).unwrap_or(rows);
    let spec = crate::analyze::sinusoid::SinusoidSpec {
        base: fit.base,
        layout: fit.layout,
        sin_first: fit.sin_first,
        exponent: fit.exponent,
        offset: fit.offset,
        scale: fit.scale,
        frequency_scale: fit.frequency_scale,
    };
    let mut values = crate::analyze::sinusoid::generate(&spec, new_rows, dim);
    let mut zeroed = Vec::new();
    for z in &fit.zero_rows {
        let end = z[1].min(lead).min(new_rows);
        if z[0] < end {
            values.slice_mut(s![z[0]..end, ..]).fill(0.0);
            zeroed.push(crate::text::rows([z[0], end]));
        }
    }
    p.reserved_rows = lead;
    p.synthesised = vec![[0, new_rows]];
    p.how = format!(
        "the fitted formula (base {}, {} layout, {} first, exponent {}, offset {}, amplitude {}, frequency scale {}) evaluated in f64 for {new_rows} rows and rounded once to {}{}",
        fit.base,
        match fit.layout {
            crate::analyze::sinusoid::Layout::Interleaved => "interleaved",
            crate::analyze::sinusoid::Layout::Split => "split",
        },
        if fit.sin_first { "sin" } else { "cos" },
        serde_json::to_value(fit.exponent)
            .ok()
            .and_then(|v| v.as_str().map(str::to_string))
            .unwrap_or_default(),
        fit.offset,
        fit.scale,
        fit.frequency_scale,
        p.dtype,
        if zeroed.is_empty() {
            String::new()
        } else {
            format!("; padding {} kept at zero", zeroed.join(", "))
        }
    );
    if let Some(c) = config {
        positions_config(c, name, rows, new_rows, &mut p);
    }
    Ok(Edit { plan: p, values })
}

/// A dotted key's value.
fn lookup<'a>(c: &'a Value, key: &str) -> Option<&'a Value> {
    key.split('.')
        .try_fold(c, |v, k| v.get(k))
        .filter(|v| !v.is_null())
}

fn lookup_int(c: &Value, key: &str) -> Option<u64> {
    lookup(c, key)?.as_u64()
}

/// The config with the changes applied.
fn apply_config(c: &Value, changes: &[ConfigChange]) -> Value {
    let mut out = c.clone();
    for ch in changes {
        let mut at = &mut out;
        for k in ch.key.split('.') {
            at = &mut at[k];
        }
        *at = ch.to.clone();
    }
    out
}

/// The input folder's `config.json` as JSON, if it is one (the audit already warned
/// about a broken one).
fn read_config_json(dir: &Path) -> Option<Value> {
    let bytes = crate::checkpoint::read_small_file(
        &dir.join("config.json"),
        crate::config::MAX_CONFIG_BYTES,
        "config.json",
    )
    .ok()?;
    serde_json::from_slice::<Value>(&bytes)
        .ok()
        .filter(Value::is_object)
}

/// The folder holding the checkpoint's weight files.
fn input_folder(ckpt: &Checkpoint) -> PathBuf {
    ckpt.files
        .first()
        .and_then(|f| f.path.parent())
        .map(Path::to_path_buf)
        .unwrap_or_default()
}

/// Refuses an output folder that is the input's, inside it, or (without `force`) exists.
fn check_output(out: &Path, input_dir: &Path, force: bool) -> Result<()> {
    let canon_in = std::fs::canonicalize(if input_dir.as_os_str().is_empty() {
        Path::new(".")
    } else {
        input_dir
    })
    .map_err(|e| Error::Output {
        path: input_dir.to_path_buf(),
        problem: e.to_string(),
    })?;
    // The deepest existing ancestor of `out`, canonical, then the rest.
    let mut existing = out.to_path_buf();
    let mut rest = Vec::new();
    while !existing.as_os_str().is_empty() && std::fs::symlink_metadata(&existing).is_err() {
        rest.push(
            existing
                .file_name()
                .map(|n| n.to_os_string())
                .unwrap_or_default(),
        );
        existing = existing.parent().map(Path::to_path_buf).unwrap_or_default();
    }
    let base = if existing.as_os_str().is_empty() {
        PathBuf::from(".")
    } else {
        existing.clone()
    };
    let mut canon_out = std::fs::canonicalize(&base).map_err(|e| Error::Output {
        path: base.clone(),
        problem: e.to_string(),
    })?;
    for part in rest.iter().rev() {
        canon_out.push(part);
    }
    if canon_out.starts_with(&canon_in) {
        return Err(Error::Output {
            path: out.to_path_buf(),
            problem: format!("is {} the input checkpoint's folder; extend writes a new checkpoint folder elsewhere", if canon_out == canon_in { "" } else { "inside" }).replace("  ", " "),
        });
    }
    if let Ok(meta) = std::fs::metadata(out) {
        if !force {
            return Err(Error::Output { path: out.to_path_buf(), problem: "exists already; give a new folder, or --force to write into it (files of the same names replaced)".into() });
        }
        if !meta.is_dir() {
            return Err(Error::Output {
                path: out.to_path_buf(),
                problem: "exists and is not a folder".into(),
            });
        }
    }
    Ok(())
}

/// Creates the output folder: exclusively, unless `force` and it is a folder already.
fn create_output(out: &Path, force: bool) -> Result<()> {
    if let Some(parent) = out.parent().filter(|p| !p.as_os_str().is_empty()) {
        std::fs::create_dir_all(parent).map_err(|e| Error::Output {
            path: parent.to_path_buf(),
            problem: format!("cannot create: {e}"),
        })?;
    }
    match std::fs::create_dir(out) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && force && out.is_dir() => Ok(()),
        Err(e) => Err(Error::Output {
            path: out.to_path_buf(),
            problem: format!("cannot create: {e}"),
        }),
    }
}

/// The shard index of a sharded input, with `metadata.total_size` set to the new sum.
fn rewrite_index(
    dir: &Path,
    ckpt: &Checkpoint,
    written: &[WrittenFile],
    replacements: &[Replacement],
) -> Result<Option<(String, String)>> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Ok(None);
    };
    let mut names: Vec<String> = entries
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".safetensors.index.json"))
        .collect();
    names.sort();
    let Some(name) = names.into_iter().next() else {
        return Ok(None);
    };
    let path = dir.join(&name);
    let bytes = crate::checkpoint::read_small_file(
        &path,
        crate::checkpoint::limits::MAX_INDEX_BYTES,
        "shard index",
    )?;
    let mut index: Value = serde_json::from_slice(&bytes)
        .map_err(|e| usage(format!("{}: not valid JSON: {e}", path.display())))?;
    let _ = written;
    let total: u64 = ckpt
        .tensors
        .iter()
        .map(|t| match replacements.iter().find(|r| r.name == t.name) {
            Some(r) => r.bytes.len() as u64,
            None => t.nbytes().unwrap_or(0) as u64,
        })
        .sum();
    if let Some(meta) = index.get_mut("metadata").and_then(Value::as_object_mut)
        && meta.contains_key("total_size")
    {
        meta.insert("total_size".into(), Value::from(total));
    }
    Ok(Some((name, serde_json::to_string_pretty(&index)? + "\n")))
}

/// Copies the regular non-weight files of the input folder (tokenizer, generation
/// config, README), except config.json and shard indexes; returns their names.
fn copy_sidecars(
    dir: &Path,
    out: &Path,
    force: bool,
    warnings: &mut Vec<String>,
) -> Result<Vec<String>> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Ok(Vec::new());
    };
    let mut names: Vec<(String, PathBuf)> = entries
        .flatten()
        .filter(|e| e.file_type().is_ok_and(|t| t.is_file()))
        .map(|e| (e.file_name().to_string_lossy().into_owned(), e.path()))
        .filter(|(n, _)| {
            let l = n.to_ascii_lowercase();
            !l.starts_with('.')
                && l != "config.json"
                && !l.ends_with(".index.json")
                && !super::WEIGHT_ENDINGS.iter().any(|end| l.ends_with(end))
                && !l.ends_with(".onnx")
        })
        .collect();
    names.sort();
    let mut copied = Vec::new();
    for (name, path) in names {
        let size = std::fs::metadata(&path).map(|m| m.len()).unwrap_or(0);
        if size > MAX_SIDECAR_BYTES {
            warnings.push(format!(
                "{name}: {size} bytes, not copied (copy it by hand if the model needs it)"
            ));
            continue;
        }
        let dest = out.join(&name);
        if dest.exists() && !force {
            warnings.push(format!("{}: exists, not replaced", dest.display()));
            continue;
        }
        std::fs::copy(&path, &dest).map_err(|e| Error::Output {
            path: dest.clone(),
            problem: format!("cannot copy {name}: {e}"),
        })?;
        copied.push(name);
    }
    Ok(copied)
}

/// One line for the written files' metadata: what was synthesised.
fn provenance(p: &EditPlan) -> String {
    format!(
        "{}: {} synthesised by posaudit extend --method {} --rows {} (shape {:?} -> {:?}); fine-tune before trusting them",
        p.table,
        p.synthesised
            .iter()
            .map(|r| crate::text::rows(*r))
            .collect::<Vec<_>>()
            .join(", "),
        p.method,
        p.rows,
        p.old_shape,
        p.new_shape
    )
}

fn cautions(p: &EditPlan) -> Vec<String> {
    let synth = p
        .synthesised
        .iter()
        .map(|r| crate::text::rows(*r))
        .collect::<Vec<_>>()
        .join(", ");
    let mut out = Vec::new();
    match p.kind {
        Kind::FixedSinusoidal => out.push(format!(
            "{synth} of `{}` now hold the fitted formula; a model trained with the old (rounded) values may behave differently until it is fine-tuned or evaluated with the new table.",
            p.table
        )),
        _ => out.push(format!(
            "{synth} of `{}` are synthesised, not trained: fine-tune the model on sequences (or images) of the new size before trusting them, and evaluate it there.",
            p.table
        )),
    }
    if matches!(
        p.method.as_str(),
        "interpolate" | "cubic" | "bilinear" | "bicubic"
    ) && p.rows == "all"
    {
        out.push("Interpolated rows are smooth by construction, so the audit of the new checkpoint reads them as trained: it cannot tell synthesised rows from learned ones (the written file's metadata key posaudit_extend says which rows were synthesised).".into());
    }
    if p.method == "copy" {
        out.push("Tiled rows repeat the trained rows: positions one period apart get the same vector until fine-tuning separates them.".into());
    }
    if p.method == "reinit" {
        out.push("Re-initialised rows are noise: the audit of the new checkpoint calls them untrained, which they are.".into());
    }
    out
}

fn state(path: &str, t: &TableAudit) -> TableState {
    TableState {
        path: path.to_string(),
        shape: t.shape.clone(),
        verdict: t.verdict.clone(),
        findings: t.findings.clone(),
    }
}

fn common_prefix_parts(a: &str, b: &str) -> usize {
    a.split('.')
        .zip(b.split('.'))
        .take_while(|(x, y)| x == y)
        .count()
}
