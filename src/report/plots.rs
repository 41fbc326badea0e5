//! SVG plots for the Markdown report.
//!
//! Every function here takes plain data (the small structs below) and returns a
//! complete, self-contained SVG document as a `String`. Nothing here does I/O
//! or knows about analysis results; the report layer converts its structs into
//! these. None of the functions panic: non-finite values are skipped (lines) or
//! drawn grey (heatmaps), and a plot with nothing finite to show says "no data".
//!
//! # Why a hand-written SVG writer instead of `plotters`
//!
//! `plotters` 0.3.7 (tried with only `svg_backend`, `line_series`
//! and `point_series`; removed since) cannot do it: without its `ttf`/`ab_glyph` features plotters measures
//! text with a fixed guess (0.7 em per character, its `naive` font module) and
//! still emits `<text>` elements, so it gains us no font independence, while its
//! SVG backend can only embed bitmaps with the `image` feature: a 512×512
//! heatmap would become 262 144 `<rect>` elements (tens of MB). Adding a font
//! crate would not help either, since the SVG backend still writes `<text>` and
//! leaves glyphs to the viewer. The plots below need exact control (shaded
//! ranges at known pixels, log ticks, legends that never cover data, an
//! embedded palette PNG for heatmaps), so a small writer of our own is
//! simpler than working around the library; `plotters` is not used here.
//!
//! Text is written as SVG `<text>` with a generic font stack ending in
//! `sans-serif`, so no particular installed font is needed: browsers and
//! `rsvg-convert` substitute their default sans-serif face. Layout never depends
//! on exact glyph widths: labels are anchored (start/middle/end) and the few
//! boxes sized from text (legend, margins) use a deliberately generous estimate.
//!
//! # Colours
//!
//! Series use the Okabe–Ito colour-blind-safe palette ([`PALETTE`]); after eight
//! series, colours repeat with dashes. Heatmaps use one of two colormaps
//! ([`Colormap`]) computed in the Oklab space with lightness linear in the
//! value, so they are perceptually ordered and readable in greyscale. NaN
//! cells are drawn in [`NAN_COLOR`] and listed under the colour bar.
//!
//! # Size
//!
//! Lines longer than four points per horizontal pixel are reduced to the
//! first, minimum, maximum and last point of each pixel column, which draws the
//! same picture. Heatmap cells are one 8-bit palette PNG (our own small
//! deflate encoder, base64) embedded with `<image>`: at most about 350 kB for
//! 512×512 cells of pure noise, far less for smooth maps (the gallery's
//! 512×512 cosine map is 128 kB).

mod color;
mod heatmap;
mod layout;
mod line;
mod png;
mod scale;
mod svg;

pub use color::{Colormap, NAN_COLOR, PALETTE};
pub use heatmap::{heatmap, heatmap_grid};
pub use line::{line_chart, small_multiples, spectrum_plot};

/// Default width of a plot, in pixels.
pub const DEFAULT_WIDTH: u32 = 800;
/// Default height of a line chart, in pixels.
pub const DEFAULT_HEIGHT: u32 = 400;

/// Errors from building plot inputs.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum PlotError {
    /// The number of values is not rows × cols.
    #[error("matrix of {rows} x {cols} needs {expected} values, got {got}")]
    ShapeMismatch {
        /// Declared rows.
        rows: usize,
        /// Declared columns.
        cols: usize,
        /// rows × cols (saturating).
        expected: usize,
        /// Values given.
        got: usize,
    },
}

/// One named line of (x, y) points. Points are drawn in the given order;
/// a non-finite coordinate breaks the line there.
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Legend text.
    pub label: String,
    /// The points, in data units.
    pub points: Vec<(f64, f64)>,
}

impl Series {
    /// A series from explicit points.
    pub fn new(label: impl Into<String>, points: Vec<(f64, f64)>) -> Self {
        Series {
            label: label.into(),
            points,
        }
    }

