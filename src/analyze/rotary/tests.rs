//! Tests of the rotary analyses against published values and invented vectors.

use super::recipes::llama3_scale;
use super::*;
use ndarray::Array1;

fn f32_round(v: &[f64]) -> Vec<f64> {
    v.iter().map(|x| (*x as f32) as f64).collect()
}

fn analyze(v: &[f64], hints: &RotaryHints) -> RotaryAnalysis {
    analyze_inv_freq(ArrayView1::from(v), hints)
}

#[test]
fn llama_inverse_frequencies_match_the_published_check_values() {
    // check-values §6.1 (a-calc from the HF / Meta formula), head_dim 128.
    let cases = [
        (1e4, 0.86596432, 1.1547820e-4),
        (5e5, 0.81461723, 2.4551408e-6),
        (1e6, 0.80584219, 1.2409378e-6),
    ];
    for (base, f1, f63) in cases {
        let v = inv_freq(base, 128);
        assert_eq!(v.len(), 64);
        assert_eq!(v[0], 1.0);
        assert!((v[1] - f1).abs() < 1e-8, "{base}: {}", v[1]);
        assert!(((v[63] - f63) / f63).abs() < 1e-6, "{base}: {}", v[63]);
    }
    // Longest wavelength for θ=1e4 is 54410 (§6.1).
    let w = wavelength_summary(&inv_freq(1e4, 128), Some(4096)).unwrap();
    assert!((w.longest - 54410.0).abs() < 1.0, "{}", w.longest);
}

#[test]
fn unscaled_vectors_are_recognised_with_their_base() {
    // check-values §6.1: the three published bases, stored as float32.
    for base in [1e4, 5e5, 1e6] {
        let v = f32_round(&inv_freq(base, 128));
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, Scaling::None, "{base}: {a:?}");
        assert_eq!(a.base, Some(base));
        assert_eq!(a.factor, 1.0);
        assert!(a.low_precision.is_none());
        assert!(a.problem.is_none());
    }
}

#[test]
fn an_uncommon_base_without_config_is_reported_as_fitted() {
    // Invented base 123456: no scaling claimed, the fit returns it.
    let v = f32_round(&inv_freq(123_456.0, 64));
    let a = analyze(&v, &RotaryHints::default());
    assert_eq!(a.scaling, Scaling::None);
    assert!((a.base.unwrap() / 123_456.0 - 1.0).abs() < 1e-5);
}

#[test]
fn ntk_aware_bases_are_recognised_and_alpha_recovered() {
    // check-values §6.4: d=128, base 1e4; α=2,4,8 → 20221.26, 40889.94, 82684.62.
    for (alpha, expected) in [(2.0, 20221.26), (4.0, 40889.94), (8.0, 82684.62)] {
        let base: f64 = 1e4 * f64::powf(alpha, 128.0 / 126.0);
        assert!((base - expected).abs() < 0.01, "{base}");
        let v = f32_round(&inv_freq(base, 128));
        // With the config's rope_theta …
        let hints = RotaryHints {
            config_theta: Some(1e4),
            ..Default::default()
        };
        let a = analyze(&v, &hints);
        assert_eq!(a.scaling, Scaling::Ntk, "{a:?}");
        assert_eq!(a.ntk_alpha, Some(alpha));
        assert_eq!(a.factor, alpha);
        assert!((a.base.unwrap() - expected).abs() < 0.5, "{:?}", a.base);
        // … and without it (the common base 1e4 is assumed and said so).
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, Scaling::Ntk, "{a:?}");
        assert_eq!(a.ntk_alpha, Some(alpha));
        assert_eq!(a.original_base, Some(1e4));
    }
}

