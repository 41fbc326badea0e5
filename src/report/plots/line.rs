//! Line charts, the singular-value spectrum and small multiples of lines.

use super::color::{series_color, series_dash};
use super::layout::{
    self, Area, AxisDraw, LABEL_SIZE, LegendEntry, SMALL_SIZE, TICK_SIZE, axis_labels, legend,
    legend_height, legend_rows, max_label_width, no_data, thin_x_ticks,
};
use super::scale::{Axis, AxisKind, format_value};
use super::svg::{Anchor, MUTED, Svg, TextStyle, num, text_width};
use super::{LineChart, RefLine, Scale, SmallMultiples, Spectrum};

/// Fill of shaded x ranges: a light warm grey that stays visible under the
/// grid but does not compete with the lines.
const SHADE_FILL: &str = "#f5eee3";
const SHADE_INK: &str = "#8a6a3a";
const REF_INK: &str = "#444444";

fn axis_kind(s: Scale) -> AxisKind {
    match s {
        Scale::Linear => AxisKind::Linear,
        Scale::Log10 => AxisKind::Log10,
    }
}

/// Finite bounds of an iterator, or `None` when it yields nothing finite.
fn bounds(values: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    values
        .filter(|v| v.is_finite())
        .fold(None, |acc, v| match acc {
            None => Some((v, v)),
            Some((lo, hi)) => Some((lo.min(v), hi.max(v))),
        })
}

/// Path data for one series plus what was drawn.
struct Traced {
    /// `d` attribute; empty when nothing could be drawn.
    d: String,
    /// Pixel positions of the drawable points (for markers).
    points: Vec<(f64, f64)>,
    /// Points left out because they were not positive on a log axis.
    non_positive: usize,
}

/// Turns data points into path data, breaking the line at points that cannot
/// be shown, and reducing long runs within one pixel column to first, min, max
/// and last point (same picture, smaller file).
fn trace(points: &[(f64, f64)], x: &Axis, y: &Axis) -> Traced {
    let mut non_positive = 0;
    // Segments of consecutive drawable points, in pixels.
    let mut segments: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
    for &(px, py) in points {
        let mapped = match (x.map(px), y.map(py)) {
            (Some(a), Some(b)) => Some((a, b)),
            _ => {
                if y.kind == AxisKind::Log10 && py.is_finite() && py <= 0.0 {
                    non_positive += 1;
                }
                None
            }
        };
        match mapped {
            Some(p) => {
                if let Some(s) = segments.last_mut() {
                    s.push(p);
                }
            }
            None => {
                if segments.last().is_some_and(|s| !s.is_empty()) {
                    segments.push(Vec::new());
                }
            }
        }
    }
    let mut d = String::new();
    let mut all = Vec::new();
    for seg in segments.iter().filter(|s| !s.is_empty()) {
        let reduced = reduce(seg);
        for (i, (px, py)) in reduced.iter().enumerate() {
            d.push(if i == 0 { 'M' } else { 'L' });
            d.push_str(&num(*px));
            d.push(' ');
            d.push_str(&num(*py));
        }
        if reduced.len() == 1 {
            // A lone point: a zero-length segment with round caps shows as a dot.
            d.push_str("h0.01");
        }
        all.extend_from_slice(seg);
    }
    Traced {
        d,
        points: all,
        non_positive,
    }
}

/// Keeps first, min, max and last point of every run of points that fall into
/// the same pixel column.
fn reduce(seg: &[(f64, f64)]) -> Vec<(f64, f64)> {
    if seg.len() < 8 {
        return seg.to_vec();
    }
    let mut out = Vec::with_capacity(seg.len().min(4096));
    let mut i = 0;
    while i < seg.len() {
        let col = seg[i].0.floor();
        let mut j = i;
        while j + 1 < seg.len() && seg[j + 1].0.floor() == col {
            j += 1;
        }
        if j - i < 4 {
            out.extend_from_slice(&seg[i..=j]);
        } else {
            let run = &seg[i..=j];
            let (mut kmin, mut kmax) = (0, 0);
            for (k, p) in run.iter().enumerate() {
                if p.1 < run[kmin].1 {
                    kmin = k;
                }
                if p.1 > run[kmax].1 {
                    kmax = k;
                }
            }
            let mut keep = vec![0, kmin, kmax, run.len() - 1];
            keep.sort_unstable();
            keep.dedup();
            out.extend(keep.into_iter().map(|k| run[k]));
        }
        i = j + 1;
    }
    out
}

