//! Tests of the line-chart renderer.

use super::super::{LineChart, Panel, RefLine, Scale, Series, SmallMultiples, Spectrum, XRange};
use super::*;
use roxmltree::Document;

fn parse(svg: &str) -> Document<'_> {
    Document::parse(svg).unwrap_or_else(|e| panic!("not well-formed XML: {e}\n{svg}"))
}

fn with_class<'a>(doc: &'a Document<'a>, class: &str) -> Vec<roxmltree::Node<'a, 'a>> {
    doc.descendants()
        .filter(|n| n.attribute("class") == Some(class))
        .collect()
}

fn texts(doc: &Document<'_>, class: &str) -> Vec<String> {
    with_class(doc, class)
        .iter()
        .map(|n| n.text().unwrap_or("").to_string())
        .collect()
}

fn attr(n: &roxmltree::Node<'_, '_>, name: &str) -> f64 {
    n.attribute(name)
        .and_then(|v| v.parse().ok())
        .unwrap_or_else(|| panic!("attribute {name} missing on {n:?}"))
}

/// Invented data: a smooth curve over 300 trained rows, then noise-like
/// values over an untrained tail up to 512.
fn norms_chart() -> LineChart {
    let mut c = LineChart::new(
        "Row norms",
        "position (row index)",
        "L2 norm (weight units)",
    );
    c.series.push(Series::from_values(
        "row norm",
        0.0,
        &(0..512)
            .map(|i| {
                if i < 300 {
                    1.0 + (i as f64 / 40.0).sin() * 0.1
                } else {
                    0.45
                }
            })
            .collect::<Vec<_>>(),
    ));
    c.series.push(Series::from_values(
        "smoothed",
        0.0,
        &(0..512)
            .map(|i| 0.9 + i as f64 / 2000.0)
            .collect::<Vec<_>>(),
    ));
    c.shaded.push(XRange {
        start: 300.0,
        end: 512.0,
        label: "untrained 300–512".into(),
    });
    c.h_lines.push(RefLine::new(0.4525, "init noise level σ√d"));
    c
}

#[test]
fn line_chart_has_title_axis_labels_legend_and_one_path_per_series() {
    let svg = line_chart(&norms_chart());
    let doc = parse(&svg);
    assert_eq!(texts(&doc, "title"), vec!["Row norms"]);
    assert_eq!(texts(&doc, "x-label"), vec!["position (row index)"]);
    assert_eq!(texts(&doc, "y-label"), vec!["L2 norm (weight units)"]);
    assert_eq!(with_class(&doc, "series").len(), 2);
    assert_eq!(texts(&doc, "legend-label"), vec!["row norm", "smoothed"]);
    assert_eq!(texts(&doc, "ref-label"), vec!["init noise level σ√d"]);
    assert_eq!(texts(&doc, "shade-label"), vec!["untrained 300–512"]);
    assert!(texts(&doc, "tick-x").contains(&"500".to_string()));
}

#[test]
fn overlong_title_is_shrunk_then_cut_but_kept_whole_in_svg_title() {
    let long = "a very long title ".repeat(10);
    let mut c = norms_chart();
    c.title = long.clone();
    let svg = line_chart(&c);
    let doc = parse(&svg);
    let t = &with_class(&doc, "title")[0];
    assert_eq!(attr(t, "font-size"), 12.0);
    let shown = t.text().unwrap_or("");
    assert!(shown.ends_with('…') && shown.len() < long.len(), "{shown}");
    let full = doc
        .descendants()
        .find(|n| n.has_tag_name("title"))
        .and_then(|n| n.text());
    assert_eq!(full, Some(long.as_str()));
}

#[test]
fn single_series_has_no_legend() {
    let mut c = norms_chart();
    c.series.truncate(1);
    let svg = line_chart(&c);
    let doc = parse(&svg);
    assert!(with_class(&doc, "legend-label").is_empty());
    assert_eq!(with_class(&doc, "series").len(), 1);
}

