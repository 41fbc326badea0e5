//! Tests of the sinusoid fit against published values and invented tables.

use super::*;
use crate::analyze::precision::{round_bf16, round_f16};
use crate::testutil::Rng;
use ndarray::{Array1, Array2};

fn vaswani(base: f64) -> SinusoidSpec {
    SinusoidSpec {
        base,
        layout: Layout::Interleaved,
        sin_first: true,
        exponent: Exponent::TwoIOverD,
        offset: 0,
        scale: 1.0,
        frequency_scale: 1.0,
    }
}

fn t2t() -> SinusoidSpec {
    SinusoidSpec {
        layout: Layout::Split,
        exponent: Exponent::IOverHalfMinusOne,
        ..vaswani(10000.0)
    }
}

fn to_f32(a: &Array2<f64>) -> Array2<f64> {
    a.mapv(|v| v as f32 as f64)
}

fn assert_row(table: &Array2<f64>, r: usize, expected: &[f64], tol: f64) {
    for (j, e) in expected.iter().enumerate() {
        let got = table[[r, j]];
        assert!((got - e).abs() <= tol, "row {r} col {j}: {got} vs {e}");
    }
}

#[test]
fn generator_reproduces_the_published_d8_vaswani_rows() {
    // check-values §1.2 (a-calc from Vaswani 2017 §3.5): d=8, ω = [1, 0.1, 0.01, 0.001].
    let t = generate(&vaswani(10000.0), 3, 8);
    assert_row(&t, 0, &[0., 1., 0., 1., 0., 1., 0., 1.], 1e-12);
    let pos1 = [
        0.841470985,
        0.540302306,
        0.099833417,
        0.995004165,
        0.009999833,
        0.99995,
        0.001,
        0.9999995,
    ];
    assert_row(&t, 1, &pos1, 1e-9);
    let pos2 = [
        0.909297427,
        -0.416146837,
        0.198669331,
        0.980066578,
        0.019998667,
        0.999800007,
        0.001999999,
        0.999998,
    ];
    assert_row(&t, 2, &pos2, 1e-9);
}

#[test]
fn generator_reproduces_the_published_fairseq_and_marian_rows() {
    // check-values §2.2 (a-calc from fairseq get_embedding(4, 8, padding_idx=1)):
    // split, sin first, ω_i = 10000^(−i/3); row 1 zeroed as the padding row.
    let mut t = generate(&t2t(), 4, 8);
    t.row_mut(1).fill(0.0);
    assert_row(&t, 0, &[0., 0., 0., 0., 1., 1., 1., 1.], 1e-12);
    assert_row(&t, 1, &[0.0; 8], 0.0);
    let row2 = [
        0.909297427,
        0.092698501,
        0.004308856,
        0.0002,
        -0.416146837,
        0.995694224,
        0.999990717,
        0.99999998,
    ];
    assert_row(&t, 2, &row2, 1e-9);
    // check-values §2.4 (a-calc from HF Marian): split halves with Vaswani frequencies.
    let marian = SinusoidSpec {
        layout: Layout::Split,
        ..vaswani(10000.0)
    };
    let m = generate(&marian, 2, 8);
    let pos1 = [
        0.841470985,
        0.099833417,
        0.009999833,
        0.001,
        0.540302306,
        0.995004165,
        0.99995,
        0.9999995,
    ];
    assert_row(&m, 1, &pos1, 1e-9);
}

#[test]
fn generator_matches_the_published_frequencies_and_row_norm() {
    // check-values §1.1 and §2.1 (a-calc): d=512 ω_1 Vaswani 0.96466162, t2t 0.96452553;
    // ω_255 = 1.036633e-4; §1.3: every row has norm sqrt(d/2) = 19.5959 for d=768.
    let v = vaswani(10000.0).frequencies(512);
    assert!((v[1] - 0.96466162).abs() < 1e-8);
    assert!((v[255] - 1.036633e-4).abs() < 1e-9);
    let t = t2t().frequencies(512);
    assert!((t[1] - 0.96452553).abs() < 1e-8);
    assert!((t[255] - 1e-4).abs() < 1e-15);
    let table = generate(&vaswani(10000.0), 64, 768);
    for r in table.rows() {
        let norm = r.dot(&r).sqrt();
        assert!((norm - 19.5959).abs() < 1e-4);
    }
}