/// Draws a line chart.
///
/// Layout, top to bottom: title, legend (only with more than one series,
/// wrapped into rows so it never covers data), plot area, x tick labels and
/// x-axis label. The x range spans all points, shaded ranges and vertical
/// reference lines exactly; the y range spans all drawable points and
/// horizontal reference lines plus 5 % padding. Series with at most 40 points
/// also get a dot per point. Returns a "no data" plot when no series has a
/// drawable point.
pub fn line_chart(chart: &LineChart) -> String {
    let width = f64::from(chart.width.max(200));
    let height = f64::from(chart.height.max(150));
    let kind = axis_kind(chart.y_scale);
    let drawable_y = |y: f64| y.is_finite() && (kind == AxisKind::Linear || y > 0.0);
    let pts = || {
        chart
            .series
            .iter()
            .flat_map(|s| s.points.iter())
            .filter(|(x, y)| x.is_finite() && drawable_y(*y))
    };
    let (Some(xb), Some(yb)) = (
        bounds(
            pts()
                .map(|p| p.0)
                .chain(chart.shaded.iter().flat_map(|r| [r.start, r.end]))
                .chain(chart.v_lines.iter().map(|r| r.value)),
        ),
        bounds(
            pts().map(|p| p.1).chain(
                chart
                    .h_lines
                    .iter()
                    .map(|r| r.value)
                    .filter(|&v| drawable_y(v)),
            ),
        ),
    ) else {
        return no_data(width, height, &chart.title);
    };
    if pts().next().is_none() {
        return no_data(width, height, &chart.title);
    }

    let entries: Vec<LegendEntry<'_>> = if chart.series.len() > 1 {
        chart
            .series
            .iter()
            .enumerate()
            .map(|(i, s)| LegendEntry {
                color: series_color(i),
                dash: series_dash(i),
                label: &s.label,
            })
            .collect()
    } else {
        Vec::new()
    };

    // The y axis needs its tick labels before the left margin is known; the
    // pixel range is fixed afterwards.
    let rows = legend_rows(&entries, width - 80.0);
    let top = 42.0
        + if rows > 0 {
            legend_height(rows) + 6.0
        } else {
            0.0
        };
    let bottom = height - 52.0;
    let y_probe = Axis::new(kind, yb.0, yb.1, bottom, top).padded(0.05);
    let y_ticks = y_probe.ticks(((bottom - top) / 45.0).max(3.0) as usize);
    let left = 34.0 + max_label_width(&y_ticks, TICK_SIZE) + 10.0;
    let area = Area {
        left,
        top,
        right: width - 24.0,
        bottom,
    };
    let y = Axis { ..y_probe };
    let x = Axis::new(AxisKind::Linear, xb.0, xb.1, area.left, area.right);
    let x_ticks = thin_x_ticks(x.ticks((area.width() / 90.0).max(2.0) as usize), &x);

    let mut svg = Svg::new(width, height);
    layout::title(&mut svg, width, &chart.title);
    if !entries.is_empty() {
        legend(&mut svg, &entries, 40.0, 36.0, width - 80.0);
    }

    let shade_labels = draw_shading(&mut svg, chart, &x, area);
    let axes = AxisDraw {
        area,
        x: &x,
        y: &y,
        x_ticks: &x_ticks,
        y_ticks: &y_ticks,
        x_labels: true,
        y_labels: true,
        tick_size: TICK_SIZE,
    };
    axes.grid(&mut svg);

    let mut non_positive = 0;
    let mut drawn_points: Vec<(f64, f64)> = Vec::new();
    for (i, s) in chart.series.iter().enumerate() {
        let t = trace(&s.points, &x, &y);
        non_positive += t.non_positive;
        drawn_points.extend(&t.points);
        if t.d.is_empty() {
            continue;
        }
        let mut attrs = format!(
            "class=\"series\" data-label=\"{}\"",
            super::svg::escape(&s.label)
        );
        if let Some(dash) = series_dash(i) {
            attrs.push_str(&format!(" stroke-dasharray=\"{dash}\""));
        }
        svg.path(&t.d, series_color(i), 1.8, &attrs);
        if t.points.len() <= 40 {
            for (px, py) in &t.points {
                svg.circle(*px, *py, 2.6, series_color(i));
            }
        }
    }
    let shade_label_lines = shade_labels.iter().map(|l| l.1 + 1).max().unwrap_or(0);
    draw_ref_lines(
        &mut svg,
        (&chart.h_lines, &chart.v_lines),
        (&x, &y),
        area,
        shade_label_lines,
        &drawn_points,
    );
    draw_shade_labels(&mut svg, &shade_labels, area);
    axes.axes(&mut svg);
    axis_labels(
        &mut svg,
        area,
        (&chart.x_label, &chart.y_label),
        18.0,
        height,
    );
    if non_positive > 0 {
        note(
            &mut svg,
            area.right,
            height - 12.0,
            &format!("{non_positive} values ≤ 0 not shown (log scale)"),
        );
    }
    svg.finish()
}

