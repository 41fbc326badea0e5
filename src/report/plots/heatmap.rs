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
    let y_probe = Axis::new(AxisKind::Linear, h.y_range.0, h.y_range.1, top, bottom);
    let y_ticks = y_probe.ticks(((bottom - top) / 50.0).max(2.0) as usize);
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
    let y_ticks = y.ticks((ah / 50.0).max(2.0) as usize);

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
mod tests {
    use super::super::{ColorScale, Colormap, Heatmap, HeatmapGrid, HeatmapPanel, Matrix};
    use super::*;
    use roxmltree::Document;

    fn parse(svg: &str) -> Document<'_> {
        Document::parse(svg).unwrap_or_else(|e| panic!("not well-formed XML: {e}"))
    }

    fn texts(doc: &Document<'_>, class: &str) -> Vec<String> {
        doc.descendants()
            .filter(|n| n.attribute("class") == Some(class))
            .map(|n| n.text().unwrap_or("").to_string())
            .collect()
    }

    /// Decodes the first embedded PNG with the `png` crate (independent decoder)
    /// and returns (width, height, RGB bytes).
    fn first_image(doc: &Document<'_>) -> (usize, usize, Vec<u8>) {
        let href = doc
            .descendants()
            .find(|n| n.has_tag_name("image"))
            .and_then(|n| n.attribute("href"))
            .expect("an image");
        let b64 = href
            .strip_prefix("data:image/png;base64,")
            .expect("png data uri");
        let bytes = decode_b64(b64);
        let mut dec = ::png::Decoder::new(std::io::Cursor::new(bytes));
        dec.set_transformations(::png::Transformations::EXPAND);
        let mut reader = dec.read_info().expect("png header");
        let mut buf = vec![0; reader.output_buffer_size().expect("size")];
        let info = reader.next_frame(&mut buf).expect("png frame");
        (info.width as usize, info.height as usize, buf)
    }

    /// Base64 decoding per RFC 4648 (test helper only).
    fn decode_b64(s: &str) -> Vec<u8> {
        let val = |c: u8| match c {
            b'A'..=b'Z' => c - b'A',
            b'a'..=b'z' => c - b'a' + 26,
            b'0'..=b'9' => c - b'0' + 52,
            b'+' => 62,
            _ => 63,
        };
        let mut out = Vec::new();
        for chunk in s.as_bytes().chunks(4) {
            let n = chunk
                .iter()
                .take_while(|&&c| c != b'=')
                .enumerate()
                .fold(0u32, |acc, (i, &c)| acc | (val(c) as u32) << (18 - 6 * i));
            let valid = chunk.iter().filter(|&&c| c != b'=').count();
            for i in 0..valid.saturating_sub(1) {
                out.push((n >> (16 - 8 * i)) as u8);
            }
        }
        out
    }

    /// Invented data: a cosine-like band matrix 64 × 64 with one NaN cell.
    fn cosine_map() -> Heatmap {
        let n = 64;
        let mut v: Vec<f64> = (0..n * n)
            .map(|k| {
                let (i, j) = ((k / n) as f64, (k % n) as f64);
                (-(i - j).abs() / 10.0).exp() * 1.2 - 0.3
            })
            .collect();
        v[5 * n + 7] = f64::NAN;
        Heatmap {
            title: "Cosine between positions".into(),
            x_label: "position".into(),
            y_label: "position".into(),
            matrix: Matrix::new(n, n, v).expect("shape"),
            x_range: (0.0, 2048.0),
            y_range: (0.0, 2048.0),
            color: ColorScale {
                colormap: Colormap::Diverging,
                range: None,
                label: "cosine similarity".into(),
            },
            width: 800,
            height: 560,
        }
    }

    #[test]
    fn heatmap_has_title_labels_and_symmetric_diverging_range() {
        let svg = heatmap(&cosine_map());
        let doc = parse(&svg);
        assert_eq!(texts(&doc, "title"), vec!["Cosine between positions"]);
        assert_eq!(texts(&doc, "x-label"), vec!["position"]);
        assert_eq!(texts(&doc, "colorbar-label"), vec!["cosine similarity"]);
        // Largest magnitude is 1.2·e⁰ − 0.3 = 0.9 on the diagonal; the diverging
        // scale is symmetric about zero.
        assert_eq!(texts(&doc, "colorbar-max"), vec!["0.9"]);
        assert_eq!(texts(&doc, "colorbar-min"), vec!["−0.9"]);
        assert!(texts(&doc, "tick-x").contains(&"2000".to_string()));
        // x ticks sit where the axis range (0, 2048) puts them on the cell area.
        let area = doc
            .descendants()
            .find(|n| n.attribute("class") == Some("plot-area"))
            .expect("area");
        let num = |n: &roxmltree::Node<'_, '_>, a: &str| -> f64 {
            n.attribute(a).and_then(|v| v.parse().ok()).expect("number")
        };
        let (left, w) = (num(&area, "x"), num(&area, "width"));
        let image = doc
            .descendants()
            .find(|n| n.has_tag_name("image"))
            .expect("image");
        assert_eq!((num(&image, "x"), num(&image, "width")), (left, w));
        for tick in doc
            .descendants()
            .filter(|n| n.attribute("class") == Some("tick-x"))
        {
            let v: f64 = tick
                .text()
                .and_then(|t| t.parse().ok())
                .expect("numeric label");
            assert!((num(&tick, "x") - (left + v / 2048.0 * w)).abs() < 0.01);
        }
    }

    #[test]
    fn explicit_range_is_printed_at_the_bar_ends() {
        let mut h = cosine_map();
        h.color = ColorScale {
            colormap: Colormap::Sequential,
            range: Some((-1.0, 1.0)),
            label: "cosine".into(),
        };
        let doc_s = heatmap(&h);
        let doc = parse(&doc_s);
        assert_eq!(texts(&doc, "colorbar-min"), vec!["−1"]);
        assert_eq!(texts(&doc, "colorbar-max"), vec!["1"]);
    }

    #[test]
    fn nan_cell_is_grey_and_explained() {
        let svg = heatmap(&cosine_map());
        let doc = parse(&svg);
        assert_eq!(texts(&doc, "nan-label"), vec!["NaN"]);
        let (w, h, rgb) = first_image(&doc);
        // Square cells, each repeated s times: cell (5, 7) is pixel block (5s.., 7s..).
        assert_eq!(w, h);
        assert_eq!(w % 64, 0);
        let s = w / 64;
        assert!(s > 1, "a 64-cell map shown at ~450 px is upscaled");
        let px = |r: usize, c: usize| &rgb[3 * (r * w + c)..3 * (r * w + c) + 3];
        for (dr, dc) in [(0, 0), (s - 1, s - 1)] {
            assert_eq!(px(5 * s + dr, 7 * s + dc), &super::super::NAN_COLOR);
        }
        assert_ne!(px(5 * s, 8 * s), &super::super::NAN_COLOR);
        assert_ne!(px(5 * s, 7 * s - 1), &super::super::NAN_COLOR);
        // The diagonal holds the maximum: the top colour of the diverging map.
        assert_eq!(px(0, 0), &Colormap::Diverging.rgb(1.0));
    }

    #[test]
    fn large_matrix_is_block_averaged_and_stays_small() {
        let n = 1024;
        let v: Vec<f64> = (0..n * n)
            .map(|k| ((k / n) as f64 - (k % n) as f64).abs())
            .collect();
        let mut h = cosine_map();
        h.matrix = Matrix::new(n, n, v).expect("shape");
        h.color.colormap = Colormap::Sequential;
        let svg = heatmap(&h);
        assert!(svg.len() < 400_000, "{} bytes", svg.len());
        let doc = parse(&svg);
        let (w, hh, _) = first_image(&doc);
        assert_eq!((w, hh), (512, 512));
        // Block means of |i - j| over 2×2 blocks: the largest is at the corner,
        // mean of {1023, 1022, 1022, 1021} = 1022 (computed by hand).
        assert_eq!(texts(&doc, "colorbar-max"), vec!["1022"]);
        assert_eq!(texts(&doc, "colorbar-min"), vec!["0.5"]);
    }

    #[test]
    fn empty_matrix_says_no_data_and_mismatch_is_an_error() {
        let mut h = cosine_map();
        h.matrix = Matrix::new(0, 5, vec![]).expect("empty is allowed");
        assert!(heatmap(&h).contains(">no data<"));
        assert_eq!(
            Matrix::new(2, 3, vec![1.0; 5]),
            Err(PlotError::ShapeMismatch {
                rows: 2,
                cols: 3,
                expected: 6,
                got: 5
            })
        );
    }

    use super::super::PlotError;

    #[test]
    fn all_nan_matrix_is_grey_without_colour_bar() {
        let mut h = cosine_map();
        h.matrix = Matrix::new(3, 4, vec![f64::NAN; 12]).expect("shape");
        let svg = heatmap(&h);
        let doc = parse(&svg);
        assert!(texts(&doc, "colorbar-max").is_empty());
        assert_eq!(texts(&doc, "nan-label"), vec!["NaN"]);
    }

    #[test]
    fn grid_shares_one_scale_and_titles_each_panel() {
        // Invented data: five 14 × 14 similarity maps peaking at different cells.
        let panels: Vec<HeatmapPanel> = (0..5)
            .map(|p| {
                let (pr, pc) = (p * 3 % 14, p * 5 % 14);
                let v = (0..196)
                    .map(|k| {
                        let (r, c) = ((k / 14) as f64, (k % 14) as f64);
                        let d2 = (r - pr as f64).powi(2) + (c - pc as f64).powi(2);
                        (-d2 / 8.0).exp() * (p as f64 + 1.0) / 5.0
                    })
                    .collect();
                HeatmapPanel {
                    title: format!("patch ({pr}, {pc})"),
                    matrix: Matrix::new(14, 14, v).expect("shape"),
                }
            })
            .collect();
        let g = HeatmapGrid {
            title: "Patch similarity".into(),
            x_label: "patch column".into(),
            y_label: "patch row".into(),
            panels,
            x_range: (0.0, 14.0),
            y_range: (0.0, 14.0),
            color: ColorScale {
                colormap: Colormap::Sequential,
                range: None,
                label: "cosine".into(),
            },
            columns: None,
            width: 800,
        };
        let svg = heatmap_grid(&g);
        let doc = parse(&svg);
        assert_eq!(texts(&doc, "panel-title").len(), 5);
        assert_eq!(texts(&doc, "panel-title")[1], "patch (3, 5)");
        // One colour bar for all panels: the maximum is panel 5's peak, 5/5 = 1.
        assert_eq!(texts(&doc, "colorbar-max"), vec!["1"]);
        assert_eq!(texts(&doc, "colorbar-label"), vec!["cosine"]);
        assert_eq!(texts(&doc, "y-label"), vec!["patch row"]);
        // Five panels + colour bar image.
        assert_eq!(
            doc.descendants()
                .filter(|n| n.has_tag_name("image"))
                .count(),
            6
        );
    }

    #[test]
    fn grid_without_panels_says_no_data() {
        let g = HeatmapGrid {
            title: "none".into(),
            x_label: "x".into(),
            y_label: "y".into(),
            panels: vec![],
            x_range: (0.0, 1.0),
            y_range: (0.0, 1.0),
            color: ColorScale {
                colormap: Colormap::Sequential,
                range: None,
                label: String::new(),
            },
            columns: Some(3),
            width: 800,
        };
        assert!(heatmap_grid(&g).contains(">no data<"));
    }
}