#[test]
fn shaded_range_sits_between_the_pixels_of_its_ends() {
    let svg = line_chart(&norms_chart());
    let doc = parse(&svg);
    let area = &with_class(&doc, "plot-area")[0];
    let (left, w) = (attr(area, "x"), attr(area, "width"));
    // The x axis spans the data exactly: 0 .. 512 (the shaded end), so
    // pixel(v) = left + v / 512 * width (linear mapping, by definition).
    let px = |v: f64| left + v / 512.0 * w;
    let shade = &with_class(&doc, "shade")[0];
    assert!((attr(shade, "x") - px(300.0)).abs() < 0.01);
    assert!((attr(shade, "x") + attr(shade, "width") - px(512.0)).abs() < 0.02);
}

#[test]
fn crowded_band_labels_stack_and_vertical_labels_go_below_them() {
    let mut c = LineChart::new("t", "x", "y");
    c.series.push(Series::from_values("a", 0.0, &[1.0; 100]));
    for (a, b) in [(10.0, 14.0), (15.0, 19.0), (60.0, 90.0)] {
        c.shaded.push(XRange {
            start: a,
            end: b,
            label: format!("untrained {a}–{b}"),
        });
    }
    c.v_lines.push(RefLine::new(80.0, "declared 80"));
    let svg = line_chart(&c);
    let doc = parse(&svg);
    let ys: Vec<f64> = with_class(&doc, "shade-label")
        .iter()
        .map(|n| attr(n, "y"))
        .collect();
    // The two neighbouring labels cannot share a line; the far one can.
    assert!(ys[1] > ys[0], "{ys:?}");
    assert_eq!(ys[2], ys[0]);
    let v_label = with_class(&doc, "ref-label")
        .into_iter()
        .find(|n| n.text() == Some("declared 80"))
        .expect("label");
    assert!(attr(&v_label, "y") > ys[1]);
    // Labels are drawn after (over) every band.
    let order: Vec<&str> = doc
        .descendants()
        .filter_map(|n| n.attribute("class"))
        .filter(|c| *c == "shade" || *c == "shade-label")
        .collect();
    assert_eq!(
        order,
        vec![
            "shade",
            "shade",
            "shade",
            "shade-label",
            "shade-label",
            "shade-label"
        ]
    );
}

#[test]
fn log_scale_ticks_are_powers_of_ten_at_log_spaced_pixels() {
    let mut c = LineChart::new("decay", "index", "value");
    c.y_scale = Scale::Log10;
    c.series.push(Series::from_values(
        "v",
        1.0,
        &(0..60)
            .map(|i| 10f64.powf(1.0 - i as f64 / 12.0))
            .collect::<Vec<_>>(),
    ));
    let svg = line_chart(&c);
    let doc = parse(&svg);
    let labels = texts(&doc, "tick-y");
    // Data run from 10¹ down to 10^(1 − 59/12) ≈ 1.2×10⁻⁴.
    assert_eq!(labels, vec!["10⁻⁴", "10⁻³", "10⁻²", "10⁻¹", "10⁰", "10¹"]);
    // Equal ratios must be equal distances: successive decades are spaced equally.
    let ys: Vec<f64> = with_class(&doc, "tick-y")
        .iter()
        .map(|n| attr(n, "y"))
        .collect();
    let d: Vec<f64> = ys.windows(2).map(|w| w[0] - w[1]).collect();
    for w in d.windows(2) {
        assert!((w[0] - w[1]).abs() < 0.02, "{d:?}");
    }
}

#[test]
fn log_scale_counts_values_it_cannot_show() {
    let mut c = LineChart::new("t", "x", "y");
    c.y_scale = Scale::Log10;
    c.series.push(Series::new(
        "a",
        vec![(0.0, 1.0), (1.0, 0.0), (2.0, -3.0), (3.0, 10.0)],
    ));
    let doc_s = line_chart(&c);
    let doc = parse(&doc_s);
    assert_eq!(
        texts(&doc, "note"),
        vec!["2 values ≤ 0 not shown (log scale)"]
    );
}

