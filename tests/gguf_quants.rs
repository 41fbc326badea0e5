//! Quantized GGUF tensors, dequantized value for value as the `gguf` Python package does.
//!
//! `fixtures/formats/quants.gguf` was written by `gguf.GGUFWriter` (gguf 0.19.0; see
//! `generate_quants.py` and `PROVENANCE.json`): Q8_0, Q4_0, Q4_1, Q5_0 and Q5_1 copies of
//! an invented table quantized by `gguf.quants.quantize`, and random valid Q4_K, Q5_K,
//! Q6_K and Q8_K blocks. `quants_expected.safetensors` holds what
//! `gguf.quants.dequantize` returns for each (Q8_K, which that package does not
//! dequantize: d·q by the ggml block layout, computed with numpy).

use std::path::{Path, PathBuf};
use std::process::Command;

use posaudit::checkpoint::{Checkpoint, Dtype};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/formats")
        .join(name)
}

fn open(name: &str) -> Checkpoint {
    Checkpoint::open(&fixture(name)).unwrap_or_else(|e| panic!("{name}: {e}"))
}

const TYPES: [(&str, &str); 9] = [
    ("q8_0.position_embd.weight", "Q8_0"),
    ("q4_0.position_embd.weight", "Q4_0"),
    ("q4_1.position_embd.weight", "Q4_1"),
    ("q5_0.position_embd.weight", "Q5_0"),
    ("q5_1.position_embd.weight", "Q5_1"),
    ("q4_k.random_blocks", "Q4_K"),
    ("q5_k.random_blocks", "Q5_K"),
    ("q6_k.random_blocks", "Q6_K"),
    ("q8_k.random_blocks", "Q8_K"),
];

#[test]
fn every_block_type_dequantizes_bit_identical_to_the_gguf_package() {
    let c = open("quants.gguf");
    let expected = open("quants_expected.safetensors");
    for (name, ty) in TYPES {
        let t = c.tensor(name).unwrap_or_else(|| panic!("no `{name}`"));
        assert_eq!(t.dtype.to_string(), ty, "{name}");
        assert!(matches!(t.dtype, Dtype::Quantized(_)), "{name}");
        let e = expected.tensor(name).unwrap();
        assert_eq!(t.shape, e.shape, "{name}");
        let want = expected.read_f64(e).unwrap();
        let got = c.read_f64(t).unwrap();
        let differ = want
            .iter()
            .zip(got.iter())
            .filter(|(a, b)| a.to_bits() != b.to_bits())
            .count();
        assert_eq!(differ, 0, "{name}: {differ} values differ");
        // The row path (used by the detector's probe and the audit) agrees too.
        let rows = c.read_rows(t, &[0, t.shape[0] - 1]).unwrap();
        let table = c.read_table(t).unwrap();
        assert_eq!(rows.row(0), table.row(0), "{name}");
        assert_eq!(rows.row(1), table.row(t.shape[0] - 1), "{name}");
        // Not every value is zero: the comparison is not vacuous.
        assert!(got.iter().any(|v| *v != 0.0), "{name}");
    }
}

