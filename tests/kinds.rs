//! Audit of the kinds that are not 1-D tables, end to end.

mod common;

use common::{fixture, posaudit};
use serde_json::Value;

fn audit_json(path: &std::path::Path) -> Value {
    let run = posaudit(&["audit", path.to_str().unwrap(), "--json"]);
    assert_eq!(run.code, 0, "stderr: {}", run.stderr);
    serde_json::from_str(&run.stdout).unwrap()
}

#[test]
fn gguf_rope_divisors_written_by_the_gguf_package_decode_to_the_llama31_ramp() {
    // fixtures/kinds/llama31-rope-freqs.gguf is written by gguf 0.19.0 (the format's
    // reference writer) with the divisors of check-values §6.8: base 5e5, head_dim 128,
    // factor 8. §6.6: 29 frequencies unchanged, 6 smoothed, 29 divided by 8, original
    // context 8192.
    let doc = audit_json(&fixture("kinds/llama31-rope-freqs.gguf"));
    assert_eq!(doc["checkpoint"]["format"], "gguf");
    let t = &doc["tables"][0];
    assert_eq!(t["name"], "rope_freqs.weight");
    assert_eq!(t["kind"], "rotary-frequencies");
    let r = &t["rotary"];
    assert_eq!(r["scaling"], "wavelength-ramp");
    assert!((r["factor"].as_f64().unwrap() - 8.0).abs() < 1e-6);
    assert!((r["base"].as_f64().unwrap() - 500000.0).abs() < 1e-3);
    assert_eq!(r["ramp"]["unchanged"], serde_json::json!([0, 29]));
    assert_eq!(r["ramp"]["smoothed"], serde_json::json!([29, 35]));
    assert_eq!(r["ramp"]["divided"], serde_json::json!([35, 64]));
    assert!((r["ramp"]["original_context"].as_f64().unwrap() - 8192.0).abs() < 1.0);
    let published = [1.207484, 1.553415, 2.026313, 2.694530, 3.684253, 5.257327];
    for (got, want) in r["ramp"]["smoothed_divisors"]
        .as_array()
        .unwrap()
        .iter()
        .zip(published)
    {
        assert!(
            (got.as_f64().unwrap() - want).abs() < 1e-5,
            "{got} vs {want}"
        );
    }
    assert!(
        t["findings"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f["code"] == "rotary-scaled")
    );
}

#[test]
fn the_demo_showcase_gives_each_kind_its_analysis() {
    // Invented demo data (examples/demo/README.md); the checks use published facts:
    // T5 bidirectional bucket 16 is unreachable (check-values §5.1); 145 rows = 1 + 12².
    let doc = audit_json(
        &std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("examples/demo/checkpoints/showcase"),
    );
    let find = |kind: &str| {
        doc["tables"]
            .as_array()
            .unwrap()
            .iter()
            .find(|t| t["kind"] == kind)
            .cloned()
            .unwrap()
    };
    let rel = find("relative-bias");
    assert_eq!(rel["relative"]["buckets"], 32);
    assert_eq!(rel["relative"]["bidirectional"], true);
    assert_eq!(rel["relative"]["unreachable"], serde_json::json!([16]));
    let grid = find("learned-grid-2d");
    assert_eq!(grid["grid"]["height"], 12);
    assert_eq!(grid["grid"]["width"], 12);
    assert_eq!(grid["grid"]["extra_rows"], 1);
    let rot = find("rotary-frequencies");
    assert_eq!(rot["rotary"]["scaling"], "wavelength-ramp");
    let ids = find("position-ids");
    assert_eq!(ids["position_ids"]["contiguous"], true);
    for t in doc["tables"].as_array().unwrap() {
        let k = t["kind"].as_str().unwrap();
        for (field, owner) in [
            ("sinusoid", "fixed-sinusoidal"),
            ("rotary", "rotary-frequencies"),
            ("grid", "learned-grid-2d"),
            ("relative", "relative-bias"),
        ] {
            assert_eq!(t[field].is_null(), k != owner, "{field} on a {k} table");
        }
    }
}

#[test]
fn a_window_index_buffer_is_recognised_and_its_table_decoded() {
    // Swin construction (check-values §5.2): window 7 → 169 table rows, a 49x49 index.
    let p = fixture("audit/swin-window");
    let scan: Value =
        serde_json::from_str(&posaudit(&["scan", p.to_str().unwrap(), "--json"]).stdout).unwrap();
    assert_eq!(
        scan["tables"].as_array().unwrap().len(),
        1,
        "the index is not a table"
    );
    let b = &scan["index_buffers"][0];
    assert_eq!(b["name"], "layers.0.blocks.0.attn.relative_position_index");
    assert!(
        b["what"].as_str().unwrap().contains("7x7 window"),
        "{}",
        b["what"]
    );
    let doc = audit_json(&p);
    let r = &doc["tables"][0]["relative"];
    assert_eq!(r["buckets"], 169);
    assert_eq!(r["heads"], 3);
    assert_eq!(
        r["unreachable"],
        serde_json::json!([]),
        "every Swin row is used (§5.2)"
    );
}

#[test]
fn a_config_that_says_alibi_gets_the_published_slopes() {
    // check-values §6.9: 12 heads → 2^-1..2^-8 then 2^-0.5, 2^-1.5, 2^-2.5, 2^-3.5.
    let doc = audit_json(&fixture("audit/alibi-config"));
    let slopes: Vec<f64> = doc["config_alibi"]["slopes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_f64().unwrap())
        .collect();
    let mut want: Vec<f64> = (1..=8).map(|i| 2f64.powi(-i)).collect();
    want.extend([-0.5f64, -1.5, -2.5, -3.5].iter().map(|e| 2f64.powf(*e)));
    assert_eq!(slopes.len(), 12);
    for (g, w) in slopes.iter().zip(&want) {
        assert!((g - w).abs() < 1e-12, "{g} vs {w}");
    }
    assert_eq!(doc["tables"].as_array().unwrap().len(), 0);
}
