//! Checks of the analyses and of the linalg seam against outside truth: numpy values
//! written by `tests/reference/spectrum_reference.py` (numpy version recorded in the JSON)
//! and published values from check-values.md. Runs against whichever linalg backend is
//! compiled in (`cargo test` for faer, `cargo test --features lapack` for LAPACK).

use std::f64::consts::PI;

use ndarray::Array2;
use posaudit::analyze::{neighbours, spectrum, waves};
use posaudit::linalg;
use serde_json::Value;

fn reference() -> Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/data/spectrum_reference.json"
    );
    serde_json::from_str(&std::fs::read_to_string(path).expect("reference file")).expect("json")
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect()
}

/// Vaswani et al. 2017 §3.5, built with the same operations as the reference script.
fn vaswani(n: usize, d: usize) -> Array2<f64> {
    let mut t = Array2::zeros((n, d));
    for i in 0..d / 2 {
        let w = 10000f64.powf(-(2.0 * i as f64) / d as f64);
        for p in 0..n {
            let a = p as f64 * w;
            t[[p, 2 * i]] = a.sin();
            t[[p, 2 * i + 1]] = a.cos();
        }
    }
    t
}

/// The invented splitmix64 + Box–Muller Gaussian stream of the reference script.
fn splitmix_gaussian(n: usize, d: usize, seed: u64) -> Array2<f64> {
    let mut state = seed;
    let mut uniform = || {
        state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^= z >> 31;
        ((z >> 11) as f64 + 0.5) / 2f64.powi(53)
    };
    Array2::from_shape_fn((n, d), |_| {
        let u1 = uniform();
        let u2 = uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * PI * u2).cos()
    })
}

/// Relative agreement for every reference value ≥ 1e-6·σ₁ (task requirement: 1e-10).
fn assert_values_match(got: &[f64], want: &[f64], what: &str) {
    assert_eq!(got.len(), want.len(), "{what}: count");
    let s1 = want[0];
    let mut worst = 0.0f64;
    for (g, w) in got.iter().zip(want) {
        if *w >= 1e-6 * s1 {
            worst = worst.max((g - w).abs() / w);
        }
    }
    assert!(worst <= 1e-10, "{what}: worst relative error {worst:e}");
}

#[test]
fn generated_gaussian_table_is_the_one_numpy_saw() {
    let r = reference();
    let g = splitmix_gaussian(512, 768, 20261202);
    let want = floats(&r["tables"]["gaussian_512x768"]["first_values"]);
    for (j, w) in want.iter().enumerate() {
        assert!((g[[0, j]] - w).abs() <= 1e-15 * w.abs().max(1.0));
    }
}

#[test]
fn singular_values_match_numpy_on_the_vaswani_table() {
    // numpy gesdd reference; the Vaswani spectrum falls from σ₁ to ≈ 0, so this exercises
    // the refinement of small Gram values (module doc of linalg).
    let r = &reference()["tables"]["vaswani_512x768"];
    let t = vaswani(512, 768);
    let want = floats(&r["singular_values"]);
    assert_values_match(&linalg::singular_values(t.view()).unwrap(), &want, "values");
    let dec = linalg::leading_components(t.view(), 8).unwrap();
    assert_values_match(&dec.singular_values, &want, "leading_components");
    assert_values_match(
        &linalg::thin_svd(t.view()).unwrap().singular_values,
        &want,
        "thin_svd",
    );
}