    /// A series from y values at x = `x0`, `x0 + 1`, … (one per table row).
    pub fn from_values(label: impl Into<String>, x0: f64, ys: &[f64]) -> Self {
        Series {
            label: label.into(),
            points: ys
                .iter()
                .enumerate()
                .map(|(i, &y)| (x0 + i as f64, y))
                .collect(),
        }
    }
}

/// A labelled interval of the x axis drawn as a shaded band over the full
/// height (e.g. "untrained 300–512").
#[derive(Debug, Clone, PartialEq)]
pub struct XRange {
    /// Start, in x data units.
    pub start: f64,
    /// End, in x data units.
    pub end: f64,
    /// Text written at the top of the band; may be empty.
    pub label: String,
}

/// A labelled reference value drawn as a dashed line across the plot: a
/// horizontal line at a y value or a vertical line at an x value.
#[derive(Debug, Clone, PartialEq)]
pub struct RefLine {
    /// Position, in data units of its axis.
    pub value: f64,
    /// Text written beside the line; may be empty.
    pub label: String,
}

impl RefLine {
    /// A reference line at `value` with `label`.
    pub fn new(value: f64, label: impl Into<String>) -> Self {
        RefLine {
            value,
            label: label.into(),
        }
    }
}

/// How values map onto an axis.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Scale {
    /// Equal distances for equal differences.
    #[default]
    Linear,
    /// Equal distances for equal ratios; ticks at powers of ten. Values ≤ 0
    /// are left out (and counted in a note under the plot).
    Log10,
}

/// A line chart: several series, optional shaded x ranges, optional
/// reference lines.
#[derive(Debug, Clone, PartialEq)]
pub struct LineChart {
    /// Title above the plot.
    pub title: String,
    /// x-axis label, with unit (e.g. "position (row index)").
    pub x_label: String,
    /// y-axis label, with unit (e.g. "L2 norm (weight units)").
    pub y_label: String,
    /// The lines; a legend is drawn when there is more than one.
    pub series: Vec<Series>,
    /// Shaded x intervals, drawn under the lines.
    pub shaded: Vec<XRange>,
    /// Horizontal reference lines (y values).
    pub h_lines: Vec<RefLine>,
    /// Vertical reference lines (x values).
    pub v_lines: Vec<RefLine>,
    /// y-axis scale.
    pub y_scale: Scale,
    /// Image width in pixels.
    pub width: u32,
    /// Image height in pixels.
    pub height: u32,
}

impl LineChart {
    /// An empty 800×400 linear chart with the given title and axis labels.
    pub fn new(
        title: impl Into<String>,
        x_label: impl Into<String>,
        y_label: impl Into<String>,
    ) -> Self {
        LineChart {
            title: title.into(),
            x_label: x_label.into(),
            y_label: y_label.into(),
            series: Vec::new(),
            shaded: Vec::new(),
            h_lines: Vec::new(),
            v_lines: Vec::new(),
            y_scale: Scale::Linear,
            width: DEFAULT_WIDTH,
            height: DEFAULT_HEIGHT,
        }
    }
}

/// Singular values of a table, largest first, with its effective rank.
#[derive(Debug, Clone, PartialEq)]
pub struct Spectrum {
    /// Title above the plot.
    pub title: String,
    /// Singular values in the order given (normally non-increasing); drawn at
    /// index 1, 2, … on a log scale. Zeros and non-finite values are left out
    /// and counted in a note.
    pub singular_values: Vec<f64>,
    /// Effective rank, marked by a vertical line at that index, if known.
    pub effective_rank: Option<f64>,
    /// Image width in pixels.
    pub width: u32,
    /// Image height in pixels.
    pub height: u32,
}

/// One small panel of [`SmallMultiples`].
#[derive(Debug, Clone, PartialEq)]
pub struct Panel {
    /// Text above the panel (e.g. "component 1 (38% of variance)").
    pub title: String,
    /// The line, in data units.
    pub points: Vec<(f64, f64)>,
}