#[test]
fn quantization_error_bounds_the_distance_to_the_original_table() {
    // quants_expected.safetensors also holds the table before quantization. Round to
    // nearest moves each value by at most half a step; the stored f16 scale and minimum
    // add their own rounding (2^-11 relative: at most 31·2^-11 < 2^-6 of a step, plus
    // 2^-11 of the largest magnitude for the minimum); gguf's Q4_0/Q5_0 quantizer clamps
    // the far end of each block, where a value can be off by a whole step (the limits of
    // QuantizationError say so).
    let c = open("quants.gguf");
    let e = open("quants_expected.safetensors");
    let original = e
        .read_table(e.tensor("original.position_embd.weight").unwrap())
        .unwrap();
    let max_abs = original.iter().fold(0f64, |m, v| m.max(v.abs()));
    let mut bounds = Vec::new();
    for (name, whole_step_end) in [
        ("q8_0.position_embd.weight", false),
        ("q4_0.position_embd.weight", true),
        ("q4_1.position_embd.weight", false),
        ("q5_0.position_embd.weight", true),
        ("q5_1.position_embd.weight", false),
    ] {
        let t = c.tensor(name).unwrap();
        let err = c.quantization_error(t).unwrap().unwrap();
        assert_eq!(err.max_rounding_error, err.max_step / 2.0);
        assert!(err.rms_rounding_error <= err.max_step / 12f64.sqrt() + 1e-15);
        let got = c.read_table(t).unwrap();
        let base = if whole_step_end {
            err.max_step
        } else {
            err.max_rounding_error
        };
        let allowed = base * (1.0 + 2f64.powi(-6)) + 2f64.powi(-11) * max_abs;
        let worst = got
            .iter()
            .zip(original.iter())
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        assert!(worst <= allowed, "{name}: {worst} > {allowed}");
        // The bound is of the right size: the worst error reaches a good part of it.
        assert!(
            worst > 0.3 * err.max_rounding_error,
            "{name}: {worst} vs {err:?}"
        );
        bounds.push(err.max_rounding_error);
    }
    // 8-bit codes are finer than 5-bit, 5-bit finer than 4-bit.
    assert!(bounds[0] < bounds[3] && bounds[3] < bounds[1], "{bounds:?}");
    // A float tensor has no quantization error.
    let t = e.tensor("q8_0.position_embd.weight").unwrap();
    assert!(e.quantization_error(t).unwrap().is_none());
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
fn quantized_position_tables_are_found_and_audited() {
    let path = fixture("quants.gguf");
    let (code, stdout, stderr) = run(&["scan", path.to_str().unwrap(), "--json"]);
    assert_eq!(code, 0, "{stderr}");
    let doc: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    let tables = doc["tables"].as_array().unwrap();
    for (name, ty) in &TYPES[..5] {
        let t = tables
            .iter()
            .find(|t| t["name"] == *name)
            .unwrap_or_else(|| panic!("{name} not found: {stdout}"));
        assert_eq!(t["kind"], "learned-absolute", "{name}");
        assert_eq!(t["dtype"], *ty, "{name}");
    }
    // The supported block types are analysable: none is listed as skipped.
    let skipped = doc["skipped"].as_array().expect("skipped list").len();
    assert_eq!(skipped, 0, "{stdout}");
    let (code, stdout, stderr) = run(&[
        "audit",
        path.to_str().unwrap(),
        "--table",
        "q4_0.position_embd.weight",
        "--json",
    ]);
    assert!(code == 0 || code == 1, "{stderr}");
    let doc: serde_json::Value = serde_json::from_str(&stdout).unwrap();
    let t = &doc["tables"][0];
    assert_eq!(t["positions"], 64, "{stdout}");
    assert_eq!(t["dim"], 128, "{stdout}");
}

#[test]
fn a_llama_gguf_without_a_rope_base_states_the_assumed_default() {
    let c = open("rope_default.gguf");
    let h = c.config.as_ref().unwrap();
    let theta = h.rope_theta.as_ref().expect("assumed base");
    assert_eq!(theta.value, 10000.0);
    assert!(theta.key.contains("assumed default"), "{}", theta.key);
    let path = fixture("rope_default.gguf");
    let (code, stdout, stderr) = run(&["audit", path.to_str().unwrap(), "--json"]);
    assert!(code == 0 || code == 1, "{stderr}");
    assert!(
        stdout.contains("llama.rope.freq_base absent: assumed default"),
        "{stdout}"
    );
    // The terminal verdict says so too, not only the JSON's hint list.
    let (_, text, _) = run(&["audit", path.to_str().unwrap()]);
    assert!(
        text.contains("base 10000, scaling none")
            && text.contains("base assumed, not stated (llama.rope.freq_base absent"),
        "{text}"
    );
}
