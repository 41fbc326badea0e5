use super::*;
use ndarray::Array2;

use crate::testutil::Rng;

#[test]
fn t5_bidirectional_buckets_match_the_published_table() {
    // check-values §5.1 (a-calc from HF t5 `_relative_position_bucket`), 32 buckets, max 128.
    let table: [(i64, usize); 22] = [
        (-1000, 15),
        (-128, 15),
        (-64, 14),
        (-32, 12),
        (-16, 10),
        (-9, 8),
        (-8, 8),
        (-7, 7),
        (-1, 1),
        (0, 0),
        (1, 17),
        (7, 23),
        (8, 24),
        (9, 24),
        (15, 25),
        (16, 26),
        (31, 27),
        (32, 28),
        (63, 29),
        (64, 30),
        (127, 31),
        (128, 31),
    ];
    for (rp, want) in table {
        assert_eq!(t5_bucket(rp, true, 32, 128), want, "rp {rp}");
    }
    assert_eq!(t5_bucket(100_000, true, 32, 128), 31);
    // First |rp| of each log bucket on either side: 8→8, 9→12, …, 15→91.
    let firsts = [
        (8, 8),
        (9, 12),
        (10, 16),
        (11, 23),
        (12, 32),
        (13, 46),
        (14, 64),
        (15, 91),
    ];
    for (bucket, first) in firsts {
        assert_eq!(t5_bucket(-first, true, 32, 128), bucket);
        assert_eq!(t5_bucket(-(first - 1), true, 32, 128), bucket - 1);
        assert_eq!(t5_bucket(first, true, 32, 128), bucket + 16);
        assert_eq!(t5_bucket(first - 1, true, 32, 128), bucket + 15);
    }
}

#[test]
fn t5_causal_buckets_match_the_published_first_distances() {
    // check-values §5.1: buckets 0–15 exact; first distances of 16..31.
    for d in 0..16 {
        assert_eq!(t5_bucket(-d, false, 32, 128), d as usize);
    }
    let firsts = [
        16, 19, 21, 24, 27, 31, 35, 40, 46, 52, 59, 67, 77, 87, 99, 113,
    ];
    for (k, first) in firsts.iter().enumerate() {
        assert_eq!(
            t5_bucket(-first, false, 32, 128),
            16 + k,
            "distance {first}"
        );
        assert_eq!(t5_bucket(-(first - 1), false, 32, 128), 15 + k);
    }
    // Keys after the query all share bucket 0 in causal mode.
    assert_eq!(t5_bucket(5, false, 32, 128), 0);
}

#[test]
fn bucket_16_is_unreachable_only_in_bidirectional_mode() {
    // check-values §5.1.
    assert_eq!(t5_unreachable(true, 32, 128), vec![16]);
    assert!(t5_unreachable(false, 32, 128).is_empty());
}

/// Invented T5-like encoder table: each head decays with |distance| at its own rate on
/// both sides, row 16 holds init noise of std 0.05, one head (5) is pure init noise.
fn invented_encoder_table(seed: u64, row16_scale: f64) -> Array2<f64> {
    let mut noise = Rng::new(seed);
    let mut t = Array2::<f64>::zeros((32, 8));
    for h in 0..8 {
        for b in 0..32 {
            let dist = if b == 0 {
                0.0
            } else if b < 16 {
                (1..=2000)
                    .find(|&d| t5_bucket(-d, true, 32, 128) == b)
                    .unwrap() as f64
            } else if b > 16 {
                (1..=2000)
                    .find(|&d| t5_bucket(d, true, 32, 128) == b)
                    .unwrap() as f64
            } else {
                f64::NAN
            };
            t[[b, h]] = if b == 16 {
                row16_scale * noise.normal()
            } else if h == 5 {
                0.05 * noise.normal()
            } else {
                3.0 - (1.0 + dist).ln() * (0.5 + 0.1 * h as f64)
            };
        }
    }
    t
}

#[test]
fn an_invented_encoder_table_shows_decay_unreachable_row_and_noise_head() {
    let t = invented_encoder_table(7, 0.05);
    let hints = RelativeHints {
        init_std: Some(0.05),
        name: Some("encoder.block.0.layer.0.SelfAttention.relative_attention_bias.weight".into()),
        ..Default::default()
    };
    let a = analyze_t5(t.view(), &hints);
    assert!(a.bidirectional);
    assert_eq!(a.bidirectional_source, "name");
    assert_eq!(a.unreachable, vec![16]);
    assert_eq!(a.unreachable_rows[0].looks_like_init, Some(true));
    for (h, tr) in a.head_trends.iter().enumerate() {
        if h == 5 {
            continue;
        }
        assert_eq!(tr.trend, "decays", "head {h}: {tr:?}");
        assert!(!tr.looks_untrained);
    }
    assert_eq!(a.curves.len(), 8);
    assert_eq!(a.distances.len(), 257);
    assert_eq!(a.curves[0][128], t[[0, 0]]);
    assert_eq!(a.curves[0][129], t[[17, 0]]);
    assert_eq!(a.curves[0][127], t[[1, 0]]);
    // A row 16 moved away from its init scale is not init (invented: scale 1.0).
    let t = invented_encoder_table(7, 1.0);
    let a = analyze_t5(t.view(), &hints);
    assert_eq!(a.unreachable_rows[0].looks_like_init, Some(false));
}