fn check_fit(fit: &SinusoidFit, spec: &SinusoidSpec, max_err: f64) {
    assert_eq!(fit.layout, spec.layout, "{fit:?}");
    assert_eq!(fit.sin_first, spec.sin_first, "{fit:?}");
    assert_eq!(fit.exponent, spec.exponent, "{fit:?}");
    assert_eq!(fit.offset, spec.offset, "{fit:?}");
    assert!((fit.base / spec.base - 1.0).abs() < 1e-9, "{fit:?}");
    assert!(fit.max_abs_error <= max_err, "{}", fit.max_abs_error);
    assert!(!fit.precision.computed_in_low_precision);
}

#[test]
fn recovers_vaswani_interleaved_stored_as_f32() {
    // Vaswani 2017 §3.5 (check-values §1.1); f32 storage error ≤ 2^-25 for |v| ≤ 1.
    let spec = vaswani(10000.0);
    let table = to_f32(&generate(&spec, 512, 768));
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    check_fit(&fit, &spec, 2f64.powi(-24));
    assert!(fit.snapped);
    assert!(fit.zero_rows.is_empty());
    assert!(fit.precision.representable_in.contains(&"f32".to_string()));
    assert!(fit.error_by_position.len() <= 512);
}

#[test]
fn recovers_the_whisper_t2t_split_convention() {
    // Whisper `sinusoids(1500, 384)` = tensor2tensor convention (check-values §2.1, §2.3).
    let spec = t2t();
    let table = to_f32(&generate(&spec, 1500, 384));
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    check_fit(&fit, &spec, 2f64.powi(-24));
    // The same frequencies with the other exponent need base 10000^(192/191).
    assert!((fit.base_other_convention / 10000f64.powf(192.0 / 191.0) - 1.0).abs() < 1e-9);
}

#[test]
fn recovers_marian_split_with_vaswani_exponent() {
    // HF Marian (check-values §2.4): split halves, 2i/d, offset 0, 1024 rows.
    let spec = SinusoidSpec {
        layout: Layout::Split,
        ..vaswani(10000.0)
    };
    let table = to_f32(&generate(&spec, 1024, 512));
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    check_fit(&fit, &spec, 2f64.powi(-24));
}

#[test]
fn recovers_fairseq_with_padding_row_and_odd_width() {
    // fairseq get_embedding (check-values §2.2): num_embeddings = 1024 + 1 + 1, row 1
    // zeroed (padding_idx=1), odd d gets a zero last column. Row 0 keeps angle 0, so
    // the row encoding angle 0 is row 0 and the offset is 0.
    let spec = t2t();
    let mut table = Array2::zeros((1026, 513));
    table
        .slice_mut(ndarray::s![.., ..512])
        .assign(&generate(&spec, 1026, 512));
    table.row_mut(1).fill(0.0);
    let table = to_f32(&table);
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    check_fit(&fit, &spec, 2f64.powi(-24));
    assert_eq!(fit.zero_rows, vec![[1, 2]]);
    assert!(fit.zero_last_column);
}

#[test]
fn recovers_a_shifted_table_cos_first() {
    // Invented variant: two rows before position 0 (angle (r − 2)·ω) and cosines first.
    let spec = SinusoidSpec {
        offset: 2,
        sin_first: false,
        ..vaswani(10000.0)
    };
    let table = to_f32(&generate(&spec, 300, 256));
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    check_fit(&fit, &spec, 2f64.powi(-24));
    // A table starting at position 5 (negative offset), t2t split.
    let spec = SinusoidSpec {
        offset: -5,
        ..t2t()
    };
    let table = to_f32(&generate(&spec, 200, 128));
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    check_fit(&fit, &spec, 2f64.powi(-24));
}

#[test]
fn fits_an_unusual_base_without_assuming_10000() {
    // Invented: base 500 (not a published table), Vaswani layout.
    let spec = vaswani(500.0);
    let table = to_f32(&generate(&spec, 256, 64));
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    check_fit(&fit, &spec, 2f64.powi(-24));
}

