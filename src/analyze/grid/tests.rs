//! Tests of the grid analysis against published formulas and invented grids.

use super::*;
use ndarray::concatenate;

/// The crate's seeded generator (SplitMix64 + Box–Muller).
use crate::testutil::Rng as Noise;

#[test]
fn layouts_of_published_table_shapes_are_inferred() {
    let none = GridHints::default();
    // check-values §3.8 (CLIP ViT-B/32: 50, ViT-B/16: 197, ViT-L/14@336: 577),
    // §3.11 (DeiT 198 = 2 + 196), §3.12 (DINOv2 1370 = 1 + 37²), §3.13 (SAM (1,64,64,D)).
    let cases = [
        (50, 7, 1),
        (197, 14, 1),
        (577, 24, 1),
        (198, 14, 2),
        (1370, 37, 1),
        (256, 16, 0),
    ];
    for (rows, side, extra) in cases {
        let l = infer_grid(rows, &[1, rows, 768], &none).unwrap();
        assert_eq!(
            (l.height, l.width, l.extra_rows),
            (side, side, extra),
            "{rows}"
        );
    }
    let l = infer_grid(4096, &[1, 64, 64, 768], &none).unwrap();
    assert_eq!((l.height, l.width, l.extra_rows), (64, 64, 0));
    assert!(l.how.contains("4-D"));
    // Config hints: ViT-B/16 at 224 px.
    let hints = GridHints {
        image_size: Some((224, 224)),
        patch_size: Some((16, 16)),
        extra_rows: None,
    };
    let l = infer_grid(197, &[1, 197, 768], &hints).unwrap();
    assert_eq!((l.height, l.width, l.extra_rows), (14, 14, 1));
    assert!(l.how.contains("224"));
    // §9: HF Dinov2Config's default 224 px does not fit the 1370-row table; the
    // square inference takes over and says so.
    let hints = GridHints {
        image_size: Some((224, 224)),
        patch_size: Some((14, 14)),
        extra_rows: None,
    };
    let l = infer_grid(1370, &[1, 1370, 1024], &hints).unwrap();
    assert_eq!((l.height, l.extra_rows), (37, 1));
    assert!(l.how.contains("does not fit"));
    // Rectangular grid from hints (invented 320x224 image, patch 16 → 20x14).
    let hints = GridHints {
        image_size: Some((320, 224)),
        patch_size: Some((16, 16)),
        extra_rows: None,
    };
    let l = infer_grid(281, &[281, 64], &hints).unwrap();
    assert_eq!((l.height, l.width, l.extra_rows), (20, 14, 1));
    assert_eq!(infer_grid(1000, &[1000, 64], &none), None);
    assert_eq!(infer_grid(0, &[0, 64], &none), None);
    assert_eq!(infer_grid(1, &[1, 64], &none), None);
}

fn mae_table(side: usize, dim: usize) -> Array2<f64> {
    // check-values §2.6: cls row of zeros, then the published formula, column first.
    let grid = sincos_2d(side, side, dim, true).unwrap();
    concatenate(Axis(0), &[Array2::zeros((1, dim)).view(), grid.view()]).unwrap()
}

#[test]
fn the_fixed_sincos_grid_has_the_published_properties() {
    // check-values §2.6: patch rows have norm sqrt(D/2).
    let t = mae_table(14, 768);
    for r in 1..t.nrows() {
        let n = t.row(r).dot(&t.row(r)).sqrt();
        assert!((n - (384f64).sqrt()).abs() < 1e-9);
    }
    // Column-first quirk: patch (y=0, x=1) differs from patch 0 in the first half only.
    let (p0, p1) = (t.row(1), t.row(2));
    assert!((0..384).any(|k| (p0[k] - p1[k]).abs() > 1e-3));
    assert!((384..768).all(|k| p0[k] == p1[k]));
}

