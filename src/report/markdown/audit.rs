//! The Markdown report of an audit: a summary table first (one row per table: kind,
//! shape, verdict), then one section per table with its findings (evidence and limits),
//! its numbers and links to its plots.

use std::fmt::Write;

use super::{finding, finding_badges};
use crate::model::audit::{AuditReport, TableAudit};
use crate::report::figures::{self, Figure};
use crate::text::{escape, human_bytes, shape_str};

/// Renders the report and its plots. Returns the Markdown text and the figures it links.
pub fn render(report: &AuditReport) -> (String, Vec<Figure>) {
    let mut md = String::new();
    let mut all_figures = Vec::new();
    let c = &report.checkpoint;
    let _ = writeln!(md, "# Position-table audit\n");
    let _ = writeln!(
        md,
        "Checkpoint `{}`: {} format, {} file{}, {} tensors, {}.\n",
        c.path,
        c.format,
        c.files,
        if c.files == 1 { "" } else { "s" },
        c.tensors,
        human_bytes(c.bytes)
    );
    for line in c.folder_lines() {
        let _ = writeln!(md, "{}.\n", escape(&line));
    }
    if let Some(line) = c.stand_ins_line() {
        let _ = writeln!(md, "{}.\n", escape(&line));
    }
    if let Some(cfg) = &report.config {
        let _ = writeln!(
            md,
            "Configuration read from `{}`: {}.\n",
            cfg.source,
            cfg.summary()
        );
    } else {
        let _ = writeln!(
            md,
            "No `config.json` was found beside the weights: declared lengths and initializer scale are unknown, so length checks are skipped and noise scales are estimated from the table.\n"
        );
    }
    let s = &report.summary;
    let _ = writeln!(
        md,
        "**{} table{}; findings: {} error, {} warning, {} info.**\n",
        report.tables.len(),
        if report.tables.len() == 1 { "" } else { "s" },
        s.error,
        s.warning,
        s.info
    );
    for w in &report.warnings {
        let _ = writeln!(md, "> Warning: {}\n", escape(w));
    }
    if !report.tables.is_empty() {
        let _ = writeln!(
            md,
            "| # | table | kind | shape | dtype | verdict | findings |"
        );
        let _ = writeln!(md, "|---|---|---|---|---|---|---|");
        for (i, t) in report.tables.iter().enumerate() {
            let _ = writeln!(
                md,
                "| {} | [`{}`](#t{:02}) | {} | {} | {} | {} | {} |",
                i + 1,
                t.name,
                i + 1,
                t.kind.as_str(),
                shape_str(&t.shape),
                t.dtype,
                escape(&t.verdict),
                finding_badges(&t.findings)
            );
        }
        md.push('\n');
    }
    if let Some(r) = &report.config_rotary {
        let _ = writeln!(md, "## Rotary settings from the config\n");
        let _ = writeln!(
            md,
            "No frequency tensor is stored; these come from `rope_theta` / `rope_scaling`: {}.\n",
            escape(&r.verdict)
        );
        for f in &r.findings {
            finding(&mut md, f);
        }
        for f in figures::rotary(&r.analysis, "config", "config rope") {
            let _ = writeln!(md, "![{}]({})\n", f.caption, f.file);
            all_figures.push(f);
        }
    }
    for (i, t) in report.tables.iter().enumerate() {
        let figs = figures::table_figures(t, i);
        section(&mut md, t, i, &figs);
        all_figures.extend(figs);
    }
    if let Some(a) = &report.config_alibi {
        let _ = writeln!(md, "## ALiBi slopes from the config\n");
        let _ = writeln!(
            md,
            "The config encodes positions with linear attention biases (ALiBi); no tensor is stored. The {} heads use slopes {} (geometric sequence of the published construction).\n",
            a.heads,
            a.slopes
                .iter()
                .map(|s| format!("{s:.6}"))
                .collect::<Vec<_>>()
                .join(", ")
        );
    }
    if !report.index_buffers.is_empty() {
        let _ = writeln!(md, "## Index buffers\n");
        for b in &report.index_buffers {
            let _ = writeln!(
                md,
                "- `{}` ({}): {}",
                b.name,
                shape_str(&b.shape),
                escape(&b.what)
            );
        }
        md.push('\n');
    }
    if !report.skipped.is_empty() {
        let _ = writeln!(md, "## Skipped tensors\n");
        for s in report.skipped.iter().take(20) {
            let _ = writeln!(md, "- `{}` ({}): {}", s.name, s.dtype, escape(&s.reason));
        }
        if report.skipped.len() > 20 {
            let _ = writeln!(md, "- … and {} more", report.skipped.len() - 20);
        }
        md.push('\n');
    }
    let _ = writeln!(
        md,
        "---\nFindings are statistical evidence from the stored weights alone. They do not replace evaluation on real data: confirm any finding on held-out inputs before acting on it (re-initialising, truncating or extending a table)."
    );
    (md, all_figures)
}