#[test]
fn noise_heads_are_flagged_and_smooth_heads_never_are() {
    // Invented: over 50 seeds, the pure-noise head 5 should mostly be flagged
    // (the verdict has a known false-negative rate on 16-value sides), and the
    // smooth heads never.
    let hints = RelativeHints {
        bidirectional: Some(true),
        init_std: Some(0.05),
        ..Default::default()
    };
    let mut flagged = 0;
    for seed in 1..=50 {
        let a = analyze_t5(invented_encoder_table(seed, 0.05).view(), &hints);
        assert!(
            a.untrained_heads.iter().all(|h| *h == 5),
            "{:?}",
            a.untrained_heads
        );
        flagged += a.untrained_heads.len();
    }
    assert!(flagged >= 35, "noise head flagged only {flagged}/50 times");
}

#[test]
fn direction_is_inferred_from_smoothness_when_nothing_says_it() {
    let t = invented_encoder_table(3, 0.05);
    let a = analyze_t5(t.view(), &RelativeHints::default());
    assert!(a.bidirectional, "{}", a.bidirectional_source);
    assert!(a.bidirectional_source.starts_with("inferred"));
    // Invented causal table: smooth in the causal bucket order 0..31.
    let c = Array2::from_shape_fn((32, 4), |(b, h)| -((1 + b) as f64).ln() * (1.0 + h as f64));
    let a = analyze_t5(c.view(), &RelativeHints::default());
    assert!(!a.bidirectional, "{}", a.bidirectional_source);
    assert!(a.unreachable.is_empty());
}

#[test]
fn swin_index_has_the_published_structure() {
    // check-values §5.2, window 7.
    let idx = swin_relative_index(7, 7);
    assert_eq!(idx.len(), 49 * 49);
    let mut counts = vec![0usize; 169];
    for &i in &idx {
        counts[i] += 1;
    }
    assert!(counts.iter().all(|c| *c > 0), "all 169 entries used");
    assert_eq!(idx.iter().max(), Some(&168));
    for i in 0..49 {
        assert_eq!(idx[i * 49 + i], 84);
    }
    assert_eq!(idx[1], 83);
    assert_eq!(idx[49], 85);
    for (r, &c) in counts.iter().enumerate() {
        let dy = (r / 13) as i64 - 6;
        let dx = (r % 13) as i64 - 6;
        assert_eq!(c as i64, (7 - dy.abs()) * (7 - dx.abs()), "row {r}");
    }
    assert_eq!(counts[84], 49);
    assert_eq!(counts[0], 1);
}

#[test]
fn swin_index_buffers_are_recognised_and_tables_are_not() {
    let idx: Vec<i64> = swin_relative_index(7, 7)
        .iter()
        .map(|&i| i as i64)
        .collect();
    assert_eq!(is_swin_index(&idx, &[49, 49]), Some((7, 7)));
    assert_eq!(is_swin_index(&idx, &[2401]), Some((7, 7)));
    let rect: Vec<i64> = swin_relative_index(2, 4)
        .iter()
        .map(|&i| i as i64)
        .collect();
    assert_eq!(is_swin_index(&rect, &[8, 8]), Some((2, 4)));
    let mut bad = idx.clone();
    bad[100] = 0;
    assert_eq!(is_swin_index(&bad, &[49, 49]), None);
    assert_eq!(is_swin_index(&[], &[0, 0]), None);
    assert_eq!(is_swin_index(&idx, &[49, 48]), None);
}

#[test]
fn swin_tables_decode_to_offset_maps() {
    // Invented: bias = −(dy² + dx²) per head, window 7, 3 heads (Swin-T stage 1 shape, §5.2).
    let t = Array2::from_shape_fn((169, 3), |(r, h)| {
        let dy = (r / 13) as f64 - 6.0;
        let dx = (r % 13) as f64 - 6.0;
        -(dy * dy + dx * dx) * (1.0 + h as f64)
    });
    let a = analyze_swin(t.view(), None, Some(0.02));
    assert_eq!(a.window, Some((7, 7)));
    assert_eq!(a.offset_maps.len(), 3);
    assert_eq!(a.offset_maps[0].len(), 13);
    assert_eq!(a.offset_maps[1][6][6], 0.0);
    assert_eq!(a.offset_maps[0][0][0], -72.0);
    assert!(a.head_trends.iter().all(|t| t.trend == "decays"));
    assert!(a.untrained_heads.is_empty());
    assert!(a.unreachable.is_empty());
    // Noise of the init scale is flagged (invented, std 0.02).
    let mut n = Rng::new(11);
    let t = Array2::from_shape_fn((169, 4), |_| 0.02 * n.normal());
    let a = analyze_swin(t.view(), Some((7, 7)), Some(0.02));
    assert!(a.untrained_heads.len() >= 3, "{:?}", a.head_trends);
    let a = analyze_swin(t.view(), Some((6, 7)), None);
    assert!(a.problem.is_some());
}

