//! Heatmaps (one matrix with a colour bar) and grids of small heatmaps on a
//! shared colour scale. Cells are drawn as one embedded palette PNG.

use super::color::{Colormap, LEVELS, hex, level};
use super::layout::{
    self, Area, AxisDraw, LABEL_SIZE, SMALL_SIZE, TICK_SIZE, axis_labels, max_label_width, no_data,
    thin_x_ticks,
};
use super::png;
use super::scale::{Axis, AxisKind, format_value, linear_ticks};
use super::svg::{Anchor, INK, MUTED, Svg, TextStyle};
use super::{ColorScale, Heatmap, HeatmapGrid, Matrix};

/// Largest number of rows or columns drawn; bigger matrices are block-averaged
/// first so the embedded image stays below about 350 kB.
const MAX_CELLS: usize = 512;
/// Each image pixel may cover at most this many display pixels. Cells are
/// repeated to get there, because some viewers (`rsvg-convert` 2.54, checked
/// by rendering) ignore `image-rendering` and smooth a scaled-up image, which
/// blurs cell edges over one image pixel.
const MAX_STRETCH: f64 = 2.0;
const BAR_WIDTH: f64 = 16.0;

/// Block mean (ignoring NaN) so that neither dimension exceeds [`MAX_CELLS`].
/// A block with no finite value stays NaN.
fn shrink(m: &Matrix) -> (usize, usize, Vec<f64>) {
    let (rows, cols) = (m.rows(), m.cols());
    if rows <= MAX_CELLS && cols <= MAX_CELLS {
        return (rows, cols, m.values().to_vec());
    }
    let fr = rows.div_ceil(MAX_CELLS);
    let fc = cols.div_ceil(MAX_CELLS);
    let (nr, nc) = (rows.div_ceil(fr), cols.div_ceil(fc));
    let mut sum = vec![0.0; nr * nc];
    let mut count = vec![0usize; nr * nc];
    for (r, row) in m.values().chunks(cols).enumerate() {
        for (c, &v) in row.iter().enumerate() {
            if !v.is_nan() {
                let k = (r / fr) * nc + c / fc;
                sum[k] += v;
                count[k] += 1;
            }
        }
    }
    let out = sum
        .iter()
        .zip(&count)
        .map(|(&s, &n)| if n == 0 { f64::NAN } else { s / n as f64 })
        .collect();
    (nr, nc, out)
}

/// The colour-bar range: the caller's, or one derived from the finite values.
/// `None` when there is no explicit range and no finite value.
fn resolve_range<'a>(
    scale: &ColorScale,
    values: impl Iterator<Item = &'a f64>,
) -> Option<(f64, f64)> {
    if let Some((a, b)) = scale.range.filter(|(a, b)| a.is_finite() && b.is_finite()) {
        return Some(widen(a.min(b), a.max(b)));
    }
    let (mut lo, mut hi, mut any) = (f64::INFINITY, f64::NEG_INFINITY, false);
    for &v in values.filter(|v| v.is_finite()) {
        lo = lo.min(v);
        hi = hi.max(v);
        any = true;
    }
    if !any {
        return None;
    }
    Some(match scale.colormap {
        Colormap::Sequential => widen(lo, hi),
        Colormap::Diverging => {
            let m = lo.abs().max(hi.abs());
            if m > 0.0 { (-m, m) } else { (-1.0, 1.0) }
        }
    })
}

fn widen(lo: f64, hi: f64) -> (f64, f64) {
    if hi > lo {
        (lo, hi)
    } else if lo == 0.0 {
        (-1.0, 1.0)
    } else {
        (lo - lo.abs() * 0.1, hi + hi.abs() * 0.1)
    }
}