fn section(md: &mut String, t: &TableAudit, i: usize, figs: &[Figure]) {
    let _ = writeln!(
        md,
        "<a id=\"t{:02}\"></a>\n## {}. `{}`\n",
        i + 1,
        i + 1,
        t.name
    );
    let _ = writeln!(
        md,
        "{} · shape {} · {} · file `{}`  \nDetected by {}.\n",
        t.kind.as_str(),
        shape_str(&t.shape),
        t.dtype,
        t.file,
        escape(&t.why)
    );
    let _ = writeln!(md, "**Verdict:** {}\n", escape(&t.verdict));
    if let Some(other) = &t.same_as {
        let same = match t.findings.len() {
            0 => String::new(),
            1 => ", so the same finding".to_string(),
            n => format!(", so the same {n} findings"),
        };
        let _ = writeln!(
            md,
            "Identical to `{}` (the same values{same}); see its section.\n",
            escape(other)
        );
        return;
    }
    if !t.findings.is_empty() {
        let _ = writeln!(md, "### Findings\n");
        for f in &t.findings {
            finding(md, f);
        }
        md.push('\n');
    }
    let numbers = numbers(t);
    if !numbers.is_empty() {
        let _ = writeln!(md, "### Numbers\n");
        for n in numbers {
            let _ = writeln!(md, "- {n}");
        }
        md.push('\n');
    }
    if !figs.is_empty() {
        let _ = writeln!(md, "### Plots\n");
        for f in figs {
            let _ = writeln!(md, "![{}]({})\n", f.caption, f.file);
        }
    }
}

fn f3(x: Option<f64>) -> String {
    x.map(|v| format!("{v:.3}")).unwrap_or_else(|| "n/a".into())
}

