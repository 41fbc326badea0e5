//! Chooses and builds the plots of an audit report from the document: which plot each
//! table gets, its title, axes and shaded ranges. Drawing itself is in [`super::plots`];
//! the plots of a comparison are in [`compare`].

pub mod compare;

use super::plots::{
    self, ColorScale, Colormap, Heatmap, HeatmapGrid, HeatmapPanel, LineChart, Matrix, Panel,
    RefLine, Scale, Series, SmallMultiples, XRange,
};
use crate::analyze::rotary::Scaling;
use crate::detect::Kind;
use crate::model::FindingCode;
use crate::model::audit::TableAudit;

/// One plot: its file name (unique within the report), a caption, and the SVG.
#[derive(Debug, Clone)]
pub struct Figure {
    /// File name, e.g. `t01-norms.svg`.
    pub file: String,
    /// Alt text / caption for the Markdown link.
    pub caption: String,
    /// The SVG document.
    pub svg: String,
}

fn fig(prefix: &str, name: &str, caption: impl Into<String>, svg: String) -> Figure {
    Figure {
        file: format!("{prefix}-{name}.svg"),
        caption: caption.into(),
        svg,
    }
}

/// The plots of one table. `index` numbers the table within the report (file prefix).
pub fn table_figures(t: &TableAudit, index: usize) -> Vec<Figure> {
    let prefix = format!("t{:02}", index + 1);
    let mut out = Vec::new();
    if t.same_as.is_some() {
        return out;
    }
    match t.kind {
        Kind::LearnedAbsolute | Kind::FixedSinusoidal => one_d(t, &prefix, &mut out),
        Kind::LearnedGrid2d => grid(t, &prefix, &mut out),
        Kind::RelativeBias => relative(t, &prefix, &mut out),
        Kind::RotaryFrequencies => {
            if let Some(r) = &t.rotary {
                out.extend(rotary(r, &prefix, &t.name));
            }
        }
        Kind::PositionIds => {}
    }
    out
}

fn shaded_ranges(t: &TableAudit) -> Vec<XRange> {
    let mut shaded = Vec::new();
    if t.untrained.is_none() {
        return shaded;
    }
    for f in &t.findings {
        let label = match f.code {
            FindingCode::UntrainedTail | FindingCode::UntrainedRows => "untrained",
            FindingCode::PartiallyTrained => "fading",
            _ => continue,
        };
        // A fade is one stretch however fragmented (its trained rows in between are
        // part of the picture); untrained runs are shaded one by one.
        let spans: Vec<[usize; 2]> = match (f.code, f.ranges.first(), f.ranges.last()) {
            (FindingCode::PartiallyTrained, Some(a), Some(b)) => vec![[a[0], b[1]]],
            _ => f.ranges.clone(),
        };
        for r in spans {
            shaded.push(XRange {
                start: r[0] as f64,
                end: r[1] as f64,
                label: format!("{label} {}", crate::text::range(r)),
            });
        }
    }
    shaded
}