/// Up to eight small line panels sharing one x axis, each with its own y
/// range; more panels than eight are drawn too but get small.
#[derive(Debug, Clone, PartialEq)]
pub struct SmallMultiples {
    /// Title above all panels.
    pub title: String,
    /// Shared x-axis label, with unit.
    pub x_label: String,
    /// Shared y-axis label, with unit.
    pub y_label: String,
    /// The panels, laid out in one column (up to four) or two columns.
    pub panels: Vec<Panel>,
    /// Image width in pixels; the height follows from the number of panels.
    pub width: u32,
}

/// A dense row-major matrix of values for a heatmap.
#[derive(Debug, Clone, PartialEq)]
pub struct Matrix {
    rows: usize,
    cols: usize,
    values: Vec<f64>,
}

impl Matrix {
    /// A `rows` × `cols` matrix from row-major values; fails when
    /// `values.len() != rows * cols`. Zero rows or columns are allowed (the
    /// plot then says "no data").
    pub fn new(rows: usize, cols: usize, values: Vec<f64>) -> Result<Self, PlotError> {
        let expected = rows.saturating_mul(cols);
        if rows.checked_mul(cols) != Some(values.len()) {
            return Err(PlotError::ShapeMismatch {
                rows,
                cols,
                expected,
                got: values.len(),
            });
        }
        Ok(Matrix { rows, cols, values })
    }

    /// Number of rows (drawn top to bottom).
    pub fn rows(&self) -> usize {
        self.rows
    }

    /// Number of columns (drawn left to right).
    pub fn cols(&self) -> usize {
        self.cols
    }

    /// The row-major values.
    pub fn values(&self) -> &[f64] {
        &self.values
    }
}

/// How heatmap values become colours.
#[derive(Debug, Clone, PartialEq)]
pub struct ColorScale {
    /// Sequential for magnitudes, diverging for signed values around zero.
    pub colormap: Colormap,
    /// Value at the low and high end of the colour bar. `None`: the finite
    /// data range (sequential) or ± the largest finite magnitude (diverging).
    /// Values outside are drawn in the end colours.
    pub range: Option<(f64, f64)>,
    /// Colour-bar label, with unit (e.g. "cosine similarity").
    pub label: String,
}

/// A matrix drawn as coloured cells with a colour bar.
#[derive(Debug, Clone, PartialEq)]
pub struct Heatmap {
    /// Title above the plot.
    pub title: String,
    /// x-axis label (columns), with unit.
    pub x_label: String,
    /// y-axis label (rows), with unit.
    pub y_label: String,
    /// The values; row 0 is drawn at the top.
    pub matrix: Matrix,
    /// Data values of the left edge of column 0 and the right edge of the
    /// last column (e.g. (0, 2048) for 512 columns summarising 2048 positions).
    pub x_range: (f64, f64),
    /// Data values of the top edge of row 0 and the bottom edge of the last row.
    /// For rows that are items (checkpoint pairs, heads) rather than a
    /// continuous range, (−0.5, rows − 0.5) puts integer tick labels at row centres.
    pub y_range: (f64, f64),
    /// Colours.
    pub color: ColorScale,
    /// Image width in pixels.
    pub width: u32,
    /// Image height in pixels. A square matrix is drawn with square cells.
    pub height: u32,
    /// One tick label per matrix row (at the row's centre) instead of numeric y ticks,
    /// thinned to fit; ignored unless it has exactly one label per row and the matrix
    /// is not block-averaged.
    pub row_labels: Vec<String>,
}

/// One panel of a [`HeatmapGrid`].
#[derive(Debug, Clone, PartialEq)]
pub struct HeatmapPanel {
    /// Text above the panel (e.g. "patch (3, 7)" or "head 4").
    pub title: String,
    /// The values; row 0 at the top.
    pub matrix: Matrix,
}

/// Several small heatmaps on one shared colour scale, laid out in a grid.
#[derive(Debug, Clone, PartialEq)]
pub struct HeatmapGrid {
    /// Title above all panels.
    pub title: String,
    /// Shared x-axis label (columns), with unit.
    pub x_label: String,
    /// Shared y-axis label (rows), with unit.
    pub y_label: String,
    /// The panels, filled row by row.
    pub panels: Vec<HeatmapPanel>,
    /// Data values of the left and right edges of every panel.
    pub x_range: (f64, f64),
    /// Data values of the top and bottom edges of every panel.
    pub y_range: (f64, f64),
    /// Shared colours; an automatic range covers all panels.
    pub color: ColorScale,
    /// Panels per row; `None` picks about the square root of the count.
    pub columns: Option<usize>,
    /// Image width in pixels; the height follows from the layout.
    pub width: u32,
}