/// A small muted note at the bottom right.
fn note(svg: &mut Svg, right: f64, y: f64, text: &str) {
    svg.text(
        right,
        y,
        text,
        TextStyle::new(SMALL_SIZE, Anchor::End, "note").fill(MUTED),
    );
}

/// A shade label placed at the top of the plot area: left x, line number, text.
type ShadeLabel<'a> = (f64, usize, &'a str);

/// Draws the shaded x ranges and places their labels at the top of the plot
/// area (drawn later, over the lines); a label that would overlap an earlier
/// one moves down a line.
fn draw_shading<'a>(
    svg: &mut Svg,
    chart: &'a LineChart,
    x: &Axis,
    area: Area,
) -> Vec<ShadeLabel<'a>> {
    let mut placed: Vec<(f64, f64, usize)> = Vec::new();
    let mut labels = Vec::new();
    for r in &chart.shaded {
        let (Some(a), Some(b)) = (x.map_clamped(r.start), x.map_clamped(r.end)) else {
            continue;
        };
        let (a, b) = (a.min(b), a.max(b));
        svg.rect(
            a,
            area.top,
            b - a,
            area.height(),
            SHADE_FILL,
            &format!(
                "class=\"shade\" data-start=\"{}\" data-end=\"{}\"",
                r.start, r.end
            ),
        );
        if r.label.is_empty() {
            continue;
        }
        let w = text_width(&r.label, SMALL_SIZE);
        // Centre over the band, but keep inside the plot area.
        let mut lx = ((a + b) / 2.0 - w / 2.0).max(area.left + 3.0);
        lx = lx.min(area.right - w - 3.0);
        let mut line = 0;
        while placed
            .iter()
            .any(|&(s, e, l)| l == line && lx < e + 6.0 && lx + w > s - 6.0)
        {
            line += 1;
        }
        placed.push((lx, lx + w, line));
        labels.push((lx, line, r.label.as_str()));
    }
    labels
}