fn one_d(t: &TableAudit, prefix: &str, out: &mut Vec<Figure>) {
    let short = short_name(&t.name);
    if let Some(p) = &t.profile {
        let mut c = LineChart::new(
            format!("Row norm by position — {short}"),
            "position (table row)",
            "L2 norm of the row",
        );
        c.series
            .push(Series::from_values("row norm", 0.0, &p.norms.norms));
        c.shaded = shaded_ranges(t);
        if let (Some(std), Some(d)) = (
            t.untrained
                .as_ref()
                .and_then(|u| u.evidence.init_std_hint.or(u.evidence.init_std_estimate)),
            t.dim,
        ) {
            c.h_lines.push(RefLine::new(
                std * (d as f64).sqrt(),
                format!("init noise σ√d = {:.3}", std * (d as f64).sqrt()),
            ));
        }
        // The phase boundary, as the verdicts placed it (a table row).
        if let Some(f) = t
            .findings
            .iter()
            .find(|f| f.code == FindingCode::PhaseBoundary)
            .and_then(|f| f.ranges.first())
        {
            c.v_lines.push(RefLine::new(
                f[0] as f64,
                format!("phase boundary {}", f[0]),
            ));
        }
        out.push(fig(
            prefix,
            "norms",
            "Row norms against position, untrained ranges shaded, a phase boundary marked",
            plots::line_chart(&c),
        ));

        let cos: Vec<f64> = p
            .neighbour_cosine
            .iter()
            .map(|v| v.unwrap_or(f64::NAN))
            .collect();
        let mut c = LineChart::new(
            format!("Cosine of each row with the next — {short}"),
            "position (table row)",
            "cosine(row p, row p+1)",
        );
        c.series
            .push(Series::from_values("neighbour cosine", 0.0, &cos));
        c.shaded = shaded_ranges(t);
        if let Some(d) = t.dim {
            let band = 3.0 / (d as f64).sqrt();
            c.h_lines.push(RefLine::new(
                band,
                format!("+3/√d: independent rows stay below ({band:.3})"),
            ));
        }
        out.push(fig(
            prefix,
            "neighbours",
            "Neighbour cosine against position",
            plots::line_chart(&c),
        ));

        let m = &p.cosine_matrix;
        let side = m.positions.len();
        if side > 1 {
            let values: Vec<f64> = m
                .values
                .iter()
                .flat_map(|r| r.iter().map(|v| v.unwrap_or(f64::NAN)))
                .collect();
            if let Ok(matrix) = Matrix::new(side, side, values) {
                let last = *m.positions.last().unwrap_or(&0) as f64;
                let h = Heatmap {
                    title: format!("Position-by-position cosine similarity — {short}"),
                    x_label: "position".into(),
                    y_label: "position".into(),
                    matrix,
                    x_range: (0.0, last + 1.0),
                    y_range: (0.0, last + 1.0),
                    color: ColorScale {
                        colormap: Colormap::Diverging,
                        range: Some((-1.0, 1.0)),
                        label: "cosine".into(),
                    },
                    width: 640,
                    height: 560,
                    row_labels: Vec::new(),
                };
                out.push(fig(
                    prefix,
                    "similarity",
                    "Cosine similarity between positions",
                    plots::heatmap(&h),
                ));
            }
        }
    }
    if let Some(sp) = &t.spectrum {
        // Values at or below the spectrum's resolution (sqrt(p·ε)·σ₁, see
        // linalg::gram) are rounding noise of the method, not properties of the table:
        // they are left out of the plot (and counted in the caption), which also keeps
        // the figure the same whichever backend computed it.
        let drawn: Vec<f64> = sp
            .singular_values
            .iter()
            .copied()
            .filter(|v| !(v.is_finite() && *v <= sp.resolution))
            .collect();
        let hidden = sp.singular_values.len() - drawn.len();
        let s = plots::Spectrum {
            title: format!("Singular values of the mean-centred table — {short}"),
            singular_values: drawn,
            effective_rank: Some(sp.effective_rank),
            width: plots::DEFAULT_WIDTH,
            height: plots::DEFAULT_HEIGHT,
        };
        let caption = if hidden > 0 {
            format!(
                "Singular-value spectrum with the effective rank ({hidden} value(s) below \
                 the numerical resolution not drawn)"
            )
        } else {
            "Singular-value spectrum with the effective rank".to_string()
        };
        out.push(fig(prefix, "spectrum", caption, plots::spectrum_plot(&s)));
        if !sp.components.is_empty() {
            let panels = sp
                .components
                .iter()
                .enumerate()
                .map(|(k, c)| Panel {
                    title: format!("component {}", k + 1),
                    points: c.iter().enumerate().map(|(i, v)| (i as f64, *v)).collect(),
                })
                .collect();
            let m = SmallMultiples {
                title: format!("Leading principal components against position — {short}"),
                x_label: "position".into(),
                y_label: "score".into(),
                panels,
                width: plots::DEFAULT_WIDTH,
            };
            out.push(fig(
                prefix,
                "components",
                "Leading principal components as functions of position",
                plots::small_multiples(&m),
            ));
        }
    }
    if let Some(fit) = &t.sinusoid {
        let mut c = LineChart::new(
            format!("Error against the fitted sinusoid — {short}"),
            "position (table row)",
            "max |table − formula| in the bin",
        );
        let pts: Vec<(f64, f64)> = fit
            .error_by_position
            .iter()
            .map(|b| ((b.start + b.end) as f64 / 2.0, b.max_abs_error.max(1e-18)))
            .collect();
        c.series.push(Series::new("max abs error", pts));
        c.y_scale = Scale::Log10;
        c.h_lines.push(RefLine::new(
            fit.precision.storage_half_ulp * fit.scale.max(1e-12),
            format!("{} half-ULP", t.dtype),
        ));
        out.push(fig(
            prefix,
            "error",
            "Error against the fitted formula, by position",
            plots::line_chart(&c),
        ));
    }
}

fn grid(t: &TableAudit, prefix: &str, out: &mut Vec<Figure>) {
    let Some(g) = &t.grid else { return };
    let panels: Vec<HeatmapPanel> = g
        .similarity_maps
        .iter()
        .filter_map(|m| {
            let values: Vec<f64> = m.cosines.iter().flatten().copied().collect();
            Some(HeatmapPanel {
                title: m.label.clone(),
                matrix: Matrix::new(g.height, g.width, values).ok()?,
            })
        })
        .collect();
    if panels.is_empty() {
        return;
    }
    let h = HeatmapGrid {
        title: format!(
            "Cosine of selected patches with every patch — {}",
            short_name(&t.name)
        ),
        x_label: "grid column".into(),
        y_label: "grid row".into(),
        panels,
        x_range: (-0.5, g.width as f64 - 0.5),
        y_range: (-0.5, g.height as f64 - 0.5),
        color: ColorScale {
            colormap: Colormap::Diverging,
            range: Some((-1.0, 1.0)),
            label: "cosine".into(),
        },
        columns: Some(3),
        width: 900,
    };
    out.push(fig(
        prefix,
        "patch-similarity",
        "Similarity maps of selected patches on the grid",
        plots::heatmap_grid(&h),
    ));
}