#[test]
fn plain_gram_values_would_miss_the_1e_10_target_that_refinement_meets() {
    // The accuracy trade-off of the linalg module doc, measured: eigenvalues of AAᵀ alone
    // give small singular values with relative error ≈ ε·(σ₁/σ)², far above 1e-10 near
    // 1e-6·σ₁ (numpy measured 1e-7 on this table), while singular_values() meets it.
    let r = &reference()["tables"]["vaswani_512x768"];
    let t = vaswani(512, 768);
    let want = floats(&r["singular_values"]);
    let g = t.dot(&t.t());
    let (lam, _) = linalg::symmetric_eigen(g.view()).unwrap();
    let plain: Vec<f64> = lam.iter().map(|l| l.max(0.0).sqrt()).collect();
    let worst_plain = plain
        .iter()
        .zip(&want)
        .filter(|(_, w)| **w >= 1e-6 * want[0])
        .map(|(g, w)| (g - w).abs() / w)
        .fold(0.0f64, f64::max);
    assert!(
        worst_plain > 1e-9,
        "plain Gram unexpectedly accurate: {worst_plain:e}"
    );
    assert_values_match(
        &linalg::singular_values(t.view()).unwrap(),
        &want,
        "refined",
    );
}

#[test]
fn effective_rank_of_vaswani_and_gaussian_tables_match_published_values() {
    let r = reference();
    let v = vaswani(512, 768);
    let sv = linalg::singular_values(v.view()).unwrap();
    let e = spectrum::effective_rank(&sv);
    // check-values §1.3 / §8.1: Vaswani 512×768 ≈ 108.98 (uncentred table)
    assert!((e - 108.98).abs() < 0.01, "{e}");
    let want = r["tables"]["vaswani_512x768"]["effective_rank"]
        .as_f64()
        .unwrap();
    assert!((e - want).abs() < 1e-9 * want);

    let g = splitmix_gaussian(512, 768, 20261202);
    let sg = linalg::singular_values(g.view()).unwrap();
    let want_values = floats(&r["tables"]["gaussian_512x768"]["singular_values"]);
    assert_values_match(&sg, &want_values, "gaussian");
    let eg = spectrum::effective_rank(&sg);
    // check-values §1.3 / §8.1: i.i.d. Gaussian 512×768 ≈ 457
    assert!((eg - 457.0).abs() < 1.5, "{eg}");
    let want = r["tables"]["gaussian_512x768"]["effective_rank"]
        .as_f64()
        .unwrap();
    assert!((eg - want).abs() < 1e-9 * want);
}

/// The accuracy the audit's spectrum documents (linalg::gram module doc): for every
/// reference value above the reported resolution, `|σ̂ − σ| ≤ p·ε·σ₁²/σ` (p = number of
/// singular values), and 1e-10 relative for values ≥ 1e-2·σ₁ when p ≤ 1024. Returns the
/// worst `|σ̂ − σ|·σ/(p·ε·σ₁²)` seen (the bound is 1).
fn assert_gram_accuracy(got: &[f64], want: &[f64], resolution: f64, what: &str) -> f64 {
    assert_eq!(got.len(), want.len(), "{what}: count");
    let s1 = want[0];
    let p = want.len() as f64;
    let mut worst = 0.0f64;
    for (g, w) in got.iter().zip(want) {
        if *w > resolution {
            let c = (g - w).abs() * w / (p * f64::EPSILON * s1 * s1);
            worst = worst.max(c);
            assert!(
                c <= 1.0,
                "{what}: σ = {w:e}: error {:e}, {c:.3} of the bound",
                (g - w).abs()
            );
        }
        if *w >= 1e-2 * s1 && p <= 1024.0 {
            assert!((g - w).abs() <= 1e-10 * w, "{what}: σ = {w:e} got {g:e}");
        }
    }
    worst
}