/// Draws the cells of a (rows × cols) matrix over `area` as one PNG.
fn draw_cells(
    svg: &mut Svg,
    rows: usize,
    cols: usize,
    values: &[f64],
    area: Area,
    range: (f64, f64),
    table: &[[u8; 3]],
) {
    let repeat = |display: f64, cells: usize| -> usize {
        let s = (display / (MAX_STRETCH * cells.max(1) as f64)).ceil();
        if s.is_finite() {
            (s as usize).clamp(1, 64)
        } else {
            1
        }
    };
    let sx = repeat(area.width(), cols);
    let sy = repeat(area.height(), rows);
    let (w, h) = (cols * sx, rows * sy);
    let mut idx = Vec::with_capacity(w * h);
    for row in values.chunks(cols.max(1)) {
        let line: Vec<u8> = row
            .iter()
            .flat_map(|&v| std::iter::repeat_n(level(v, range.0, range.1), sx))
            .collect();
        for _ in 0..sy {
            idx.extend_from_slice(&line);
        }
    }
    if let Some(uri) = png::data_uri(w, h, &idx, table) {
        svg.image(area.left, area.top, area.width(), area.height(), &uri);
    }
}

/// Layout of a vertical colour bar with its tick labels and title.
struct ColorBar<'a> {
    left: f64,
    top: f64,
    bottom: f64,
    range: (f64, f64),
    colormap: Colormap,
    label: &'a str,
    has_nan: bool,
}

/// Tick labels of a colour bar: the exact ends plus nice values between them
/// that keep clear of the ends.
fn bar_ticks(range: (f64, f64), top: f64, bottom: f64) -> Vec<(f64, String, &'static str)> {
    let (lo, hi) = range;
    let px = |v: f64| bottom - (v - lo) / (hi - lo) * (bottom - top);
    let mut out = vec![
        (lo, format_value(lo, 3), "colorbar-min"),
        (hi, format_value(hi, 3), "colorbar-max"),
    ];
    let target = ((bottom - top) / 50.0).max(2.0) as usize;
    for (v, l) in linear_ticks(lo, hi, target) {
        if (px(v) - px(lo)).abs() > 16.0 && (px(v) - px(hi)).abs() > 16.0 {
            out.push((v, l, "colorbar-tick"));
        }
    }
    out
}

/// Horizontal space the colour bar needs right of the plot area.
fn bar_space(range: Option<(f64, f64)>) -> f64 {
    let tick_w = range
        .map(|r| {
            let t: Vec<(f64, String)> = bar_ticks(r, 0.0, 300.0)
                .into_iter()
                .map(|(v, l, _)| (v, l))
                .collect();
            max_label_width(&t, TICK_SIZE)
        })
        .unwrap_or(24.0);
    // gap, bar, tick marks and labels, gap, the rotated title (its glyphs extend about
    // one label size right of its anchor), margin.
    18.0 + BAR_WIDTH + 6.0 + tick_w + 14.0 + 2.0 * LABEL_SIZE + 8.0
}

fn draw_color_bar(svg: &mut Svg, bar: &ColorBar<'_>) {
    let (lo, hi) = bar.range;
    svg.open_group("class=\"colorbar\"");
    // One column of all levels, highest at the top.
    let idx: Vec<u8> = (0..LEVELS).rev().map(|i| i as u8).collect();
    let table = bar.colormap.table();
    if let Some(uri) = png::data_uri(1, LEVELS, &idx, &table) {
        svg.image(bar.left, bar.top, BAR_WIDTH, bar.bottom - bar.top, &uri);
    }
    svg.rect(
        bar.left,
        bar.top,
        BAR_WIDTH,
        bar.bottom - bar.top,
        "none",
        &format!("stroke=\"{INK}\" stroke-width=\"0.8\""),
    );
    let mut widest: f64 = 0.0;
    for (v, label, class) in bar_ticks(bar.range, bar.top, bar.bottom) {
        let py = bar.bottom - (v - lo) / (hi - lo) * (bar.bottom - bar.top);
        let x = bar.left + BAR_WIDTH;
        svg.line(x, py, x + 4.0, py, INK, 1.0, "");
        svg.text(
            x + 7.0,
            py + TICK_SIZE * 0.36,
            &label,
            TextStyle::new(TICK_SIZE, Anchor::Start, class),
        );
        widest = widest.max(super::svg::text_width(&label, TICK_SIZE));
    }
    if !bar.label.is_empty() {
        let x = bar.left + BAR_WIDTH + 7.0 + widest + 14.0;
        svg.text(
            x,
            (bar.top + bar.bottom) / 2.0,
            bar.label,
            TextStyle::new(LABEL_SIZE, Anchor::Middle, "colorbar-label").rotate(90.0),
        );
    }
    svg.close_group();
    if bar.has_nan {
        nan_swatch(svg, bar.left, bar.bottom + 10.0);
    }
}