fn relative(t: &TableAudit, prefix: &str, out: &mut Vec<Figure>) {
    let Some(r) = &t.relative else { return };
    let short = short_name(&t.name);
    if !r.curves.is_empty() && !r.distances.is_empty() {
        let mut c = LineChart::new(
            format!("Bias against relative distance, per head — {short}"),
            "relative distance (key − query)",
            "bias added to the attention logit",
        );
        for (h, curve) in r.curves.iter().enumerate() {
            let pts = r
                .distances
                .iter()
                .zip(curve)
                .map(|(d, v)| (*d as f64, *v))
                .collect();
            c.series.push(Series::new(format!("head {h}"), pts));
        }
        out.push(fig(
            prefix,
            "bias-curves",
            "Per-head bias against relative distance",
            plots::line_chart(&c),
        ));
    }
    if let (Some((wh, ww)), false) = (r.window, r.offset_maps.is_empty()) {
        let (rows, cols) = (2 * wh - 1, 2 * ww - 1);
        let panels: Vec<HeatmapPanel> = r
            .offset_maps
            .iter()
            .enumerate()
            .filter_map(|(h, m)| {
                Some(HeatmapPanel {
                    title: format!("head {h}"),
                    matrix: Matrix::new(rows, cols, m.iter().flatten().copied().collect()).ok()?,
                })
            })
            .collect();
        let h = HeatmapGrid {
            title: format!("Bias by 2-D offset, per head — {short}"),
            x_label: "dx".into(),
            y_label: "dy".into(),
            panels,
            x_range: (-(ww as f64) + 0.5, ww as f64 - 0.5),
            y_range: (-(wh as f64) + 0.5, wh as f64 - 0.5),
            color: ColorScale {
                colormap: Colormap::Diverging,
                range: None,
                label: "bias".into(),
            },
            columns: Some(4),
            width: 900,
        };
        out.push(fig(
            prefix,
            "offset-maps",
            "Per-head bias maps over 2-D offsets",
            plots::heatmap_grid(&h),
        ));
    }
}

/// The wavelength plot of a rotary analysis (stored or config-derived).
pub fn rotary(r: &crate::analyze::rotary::RotaryAnalysis, prefix: &str, name: &str) -> Vec<Figure> {
    let Some(base) = r.base else {
        return Vec::new();
    };
    let d = r.rotary_dim.max(2) as f64;
    let n = r.frequencies;
    let mut c = LineChart::new(
        format!(
            "Rotary wavelengths by frequency index — {}",
            short_name(name)
        ),
        "frequency index i",
        "wavelength 2π/ω (tokens)",
    );
    c.y_scale = Scale::Log10;
    let unscaled: Vec<(f64, f64)> = (0..n)
        .map(|i| {
            (
                i as f64,
                2.0 * std::f64::consts::PI * base.powf(2.0 * i as f64 / d),
            )
        })
        .collect();
    c.series.push(Series::new(
        format!("base {base:.0}, no scaling"),
        unscaled.clone(),
    ));
    if r.scaling != Scaling::None {
        if let Some(ramp) = &r.ramp {
            let scaled: Vec<(f64, f64)> = unscaled
                .iter()
                .map(|&(i, w)| {
                    let i = i as usize;
                    let div = if i < ramp.unchanged.1 {
                        1.0
                    } else if i >= ramp.divided.0 {
                        r.factor
                    } else {
                        ramp.smoothed_divisors
                            .get(i - ramp.smoothed.0)
                            .copied()
                            .unwrap_or(1.0)
                    };
                    (i as f64, w * div)
                })
                .collect();
            c.series.push(Series::new("as stored (rescaled)", scaled));
        } else if r.scaling == Scaling::Linear {
            c.series.push(Series::new(
                "as stored (rescaled)",
                unscaled.iter().map(|&(i, w)| (i, w * r.factor)).collect(),
            ));
        }
    }
    if let Some(w) = &r.wavelengths
        && let Some(ctx) = w.context
    {
        c.h_lines
            .push(RefLine::new(ctx as f64, format!("declared context {ctx}")));
    }
    vec![fig(
        prefix,
        "wavelengths",
        "Rotary wavelengths against the declared context",
        plots::line_chart(&c),
    )]
}

/// The last two dotted parts of a tensor name, for plot titles.
pub fn short_name(name: &str) -> String {
    let parts: Vec<&str> = name.split('.').collect();
    if parts.len() <= 3 {
        name.to_string()
    } else {
        parts[parts.len() - 3..].join(".")
    }
}