#[test]
fn linear_interpolation_is_recognised_with_its_factor() {
    // check-values §6.3: HF linear scaling is inv_freq /= factor.
    for factor in [2.0, 4.0, 8.0] {
        let v: Vec<f64> = f32_round(
            &inv_freq(1e4, 128)
                .iter()
                .map(|w| w / factor)
                .collect::<Vec<_>>(),
        );
        let a = analyze(&v, &RotaryHints::default());
        assert_eq!(a.scaling, Scaling::Linear, "{a:?}");
        assert_eq!(a.factor, factor);
        assert_eq!(a.base, Some(1e4));
    }
}

fn llama31_frequencies() -> Vec<f64> {
    // check-values §6.6: θ=5e5, head_dim 128, factor 8, low 1, high 4, old context 8192.
    llama3_scale(&inv_freq(5e5, 128), 8.0, 1.0, 4.0, 8192.0)
}

#[test]
fn llama31_scaling_has_the_published_groups_and_divisors() {
    let base = inv_freq(5e5, 128);
    let out = llama31_frequencies();
    let div: Vec<f64> = base.iter().zip(&out).map(|(b, o)| b / o).collect();
    // §6.6: 29 unchanged, 6 smoothed (listed divisors), 29 divided by 8.
    assert!(div[..29].iter().all(|x| *x == 1.0));
    let listed = [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327];
    for (d, l) in div[29..35].iter().zip(listed) {
        assert!((d - l).abs() < 1e-6, "{d} vs {l}");
    }
    assert!(div[35..].iter().all(|x| (x - 8.0).abs() < 1e-12));
    assert!((out[63] - 3.0689e-7).abs() < 1e-10, "{}", out[63]);
}

#[test]
fn llama31_scaled_frequencies_are_a_wavelength_ramp_with_factor_8() {
    let v = f32_round(&llama31_frequencies());
    let a = analyze(&v, &RotaryHints::default());
    assert_eq!(a.scaling, Scaling::WavelengthRamp, "{a:?}");
    assert_eq!(a.factor, 8.0);
    assert_eq!(a.base, Some(5e5));
    let r = a.ramp.unwrap();
    assert_eq!(
        (r.unchanged, r.smoothed, r.divided),
        ((0, 29), (29, 35), (35, 64))
    );
    assert_eq!(r.shape, "linear-in-frequency");
    assert_eq!(r.low_freq_wavelength, Some(8192.0));
    assert_eq!(r.high_freq_wavelength, Some(2048.0));
    assert_eq!(r.original_context, Some(8192.0));
    assert_eq!(r.low_freq_factor, Some(1.0));
    assert_eq!(r.high_freq_factor, Some(4.0));
    let listed = [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327];
    for (d, l) in r.smoothed_divisors.iter().zip(listed) {
        assert!((d - l).abs() < 1e-5, "{d} vs {l}");
    }
}

#[test]
fn gguf_divisors_of_llama31_give_the_same_ramp() {
    // check-values §6.8: the converter's formula, which must reproduce the listed vector.
    let base = inv_freq(5e5, 128);
    let divisors: Vec<f64> = base
        .iter()
        .map(|&f| {
            let wl = 2.0 * PI / f;
            if wl < 8192.0 / 4.0 {
                1.0
            } else if wl > 8192.0 {
                8.0
            } else {
                let smooth = (8192.0 / wl - 1.0) / (4.0 - 1.0);
                1.0 / ((1.0 - smooth) / 8.0 + smooth)
            }
        })
        .map(|x| (x as f32) as f64)
        .collect();
    assert!(divisors[..29].iter().all(|x| *x == 1.0));
    assert!(divisors[35..].iter().all(|x| *x == 8.0));
    let listed = [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327];
    for (d, l) in divisors[29..35].iter().zip(listed) {
        assert!((d - l).abs() < 1e-6);
    }
    let a = analyze_rope_factors(
        Array1::from(divisors).view(),
        5e5,
        &RotaryHints {
            declared_context: Some(131072),
            ..Default::default()
        },
    );
    assert_eq!(a.source, "divisors");
    assert_eq!(a.scaling, Scaling::WavelengthRamp, "{a:?}");
    assert_eq!(a.factor, 8.0);
    let r = a.ramp.unwrap();
    assert_eq!(
        (r.unchanged, r.smoothed, r.divided),
        ((0, 29), (29, 35), (35, 64))
    );
    assert_eq!(r.original_context, Some(8192.0));
    // Every scaled wavelength is below 131072 except the longest ones.
    assert!(a.wavelengths.unwrap().beyond_context.is_some());
}