#[test]
fn spectrum_of_the_centred_tables_matches_numpy() {
    // numpy gesdd of the centred tables (tests/reference/spectrum_reference.py). The audit's
    // spectrum takes the Gram route without refinement (speed target of the audit), so
    // small values carry the documented relative error ε·(σ₁/σ)²; the exact path,
    // linalg::singular_values, is held to 1e-10 above.
    let r = reference();
    for (name, table) in [
        ("vaswani_512x768", vaswani(512, 768)),
        ("gaussian_512x768", splitmix_gaussian(512, 768, 20261202)),
    ] {
        let e = &r["tables"][name];
        let s = spectrum::spectrum(table.view(), 8).unwrap();
        let want = floats(&e["centred_singular_values"]);
        let c = assert_gram_accuracy(&s.singular_values, &want, s.resolution, name);
        eprintln!(
            "{name}: worst error {c:.3} of the bound, resolution {:e}",
            s.resolution
        );
        // The resolution sits where the method says: sqrt(p·ε)·σ₁.
        let p = 512f64;
        assert!((s.resolution - (p * f64::EPSILON).sqrt() * want[0]).abs() < 1e-9 * s.resolution);
        let want_rank = e["centred_effective_rank"].as_f64().unwrap();
        // The small values near the resolution carry relative errors up to c/p (module
        // doc of linalg::gram), which moves the effective rank by about 1e-7 relative
        // (6.8e-8 measured on the Vaswani table); the report prints two decimals. The
        // exact path is held to 1e-9 in effective_rank_of_vaswani_and_gaussian_tables_….
        let rel = (s.effective_rank - want_rank).abs() / want_rank;
        eprintln!(
            "{name}: effective rank {} vs numpy {want_rank}, relative {rel:e}",
            s.effective_rank
        );
        assert!(rel < 1e-6, "{name}: {rel:e}");
        let energy = e["centred_energy_top_k"].as_array().unwrap();
        assert_eq!(energy.len(), s.energy_top_k.len());
        for (got, pair) in s.energy_top_k.iter().zip(energy) {
            assert_eq!(got.k as u64, pair[0].as_u64().unwrap());
            assert!((got.fraction - pair[1].as_f64().unwrap()).abs() < 1e-12);
        }
        assert_eq!(s.components.len(), 8);
        // ‖component c‖ = σ_c (component = σ_c·u_c with ‖u_c‖ = 1)
        for (c, comp) in s.components.iter().enumerate() {
            let norm = comp.iter().map(|x| x * x).sum::<f64>().sqrt();
            assert!((norm - s.singular_values[c]).abs() < 1e-9 * s.singular_values[0]);
        }
    }
}

#[test]
fn gram_spectrum_vectors_match_numpy_on_a_random_table() {
    // numpy's leading singular vectors of the 64x48 random table (uncentred), compared
    // with the Gram route's (full eigen-decomposition at this size).
    let r = &reference()["tables"]["random_64x48"];
    let rows: Vec<Vec<f64>> = r["table"].as_array().unwrap().iter().map(floats).collect();
    let t = Array2::from_shape_fn((64, 48), |(i, j)| rows[i][j]);
    let g = linalg::gram_spectrum(t.view(), 3, linalg::Centring::None).unwrap();
    assert_gram_accuracy(
        &g.decomposition.singular_values,
        &floats(&r["singular_values"]),
        g.resolution,
        "random_64x48",
    );
    for (j, u) in r["left_vectors_top3"]
        .as_array()
        .unwrap()
        .iter()
        .enumerate()
    {
        for (i, x) in floats(u).iter().enumerate() {
            assert!(
                (g.decomposition.left[[i, j]] - x).abs() < 1e-10,
                "left {i},{j}"
            );
        }
    }
}

#[test]
fn gram_spectrum_lanczos_vectors_match_the_exact_svd_on_a_large_table() {
    // Large enough (p = 768 > 128, k = 8) for the Lanczos path; the reference is the exact
    // thin SVD of the centred table (faer or LAPACK gesdd, itself checked against numpy
    // above). Table: the Vaswani 1024x768 sinusoid plus the invented splitmix noise at
    // 1e-3, so the spectrum has both a fast-falling head and a flat tail.
    let t = vaswani(1024, 768) + splitmix_gaussian(1024, 768, 7) * 1e-3;
    let g = linalg::gram_spectrum(t.view(), 8, linalg::Centring::Columns).unwrap();
    assert_eq!(g.vector_method, "lanczos");
    let mean = t.mean_axis(ndarray::Axis(0)).unwrap();
    let exact = linalg::thin_svd((&t - &mean).view()).unwrap();
    let c = assert_gram_accuracy(
        &g.decomposition.singular_values,
        &exact.singular_values,
        g.resolution,
        "vaswani+noise",
    );
    eprintln!("vaswani+noise 1024x768: worst error {c:.3} of the bound");
    for j in 0..8 {
        // Vectors agree up to the angle residual/gap; pairs of nearly equal singular
        // values (sin/cos of one frequency) may rotate within their plane, so compare
        // the projector onto the top-8 space instead of single vectors: ‖P̂ − P‖ via the
        // cosine of each Lanczos vector against the exact top-8 space.
        let v = g.decomposition.right.column(j);
        let inside: f64 = (0..8).map(|i| exact.right.column(i).dot(&v).powi(2)).sum();
        assert!((1.0 - inside).abs() < 1e-10, "vector {j}: {inside}");
    }
}

