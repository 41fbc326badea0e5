//! `posaudit compare` run as a user would: checkpoints written into temporary folders by
//! a tiny safetensors writer (the format's layout: 8-byte little-endian header length,
//! JSON header with dtype/shape/data_offsets, then the raw little-endian values), plus
//! the format fixtures written by the real safetensors and torch writers.
//!
//! Every table here is invented (seeded random numbers).

mod common;

use std::path::{Path, PathBuf};

use common::{fixture, posaudit, table};
use serde_json::Value;

/// Seeded generator (SplitMix64) with Box-Muller normals: invented data.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn uniform(&mut self) -> f64 {
        ((self.next() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let (u, v) = (self.uniform(), self.uniform());
        (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos()
    }
}

/// A row-major table.
#[derive(Clone)]
struct Table {
    rows: usize,
    cols: usize,
    v: Vec<f64>,
}

impl Table {
    fn gaussian(rng: &mut Rng, rows: usize, cols: usize, std: f64) -> Self {
        Table {
            rows,
            cols,
            v: (0..rows * cols).map(|_| std * rng.normal()).collect(),
        }
    }
    fn at(&self, i: usize, j: usize) -> f64 {
        self.v[i * self.cols + j]
    }
    fn map_rows(&self, f: impl Fn(usize, usize, f64) -> f64) -> Self {
        let mut t = self.clone();
        for i in 0..self.rows {
            for j in 0..self.cols {
                t.v[i * self.cols + j] = f(i, j, self.at(i, j));
            }
        }
        t
    }
    /// Rounded to f32, as an F32 checkpoint stores it.
    fn f32(&self) -> Self {
        self.map_rows(|_, _, x| x as f32 as f64)
    }
}

#[derive(Clone, Copy)]
enum Dt {
    F32,
    F64,
}

/// Writes a safetensors file holding `tensors` (name, dtype, table).
fn write_safetensors(path: &Path, tensors: &[(&str, Dt, &Table)]) {
    let mut header = serde_json::Map::new();
    let mut data = Vec::new();
    for (name, dt, t) in tensors {
        let start = data.len();
        for &x in &t.v {
            match dt {
                Dt::F32 => data.extend_from_slice(&(x as f32).to_le_bytes()),
                Dt::F64 => data.extend_from_slice(&x.to_le_bytes()),
            }
        }
        header.insert(
            name.to_string(),
            serde_json::json!({
                "dtype": match dt { Dt::F32 => "F32", Dt::F64 => "F64" },
                "shape": [t.rows, t.cols],
                "data_offsets": [start, data.len()],
            }),
        );
    }
    let mut h = serde_json::to_vec(&Value::Object(header)).unwrap();
    while !h.len().is_multiple_of(8) {
        h.push(b' ');
    }
    let mut bytes = (h.len() as u64).to_le_bytes().to_vec();
    bytes.extend_from_slice(&h);
    bytes.extend_from_slice(&data);
    std::fs::write(path, bytes).unwrap();
}

const POS: &str = "model.embed_positions.weight";

/// Writes one checkpoint per table into `dir` (`ckpt{i}.safetensors`) under `name`.
fn checkpoints(dir: &Path, name: &str, dt: Dt, tables: &[Table]) -> Vec<PathBuf> {
    tables
        .iter()
        .enumerate()
        .map(|(i, t)| {
            let p = dir.join(format!("ckpt{i}.safetensors"));
            write_safetensors(&p, &[(name, dt, t)]);
            p
        })
        .collect()
}

fn compare_json(paths: &[PathBuf], extra: &[&str]) -> Value {
    let mut args = vec!["compare".to_string()];
    args.extend(paths.iter().map(|p| p.display().to_string()));
    args.extend(extra.iter().map(|s| s.to_string()));
    args.push("--json".into());
    let argv: Vec<&str> = args.iter().map(String::as_str).collect();
    let run = posaudit(&argv);
    assert_eq!(run.code, 0, "stderr: {}", run.stderr);
    serde_json::from_str(&run.stdout).expect("stdout is one JSON document")
}

fn ranges(v: &Value) -> Vec<[u64; 2]> {
    v.as_array()
        .unwrap()
        .iter()
        .map(|r| [r[0].as_u64().unwrap(), r[1].as_u64().unwrap()])
        .collect()
}

/// Rows `trained` get a random update; the others are decayed: p ← (1 − lr·λ)·p, the
/// decoupled weight decay update (Loshchilov & Hutter 2019, "Decoupled Weight Decay
/// Regularization", Algorithm 2) with no gradient, here with lr·λ = 1e-3.
fn train_step(rng: &mut Rng, prev: &Table, trained: std::ops::Range<usize>) -> Table {
    let step = Table::gaussian(rng, prev.rows, prev.cols, 2e-3);
    prev.map_rows(|i, j, x| {
        if trained.contains(&i) {
            x + step.at(i, j)
        } else {
            0.999 * x
        }
    })
    .f32()
}

#[test]
fn decayed_rows_are_unchanged_with_their_scale_factor() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(11);
    let a = Table::gaussian(&mut rng, 64, 16, 0.02).f32();
    let b = train_step(&mut rng, &a, 0..32);
    let doc = compare_json(&checkpoints(dir.path(), POS, Dt::F32, &[a, b]), &[]);
    let t = table(&doc, POS);
    let step = &t["steps"][0];
    assert_eq!(ranges(&step["unchanged"]), vec![[32, 64]]);
    let scale = step["unchanged_detail"][0]["scale"].as_f64().unwrap();
    // The factor applied was 0.999; f32 rounding of each value moves the least-squares
    // estimate by at most the F32 unit roundoff 2^-24 ≈ 6e-8 (check-values.md §7.1).
    assert!((scale - 0.999).abs() < 1e-6, "scale {scale}");
    assert_eq!(step["tolerance_dtype"], "F32");
    let f = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == "unchanged-rows")
        .expect("an unchanged-rows finding");
    assert_eq!(f["severity"], "info");
    assert_eq!(f["positions"], serde_json::json!([32, 64]));
    assert!(f["message"].as_str().unwrap().contains("0.999000"), "{f}");
    assert!(
        f["limits"]
            .as_str()
            .unwrap()
            .starts_with("Identical up to a scale means never updated, only decayed")
    );
    // The trained rows moved by about ‖N(0, (2e-3)²·I_16)‖ = 2e-3·4 = 8e-3 each.
    let change: Vec<f64> = step["change"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    assert_eq!(change.len(), 64);
    assert!(change[..32].iter().all(|&c| c > 2e-3 && c < 2e-2));
}