#[test]
fn config_llama3_and_linear_entries_agree_with_the_formulas() {
    let rs = serde_json::json!({"rope_type": "llama3", "factor": 8.0, "low_freq_factor": 1.0,
        "high_freq_factor": 4.0, "original_max_position_embeddings": 8192});
    let a = rotary_from_config(5e5, 128, Some(&rs), Some(131072));
    assert_eq!(a.source, "config");
    assert_eq!(a.scaling, Scaling::WavelengthRamp);
    assert_eq!(a.factor, 8.0);
    let r = a.ramp.unwrap();
    assert_eq!(r.smoothed, (29, 35));
    assert_eq!(
        r.context_assumption.as_deref(),
        Some("original context from the config")
    );
    let rs = serde_json::json!({"type": "linear", "factor": 4.0});
    let a = rotary_from_config(1e4, 128, Some(&rs), Some(8192));
    assert_eq!((a.scaling, a.factor), (Scaling::Linear, 4.0));
    let a = rotary_from_config(1e4, 128, None, Some(4096));
    assert_eq!(
        (a.scaling.as_str(), a.factor, a.base),
        ("none", 1.0, Some(1e4))
    );
    // 4096 context with θ=1e4, d=128: wavelength 2π·1e4^(2i/128) exceeds 4096 from
    // i = ceil(64·ln(4096/2π)/ln(1e4)) = 46 on (computed from §6.1's formula).
    let w = a.wavelengths.unwrap();
    assert_eq!(w.first_index_beyond_context, Some(46));
    assert_eq!(w.beyond_context, Some(18));
}

#[test]
fn config_yarn_has_the_published_ramp_bounds_and_attention_factor() {
    // check-values §6.5: dim 128, base 1e4, L=4096 → low 20, high 46; s=8 → 1.207944.
    let rs = serde_json::json!({"rope_type": "yarn", "factor": 8.0,
        "original_max_position_embeddings": 4096});
    let a = rotary_from_config(1e4, 128, Some(&rs), Some(32768));
    let y = a.yarn.clone().unwrap();
    assert_eq!((y.low, y.high), (20, 46));
    assert!((y.attention_factor - 1.207944).abs() < 1e-6);
    assert_eq!(a.scaling, Scaling::WavelengthRamp, "{a:?}");
    assert_eq!(a.factor, 8.0);
    let r = a.ramp.unwrap();
    assert_eq!(r.shape, "linear-in-index");
    assert_eq!(r.ramp_start_index, Some(20.0));
    assert_eq!(r.ramp_end_index, Some(46.0));
    // Other published bounds: base 1e4, L=2048 → 16, 41; base 5e5, L=8192 → 18, 35.
    for (base, l, lo, hi) in [(1e4, 2048, 16, 41), (5e5, 8192, 18, 35)] {
        let rs = serde_json::json!({"rope_type": "yarn", "factor": 4.0,
            "original_max_position_embeddings": l});
        let (_, y) = frequencies_from_config(base, 128, Some(&rs), None).unwrap();
        let y = y.unwrap();
        assert_eq!((y.low, y.high), (lo, hi));
    }
}