/// The grey square with "NaN" that explains grey cells.
fn nan_swatch(svg: &mut Svg, x: f64, y: f64) {
    svg.rect(
        x,
        y,
        BAR_WIDTH,
        12.0,
        &hex(super::NAN_COLOR),
        &format!("class=\"nan-swatch\" stroke=\"{INK}\" stroke-width=\"0.8\""),
    );
    svg.text(
        x + BAR_WIDTH + 6.0,
        y + 10.0,
        "NaN",
        TextStyle::new(SMALL_SIZE, Anchor::Start, "nan-label").fill(MUTED),
    );
}

/// Ticks at the centres of the rows, labelled by `labels`, every k-th row so that
/// labels are at least 14 px apart over `span` pixels (the last row always labelled).
fn row_ticks(labels: &[String], y_range: (f64, f64), span: f64) -> Vec<(f64, String)> {
    let n = labels.len();
    if n == 0 {
        return Vec::new();
    }
    let per_row = span / n as f64;
    let every = ((14.0 / per_row.max(1e-9)).ceil() as usize).max(1);
    let at = |i: usize| y_range.0 + (i as f64 + 0.5) * (y_range.1 - y_range.0) / n as f64;
    (0..n)
        .filter(|i| (n - 1 - i).is_multiple_of(every))
        .map(|i| (at(i), labels[i].clone()))
        .collect()
}