#[test]
fn a_nearly_right_table_gives_a_fit_with_a_large_error() {
    // Invented corruption: 8 of the 384 pairs use the wrong frequency.
    let spec = vaswani(10000.0);
    let mut table = generate(&spec, 512, 768);
    let freqs = spec.frequencies(768);
    for i in 100..108 {
        for r in 0..512 {
            let (s, c) = (r as f64 * freqs[i] * 1.5).sin_cos();
            table[[r, 2 * i]] = s;
            table[[r, 2 * i + 1]] = c;
        }
    }
    let fit = fit_sinusoid(table.view(), 2f64.powi(-25)).unwrap();
    assert_eq!(fit.layout, Layout::Interleaved);
    assert!((fit.base - 10000.0).abs() < 1e-6, "{fit:?}");
    assert!(fit.max_abs_error > 0.1, "{}", fit.max_abs_error);
}

#[test]
fn random_and_learned_like_tables_are_not_sinusoids() {
    // Invented: i.i.d. N(0, 0.02²) table, and a smooth learned-like table (a few smooth
    // waves along position times random directions, plus small noise).
    let mut rng = Rng(7);
    let random = Array2::from_shape_fn((256, 128), |_| 0.02 * rng.normal());
    assert!(fit_sinusoid(random.view(), 2f64.powi(-25)).is_none());
    let smooth = smooth_table(&mut rng, 256, 128);
    assert!(fit_sinusoid(smooth.view(), 2f64.powi(-25)).is_none());
}

fn smooth_table(rng: &mut Rng, n: usize, d: usize) -> Array2<f64> {
    let dirs: Vec<Array1<f64>> = (0..6)
        .map(|_| Array1::from_shape_fn(d, |_| rng.normal() * 0.05))
        .collect();
    let phases: Vec<f64> = (0..6)
        .map(|_| rng.uniform() * std::f64::consts::TAU)
        .collect();
    Array2::from_shape_fn((n, d), |(r, j)| {
        let t = r as f64 / n as f64;
        let mut v = 0.0;
        for k in 0..6 {
            v += dirs[k][j] * (std::f64::consts::PI * (k as f64 + 1.0) * t + phases[k]).cos();
        }
        v + 0.002 * rng.normal()
    })
}

fn low_precision_table(n: usize, d: usize, rd: fn(f64) -> f64) -> Array2<f64> {
    // check-values §7.2: angle = round(round(pos)·round(ω)) in the low dtype, then
    // sin/cos (evaluated here in f64 and stored as f32).
    let spec = vaswani(10000.0);
    let freqs = spec.frequencies(d);
    let mut t = Array2::zeros((n, d));
    for r in 0..n {
        for (i, w) in freqs.iter().enumerate() {
            let (s, c) = rd(rd(r as f64) * rd(*w)).sin_cos();
            t[[r, 2 * i]] = s as f32 as f64;
            t[[r, 2 * i + 1]] = c as f32 as f64;
        }
    }
    t
}

fn max_err_below(table: &Array2<f64>, exact: &Array2<f64>, rows: usize) -> f64 {
    let mut m = 0.0f64;
    for r in 0..rows {
        for j in 0..table.ncols() {
            m = m.max((table[[r, j]] - exact[[r, j]]).abs());
        }
    }
    m
}

#[test]
fn low_precision_simulation_reproduces_the_published_errors() {
    // check-values §7.2 (a-calc, numpy/ml_dtypes), Vaswani d=768.
    let exact = generate(&vaswani(10000.0), 512, 768);
    let bf = low_precision_table(512, 768, round_bf16);
    for (rows, want) in [(64, 0.214), (128, 0.423), (256, 0.861), (512, 1.94)] {
        let got = max_err_below(&bf, &exact, rows);
        assert!(
            (got - want).abs() < 0.006 * want.max(1.0),
            "bf16 {rows}: {got}"
        );
    }
    let f = low_precision_table(512, 768, round_f16);
    for (rows, want) in [(64, 0.026), (128, 0.059), (256, 0.117), (512, 0.233)] {
        let got = max_err_below(&f, &exact, rows);
        assert!((got - want).abs() < 0.006, "f16 {rows}: {got}");
    }
}