#[test]
fn a_whole_table_halved_is_unchanged_with_factor_one_half() {
    // 0.5 is exact in binary: b = a/2 is bit-exact, the factor must come out as 0.5.
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(12);
    let a = Table::gaussian(&mut rng, 40, 8, 0.02).f32();
    let b = a.map_rows(|_, _, x| 0.5 * x);
    let doc = compare_json(&checkpoints(dir.path(), POS, Dt::F32, &[a, b]), &[]);
    let step = &table(&doc, POS)["steps"][0];
    assert_eq!(ranges(&step["unchanged"]), vec![[0, 40]]);
    assert_eq!(step["unchanged_detail"][0]["scale"].as_f64().unwrap(), 0.5);
    assert_eq!(step["unchanged_detail"][0]["bit_identical"], false);
}

/// A random orthogonal d×d matrix: Gram-Schmidt on a Gaussian matrix (common practice
/// for drawing a Haar-distributed rotation, up to column signs).
fn random_rotation(rng: &mut Rng, d: usize) -> Vec<Vec<f64>> {
    let mut q: Vec<Vec<f64>> = Vec::new();
    while q.len() < d {
        let mut v: Vec<f64> = (0..d).map(|_| rng.normal()).collect();
        for _ in 0..2 {
            for u in &q {
                let dot: f64 = u.iter().zip(&v).map(|(a, b)| a * b).sum();
                for (x, y) in v.iter_mut().zip(u) {
                    *x -= dot * y;
                }
            }
        }
        let n = v.iter().map(|x| x * x).sum::<f64>().sqrt();
        q.push(v.into_iter().map(|x| x / n).collect());
    }
    q
}