fn draw_shade_labels(svg: &mut Svg, labels: &[ShadeLabel<'_>], area: Area) {
    for &(lx, line, text) in labels {
        svg.text(
            lx,
            area.top + 14.0 + 14.0 * line as f64,
            text,
            TextStyle::new(SMALL_SIZE, Anchor::Start, "shade-label")
                .fill(SHADE_INK)
                .halo(),
        );
    }
}

/// Dashed reference lines with labels: a horizontal line's label goes at the right or
/// left end, just above or below the line, wherever it covers the fewest data points
/// (right end above the line on ties); vertical labels near the top beside the line.
fn draw_ref_lines(
    svg: &mut Svg,
    (h_lines, v_lines): (&[RefLine], &[RefLine]),
    (x, y): (&Axis, &Axis),
    area: Area,
    shade_label_lines: usize,
    data: &[(f64, f64)],
) {
    for r in h_lines {
        let Some(py) = y.map(r.value) else { continue };
        svg.line(
            area.left,
            py,
            area.right,
            py,
            REF_INK,
            1.2,
            "class=\"ref-line\" stroke-dasharray=\"6 4\"",
        );
        if !r.label.is_empty() {
            let w = text_width(&r.label, SMALL_SIZE);
            let above = py - 5.0;
            let below = py + 14.0;
            let mut best: Option<(usize, f64, f64, Anchor)> = None;
            for (lx, anchor, x0) in [
                (area.right - 5.0, Anchor::End, area.right - 5.0 - w),
                (area.left + 5.0, Anchor::Start, area.left + 5.0),
            ] {
                for ly in [above, below] {
                    if ly - SMALL_SIZE < area.top || ly > area.bottom - 2.0 {
                        continue;
                    }
                    // Points inside the label's box, with a 2-pixel margin.
                    let covered = data
                        .iter()
                        .filter(|(px, qy)| {
                            *px >= x0 - 2.0
                                && *px <= x0 + w + 2.0
                                && *qy >= ly - SMALL_SIZE - 2.0
                                && *qy <= ly + 4.0
                        })
                        .count();
                    if best.is_none_or(|b| covered < b.0) {
                        best = Some((covered, lx, ly, anchor));
                    }
                }
            }
            let (lx, ly, anchor) =
                best.map_or((area.right - 5.0, below, Anchor::End), |b| (b.1, b.2, b.3));
            svg.text(
                lx,
                ly,
                &r.label,
                TextStyle::new(SMALL_SIZE, anchor, "ref-label")
                    .fill(REF_INK)
                    .halo(),
            );
        }
    }
    for r in v_lines {
        let Some(px) = x.map(r.value) else { continue };
        svg.line(
            px,
            area.top,
            px,
            area.bottom,
            REF_INK,
            1.2,
            "class=\"ref-line\" stroke-dasharray=\"6 4\"",
        );
        if !r.label.is_empty() {
            let w = text_width(&r.label, SMALL_SIZE);
            let ly = area.top + 14.0 + 14.0 * shade_label_lines as f64;
            let (lx, anchor) = if px + 5.0 + w < area.right {
                (px + 5.0, Anchor::Start)
            } else {
                (px - 5.0, Anchor::End)
            };
            svg.text(
                lx,
                ly,
                &r.label,
                TextStyle::new(SMALL_SIZE, anchor, "ref-label")
                    .fill(REF_INK)
                    .halo(),
            );
        }
    }
}

/// Draws singular values against their index (1-based) on a log y axis, with
/// a dashed vertical line at the effective rank.
///
/// Zero, negative and non-finite values cannot be placed on a log axis; they
/// are left out and counted in a note. Returns a "no data" plot when no value
/// is positive and finite.
pub fn spectrum_plot(spectrum: &Spectrum) -> String {
    let mut chart = LineChart::new(
        spectrum.title.clone(),
        "index of singular value (1 = largest)",
        "singular value (weight units)",
    );
    chart.width = spectrum.width;
    chart.height = spectrum.height;
    chart.y_scale = Scale::Log10;
    chart.series.push(super::Series::new(
        "singular values",
        spectrum
            .singular_values
            .iter()
            .enumerate()
            .map(|(i, &s)| ((i + 1) as f64, s))
            .collect(),
    ));
    if let Some(r) = spectrum.effective_rank.filter(|r| r.is_finite()) {
        chart.v_lines.push(RefLine::new(
            r,
            format!("effective rank {}", format_value(r, 3)),
        ));
    }
    line_chart(&chart)
}

/// Draws one small line panel per entry, sharing the x range; one column for
/// up to four panels, two columns beyond. Each panel has its own y range
/// (components differ in scale) with three or so ticks; x tick labels only
/// under the bottom panel of each column. Returns a "no data" plot when no
/// panel has a finite point.
pub fn small_multiples(m: &SmallMultiples) -> String {
    let width = f64::from(m.width.max(200));
    let n = m.panels.len();
    let finite = |p: &&(f64, f64)| p.0.is_finite() && p.1.is_finite();
    let Some(xb) = bounds(
        m.panels
            .iter()
            .flat_map(|p| p.points.iter().filter(finite).map(|p| p.0)),
    ) else {
        return no_data(width, f64::from(super::DEFAULT_HEIGHT), &m.title);
    };
    let cols = if n <= 4 { 1 } else { 2 };
    let rows = n.div_ceil(cols);
    let panel_h = if cols == 1 { 96.0 } else { 88.0 };
    let title_h = 16.0;
    let gap = 10.0;
    let top0 = 42.0;
    let height = top0 + rows as f64 * (panel_h + title_h + gap) - gap + 52.0;

    // Per-panel y axes; the shared left margin must fit the widest tick label.
    let y_axes: Vec<Option<(f64, f64)>> = m
        .panels
        .iter()
        .map(|p| bounds(p.points.iter().filter(finite).map(|p| p.1)))
        .collect();
    let probe_ticks: Vec<Vec<(f64, String)>> = y_axes
        .iter()
        .map(|b| match b {
            Some((lo, hi)) => Axis::new(AxisKind::Linear, *lo, *hi, panel_h, 0.0)
                .padded(0.08)
                .ticks(3),
            None => Vec::new(),
        })
        .collect();
    let tick_w = probe_ticks
        .iter()
        .map(|t| max_label_width(t, TICK_SIZE))
        .fold(0.0, f64::max);
    let col_gap = 16.0;
    let left0 = 34.0 + tick_w + 10.0;
    let inner_w = width - left0 - 20.0;
    let col_w = (inner_w - (cols as f64 - 1.0) * (col_gap + tick_w + 10.0)) / cols as f64;

    let mut svg = Svg::new(width, height);
    layout::title(&mut svg, width, &m.title);
    let mut last_area = None;
    for (i, panel) in m.panels.iter().enumerate() {
        let (c, r) = (i / rows, i % rows);
        let left = left0 + c as f64 * (col_w + col_gap + tick_w + 10.0);
        let ptop = top0 + r as f64 * (panel_h + title_h + gap) + title_h;
        let area = Area {
            left,
            top: ptop,
            right: left + col_w,
            bottom: ptop + panel_h,
        };
        svg.open_group("class=\"panel\"");
        svg.text(
            area.left,
            area.top - 4.0,
            &panel.title,
            TextStyle::new(SMALL_SIZE + 0.5, Anchor::Start, "panel-title").bold(),
        );
        let x = Axis::new(AxisKind::Linear, xb.0, xb.1, area.left, area.right);
        let x_ticks = thin_x_ticks(x.ticks((area.width() / 90.0).max(2.0) as usize), &x);
        let bottom_of_column = r == rows - 1 || i == n - 1;
        let (y, y_ticks) = match y_axes[i] {
            Some((lo, hi)) => {
                let y = Axis::new(AxisKind::Linear, lo, hi, area.bottom, area.top).padded(0.08);
                (y, y.ticks(3))
            }
            None => (
                Axis::new(AxisKind::Linear, 0.0, 1.0, area.bottom, area.top),
                Vec::new(),
            ),
        };
        let axes = AxisDraw {
            area,
            x: &x,
            y: &y,
            x_ticks: &x_ticks,
            y_ticks: &y_ticks,
            x_labels: bottom_of_column,
            y_labels: true,
            tick_size: TICK_SIZE,
        };
        axes.grid(&mut svg);
        if let Some(zero) = y.map(0.0).filter(|z| *z > area.top && *z < area.bottom) {
            svg.line(
                area.left,
                zero,
                area.right,
                zero,
                "#b0b0b0",
                1.0,
                "class=\"zero\"",
            );
        }
        let t = trace(&panel.points, &x, &y);
        if t.d.is_empty() {
            svg.text(
                (area.left + area.right) / 2.0,
                (area.top + area.bottom) / 2.0 + 4.0,
                "no data",
                TextStyle::new(SMALL_SIZE, Anchor::Middle, "no-data").fill(MUTED),
            );
        } else {
            svg.path(&t.d, series_color(0), 1.5, "class=\"series\"");
        }
        axes.axes(&mut svg);
        svg.close_group();
        if last_area.is_none() || r == rows - 1 {
            last_area = Some(area);
        }
    }
    if let Some(a) = last_area {
        let whole = Area {
            left: left0,
            top: top0,
            right: width - 20.0,
            bottom: a.bottom,
        };
        axis_labels(&mut svg, whole, (&m.x_label, ""), 18.0, height);
        if !m.y_label.is_empty() {
            svg.text(
                18.0,
                (top0 + a.bottom) / 2.0,
                &m.y_label,
                TextStyle::new(LABEL_SIZE, Anchor::Middle, "y-label").rotate(-90.0),
            );
        }
    }
    svg.finish()
}

#[cfg(test)]
mod tests;