fn reference() -> serde_json::Value {
    // Written by tests/reference/kinds.py (numpy; version recorded in the file).
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/kinds.json");
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

#[test]
fn t5_buckets_match_the_numpy_reference_over_600_distances() {
    // tests/reference/kinds.py evaluates check-values §5.1 in numpy float32.
    let r = reference();
    let t = &r["t5_buckets"];
    let rps = t["relative_positions"].as_array().unwrap();
    for (mode, bidirectional) in [("bidirectional", true), ("causal", false)] {
        let want = t[mode].as_array().unwrap();
        assert_eq!(rps.len(), want.len());
        for (rp, b) in rps.iter().zip(want) {
            let rp = rp.as_i64().unwrap();
            assert_eq!(
                t5_bucket(rp, bidirectional, 32, 128) as u64,
                b.as_u64().unwrap(),
                "{mode} rp {rp}"
            );
        }
    }
}

#[test]
fn degenerate_tables_give_a_problem_not_a_panic() {
    let empty = Array2::<f64>::zeros((0, 4));
    assert!(
        analyze_t5(empty.view(), &RelativeHints::default())
            .problem
            .is_some()
    );
    let one = Array2::<f64>::zeros((1, 4));
    assert!(
        analyze_t5(one.view(), &RelativeHints::default())
            .problem
            .is_some()
    );
    let mut nan = Array2::<f64>::zeros((32, 2));
    nan[[3, 1]] = f64::NAN;
    assert!(
        analyze_t5(nan.view(), &RelativeHints::default())
            .problem
            .is_some()
    );
    // Constant table: no panic, no trend, not called untrained (no spread).
    let c = Array2::<f64>::ones((32, 2));
    let a = analyze_t5(c.view(), &RelativeHints::default());
    assert!(a.problem.is_none());
    assert!(a.untrained_heads.is_empty());
    assert!(analyze_swin(empty.view(), None, None).problem.is_some());
    assert!(
        analyze_swin(Array2::<f64>::zeros((10, 2)).view(), None, None)
            .problem
            .is_some()
    );
    // Odd bucket settings do not panic.
    for nb in 0..5 {
        for md in 0..4 {
            for rp in -10..=10 {
                let b = t5_bucket(rp, true, nb, md);
                assert!(nb == 0 || b < nb);
                let b = t5_bucket(rp, false, nb, md);
                assert!(nb == 0 || b < nb);
            }
        }
    }
    assert_eq!(t5_bucket(i64::MIN, true, 32, 128), 15);
    assert!(swin_relative_index(0, 7).is_empty());
}

#[test]
fn serialises_the_contract_fields() {
    // design.md: "relative": {"buckets": 32, "heads": 12, "bidirectional": true, "unreachable": [16]}
    let t = Array2::from_shape_fn((32, 12), |(b, h)| -((1 + b) as f64).ln() * (1 + h) as f64);
    let hints = RelativeHints {
        bidirectional: Some(true),
        ..Default::default()
    };
    let j = serde_json::to_value(analyze_t5(t.view(), &hints)).unwrap();
    assert_eq!(j["buckets"], serde_json::json!(32));
    assert_eq!(j["heads"], serde_json::json!(12));
    assert_eq!(j["bidirectional"], serde_json::json!(true));
    assert_eq!(j["unreachable"], serde_json::json!([16]));
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(128))]

    #[test]
    fn buckets_stay_in_range(rp in proptest::num::i64::ANY, bi in proptest::bool::ANY,
                             nb in 0usize..200, md in 0usize..100_000) {
        let b = t5_bucket(rp, bi, nb, md);
        proptest::prop_assert!(nb == 0 || b < nb);
    }

    #[test]
    fn arbitrary_tables_never_panic(
        rows in 0usize..40, heads in 0usize..5,
        vals in proptest::collection::vec(proptest::num::f64::ANY, 200),
        md in proptest::option::of(0usize..1000),
        bi in proptest::option::of(proptest::bool::ANY),
        init in proptest::option::of(proptest::num::f64::ANY),
    ) {
        let t = Array2::from_shape_fn((rows, heads), |(r, h)| vals[(r * 5 + h) % 200]);
        let hints = RelativeHints { bidirectional: bi, num_buckets: None, max_distance: md, init_std: init, name: None };
        let a = analyze_t5(t.view(), &hints);
        proptest::prop_assert!(a.problem.is_some() || a.head_trends.len() == heads);
        let s = analyze_swin(t.view(), None, init);
        proptest::prop_assert!(s.problem.is_some() || s.offset_maps.len() == heads);
        let _ = analyze_swin(t.view(), Some((usize::MAX, 3)), init);
    }
}