#[test]
fn the_fixed_sincos_grid_is_recognised_with_its_column_first_order() {
    let t = mae_table(14, 768);
    let layout = infer_grid(t.nrows(), &[1, t.nrows(), 768], &GridHints::default()).unwrap();
    let a = analyze_grid(t.view(), &layout);
    let f = a.fixed_sincos.clone().unwrap();
    assert!(f.matches, "{f:?}");
    assert_eq!(f.first_half_axis, "column (w)");
    assert!(f.max_abs_error < 1e-12);
    assert!(f.max_abs_error_other_order > 0.5);
    assert!(f.extra_rows_zero);
    assert_eq!(a.extra_row_norms, vec![0.0]);
    // The formula is additive in (row, column) by construction.
    assert!((a.separability.unwrap().additive - 1.0).abs() < 1e-9);
    assert_eq!(a.odd_patch_count, 0, "{:?}", a.odd_patches);
    // Stored as float32 it still matches (rounding ≤ 6e-8).
    let t32 = t.mapv(|v| (v as f32) as f64);
    assert!(
        analyze_grid(t32.view(), &layout)
            .fixed_sincos
            .unwrap()
            .matches
    );
    // The row-first variant is recognised as such.
    let rf = sincos_2d(14, 14, 768, false).unwrap();
    let l0 = GridLayout {
        height: 14,
        width: 14,
        extra_rows: 0,
        how: "test".into(),
    };
    let f = analyze_grid(rf.view(), &l0).fixed_sincos.unwrap();
    assert!(f.matches);
    assert_eq!(f.first_half_axis, "row (h)");
}

