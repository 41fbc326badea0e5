//! Tests of the heat-map renderer.

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
        row_labels: Vec::new(),
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