#[test]
fn bf16_rounded_frequencies_carry_the_published_fingerprint_and_phase_error() {
    // check-values §7.3: bf16(inv_freq)[:6] for θ=1e4, d=128, and the phase error.
    let exact = inv_freq(1e4, 128);
    let v: Vec<f64> = exact
        .iter()
        .map(|x| half::bf16::from_f64(*x).to_f64())
        .collect();
    let fingerprint = [1.0, 0.8671875, 0.75, 0.6484375, 0.5625, 0.486328125];
    assert_eq!(&v[..6], &fingerprint);
    let a = analyze(&v, &RotaryHints::default());
    assert_eq!(a.scaling, Scaling::None, "{a:?}");
    assert_eq!(a.base, Some(1e4));
    let p = a.low_precision.expect("bf16 fingerprint");
    assert_eq!(p.dtype, "bf16");
    assert_eq!(p.entries, 64);
    // §7.3: max relative error 3.65e-3; phase 0.63 rad at 512, 2.5 at 2048, 5.0 at 4096.
    assert!(
        (p.max_rel_error - 3.65e-3).abs() < 1e-4,
        "{}",
        p.max_rel_error
    );
    let at = |pos| {
        p.phase_error
            .iter()
            .find(|e| e.position == pos)
            .unwrap()
            .radians
    };
    assert!((at(512) - 0.63).abs() < 0.01, "{}", at(512));
    assert!((at(2048) - 2.5).abs() < 0.05, "{}", at(2048));
    assert!((at(4096) - 5.0).abs() < 0.1, "{}", at(4096));
    // f16 rounding is detected as f16 (max relative error 4.09e-4, §7.3).
    let v16: Vec<f64> = exact
        .iter()
        .map(|x| half::f16::from_f64(*x).to_f64())
        .collect();
    let p = analyze(&v16, &RotaryHints::default())
        .low_precision
        .unwrap();
    assert_eq!(p.dtype, "f16");
    assert!(
        (p.max_rel_error - 4.09e-4).abs() < 1e-5,
        "{}",
        p.max_rel_error
    );
}