#[test]
fn a_rotated_table_is_the_same_subspace_while_row_cosines_are_near_zero() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(13);
    let (n, d) = (128, 32);
    let a = Table::gaussian(&mut rng, n, d, 0.02);
    let q = random_rotation(&mut rng, d);
    let b = Table {
        rows: n,
        cols: d,
        v: (0..n)
            .flat_map(|i| {
                let a = &a;
                let q = &q;
                (0..d).map(move |j| (0..d).map(|k| a.at(i, k) * q[k][j]).sum::<f64>())
            })
            .collect(),
    };
    let doc = compare_json(&checkpoints(dir.path(), POS, Dt::F64, &[a, b]), &[]);
    let step = &table(&doc, POS)["steps"][0];
    // B = A·Q with Q orthogonal: the column space of B equals that of A, so every
    // principal angle is 0 (similarity 1), and linear CKA is invariant to orthogonal
    // transforms (Kornblith et al. 2019, §3), so it is 1 too.
    let sim = step["subspace_similarity"].as_f64().unwrap();
    let cka = step["similarity"]["cka"].as_f64().unwrap();
    assert!((sim - 1.0).abs() < 1e-6, "subspace similarity {sim}");
    assert!((cka - 1.0).abs() < 1e-6, "cka {cka}");
    let pr = step["similarity"]["procrustes_residual"].as_f64().unwrap();
    assert!(pr < 1e-6, "procrustes residual {pr}");
    // Per row, cos(a_i, Q a_i) has mean tr(Q)/d and spread about 1/√d (check-values.md
    // §8.2): near zero, nothing like the 1 a per-row view of "unchanged" would need.
    let cos: Vec<f64> = step["cosine"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    let mean = cos.iter().sum::<f64>() / cos.len() as f64;
    let mean_abs = cos.iter().map(|c| c.abs()).sum::<f64>() / cos.len() as f64;
    assert!(
        mean.abs() < 0.2 && mean_abs < 0.35,
        "mean {mean}, mean |cos| {mean_abs}"
    );
    assert!(ranges(&step["unchanged"]).is_empty());
}

#[test]
fn independent_random_tables_are_near_the_chance_level() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(14);
    let a = Table::gaussian(&mut rng, 256, 32, 0.02);
    let b = Table::gaussian(&mut rng, 256, 32, 0.02);
    let doc = compare_json(&checkpoints(dir.path(), POS, Dt::F64, &[a, b]), &[]);
    let sim = &table(&doc, POS)["steps"][0]["similarity"];
    let k = sim["k"].as_f64().unwrap();
    let s = sim["subspace_similarity"].as_f64().unwrap();
    // Chance level k/(n−1) for independent uniform subspaces (derived in
    // src/compare/similarity.rs module docs; checked by simulation in
    // tests/reference/subspace_reference.py).
    let chance = sim["chance_level"]["subspace_similarity"].as_f64().unwrap();
    assert!((chance - k / 255.0).abs() < 1e-12);
    assert!((s - chance).abs() < 0.05, "similarity {s}, chance {chance}");
    let cka = sim["cka"].as_f64().unwrap();
    let cka0 = sim["chance_level"]["cka"].as_f64().unwrap();
    // sqrt(32·32 / (288·288)) = 0.111
    assert!((cka0 - 32.0 / 288.0).abs() < 1e-9);
    assert!((cka - cka0).abs() < 0.05, "cka {cka}, chance {cka0}");
}

