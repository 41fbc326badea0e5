//! `posaudit extend`: the resampling against torch.nn.functional.interpolate (values
//! computed by tests/reference/edit_reference.py, committed with the versions it ran
//! with), and the command run as a user would on the invented demo checkpoints: the
//! written file read back by the `safetensors` crate (the format's Rust reference
//! implementation), every untouched tensor bit-identical, the edited one equal to the
//! expected values, config.json updated, the refusals one line with exit 2.

mod common;

use std::path::{Path, PathBuf};

use common::{assert_input_error, posaudit};
use ndarray::Array2;
use posaudit::edit::resample::{Interp, resample_rows, resize_grid};
use safetensors::SafeTensors;
use serde_json::Value;

const DEMO: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/demo/checkpoints");
const TERN: &str = "tern.embeddings.position_embeddings.weight";
const KITTIWAKE: &str = "kittiwake.vision.embeddings.position_embeddings";
const WHIMBREL: &str = "whimbrel.encoder.embed_positions.weight";

fn matrix(v: &Value) -> Array2<f64> {
    let rows: Vec<Vec<f64>> = serde_json::from_value(v.clone()).unwrap();
    let (n, d) = (rows.len(), rows[0].len());
    Array2::from_shape_vec((n, d), rows.into_iter().flatten().collect()).unwrap()
}

fn max_diff(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    assert_eq!(a.dim(), b.dim());
    a.iter()
        .zip(b)
        .map(|(x, y)| (x - y).abs())
        .fold(0.0, f64::max)
}

#[test]
fn resampling_matches_torch_interpolate() {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/edit_reference.json");
    let r: Value = serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap();
    assert!(
        r["versions"]["torch"]
            .as_str()
            .unwrap()
            .starts_with("2.15.0")
    );
    for case in r["one_d"].as_array().unwrap() {
        let interp = if case["mode"] == "cubic" {
            Interp::Cubic
        } else {
            Interp::Linear
        };
        let n = case["to"].as_u64().unwrap() as usize;
        let ours = resample_rows(matrix(&case["input"]).view(), n, interp, true);
        // float64 on both sides: agreement to rounding of a few operations.
        let d = max_diff(&ours, &matrix(&case["output"]));
        assert!(d < 1e-12, "{} to {n}: {d}", case["mode"]);
    }
    for case in r["grid"].as_array().unwrap() {
        let interp = if case["mode"] == "bicubic" {
            Interp::Cubic
        } else {
            Interp::Linear
        };
        let (h, w) = (
            case["height"].as_u64().unwrap() as usize,
            case["width"].as_u64().unwrap() as usize,
        );
        let (h2, w2) = (
            case["to"][0].as_u64().unwrap() as usize,
            case["to"][1].as_u64().unwrap() as usize,
        );
        let ours = resize_grid(matrix(&case["input"]).view(), h, w, h2, w2, interp);
        let d = max_diff(&ours, &matrix(&case["output"]));
        assert!(d < 1e-12, "{} {h}x{w} to {h2}x{w2}: {d}", case["mode"]);
    }
}

/// The tensors of a safetensors file: name → (dtype, shape, bytes).
fn tensors(path: &Path) -> Vec<(String, String, Vec<usize>, Vec<u8>)> {
    let bytes = std::fs::read(path).unwrap();
    let st = SafeTensors::deserialize(&bytes).unwrap();
    let mut out: Vec<_> = st
        .tensors()
        .into_iter()
        .map(|(n, v)| {
            (
                n,
                format!("{:?}", v.dtype()),
                v.shape().to_vec(),
                v.data().to_vec(),
            )
        })
        .collect();
    out.sort_by(|a, b| a.0.cmp(&b.0));
    out
}

fn floats(dtype: &str, bytes: &[u8]) -> Vec<f64> {
    match dtype {
        "F32" => bytes
            .chunks(4)
            .map(|c| f32::from_le_bytes(c.try_into().unwrap()) as f64)
            .collect(),
        "F16" => bytes
            .chunks(2)
            .map(|c| half::f16::from_le_bytes([c[0], c[1]]).to_f64())
            .collect(),
        other => panic!("{other}"),
    }
}