fn reference() -> serde_json::Value {
    // Written by tests/reference/kinds.py (numpy; version recorded in the file).
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/kinds.json");
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

#[test]
fn the_formula_matches_the_numpy_reference_grid() {
    // tests/reference/kinds.py builds check-values §2.6 with np.meshgrid(grid_w, grid_h).
    let r = reference();
    let g = &r["mae_grid"];
    let rows: Vec<Vec<f64>> = serde_json::from_value(g["rows"].clone()).unwrap();
    assert_eq!((g["dim"].as_u64(), g["side"].as_u64()), (Some(16), Some(3)));
    let ours = mae_table(3, 16);
    assert_eq!(ours.nrows(), rows.len());
    for (i, row) in rows.iter().enumerate() {
        for (k, v) in row.iter().enumerate() {
            assert!((ours[[i, k]] - v).abs() < 1e-12, "row {i} col {k}");
        }
    }
    let t = Array2::from_shape_fn((10, 16), |(i, k)| rows[i][k]);
    let layout = infer_grid(10, &[1, 10, 16], &GridHints::default()).unwrap();
    let f = analyze_grid(t.view(), &layout).fixed_sincos.unwrap();
    assert!(f.matches);
    assert_eq!(f.first_half_axis, "column (w)");
}

/// Invented learned grid: smooth waves along each axis (2 cycles down the height,
/// 3 across the width) with per-dimension amplitudes and phases, plus small noise.
fn wave_grid(h: usize, w: usize, dim: usize, interaction: bool, seed: u64) -> Array2<f64> {
    let mut n = Noise(seed);
    let amp: Vec<(f64, f64, f64, f64)> = (0..dim)
        .map(|_| {
            (
                n.normal(),
                n.normal(),
                2.0 * PI * n.uniform(),
                2.0 * PI * n.uniform(),
            )
        })
        .collect();
    Array2::from_shape_fn((h * w, dim), |(p, k)| {
        let (y, x) = ((p / w) as f64, (p % w) as f64);
        let (a, b, phy, phx) = amp[k];
        let ry = (2.0 * PI * 2.0 * y / h as f64 + phy).sin();
        let cx = (2.0 * PI * 3.0 * x / w as f64 + phx).cos();
        if interaction { a * ry * cx } else { a * ry + b * cx }
    } + 0.01 * n.normal())
}

#[test]
fn an_additive_wave_grid_is_separable_with_its_frequencies() {
    let t = wave_grid(14, 14, 64, false, 5);
    let l = GridLayout {
        height: 14,
        width: 14,
        extra_rows: 0,
        how: "test".into(),
    };
    let a = analyze_grid(t.view(), &l);
    let s = a.separability.unwrap();
    assert!(s.additive > 0.99, "{s:?}");
    let f = a.axis_frequencies.unwrap();
    assert_eq!(f.along_height[0].cycles, 2);
    assert_eq!(f.along_width[0].cycles, 3);
    assert!(f.along_height[0].power_fraction > 0.9);
    assert!(!a.fixed_sincos.unwrap().matches);
    assert_eq!(a.similarity_maps.len(), 9);
    let centre = &a.similarity_maps[0];
    assert_eq!(
        (centre.label.as_str(), centre.row, centre.col),
        ("centre", 7, 7)
    );
    assert!((centre.cosines[7][7] - 1.0).abs() < 1e-12);
    assert!(a.noise_like_fraction.unwrap() < 0.05);
}

#[test]
fn an_interaction_grid_is_not_separable() {
    // Invented: values are products of a row wave and a column wave.
    let t = wave_grid(14, 14, 64, true, 6);
    let l = GridLayout {
        height: 14,
        width: 14,
        extra_rows: 0,
        how: "test".into(),
    };
    let s = analyze_grid(t.view(), &l).separability.unwrap();
    assert!(s.additive < 0.1, "{s:?}");
}

#[test]
fn noise_patches_and_norm_outliers_are_flagged() {
    // Invented: smooth wave grid with one cell replaced by N(0, 0.02²) noise and one
    // cell scaled ×10.
    let mut t = wave_grid(14, 14, 256, false, 9);
    let mut n = Noise(99);
    for k in 0..256 {
        t[[3 * 14 + 4, k]] = 0.02 * n.normal();
    }
    t.row_mut(10 * 14 + 10).mapv_inplace(|v| v * 10.0);
    let l = GridLayout {
        height: 14,
        width: 14,
        extra_rows: 0,
        how: "test".into(),
    };
    let a = analyze_grid(t.view(), &l);
    let find = |y, x| a.odd_patches.iter().find(|p| p.row == y && p.col == x);
    assert_eq!(find(3, 4).map(|p| p.reason.as_str()), Some("noise-like"));
    assert_eq!(
        find(10, 10).map(|p| p.reason.as_str()),
        Some("norm-outlier")
    );
    // A whole grid of init noise is noise-like nearly everywhere (cosines ≈ N(0, 1/d), §8.2).
    let noise = Array2::from_shape_fn((196, 256), |_| 0.02 * n.normal());
    let a = analyze_grid(noise.view(), &l);
    assert!(
        a.noise_like_fraction.unwrap() > 0.95,
        "{:?}",
        a.noise_like_fraction
    );
}

#[test]
fn degenerate_inputs_give_a_problem_not_a_panic() {
    let l = GridLayout {
        height: 2,
        width: 2,
        extra_rows: 1,
        how: "test".into(),
    };
    let t = Array2::<f64>::zeros((4, 8));
    assert!(analyze_grid(t.view(), &l).problem.is_some());
    let mut t = Array2::<f64>::zeros((5, 8));
    let a = analyze_grid(t.view(), &l);
    assert!(a.problem.is_none());
    assert!(a.separability.is_none());
    t[[2, 3]] = f64::NAN;
    assert!(analyze_grid(t.view(), &l).problem.is_some());
    let empty = Array2::<f64>::zeros((5, 0));
    assert!(analyze_grid(empty.view(), &l).problem.is_some());
    let l1 = GridLayout {
        height: 1,
        width: 1,
        extra_rows: 0,
        how: "test".into(),
    };
    let one = Array2::<f64>::ones((1, 4));
    let a = analyze_grid(one.view(), &l1);
    assert!(a.problem.is_none());
    let huge = GridLayout {
        height: usize::MAX,
        width: 2,
        extra_rows: 0,
        how: "test".into(),
    };
    assert!(analyze_grid(one.view(), &huge).problem.is_some());
    assert!(sincos_2d(2, 2, 6, true).is_none());
}

#[test]
fn serialises_the_contract_fields() {
    // design.md: "grid": {"height": 14, "width": 14, "extra_rows": 1}
    let t = mae_table(14, 64);
    let l = infer_grid(197, &[1, 197, 64], &GridHints::default()).unwrap();
    let j = serde_json::to_value(analyze_grid(t.view(), &l)).unwrap();
    assert_eq!(j["height"], serde_json::json!(14));
    assert_eq!(j["width"], serde_json::json!(14));
    assert_eq!(j["extra_rows"], serde_json::json!(1));
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]

    #[test]
    fn arbitrary_layouts_and_tables_never_panic(
        rows in 0usize..60, dim in 0usize..20,
        vals in proptest::collection::vec(proptest::num::f64::ANY, 64),
        img in proptest::option::of((0usize..usize::MAX, 0usize..usize::MAX)),
        patch in proptest::option::of((0usize..64, 0usize..64)),
        extra in proptest::option::of(0usize..usize::MAX),
        h in 0usize..10, w in 0usize..10, e in 0usize..4,
    ) {
        let hints = GridHints { image_size: img, patch_size: patch, extra_rows: extra };
        let t = Array2::from_shape_fn((rows, dim), |(r, k)| vals[(r * 7 + k) % 64]);
        if let Some(l) = infer_grid(rows, &[1, rows, dim], &hints) {
            proptest::prop_assert_eq!(l.extra_rows + l.height * l.width, rows);
            let _ = analyze_grid(t.view(), &l);
        }
        let l = GridLayout { height: h, width: w, extra_rows: e, how: String::new() };
        let a = analyze_grid(t.view(), &l);
        proptest::prop_assert!(a.problem.is_some() || rows == e + h * w);
    }
}