#[test]
fn nan_breaks_the_line_and_empty_input_says_no_data() {
    let mut c = LineChart::new("gap", "x", "y");
    c.series.push(Series::new(
        "a",
        vec![
            (0.0, 1.0),
            (1.0, 2.0),
            (2.0, f64::NAN),
            (3.0, 1.0),
            (4.0, 0.5),
        ],
    ));
    let svg = line_chart(&c);
    let doc = parse(&svg);
    let d = with_class(&doc, "series")[0]
        .attribute("d")
        .unwrap_or("")
        .to_string();
    assert_eq!(d.matches('M').count(), 2, "{d}");

    let empty = LineChart::new("nothing", "x", "y");
    let svg = line_chart(&empty);
    let doc = parse(&svg);
    assert_eq!(texts(&doc, "no-data"), vec!["no data"]);
    let mut all_nan = LineChart::new("nan", "x", "y");
    all_nan.series.push(Series::new(
        "a",
        vec![(f64::NAN, 1.0), (1.0, f64::INFINITY)],
    ));
    assert!(line_chart(&all_nan).contains("no data"));
}

#[test]
fn long_lines_are_reduced_without_losing_extremes() {
    let ys: Vec<f64> = (0..100_000).map(|i| ((i * 7919) % 1000) as f64).collect();
    let mut c = LineChart::new("long", "x", "y");
    c.series.push(Series::from_values("a", 0.0, &ys));
    let svg = line_chart(&c);
    assert!(svg.len() < 200_000, "{} bytes", svg.len());
    let doc = parse(&svg);
    assert!(texts(&doc, "tick-y").contains(&"1000".to_string()));
}

#[test]
fn spectrum_marks_effective_rank_on_log_axis() {
    let s = Spectrum {
        title: "Spectrum".into(),
        singular_values: (0..64)
            .map(|i| 50.0 * 0.85f64.powi(i))
            .chain([0.0])
            .collect(),
        effective_rank: Some(12.34),
        width: 800,
        height: 400,
    };
    let svg = spectrum_plot(&s);
    let doc = parse(&svg);
    assert_eq!(texts(&doc, "ref-label"), vec!["effective rank 12.3"]);
    assert!(texts(&doc, "tick-y").iter().all(|l| l.starts_with("10")));
    assert_eq!(
        texts(&doc, "note"),
        vec!["1 values ≤ 0 not shown (log scale)"]
    );
    // The marker sits at x = 12.34 on an axis spanning the drawable indices
    // 1 .. 64 (the zero at index 65 cannot be shown and is left out).
    let area = &with_class(&doc, "plot-area")[0];
    let want = attr(area, "x") + (12.34 - 1.0) / 63.0 * attr(area, "width");
    let line = &with_class(&doc, "ref-line")[0];
    assert!((attr(line, "x1") - want).abs() < 0.01);
}

#[test]
fn small_multiples_draw_one_panel_each_with_shared_x_labels_once() {
    let panels: Vec<Panel> = (0..6)
        .map(|k| Panel {
            title: format!("component {}", k + 1),
            points: (0..200)
                .map(|i| (i as f64, ((k + 1) as f64 * i as f64 / 60.0).cos()))
                .collect(),
        })
        .collect();
    let m = SmallMultiples {
        title: "Leading components".into(),
        x_label: "position".into(),
        y_label: "component value".into(),
        panels,
        width: 800,
    };
    let svg = small_multiples(&m);
    let doc = parse(&svg);
    assert_eq!(with_class(&doc, "panel").len(), 6);
    assert_eq!(with_class(&doc, "series").len(), 6);
    assert_eq!(texts(&doc, "panel-title")[5], "component 6");
    assert_eq!(texts(&doc, "x-label"), vec!["position"]);
    // Two columns of three: x tick labels only under the two bottom panels.
    let bottom_panels = with_class(&doc, "panel")
        .iter()
        .filter(|p| {
            p.descendants()
                .any(|n| n.attribute("class") == Some("tick-x"))
        })
        .count();
    assert_eq!(bottom_panels, 2);
}

#[test]
fn small_multiples_without_data_say_so() {
    let m = SmallMultiples {
        title: "none".into(),
        x_label: "x".into(),
        y_label: "y".into(),
        panels: vec![],
        width: 800,
    };
    assert!(small_multiples(&m).contains(">no data<"));
}