fn get<'a>(
    t: &'a [(String, String, Vec<usize>, Vec<u8>)],
    name: &str,
) -> &'a (String, String, Vec<usize>, Vec<u8>) {
    t.iter()
        .find(|x| x.0 == name)
        .unwrap_or_else(|| panic!("no {name}"))
}

fn extend(args: &[&str]) -> Value {
    let run = posaudit(&[&["extend"], args, &["--json"]].concat());
    assert_eq!(run.code, 0, "{}", run.stderr);
    serde_json::from_str(&run.stdout).unwrap()
}

fn codes(state: &Value) -> Vec<String> {
    state["findings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["code"].as_str().unwrap().to_string())
        .collect()
}

fn config(dir: &Path) -> Value {
    serde_json::from_slice(&std::fs::read(dir.join("config.json")).unwrap()).unwrap()
}

#[test]
fn interpolate_extends_the_text_table_and_copies_everything_else() {
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("tern-4096");
    let input = PathBuf::from(DEMO).join("text-base");
    let doc = extend(&[
        input.to_str().unwrap(),
        "--table",
        TERN,
        "--to",
        "4096",
        "--method",
        "interpolate",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(doc["schema"], "posaudit/extend/v1");
    assert_eq!(doc["plan"]["new_shape"], serde_json::json!([4096, 64]));
    assert_eq!(doc["plan"]["source_rows"], serde_json::json!([0, 512]));
    assert!(codes(&doc["before"]).contains(&"untrained-tail".to_string()));
    assert!(!codes(&doc["after"]).contains(&"untrained-tail".to_string()));
    assert!(doc["cautions"][0].as_str().unwrap().contains("fine-tune"));
    let old = tensors(&input.join("model.safetensors"));
    let new = tensors(&out.join("model.safetensors"));
    assert_eq!(old.len(), new.len());
    for t in &old {
        if t.0 == TERN || t.0 == "tern.embeddings.position_ids" {
            continue;
        }
        assert_eq!(get(&new, &t.0), t, "{} copied bit for bit", t.0);
    }
    // Expected: the 512 trained rows (the demo's truth, examples/demo/README.md),
    // resampled with the convention checked against torch above, rounded once to f32.
    let (_, dt, _, bytes) = get(&old, TERN);
    let table = Array2::from_shape_vec((2048, 64), floats(dt, bytes)).unwrap();
    let want = resample_rows(
        table.slice(ndarray::s![..512, ..]),
        4096,
        Interp::Linear,
        true,
    );
    let (_, dt, shape, bytes) = get(&new, TERN);
    assert_eq!(shape, &vec![4096, 64]);
    let got = floats(dt, bytes);
    for (g, w) in got.iter().zip(want.iter()) {
        assert_eq!(*g, *w as f32 as f64);
    }
    // Position ids: 0..4096 (int64), the ramp a model registers.
    let (_, dt, shape, bytes) = get(&new, "tern.embeddings.position_ids");
    assert_eq!(
        (dt.as_str(), shape.as_slice()),
        ("I64", &[1usize, 4096][..])
    );
    let ids: Vec<i64> = bytes
        .chunks(8)
        .map(|c| i64::from_le_bytes(c.try_into().unwrap()))
        .collect();
    assert!(ids.iter().enumerate().all(|(i, &v)| v == i as i64));
    // config.json: only max_position_embeddings changed.
    let (mut a, b) = (config(&input), config(&out));
    assert_eq!(b["max_position_embeddings"], 4096);
    a["max_position_embeddings"] = 4096.into();
    assert_eq!(a, b);
    // The metadata says what was synthesised.
    let bytes = std::fs::read(out.join("model.safetensors")).unwrap();
    let (_, meta) = SafeTensors::read_metadata(&bytes).unwrap();
    let meta = meta.metadata().clone().unwrap();
    assert!(meta["posaudit_extend"].contains("rows 0..4096 synthesised"));
}

#[test]
fn grid_and_sinusoid_edits() {
    let tmp = tempfile::tempdir().unwrap();
    // Grid: 12x12 + class row (F16) to 16x16, bicubic.
    let out = tmp.path().join("kw");
    let input = PathBuf::from(DEMO).join("vision-grid");
    let doc = extend(&[
        input.to_str().unwrap(),
        "--table",
        KITTIWAKE,
        "--grid",
        "16x16",
        "--method",
        "bicubic",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(doc["plan"]["new_shape"], serde_json::json!([1, 257, 64]));
    assert_eq!(config(&out)["image_size"], 128);
    let old = tensors(&input.join("model.safetensors"));
    let new = tensors(&out.join("model.safetensors"));
    let (_, dt, _, ob) = get(&old, KITTIWAKE);
    let (_, _, _, nb) = get(&new, KITTIWAKE);
    assert_eq!(&nb[..128], &ob[..128], "class row kept bit for bit");
    let t = Array2::from_shape_vec((145, 64), floats(dt, ob)).unwrap();
    let want = resize_grid(t.slice(ndarray::s![1.., ..]), 12, 12, 16, 16, Interp::Cubic);
    let got = floats(dt, &nb[128..]);
    // Correct rounding to f16 (IEEE 754 nearest): the stored value is an f16 within half
    // an f16 spacing of the f64 value (`half`'s own from_f64 goes through f32 and may
    // round twice, so it is not the reference here).
    for (g, w) in got.iter().zip(want.iter()) {
        let e = (w.abs().max(2f64.powi(-14))).log2().floor() as i32;
        let spacing = 2f64.powi(e - 10);
        assert!((g - w).abs() <= spacing / 2.0, "{g} vs {w}");
    }
    // Sinusoid computed with bf16 angles: regenerated, the low-precision finding gone.
    let out = tmp.path().join("wh");
    let input = PathBuf::from(DEMO).join("encoder-fixed-bf16-angles");
    let doc = extend(&[
        input.to_str().unwrap(),
        "--table",
        WHIMBREL,
        "--method",
        "regenerate",
        "--to",
        "1024",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert!(codes(&doc["before"]).contains(&"low-precision".to_string()));
    assert!(
        !codes(&doc["after"]).contains(&"low-precision".to_string()),
        "{}",
        doc["after"]
    );
    assert_eq!(config(&out)["max_position_embeddings"], 1024);
    let new = tensors(&out.join("model.safetensors"));
    let (_, dt, shape, nb) = get(&new, WHIMBREL);
    assert_eq!(shape, &vec![1024, 64]);
    let got = floats(dt, nb);
    // check-values §2.1 (tensor2tensor get_timing_signal_1d, the demo's whimbrel
    // formula): ω_i = exp(−i·ln(10000)/(d/2 − 1)), sines in the first half, cosines in
    // the second, position p = row. Stored as f32: within half an f32 ULP of the exact.
    let (d, h) = (64usize, 32usize);
    for p in 0..1024 {
        for i in 0..h {
            let w = (-(i as f64) * 10000f64.ln() / (h as f64 - 1.0)).exp();
            let (s, c) = ((p as f64) * w).sin_cos();
            for (col, exact) in [(i, s), (h + i, c)] {
                let g = got[p * d + col];
                let half_ulp = (exact.abs().max(f32::MIN_POSITIVE as f64)) * 2f64.powi(-24);
                assert!(
                    (g - exact).abs() <= half_ulp * 1.0001 + 1e-13,
                    "row {p} col {col}: {g} vs {exact}"
                );
            }
        }
    }
    // check-values §1.2-style fixed rows: row 0 is [0…0 | 1…1] in the split layout.
    assert!(got[..h].iter().all(|&v| v == 0.0) && got[h..d].iter().all(|&v| v == 1.0));
}

#[test]
fn dry_run_writes_nothing_and_refusals_are_one_line() {
    let tmp = tempfile::tempdir().unwrap();
    let input = PathBuf::from(DEMO).join("text-base");
    let i = input.to_str().unwrap();
    let out = tmp.path().join("plan");
    let o = out.to_str().unwrap();
    let doc = extend(&[
        i,
        "--table",
        TERN,
        "--to",
        "4096",
        "--method",
        "copy",
        "--out",
        o,
        "--dry-run",
    ]);
    assert_eq!(doc["dry_run"], true);
    assert!(doc["after"].is_null());
    assert_eq!(doc["plan"]["synthesised"], serde_json::json!([[512, 4096]]));
    assert_eq!(
        doc["plan"]["config_changes"][0]["key"],
        "max_position_embeddings"
    );
    assert!(!out.exists(), "dry run wrote nothing");
    // Into the input folder, or a folder inside it: refused.
    let r = posaudit(&[
        "extend", i, "--table", TERN, "--to", "4096", "--method", "copy", "--out", i, "--force",
    ]);
    assert_input_error(&r, "text-base", "input checkpoint's folder");
    // An existing folder without --force.
    let r = posaudit(&[
        "extend",
        i,
        "--table",
        TERN,
        "--to",
        "4096",
        "--method",
        "copy",
        "--out",
        tmp.path().to_str().unwrap(),
    ]);
    assert_input_error(&r, tmp.path().to_str().unwrap(), "exists already");
    // A method of another kind; a kind that cannot be extended; an unknown table.
    let r = posaudit(&[
        "extend", i, "--table", TERN, "--grid", "4x4", "--method", "bicubic", "--out", o,
    ]);
    assert_input_error(&r, "text-base", "--method bicubic does not apply");
    let r = posaudit(&[
        "extend",
        i,
        "--table",
        "tern.embeddings.position_ids",
        "--to",
        "9",
        "--method",
        "copy",
        "--out",
        o,
    ]);
    assert_input_error(&r, "text-base", "position-ids");
    let r = posaudit(&[
        "extend",
        i,
        "--table",
        "tern.nope",
        "--to",
        "9",
        "--method",
        "copy",
        "--out",
        o,
    ]);
    assert_eq!(r.code, 2);
    // A tail cannot be interpolated toward; copy/reinit cannot drop trained rows.
    let r = posaudit(&[
        "extend",
        i,
        "--table",
        TERN,
        "--method",
        "interpolate",
        "--rows",
        "untrained",
        "--out",
        o,
    ]);
    assert_input_error(&r, "text-base", "no trained row on one side");
    let r = posaudit(&[
        "extend", i, "--table", TERN, "--to", "100", "--method", "copy", "--out", o,
    ]);
    assert_input_error(&r, "text-base", "would drop trained rows");
    assert!(!out.exists());
    // A non-safetensors input.
    let npy = common::fixture("numpy");
    if let Some(f) = std::fs::read_dir(&npy).ok().and_then(|mut d| {
        d.find_map(|e| {
            e.ok()
                .map(|e| e.path())
                .filter(|p| p.extension().is_some_and(|x| x == "npy"))
        })
    }) {
        let r = posaudit(&[
            "extend",
            f.to_str().unwrap(),
            "--table",
            "x",
            "--to",
            "9",
            "--method",
            "copy",
            "--out",
            o,
        ]);
        assert_eq!(r.code, 2, "{}", r.stderr);
    }
}

#[test]
fn untrained_rows_and_reinit() {
    let tmp = tempfile::tempdir().unwrap();
    let input = PathBuf::from(DEMO).join("text-base");
    let out = tmp.path().join("ru");
    let doc = extend(&[
        input.to_str().unwrap(),
        "--table",
        TERN,
        "--method",
        "reinit",
        "--rows",
        "untrained",
        "--std",
        "0.01",
        "--seed",
        "5",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(doc["plan"]["init_std"]["value"], 0.01);
    assert_eq!(
        doc["plan"]["kept"],
        serde_json::json!([{"from": [0, 512], "to": [0, 512]}])
    );
    let old = tensors(&input.join("model.safetensors"));
    let new = tensors(&out.join("model.safetensors"));
    let (_, dt, _, ob) = get(&old, TERN);
    let (_, _, shape, nb) = get(&new, TERN);
    assert_eq!(shape, &vec![2048, 64]);
    assert_eq!(
        &nb[..512 * 64 * 4],
        &ob[..512 * 64 * 4],
        "trained rows bit for bit"
    );
    let drawn = floats(dt, &nb[512 * 64 * 4..]);
    let n = drawn.len() as f64;
    let std = (drawn.iter().map(|x| x * x).sum::<f64>() / n).sqrt();
    assert!((std / 0.01 - 1.0).abs() < 0.02, "{std}");
    // The new checkpoint still reports the redrawn rows as untrained: they are noise.
    assert_eq!(
        common::pairs(&doc["after"]["findings"][0]["ranges"]),
        vec![[512, 2048]]
    );
}

/// Two shards and an index, written with the `safetensors` crate's serializer; the
/// table sits in the second shard. The first shard's tensors come back bit-identical,
/// the index keeps its weight_map and gets the new total_size.
#[test]
fn sharded_input_gives_sharded_output() {
    use safetensors::tensor::TensorView;
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("sharded");
    std::fs::create_dir(&dir).unwrap();
    let other: Vec<u8> = (0..4 * 64 * 4).map(|i| (i % 251) as u8).collect();
    // Invented smooth table: 300 rows x 64, a few waves (trained-looking everywhere).
    let rows = 300usize;
    let table: Vec<u8> = (0..rows * 64)
        .flat_map(|k| {
            let (r, c) = ((k / 64) as f64, (k % 64) as f64);
            let v = ((r / 40.0) * (1.0 + c / 16.0)).sin() * 0.1 + ((r / 90.0) + c).cos() * 0.05;
            (v as f32).to_le_bytes()
        })
        .collect();
    safetensors::serialize_to_file(
        vec![(
            "embed.weight",
            TensorView::new(safetensors::Dtype::F32, vec![4, 64], &other).unwrap(),
        )],
        None,
        &dir.join("model-00001-of-00002.safetensors"),
    )
    .unwrap();
    safetensors::serialize_to_file(
        vec![(
            "wpe.weight",
            TensorView::new(safetensors::Dtype::F32, vec![rows, 64], &table).unwrap(),
        )],
        None,
        &dir.join("model-00002-of-00002.safetensors"),
    )
    .unwrap();
    let index = serde_json::json!({"metadata": {"total_size": other.len() + table.len()}, "weight_map": {"embed.weight": "model-00001-of-00002.safetensors", "wpe.weight": "model-00002-of-00002.safetensors"}});
    std::fs::write(
        dir.join("model.safetensors.index.json"),
        serde_json::to_string_pretty(&index).unwrap(),
    )
    .unwrap();
    std::fs::write(
        dir.join("config.json"),
        r#"{"n_positions": 300, "n_embd": 64, "model_type": "invented"}"#,
    )
    .unwrap();
    std::fs::write(dir.join("tokenizer.json"), "{}").unwrap();
    let out = tmp.path().join("out");
    let doc = extend(&[
        dir.to_str().unwrap(),
        "--table",
        "wpe.weight",
        "--to",
        "600",
        "--method",
        "cubic",
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(doc["written"].as_array().unwrap().len(), 2);
    assert_eq!(config(&out)["n_positions"], 600);
    assert!(out.join("tokenizer.json").exists());
    let a = tensors(&dir.join("model-00001-of-00002.safetensors"));
    let b = tensors(&out.join("model-00001-of-00002.safetensors"));
    assert_eq!(a, b);
    let idx: Value =
        serde_json::from_slice(&std::fs::read(out.join("model.safetensors.index.json")).unwrap())
            .unwrap();
    assert_eq!(idx["weight_map"], index["weight_map"]);
    assert_eq!(
        idx["metadata"]["total_size"],
        (other.len() + 600 * 64 * 4) as u64
    );
    let t = tensors(&out.join("model-00002-of-00002.safetensors"));
    assert_eq!(get(&t, "wpe.weight").2, vec![600, 64]);
    // The new folder opens as a sharded checkpoint (its index read).
    let r = posaudit(&["scan", out.to_str().unwrap()]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert!(!r.stdout.contains("warning"), "{}", r.stdout);
}