#[test]
fn small_random_table_values_and_vectors_match_numpy() {
    let r = &reference()["tables"]["random_64x48"];
    let rows: Vec<Vec<f64>> = r["table"].as_array().unwrap().iter().map(floats).collect();
    let t = Array2::from_shape_fn((64, 48), |(i, j)| rows[i][j]);
    let want = floats(&r["singular_values"]);
    assert_values_match(&linalg::singular_values(t.view()).unwrap(), &want, "values");
    let dec = linalg::leading_components(t.view(), 3).unwrap();
    let exact = linalg::thin_svd(t.view()).unwrap();
    assert_values_match(&exact.singular_values, &want, "thin_svd");
    for (j, (u, v)) in r["left_vectors_top3"]
        .as_array()
        .unwrap()
        .iter()
        .zip(r["right_vectors_top3"].as_array().unwrap())
        .enumerate()
    {
        let (u, v) = (floats(u), floats(v));
        for (i, x) in u.iter().enumerate() {
            assert!((dec.left[[i, j]] - x).abs() < 1e-10, "left {i},{j}");
            assert!((exact.left[[i, j]] - x).abs() < 1e-10, "thin left {i},{j}");
        }
        for (i, x) in v.iter().enumerate() {
            assert!((dec.right[[i, j]] - x).abs() < 1e-10, "right {i},{j}");
        }
    }
}

#[test]
fn locality_profile_of_the_vaswani_table_matches_published_cosines() {
    let r = &reference()["tables"]["vaswani_512x768"];
    let t = vaswani(512, 768);
    let l = neighbours::locality_profile(t.view(), 10);
    let m: Vec<f64> = l.mean_cosine.iter().map(|c| c.unwrap()).collect();
    // check-values §1.3: cos(PE_p, PE_{p+k}) = 0.97336 at k=1 and 0.9061 at k=2 (d=768)
    assert!((m[0] - 0.97336).abs() < 5e-6, "{}", m[0]);
    assert!((m[1] - 0.9061).abs() < 5e-5, "{}", m[1]);
    // check-values §1.3: the cosine depends only on k, so every adjacent pair agrees
    let adj = neighbours::adjacent_cosines(t.view());
    assert!(adj.iter().all(|c| (c.unwrap() - m[0]).abs() < 1e-12));
    for (got, want) in m.iter().zip(floats(&r["locality_mean_cosine_k1_to_10"])) {
        assert!((got - want).abs() < 1e-12);
    }
}

#[test]
fn dominant_wave_of_a_vaswani_column_is_its_formula_period() {
    // Column 2i of the Vaswani table is sin(p·ω_i): period 2π/ω_i (Vaswani et al. 2017
    // §3.5). i = 40 of d = 768: ω = 10000^(−80/768), period ≈ 16.1 rows.
    let t = vaswani(512, 768);
    let w_i = 10000f64.powf(-80.0 / 768.0);
    let want = 2.0 * PI / w_i;
    let wave = waves::dominant_wave(t.column(80)).unwrap();
    assert!((wave.period - want).abs() / want < 1e-6, "{wave:?}");
    assert!(wave.explained_variance > 1.0 - 1e-9);
}