/// Draws a heatmap with a colour bar.
///
/// Row 0 is at the top; column 0 at the left. Cell (r, c) covers
/// `x_range.0 + c·Δx .. x_range.0 + (c+1)·Δx` with `Δx = (x_range.1 − x_range.0)/cols`
/// (likewise for rows), so the axes read in the caller's units. Values map
/// linearly onto the colour scale ([`ColorScale`]): values beyond the range
/// take the end colours, NaN cells are grey and a "NaN" key appears under the
/// colour bar. Matrices larger than 512 in either dimension are block-averaged
/// (NaN-aware) first. A square matrix gets square cells. An empty matrix gives
/// a "no data" plot; a matrix with no finite value and no explicit range is
/// drawn all grey without a colour bar.
pub fn heatmap(h: &Heatmap) -> String {
    let width = f64::from(h.width.max(200));
    let height = f64::from(h.height.max(150));
    let m = &h.matrix;
    if m.rows() == 0 || m.cols() == 0 {
        return no_data(width, height, &h.title);
    }
    let (rows, cols, values) = shrink(m);
    let range = resolve_range(&h.color, values.iter());
    let has_nan = values.iter().any(|v| v.is_nan());

    let top = 42.0;
    let bottom = height - 52.0;
    let labelled = h.row_labels.len() == m.rows() && rows == m.rows();
    let y_probe = Axis::new(AxisKind::Linear, h.y_range.0, h.y_range.1, top, bottom);
    let y_ticks = if labelled {
        row_ticks(&h.row_labels, h.y_range, bottom - top)
    } else {
        y_probe.ticks(((bottom - top) / 50.0).max(2.0) as usize)
    };
    let left = 34.0 + max_label_width(&y_ticks, TICK_SIZE) + 10.0;
    let bar_w = bar_space(range);
    let avail_w = width - left - bar_w - 10.0;
    let avail_h = bottom - top;
    let (aw, ah) = if rows == cols {
        let s = avail_w.min(avail_h);
        (s, s)
    } else {
        (avail_w, avail_h)
    };
    // Centre plot and colour bar together.
    let shift = ((avail_w - aw) / 2.0).max(0.0);
    let area = Area {
        left: left + shift,
        top,
        right: left + shift + aw,
        bottom: top + ah,
    };
    let x = Axis::new(
        AxisKind::Linear,
        h.x_range.0,
        h.x_range.1,
        area.left,
        area.right,
    );
    let y = Axis::new(
        AxisKind::Linear,
        h.y_range.0,
        h.y_range.1,
        area.top,
        area.bottom,
    );
    let x_ticks = thin_x_ticks(x.ticks((aw / 80.0).max(2.0) as usize), &x);
    let y_ticks = if labelled {
        row_ticks(&h.row_labels, h.y_range, ah)
    } else {
        y.ticks((ah / 50.0).max(2.0) as usize)
    };

    let mut svg = Svg::new(width, height);
    layout::title(&mut svg, width, &h.title);
    let table = h.color.colormap.table();
    draw_cells(
        &mut svg,
        rows,
        cols,
        &values,
        area,
        range.unwrap_or((0.0, 1.0)),
        &table,
    );
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
    axes.axes(&mut svg);
    let y_label_x = area.left - max_label_width(&y_ticks, TICK_SIZE) - 22.0;
    axis_labels(&mut svg, area, (&h.x_label, &h.y_label), y_label_x, height);
    let bar_left = area.right + 18.0;
    match range {
        Some(r) => draw_color_bar(
            &mut svg,
            &ColorBar {
                left: bar_left,
                top: area.top,
                bottom: area.bottom,
                range: r,
                colormap: h.color.colormap,
                label: &h.color.label,
                has_nan,
            },
        ),
        None => nan_swatch(&mut svg, bar_left, area.top),
    }
    svg.finish()
}