fn reference() -> serde_json::Value {
    // Written by tests/reference/kinds.py (numpy; version recorded in the file).
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/kinds.json");
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

#[test]
fn numpy_float32_llama31_frequencies_are_read_back_as_the_published_ramp() {
    // tests/reference/kinds.py computes check-values §6.6 in numpy float32.
    let r = reference();
    let v: Vec<f64> = serde_json::from_value(r["llama31"]["inv_freq_f32"].clone()).unwrap();
    assert_eq!(v.len(), 64);
    let a = analyze(&v, &RotaryHints::default());
    assert_eq!(a.scaling, Scaling::WavelengthRamp, "{a:?}");
    assert_eq!((a.factor, a.base), (8.0, Some(5e5)));
    let ramp = a.ramp.unwrap();
    assert_eq!(
        (ramp.unchanged, ramp.smoothed, ramp.divided),
        ((0, 29), (29, 35), (35, 64))
    );
    assert_eq!(ramp.original_context, Some(8192.0));
    assert_eq!(ramp.high_freq_factor, Some(4.0));
}

#[test]
fn layer_vectors_are_compared_bitwise() {
    let a = Array1::from(inv_freq(1e4, 8));
    let mut b = a.clone();
    b[3] *= 1.0 + 1e-6;
    let vs = vec![
        ("l0".to_string(), a.view()),
        ("l1".to_string(), a.view()),
        ("l2".to_string(), b.view()),
    ];
    let r = compare_layers(&vs);
    assert!(!r.identical);
    assert_eq!(r.differing.len(), 1);
    assert_eq!(r.differing[0].name, "l2");
    assert!((r.differing[0].max_rel_diff - 1e-6).abs() < 1e-9);
    let r = compare_layers(&vs[..2]);
    assert!(r.identical);
    assert!(compare_layers(&[]).identical);
    let short = Array1::from(vec![1.0]);
    let r = compare_layers(&[("a".into(), a.view()), ("b".into(), short.view())]);
    assert_eq!(r.differing[0].length_mismatch, Some(1));
}

#[test]
fn degenerate_inputs_give_a_problem_not_a_panic() {
    for v in [
        vec![],
        vec![1.0],
        vec![1.0, f64::NAN, 0.1],
        vec![1.0, 0.0],
        vec![0.1, 0.2, 0.3],
        vec![1.0, 1.0, 1.0],
    ] {
        let a = analyze(&v, &RotaryHints::default());
        assert!(a.problem.is_some(), "{v:?}: {a:?}");
        assert_eq!(a.scaling, Scaling::Unknown);
    }
    let a = analyze_rope_factors(
        Array1::from(vec![1.0, -1.0]).view(),
        1e4,
        &RotaryHints::default(),
    );
    assert!(a.problem.is_some());
    let a = rotary_from_config(f64::NAN, 128, None, None);
    assert!(a.problem.is_some());
    let rs = serde_json::json!({"rope_type": "linear"});
    assert!(
        rotary_from_config(1e4, 128, Some(&rs), None)
            .problem
            .is_some()
    );
    let rs = serde_json::json!({"rope_type": "made-up", "factor": 2.0});
    assert!(
        rotary_from_config(1e4, 128, Some(&rs), None)
            .problem
            .is_some()
    );
    // Scattered deviations are not forced into a scaling scheme (invented vector).
    let mut v = inv_freq(1e4, 64);
    v[3] *= 1.5;
    v[20] *= 1.5;
    let a = analyze(&v, &RotaryHints::default());
    assert_eq!(a.scaling, Scaling::Unknown);
}

#[test]
fn serialises_the_contract_fields() {
    // design.md "JSON documents": "rotary": {"base": 10000.0, "scaling": "none", "factor": 1.0}
    let a = analyze(&inv_freq(1e4, 128), &RotaryHints::default());
    let j = serde_json::to_value(&a).unwrap();
    assert_eq!(j["base"], serde_json::json!(10000.0));
    assert_eq!(j["scaling"], serde_json::json!("none"));
    assert_eq!(j["factor"], serde_json::json!(1.0));
}

/// The contract's scaling names (design.md, "Rotary `scaling`").
const SCALINGS: [&str; 5] = ["none", "linear", "ntk", "wavelength-ramp", "unknown"];

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]

    #[test]
    fn arbitrary_vectors_never_panic(
        v in proptest::collection::vec(proptest::num::f64::ANY, 0..70),
        theta in proptest::option::of(proptest::num::f64::ANY),
        rd in proptest::option::of(0usize..200),
    ) {
        let hints = RotaryHints { config_theta: theta, rotary_dim: rd, declared_context: Some(4096), original_context: None };
        let a = analyze_inv_freq(ArrayView1::from(&v), &hints);
        proptest::prop_assert!(a.problem.is_some() || a.base.is_some());
        let _ = analyze_rope_factors(ArrayView1::from(&v), theta.unwrap_or(1e4), &hints);
    }

    #[test]
    fn decreasing_positive_vectors_always_get_a_fit(
        mut v in proptest::collection::vec(1e-12f64..1.0, 2..70),
    ) {
        // Invented: any strictly positive vector sorted in decreasing order.
        v.sort_by(|a, b| b.total_cmp(a));
        let a = analyze_inv_freq(ArrayView1::from(&v), &RotaryHints::default());
        proptest::prop_assert!(a.problem.is_some() || a.base.is_some_and(|b| !b.is_nan()));
        proptest::prop_assert!(SCALINGS.contains(&a.scaling.as_str()));
    }

    #[test]
    fn arbitrary_configs_never_panic(
        theta in proptest::num::f64::ANY,
        dim in 0usize..300,
        factor in proptest::num::f64::ANY,
        kind in proptest::sample::select(vec!["linear", "dynamic", "yarn", "llama3", "longrope", "default", "x"]),
        orig in proptest::option::of(0u64..100_000),
        maxp in proptest::option::of(0usize..200_000),
    ) {
        let rs = serde_json::json!({"rope_type": kind, "factor": factor, "original_max_position_embeddings": orig,
            "low_freq_factor": 1.0, "high_freq_factor": 4.0, "long_factor": [1.0, 2.0]});
        let a = rotary_from_config(theta, dim, Some(&rs), maxp);
        proptest::prop_assert!(SCALINGS.contains(&a.scaling.as_str()));
    }
}