#[cfg(test)]
mod robustness {
    //! Any input, however odd, must give a well-formed SVG and no panic.
    use super::*;
    use proptest::prelude::*;

    /// Numbers a table can really contain, plus the awkward ones.
    fn value() -> impl Strategy<Value = f64> {
        prop_oneof![
            4 => -10.0f64..10.0,
            1 => Just(f64::NAN),
            1 => Just(f64::INFINITY),
            1 => Just(f64::NEG_INFINITY),
            1 => Just(0.0),
            1 => Just(1e308),
            1 => Just(-1e308),
            1 => Just(1e-310),
        ]
    }

    fn well_formed(svg: &str) {
        if let Err(e) = roxmltree::Document::parse(svg) {
            panic!("not well-formed: {e}");
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn line_charts_never_panic(
            series in prop::collection::vec(prop::collection::vec((value(), value()), 0..50), 0..4),
            log in any::<bool>(),
            shade in (value(), value()),
            h in value(),
            v in value(),
            w in 0u32..2000,
            ht in 0u32..1000,
        ) {
            let mut c = LineChart::new("t <&>", "x \"unit\"", "y");
            c.series = series.into_iter().enumerate().map(|(i, p)| Series::new(format!("s{i}"), p)).collect();
            c.y_scale = if log { Scale::Log10 } else { Scale::Linear };
            c.shaded.push(XRange { start: shade.0, end: shade.1, label: "band".into() });
            c.h_lines.push(RefLine::new(h, "h"));
            c.v_lines.push(RefLine::new(v, "v"));
            c.width = w;
            c.height = ht;
            well_formed(&line_chart(&c));
        }

        #[test]
        fn heatmaps_never_panic(
            rows in 0usize..12,
            cols in 0usize..12,
            fill in prop::collection::vec(value(), 144),
            range in prop::option::of((value(), value())),
            diverging in any::<bool>(),
            xr in (value(), value()),
        ) {
            let m = Matrix::new(rows, cols, fill[..rows * cols].to_vec()).expect("shape");
            let color = ColorScale {
                colormap: if diverging { Colormap::Diverging } else { Colormap::Sequential },
                range,
                label: "c".into(),
            };
            let h = Heatmap {
                title: "h".into(),
                x_label: "x".into(),
                y_label: "y".into(),
                matrix: m.clone(),
                x_range: xr,
                y_range: (0.0, rows as f64),
                color: color.clone(),
                width: 800,
                height: 400,
                row_labels: Vec::new(),
            };
            well_formed(&heatmap(&h));
            let g = HeatmapGrid {
                title: "g".into(),
                x_label: "x".into(),
                y_label: "y".into(),
                panels: vec![
                    HeatmapPanel { title: "a".into(), matrix: m.clone() },
                    HeatmapPanel { title: "b".into(), matrix: m },
                ],
                x_range: xr,
                y_range: (0.0, 1.0),
                color,
                columns: None,
                width: 800,
            };
            well_formed(&heatmap_grid(&g));
        }

        #[test]
        fn spectra_and_small_multiples_never_panic(
            sv in prop::collection::vec(value(), 0..40),
            rank in value(),
            panels in prop::collection::vec(prop::collection::vec((value(), value()), 0..30), 0..9),
        ) {
            well_formed(&spectrum_plot(&Spectrum {
                title: "s".into(),
                singular_values: sv,
                effective_rank: Some(rank),
                width: 800,
                height: 400,
            }));
            well_formed(&small_multiples(&SmallMultiples {
                title: "m".into(),
                x_label: "x".into(),
                y_label: "y".into(),
                panels: panels.into_iter().map(|p| Panel { title: "p".into(), points: p }).collect(),
                width: 800,
            }));
        }
    }
}