#[test]
fn three_checkpoints_give_the_timeline_as_constructed() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(15);
    let a = Table::gaussian(&mut rng, 64, 16, 0.02).f32();
    let b = train_step(&mut rng, &a, 0..20);
    let c = train_step(&mut rng, &b, 0..40);
    let out = dir.path().join("out");
    let paths = checkpoints(dir.path(), POS, Dt::F32, &[a, b, c]);
    let doc = compare_json(&paths, &["--out", out.to_str().unwrap()]);
    let t = table(&doc, POS);
    assert_eq!(t["steps"].as_array().unwrap().len(), 2);
    assert_eq!(t["first_to_last"]["from"], 0);
    assert_eq!(t["first_to_last"]["to"], 2);
    // Rows 40..64 were only decayed twice: unchanged first→last with factor 0.999².
    let fl = &t["first_to_last"];
    assert_eq!(ranges(&fl["unchanged"]), vec![[40, 64]]);
    let scale = fl["unchanged_detail"][0]["scale"].as_f64().unwrap();
    assert!((scale - 0.999f64.powi(2)).abs() < 1e-6, "{scale}");
    let tl = &t["timeline"];
    let got: Vec<(u64, u64, Value)> = tl["first_moved_ranges"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            (
                r["start"].as_u64().unwrap(),
                r["end"].as_u64().unwrap(),
                r["first_moved"].clone(),
            )
        })
        .collect();
    assert_eq!(
        got,
        vec![
            (0, 20, Value::from(1)),
            (20, 40, Value::from(2)),
            (40, 64, Value::Null)
        ]
    );
    assert_eq!(ranges(&tl["still_moving"]), vec![[0, 40]]);
    assert_eq!(ranges(&tl["never_moved"]), vec![[40, 64]]);
    assert_eq!(tl["heatmap"]["mean"].as_array().unwrap().len(), 2);
    assert!(std::fs::read_dir(&out).unwrap().any(|e| {
        e.unwrap()
            .file_name()
            .to_string_lossy()
            .ends_with("-timeline.svg")
    }));
}

#[test]
fn more_rows_compare_the_common_leading_rows_and_other_widths_only_similarity() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(16);
    let a = Table::gaussian(&mut rng, 64, 16, 0.02).f32();
    let longer = Table {
        rows: 80,
        cols: 16,
        v: a.v
            .iter()
            .copied()
            .chain((0..16 * 16).map(|_| 0.02 * rng.normal()))
            .collect(),
    }
    .f32();
    let doc = compare_json(
        &checkpoints(dir.path(), POS, Dt::F32, &[a.clone(), longer]),
        &[],
    );
    let t = table(&doc, POS);
    let step = &t["steps"][0];
    assert_eq!(step["rows_compared"], 64);
    assert_eq!(step["change"].as_array().unwrap().len(), 64);
    assert_eq!(ranges(&step["unchanged"]), vec![[0, 64]]);
    assert!(
        step["note"].as_str().unwrap().contains("64 vs 80"),
        "{step}"
    );
    assert!(
        t["findings"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f["code"] == "shape-changed")
    );

    let dir = tempfile::tempdir().unwrap();
    let wider = Table::gaussian(&mut rng, 64, 24, 0.02).f32();
    let doc = compare_json(&checkpoints(dir.path(), POS, Dt::F32, &[a, wider]), &[]);
    let step = &table(&doc, POS)["steps"][0];
    assert_eq!(step["per_row"], false);
    assert!(step["change"].as_array().unwrap().is_empty());
    assert!(
        step["note"]
            .as_str()
            .unwrap()
            .contains("widths differ (16 vs 24 columns)")
    );
    assert!(step["subspace_similarity"].as_f64().is_some(), "{step}");
}

#[test]
fn a_table_missing_from_one_checkpoint_is_reported_and_the_rest_compared() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(17);
    let enc = Table::gaussian(&mut rng, 64, 16, 0.02).f32();
    let dec = Table::gaussian(&mut rng, 64, 16, 0.02).f32();
    let dec_name = "model.decoder.embed_positions.weight";
    let p0 = dir.path().join("a.safetensors");
    let p1 = dir.path().join("b.safetensors");
    write_safetensors(&p0, &[(POS, Dt::F32, &enc), (dec_name, Dt::F32, &dec)]);
    write_safetensors(&p1, &[(POS, Dt::F32, &enc)]);
    let doc = compare_json(&[p0, p1], &[]);
    let d = table(&doc, dec_name);
    assert_eq!(d["missing_from"], serde_json::json!([1]));
    assert!(d["steps"].as_array().unwrap().is_empty());
    assert!(
        d["findings"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f["code"] == "table-missing")
    );
    let e = table(&doc, POS);
    assert_eq!(e["matched_by"], "name");
    assert_eq!(ranges(&e["steps"][0]["unchanged"]), vec![[0, 64]]);
}