/// Draws several small heatmaps in a grid on one colour scale.
///
/// Panels are filled row by row, `columns` per row (default: the ceiling of
/// the square root of the count). Every panel has the first panel's aspect
/// ratio (clamped to 1:3 .. 3:2 height:width) and its own title; y tick labels
/// appear on the left column and x tick labels on the bottom panel of each
/// column. The automatic colour range covers the finite values of all panels
/// (see [`heatmap`] for NaN, ranges and block-averaging). No panels, or only
/// empty ones, give a "no data" plot.
pub fn heatmap_grid(g: &HeatmapGrid) -> String {
    let width = f64::from(g.width.max(200));
    let n = g.panels.len();
    if g.panels
        .iter()
        .all(|p| p.matrix.rows() == 0 || p.matrix.cols() == 0)
    {
        return no_data(width, f64::from(super::DEFAULT_HEIGHT), &g.title);
    }
    let shrunk: Vec<(usize, usize, Vec<f64>)> =
        g.panels.iter().map(|p| shrink(&p.matrix)).collect();
    let range = resolve_range(&g.color, shrunk.iter().flat_map(|s| s.2.iter()));
    let has_nan = shrunk.iter().any(|s| s.2.iter().any(|v| v.is_nan()));

    let cols = g
        .columns
        .unwrap_or_else(|| (n as f64).sqrt().ceil() as usize)
        .clamp(1, n);
    let rows = n.div_ceil(cols);
    let top0 = 42.0;
    let title_h = 17.0;
    let gap = 12.0;
    let y_tick_probe = linear_ticks(
        g.y_range.0.min(g.y_range.1),
        g.y_range.0.max(g.y_range.1),
        3,
    );
    let left = 34.0 + max_label_width(&y_tick_probe, TICK_SIZE) + 10.0;
    let bar_w = bar_space(range);
    let mut pw = (width - left - bar_w - 10.0 - (cols as f64 - 1.0) * gap) / cols as f64;
    let aspect = shrunk
        .iter()
        .find(|s| s.0 > 0 && s.1 > 0)
        .map(|s| s.0 as f64 / s.1 as f64)
        .unwrap_or(1.0)
        .clamp(1.0 / 3.0, 1.5);
    let mut ph = pw * aspect;
    if ph > 240.0 {
        ph = 240.0;
        pw = ph / aspect;
    }
    let grid_w = cols as f64 * pw + (cols as f64 - 1.0) * gap;
    let shift = ((width - left - bar_w - 10.0 - grid_w) / 2.0).max(0.0);
    let left = left + shift;
    let height = top0 + rows as f64 * (title_h + ph) + (rows as f64 - 1.0) * (gap + 6.0) + 52.0;

    let mut svg = Svg::new(width, height);
    layout::title(&mut svg, width, &g.title);
    let table = g.color.colormap.table();
    let mut grid_bottom: f64 = top0;
    for (i, (panel, (r_n, c_n, values))) in g.panels.iter().zip(&shrunk).enumerate() {
        let (r, c) = (i / cols, i % cols);
        let pl = left + c as f64 * (pw + gap);
        let pt = top0 + r as f64 * (title_h + ph + gap + 6.0) + title_h;
        let area = Area {
            left: pl,
            top: pt,
            right: pl + pw,
            bottom: pt + ph,
        };
        grid_bottom = grid_bottom.max(area.bottom);
        svg.open_group("class=\"panel\"");
        svg.text(
            area.left + pw / 2.0,
            area.top - 5.0,
            &panel.title,
            TextStyle::new(SMALL_SIZE + 0.5, Anchor::Middle, "panel-title").bold(),
        );
        if *r_n == 0 || *c_n == 0 {
            svg.text(
                area.left + pw / 2.0,
                area.top + ph / 2.0 + 4.0,
                "no data",
                TextStyle::new(SMALL_SIZE, Anchor::Middle, "no-data").fill(MUTED),
            );
        } else {
            draw_cells(
                &mut svg,
                *r_n,
                *c_n,
                values,
                area,
                range.unwrap_or((0.0, 1.0)),
                &table,
            );
        }
        let x = Axis::new(
            AxisKind::Linear,
            g.x_range.0,
            g.x_range.1,
            area.left,
            area.right,
        );
        let y = Axis::new(
            AxisKind::Linear,
            g.y_range.0,
            g.y_range.1,
            area.top,
            area.bottom,
        );
        let x_ticks = thin_x_ticks(x.ticks((pw / 45.0).max(2.0) as usize), &x);
        let y_ticks = y.ticks((ph / 40.0).max(2.0) as usize);
        let axes = AxisDraw {
            area,
            x: &x,
            y: &y,
            x_ticks: &x_ticks,
            y_ticks: &y_ticks,
            x_labels: i + cols >= n,
            y_labels: c == 0,
            tick_size: TICK_SIZE - 1.0,
        };
        axes.axes(&mut svg);
        svg.close_group();
    }
    let whole = Area {
        left,
        top: top0,
        right: left + grid_w,
        bottom: grid_bottom,
    };
    let y_label_x = left - max_label_width(&y_tick_probe, TICK_SIZE) - 22.0;
    axis_labels(&mut svg, whole, (&g.x_label, &g.y_label), y_label_x, height);
    let bar_left = whole.right + 18.0;
    let bar_top = top0 + title_h;
    match range {
        Some(r) => draw_color_bar(
            &mut svg,
            &ColorBar {
                left: bar_left,
                top: bar_top,
                bottom: grid_bottom,
                range: r,
                colormap: g.color.colormap,
                label: &g.color.label,
                has_nan,
            },
        ),
        None => nan_swatch(&mut svg, bar_left, bar_top),
    }
    svg.finish()
}

#[cfg(test)]
mod tests;
