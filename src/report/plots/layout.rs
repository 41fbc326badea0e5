//! Pieces shared by every plot: the plot-area rectangle, title, grid, ticks,
//! axis labels, legend and the "no data" placeholder.

use super::scale::Axis;
use super::svg::{Anchor, GRID, INK, MUTED, Svg, TextStyle, text_width};

/// Font sizes, in pixels, chosen to stay readable when an 800 px wide plot is
/// shown at its natural size in a Markdown viewer.
pub(crate) const TITLE_SIZE: f64 = 16.0;
pub(crate) const LABEL_SIZE: f64 = 13.0;
pub(crate) const TICK_SIZE: f64 = 11.5;
pub(crate) const SMALL_SIZE: f64 = 11.0;

/// The rectangle data is drawn in, in pixels.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Area {
    pub left: f64,
    pub top: f64,
    pub right: f64,
    pub bottom: f64,
}

impl Area {
    pub fn width(&self) -> f64 {
        self.right - self.left
    }
    pub fn height(&self) -> f64 {
        self.bottom - self.top
    }
}

/// Draws the plot title centred at the top. A title too wide for the image
/// is set smaller (down to 12 px) and, if still too wide, cut with "…"; the
/// full text stays in the SVG `<title>`.
pub(crate) fn title(svg: &mut Svg, width: f64, text: &str) {
    svg.doc_title(text);
    let room = width - 24.0;
    // Bold glyphs are about 20 % wider than the regular estimate (measured on the
    // rendered demo titles: a 76-character bold title at 16 px spans about 750 px).
    let bold_width = |t: &str, size: f64| text_width(t, size) * 1.22;
    let mut size = TITLE_SIZE;
    while size > 12.0 && bold_width(text, size) > room {
        size -= 0.5;
    }
    let mut shown: String = text.to_string();
    if bold_width(&shown, size) > room {
        let mut chars: Vec<char> = text.chars().collect();
        while !chars.is_empty()
            && bold_width(&format!("{}…", chars.iter().collect::<String>()), size) > room
        {
            chars.pop();
        }
        shown = format!("{}…", chars.iter().collect::<String>().trim_end());
    }
    svg.text(
        width / 2.0,
        26.0,
        &shown,
        TextStyle::new(size, Anchor::Middle, "title").bold(),
    );
}

/// A complete plot that only says "no data": used whenever there is nothing
/// finite to draw, so the report still has an image in that place.
pub(crate) fn no_data(width: f64, height: f64, title_text: &str) -> String {
    let mut svg = Svg::new(width, height);
    title(&mut svg, width, title_text);
    let area = Area {
        left: 40.0,
        top: 44.0,
        right: width - 40.0,
        bottom: height - 30.0,
    };
    svg.rect(
        area.left,
        area.top,
        area.width(),
        area.height(),
        "#fafafa",
        "stroke=\"#cccccc\" stroke-width=\"1\"",
    );
    svg.text(
        width / 2.0,
        (area.top + area.bottom) / 2.0 + 6.0,
        "no data",
        TextStyle::new(LABEL_SIZE + 3.0, Anchor::Middle, "no-data").fill(MUTED),
    );
    svg.finish()
}

/// Width of the widest tick label.
pub(crate) fn max_label_width(ticks: &[(f64, String)], size: f64) -> f64 {
    ticks
        .iter()
        .map(|(_, l)| text_width(l, size))
        .fold(0.0, f64::max)
}

/// Keeps every n-th tick so neighbouring labels along a horizontal axis do not
/// overlap (at least 10 px between them).
pub(crate) fn thin_x_ticks(ticks: Vec<(f64, String)>, axis: &Axis) -> Vec<(f64, String)> {
    if ticks.len() < 2 {
        return ticks;
    }
    let px: Vec<f64> = ticks.iter().filter_map(|t| axis.map(t.0)).collect();
    let spacing = px
        .windows(2)
        .map(|w| (w[1] - w[0]).abs())
        .fold(f64::INFINITY, f64::min);
    let widest = max_label_width(&ticks, TICK_SIZE);
    let mut every = 1;
    while (every as f64) * spacing < widest + 10.0 && every < ticks.len() {
        every += 1;
    }
    ticks
        .into_iter()
        .enumerate()
        .filter(|(i, _)| i % every == 0)
        .map(|(_, t)| t)
        .collect()
}

/// Grid lines and tick labels for both axes; labels on one side may be turned
/// off (small multiples share their x labels).
pub(crate) struct AxisDraw<'a> {
    pub area: Area,
    pub x: &'a Axis,
    pub y: &'a Axis,
    pub x_ticks: &'a [(f64, String)],
    pub y_ticks: &'a [(f64, String)],
    pub x_labels: bool,
    pub y_labels: bool,
    pub tick_size: f64,
}