#[test]
fn a_renamed_table_is_matched_by_kind_and_shape() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(18);
    let a = Table::gaussian(&mut rng, 64, 16, 0.02).f32();
    let p0 = dir.path().join("a.safetensors");
    let p1 = dir.path().join("b.safetensors");
    write_safetensors(&p0, &[(POS, Dt::F32, &a)]);
    write_safetensors(&p1, &[("transformer.wpe.weight", Dt::F32, &a)]);
    let doc = compare_json(&[p0, p1], &[]);
    let t = table(&doc, POS);
    assert_eq!(t["matched_by"], "kind and shape");
    assert_eq!(t["matches"][1]["name"], "transformer.wpe.weight");
    assert_eq!(ranges(&t["steps"][0]["unchanged"]), vec![[0, 64]]);
}

#[test]
fn the_same_tables_written_by_safetensors_and_torch_are_identical() {
    // Files written by the real writers (fixtures/formats/README.md): the same invented
    // tables saved by safetensors.torch.save_file and by torch.save.
    let paths = [
        fixture("formats/reference.safetensors"),
        fixture("formats/torch_state_dict.pt"),
    ];
    let doc = compare_json(&paths, &["--table", "model.embed_positions.weight"]);
    assert_eq!(doc["checkpoints"][0]["format"], "safetensors");
    assert_eq!(doc["checkpoints"][1]["format"], "pytorch");
    assert_eq!(doc["tables"].as_array().unwrap().len(), 1);
    let step = &table(&doc, "model.embed_positions.weight")["steps"][0];
    assert_eq!(ranges(&step["unchanged"]), vec![[0, 64]]);
    assert_eq!(step["unchanged_detail"][0]["bit_identical"], true);
    assert!(step["change"].as_array().unwrap().iter().all(|c| c == 0.0));
}

#[test]
fn fewer_than_two_paths_or_a_bad_path_exit_2() {
    let run = posaudit(&["compare", "only-one.safetensors"]);
    assert_eq!(run.code, 2, "{}", run.stderr);
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(19);
    let a = Table::gaussian(&mut rng, 8, 4, 0.02);
    let paths = checkpoints(dir.path(), POS, Dt::F32, &[a]);
    let missing = dir.path().join("nope.safetensors");
    let run = posaudit(&[
        "compare",
        paths[0].to_str().unwrap(),
        missing.to_str().unwrap(),
    ]);
    common::assert_input_error(&run, "nope.safetensors", "");
    let run = posaudit(&[
        "compare",
        paths[0].to_str().unwrap(),
        paths[0].to_str().unwrap(),
        "--table",
        "no.such.tensor",
    ]);
    common::assert_input_error(&run, "ckpt0.safetensors", "no.such.tensor");
}

#[test]
fn json_follows_the_contract_and_out_writes_linked_files_only() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(20);
    let a = Table::gaussian(&mut rng, 48, 16, 0.02).f32();
    let b = train_step(&mut rng, &a, 0..24);
    let paths = checkpoints(dir.path(), POS, Dt::F32, &[a, b]);
    let out = dir.path().join("report");
    let doc = compare_json(&paths, &["--out", out.to_str().unwrap()]);
    // Contract: design.md "JSON documents", compare.
    assert_eq!(doc["schema"], "posaudit/compare/v1");
    assert_eq!(
        doc["checkpoints"][0]["path"],
        paths[0].display().to_string()
    );
    assert_eq!(
        doc["checkpoints"][1]["path"],
        paths[1].display().to_string()
    );
    let t = table(&doc, POS);
    assert_eq!(t["kind"], "learned-absolute");
    let step = &t["steps"][0];
    assert_eq!(
        (step["from"].as_u64(), step["to"].as_u64()),
        (Some(0), Some(1))
    );
    assert_eq!(step["change"].as_array().unwrap().len(), 48);
    assert!(step["unchanged"].is_array());
    assert!(step["subspace_similarity"].as_f64().unwrap() > 0.9);
    assert!(t["first_to_last"].is_null() && t["timeline"].is_null());

    // report.json is the same document as --json printed.
    let written: Value =
        serde_json::from_slice(&std::fs::read(out.join("report.json")).unwrap()).unwrap();
    assert_eq!(written, doc);
    let md = std::fs::read_to_string(out.join("report.md")).unwrap();
    let mut linked = Vec::new();
    for part in md.split("](").skip(1) {
        let target = &part[..part.find(')').unwrap()];
        assert!(
            out.join(target).is_file(),
            "report.md links missing {target}"
        );
        linked.push(target.to_string());
    }
    assert!(!linked.is_empty(), "report.md links a change plot");
    let files: Vec<String> = std::fs::read_dir(&out)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    for f in &files {
        assert!(
            f == "report.json" || f == "report.md" || linked.contains(f),
            "unexpected file {f} (temporaries must be gone, every SVG linked)"
        );
        if f.ends_with(".svg") {
            let svg = std::fs::read_to_string(out.join(f)).unwrap();
            assert!(
                roxmltree::Document::parse(&svg).is_ok(),
                "{f} is well-formed"
            );
        }
    }
    assert!(md.contains("unchanged-rows"));

    // Without --json: a terminal summary with one line per step.
    let run = posaudit(&[
        "compare",
        paths[0].to_str().unwrap(),
        paths[1].to_str().unwrap(),
    ]);
    assert_eq!(run.code, 0);
    assert!(
        run.stdout
            .lines()
            .any(|l| l.starts_with(POS) && l.contains("ckpt0 → ckpt1") && l.contains("24")),
        "{}",
        run.stdout
    );
}