fn numbers(t: &TableAudit) -> Vec<String> {
    let mut out = Vec::new();
    if let Some(sp) = &t.spectrum {
        let energy = sp
            .energy_top_k
            .iter()
            .map(|e| format!("top {}: {:.1}%", e.k, 100.0 * e.fraction))
            .collect::<Vec<_>>()
            .join(", ");
        out.push(format!(
            "Spectrum of the mean-centred table: effective rank {:.1} of at most {} (Roy & Vetterli 2007); energy in {energy}.",
            sp.effective_rank,
            sp.singular_values.len()
        ));
    }
    if let Some(tp) = &t.trained_rows_profile {
        let mut parts = Vec::new();
        if let Some(sp) = &tp.spectrum {
            parts.push(format!(
                "effective rank {:.1}, energy in top 1: {:.1}%",
                sp.effective_rank,
                100.0 * sp.energy_top_k.first().map_or(f64::NAN, |e| e.fraction)
            ));
        }
        let loc: Vec<String> = tp
            .locality
            .distances
            .iter()
            .zip(&tp.locality.mean_cosine)
            .filter(|(d, _)| matches!(**d, 1 | 10 | 100))
            .map(|(d, c)| format!("{d}: {}", f3(*c)))
            .collect();
        if !loc.is_empty() {
            parts.push(format!("mean cosine at distance {}", loc.join(", ")));
        }
        out.push(format!(
            "Trained rows {}..{} alone (the numbers above include the untrained rows' noise): {}.",
            tp.rows[0],
            tp.rows[1],
            parts.join("; ")
        ));
    }
    if let Some(p) = &t.profile {
        out.push(format!(
            "Row norms: median {}, drift {} per position, end/start ratio {}.",
            f3(p.norms.median),
            p.norms
                .slope_per_position
                .map(|v| format!("{v:.2e}"))
                .unwrap_or_else(|| "n/a".into()),
            f3(p.norms.end_to_start_ratio)
        ));
        let loc: Vec<String> = p
            .locality
            .distances
            .iter()
            .zip(&p.locality.mean_cosine)
            .filter(|(d, _)| matches!(**d, 1 | 2 | 5 | 10 | 50 | 100))
            .map(|(d, c)| format!("{d}: {}", f3(*c)))
            .collect();
        if !loc.is_empty() {
            out.push(format!(
                "Mean cosine between positions at distance {}.",
                loc.join(", ")
            ));
        }
        let waves: Vec<String> = p
            .waves
            .iter()
            .enumerate()
            .filter_map(|(k, w)| w.as_ref().map(|w| (k, w)))
            .take(4)
            .map(|(k, w)| {
                format!(
                    "component {}: period {:.1} positions ({:.0}% explained by one sinusoid)",
                    k + 1,
                    w.period,
                    100.0 * w.explained_variance
                )
            })
            .collect();
        if !waves.is_empty() {
            out.push(format!("Waves: {}.", waves.join("; ")));
        }
        if p.analysed_rows < t.positions.unwrap_or(0) {
            out.push(format!(
                "Analysed the {} finite rows of {}.",
                p.analysed_rows,
                t.positions.unwrap_or(0)
            ));
        }
    }
    if let Some(f) = &t.sinusoid {
        out.push(format!(
            "Formula fit: base {:.6}, layout {}, sin first {}, exponent {}, offset {}, scale {:.6}, max abs error {:.3e}, RMS error {:.3e}.",
            f.base,
            serde_json::to_value(f.layout).ok().and_then(|v| v.as_str().map(str::to_string)).unwrap_or_default(),
            f.sin_first,
            serde_json::to_value(f.exponent).ok().and_then(|v| v.as_str().map(str::to_string)).unwrap_or_default(),
            f.offset,
            f.scale,
            f.max_abs_error,
            f.rms_error
        ));
        out.push(format!(
            "Precision: error is {:.1}x the storage half-ULP; simulated low-precision angles: {}.",
            f.precision.error_to_half_ulp,
            f.precision
                .simulated
                .iter()
                .map(|s| format!("{} residual {:.2e}", s.dtype, s.max_abs_residual))
                .collect::<Vec<_>>()
                .join(", ")
        ));
    }
    if let Some(u) = &t.untrained {
        let e = &u.evidence;
        out.push(format!(
            "Untrained-row test thresholds: neighbour cosine below {:.3}, subspace energy below {}, KS above {:.4}; init std {} (config) / {} (estimated).",
            e.cosine_threshold,
            f3(e.subspace_threshold),
            e.ks_critical,
            f3(e.init_std_hint),
            f3(e.init_std_estimate)
        ));
    }
    if let Some(g) = &t.grid {
        out.push(format!(
            "Grid: {}x{} with {} extra row(s) ({}).",
            g.height,
            g.width,
            g.extra_rows,
            escape(&g.how)
        ));
        if let Some(s) = &g.separability {
            out.push(format!(
                "Separability: additive row+column model {:.1}% (rows {:.1}%, columns {:.1}%, interaction {:.1}%).",
                100.0 * s.additive,
                100.0 * s.row_effect,
                100.0 * s.column_effect,
                100.0 * s.interaction
            ));
        }
        out.push(format!(
            "Mean cosine with grid neighbours {}; noise-like patches {}.",
            f3(g.neighbour_cosine_mean),
            f3(g.noise_like_fraction)
        ));
    }
    if let Some(r) = &t.relative {
        out.push(format!(
            "Buckets {} x heads {}, {} ({}); unreachable buckets {:?}; max distance {}.",
            r.buckets,
            r.heads,
            if r.bidirectional {
                "bidirectional"
            } else {
                "causal"
            },
            escape(&r.bidirectional_source),
            r.unreachable,
            r.max_distance
                .map(|d| d.to_string())
                .unwrap_or_else(|| "n/a".into())
        ));
        for n in &r.notes {
            out.push(escape(n));
        }
    }
    if let Some(r) = &t.rotary {
        out.push(format!(
            "Rotary: {} frequencies (rotary dim {}), base {}, scaling {}, factor {:.4}; source {}.",
            r.frequencies,
            r.rotary_dim,
            r.base
                .map(|b| format!("{b:.4}"))
                .unwrap_or_else(|| "unknown".into()),
            r.scaling,
            r.factor,
            r.source
        ));
        if let Some(w) = &r.wavelengths {
            out.push(format!(
                "Wavelengths from {:.1} to {:.0} tokens{}.",
                w.shortest,
                w.longest,
                match (w.context, w.beyond_context) {
                    (Some(c), Some(b)) =>
                        format!("; {b} of them longer than the declared context {c}"),
                    _ => String::new(),
                }
            ));
        }
        for n in &r.notes {
            out.push(escape(n));
        }
    }
    if let Some(l) = &t.layers {
        out.push(format!(
            "{} stored rotary vectors: {}.",
            l.count,
            if l.identical {
                "all identical".to_string()
            } else {
                format!("{} differ from the first", l.differing.len())
            }
        ));
    }
    if let Some(p) = &t.position_ids {
        out.push(format!(
            "Position ids: length {}, offset {}, consecutive {}.",
            p.length, p.offset, p.contiguous
        ));
    }
    out
}