impl AxisDraw<'_> {
    /// Grid first (under the data).
    pub fn grid(&self, svg: &mut Svg) {
        let a = self.area;
        for (v, _) in self.x_ticks {
            if let Some(px) = self.x.map(*v) {
                svg.line(px, a.top, px, a.bottom, GRID, 1.0, "class=\"grid\"");
            }
        }
        for (v, _) in self.y_ticks {
            if let Some(py) = self.y.map(*v) {
                svg.line(a.left, py, a.right, py, GRID, 1.0, "class=\"grid\"");
            }
        }
    }

    /// Frame, tick marks and tick labels (over the data).
    pub fn axes(&self, svg: &mut Svg) {
        let a = self.area;
        svg.rect(
            a.left,
            a.top,
            a.width(),
            a.height(),
            "none",
            &format!("class=\"plot-area\" stroke=\"{INK}\" stroke-width=\"1\""),
        );
        for (v, label) in self.x_ticks {
            if let Some(px) = self.x.map(*v) {
                svg.line(px, a.bottom, px, a.bottom + 4.0, INK, 1.0, "");
                if self.x_labels {
                    svg.text(
                        px,
                        a.bottom + 6.0 + self.tick_size,
                        label,
                        TextStyle::new(self.tick_size, Anchor::Middle, "tick-x"),
                    );
                }
            }
        }
        for (v, label) in self.y_ticks {
            if let Some(py) = self.y.map(*v) {
                svg.line(a.left - 4.0, py, a.left, py, INK, 1.0, "");
                if self.y_labels {
                    svg.text(
                        a.left - 7.0,
                        py + self.tick_size * 0.36,
                        label,
                        TextStyle::new(self.tick_size, Anchor::End, "tick-y"),
                    );
                }
            }
        }
    }
}

/// The x-axis label centred under the area, near the bottom of the image, and
/// the y-axis label rotated and centred on `y_label_x`.
pub(crate) fn axis_labels(
    svg: &mut Svg,
    area: Area,
    (x_label, y_label): (&str, &str),
    y_label_x: f64,
    height: f64,
) {
    if !x_label.is_empty() {
        svg.text(
            (area.left + area.right) / 2.0,
            height - 12.0,
            x_label,
            TextStyle::new(LABEL_SIZE, Anchor::Middle, "x-label"),
        );
    }
    if !y_label.is_empty() {
        let cy = (area.top + area.bottom) / 2.0;
        svg.text(
            y_label_x,
            cy,
            y_label,
            TextStyle::new(LABEL_SIZE, Anchor::Middle, "y-label").rotate(-90.0),
        );
    }
}

/// One legend entry: colour, optional dash pattern, label.
pub(crate) struct LegendEntry<'a> {
    pub color: &'a str,
    pub dash: Option<&'a str>,
    pub label: &'a str,
}

const LEGEND_ROW: f64 = 18.0;
const LEGEND_SWATCH: f64 = 22.0;

fn legend_entry_width(e: &LegendEntry<'_>) -> f64 {
    LEGEND_SWATCH + 6.0 + text_width(e.label, SMALL_SIZE) + 18.0
}

/// Rows the legend needs when wrapped into `width` pixels.
pub(crate) fn legend_rows(entries: &[LegendEntry<'_>], width: f64) -> usize {
    if entries.is_empty() {
        return 0;
    }
    let mut rows = 1;
    let mut x = 0.0;
    for e in entries {
        let w = legend_entry_width(e);
        if x > 0.0 && x + w > width {
            rows += 1;
            x = 0.0;
        }
        x += w;
    }
    rows
}

/// Draws the legend as wrapped rows starting at (`left`, `top`), each row
/// centred within `width`.
pub(crate) fn legend(svg: &mut Svg, entries: &[LegendEntry<'_>], left: f64, top: f64, width: f64) {
    let mut rows: Vec<Vec<&LegendEntry<'_>>> = vec![Vec::new()];
    let mut x = 0.0;
    for e in entries {
        let w = legend_entry_width(e);
        if x > 0.0 && x + w > width {
            rows.push(Vec::new());
            x = 0.0;
        }
        if let Some(r) = rows.last_mut() {
            r.push(e);
        }
        x += w;
    }
    svg.open_group("class=\"legend\"");
    for (r, row) in rows.iter().enumerate() {
        let total: f64 = row.iter().map(|e| legend_entry_width(e)).sum::<f64>() - 18.0;
        let mut x = left + ((width - total) / 2.0).max(0.0);
        let y = top + r as f64 * LEGEND_ROW + LEGEND_ROW / 2.0;
        for e in row {
            let dash = e
                .dash
                .map(|d| format!("stroke-dasharray=\"{d}\""))
                .unwrap_or_default();
            svg.line(x, y, x + LEGEND_SWATCH, y, e.color, 2.5, &dash);
            svg.text(
                x + LEGEND_SWATCH + 6.0,
                y + SMALL_SIZE * 0.36,
                e.label,
                TextStyle::new(SMALL_SIZE, Anchor::Start, "legend-label"),
            );
            x += legend_entry_width(e);
        }
    }
    svg.close_group();
}

/// Height taken by a legend of `rows` rows.
pub(crate) fn legend_height(rows: usize) -> f64 {
    rows as f64 * LEGEND_ROW
}