#[test]
fn a_table_with_nan_is_a_finding_not_a_failure() {
    let dir = tempfile::tempdir().unwrap();
    let mut rng = Rng(21);
    let a = Table::gaussian(&mut rng, 32, 8, 0.02).f32();
    let mut b = a.clone();
    b.v[5 * 8 + 3] = f64::NAN;
    let doc = compare_json(&checkpoints(dir.path(), POS, Dt::F32, &[a, b]), &[]);
    let t = table(&doc, POS);
    let step = &t["steps"][0];
    assert_eq!(step["per_row"], false);
    assert!(
        step["note"].as_str().unwrap().contains("non-finite"),
        "{step}"
    );
    let f = &t["findings"][0];
    assert_eq!(
        (f["code"].as_str(), f["severity"].as_str()),
        (Some("non-finite"), Some("error"))
    );
}

#[test]
fn fail_on_gates_compare_by_the_documented_levels() {
    // Levels from the README's compare findings table: table-missing is a warning, so
    // --fail-on warning exits 1 and --fail-on error exits 0; without --fail-on, 0.
    // Checkpoints: the demo's run-a step 8000 and vision grid hold different tables, so
    // each table is missing from one of them (table-missing, a warning).
    let run = |extra: &[&str]| {
        std::process::Command::new(env!("CARGO_BIN_EXE_posaudit"))
            .current_dir(env!("CARGO_MANIFEST_DIR"))
            .args([
                "compare",
                "examples/demo/checkpoints/run-a/step-8000",
                "examples/demo/checkpoints/vision-grid",
                "--json",
            ])
            .args(extra)
            .output()
            .unwrap()
    };
    let plain = run(&[]);
    assert_eq!(plain.status.code(), Some(0));
    let doc: serde_json::Value = serde_json::from_slice(&plain.stdout).unwrap();
    let severities: Vec<String> = doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|t| t["findings"].as_array().unwrap().clone())
        .map(|f| f["severity"].as_str().unwrap().to_string())
        .collect();
    let has = |s: &str| severities.iter().any(|x| x == s);
    assert!(has("warning"), "{severities:?}");
    assert_eq!(run(&["--fail-on", "warning"]).status.code(), Some(1));
    let want_error = if has("error") { 1 } else { 0 };
    assert_eq!(run(&["--fail-on", "error"]).status.code(), Some(want_error));
}

#[test]
fn one_path_that_is_not_a_run_folder_is_a_usage_error_naming_it() {
    // One checkpoint file, and one checkpoint folder of the demo (it holds weights, no
    // step-numbered checkpoints): neither is a run, so there is nothing to compare.
    for path in [
        "examples/demo/checkpoints/run-a/step-8000/model.safetensors",
        "examples/demo/checkpoints/run-a/step-8000",
    ] {
        let run = posaudit(&["compare", path]);
        assert_eq!(run.code, 2, "{path}: {}", run.stderr);
        let lines: Vec<&str> = run.stderr.lines().collect();
        assert_eq!(lines.len(), 1, "{}", run.stderr);
        assert!(
            lines[0].contains(path) && lines[0].contains("run folder"),
            "{}",
            run.stderr
        );
    }
}