#[test]
fn flags_angles_computed_in_bf16_and_f16() {
    let bf = low_precision_table(512, 768, round_bf16);
    let fit = fit_sinusoid(bf.view(), 2f64.powi(-25)).unwrap();
    assert_eq!(fit.layout, Layout::Interleaved);
    assert!((fit.base - 10000.0).abs() < 1e-6, "{}", fit.base);
    assert!(fit.max_abs_error > 1.0);
    let p = &fit.precision;
    assert!(p.computed_in_low_precision, "{p:?}");
    assert_eq!(p.best_match.as_deref(), Some("bf16"));
    assert!(p.grows_with_position);
    let f = low_precision_table(512, 768, round_f16);
    let fit = fit_sinusoid(f.view(), 2f64.powi(-25)).unwrap();
    assert!(
        fit.precision.computed_in_low_precision,
        "{:?}",
        fit.precision
    );
    assert_eq!(fit.precision.best_match.as_deref(), Some("f16"));
}

#[test]
fn an_exact_table_merely_stored_in_bf16_is_not_flagged() {
    // check-values §7.2: rounding an exact table to bf16 errs by at most 1.95e-3.
    let spec = vaswani(10000.0);
    let table = generate(&spec, 512, 768).mapv(round_bf16);
    let fit = fit_sinusoid(
        table.view(),
        crate::checkpoint::Dtype::BF16.half_ulp_below_one().unwrap(),
    )
    .unwrap();
    check_fit(&fit, &spec, 1.96e-3);
    assert!(
        fit.precision.error_to_half_ulp <= 1.0 + 1e-9,
        "{:?} {} {}",
        fit.precision.error_to_half_ulp,
        fit.scale,
        fit.max_abs_error
    );
    assert!(fit.precision.representable_in.contains(&"bf16".to_string()));
    let table = generate(&spec, 512, 768).mapv(round_f16);
    let fit = fit_sinusoid(
        table.view(),
        crate::checkpoint::Dtype::F16.half_ulp_below_one().unwrap(),
    )
    .unwrap();
    check_fit(&fit, &spec, 2.45e-4);
}

#[test]
fn degenerate_inputs_give_none_without_panicking() {
    assert!(fit_sinusoid(Array2::<f64>::zeros((0, 0)).view(), 1e-8).is_none());
    assert!(fit_sinusoid(Array2::<f64>::zeros((10, 8)).view(), 1e-8).is_none());
    assert!(fit_sinusoid(Array2::<f64>::ones((1, 8)).view(), 1e-8).is_none());
    let mut t = generate(&vaswani(10000.0), 16, 8);
    t[[3, 3]] = f64::NAN;
    assert!(fit_sinusoid(t.view(), 1e-8).is_none());
    // A constant table: radii are equal but the angles do not progress.
    let constant = Array2::from_elem((20, 8), 0.5);
    assert!(fit_sinusoid(constant.view(), 1e-8).is_none());
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
    /// Never panics, whatever the shape and values (NaN, ±∞, zeros, huge numbers).
    #[test]
    fn never_panics_on_arbitrary_tables(
        n in 0usize..24,
        d in 0usize..24,
        seed in proptest::prelude::any::<u64>(),
        ulp in proptest::prelude::prop_oneof![proptest::prelude::Just(0.0), proptest::prelude::Just(f64::NAN), 1e-9f64..1e-2],
    ) {
        let mut rng = Rng(seed);
        let specials = [0.0, f64::NAN, f64::INFINITY, -1e300, 1.0, -1.0];
        let t = Array2::from_shape_fn((n, d), |_| {
            if rng.uniform() < 0.1 { specials[(rng.next_u64() % 6) as usize] } else { rng.normal() }
        });
        let _ = fit_sinusoid(t.view(), ulp);
        // A clean sinusoid of the same shape with random zeroed rows must not panic either.
        if d >= 4 {
            let mut s = generate(&vaswani(10000.0), n, d);
            for r in 0..n {
                if rng.uniform() < 0.3 { s.row_mut(r).fill(0.0); }
            }
            let _ = fit_sinusoid(s.view(), ulp);
        }
    }
}
