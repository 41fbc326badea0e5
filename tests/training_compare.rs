//! `posaudit compare` on checkpoints of tiny models really trained with torch's AdamW
//! (`fixtures/training/`, written by `fixtures/training/generate.py`), held to the truth
//! that the generator wrote from the training setup (`fixtures/training/truth.json`:
//! which rows got a gradient in which steps, and the float64 product of
//! `1 − lr_t · weight_decay` over the steps, never from analysing the outputs).
//!
//! The rows that never got a gradient were multiplied by `float32(1 − lr_t·wd)` once per
//! step (hundreds of float32 roundings); `unchanged-rows` must find exactly them, with
//! the common factor, and nothing else.

mod common;

use common::{fixture, pairs, posaudit, table, training_truth};
use serde_json::Value;

fn compare(saves: &[&str]) -> Value {
    let paths: Vec<String> = saves
        .iter()
        .map(|s| fixture(&format!("training/{s}")).display().to_string())
        .collect();
    let mut args = vec!["compare", "--json"];
    args.extend(paths.iter().map(String::as_str));
    let run = posaudit(&args);
    assert_eq!(run.code, 0, "stderr: {}", run.stderr);
    serde_json::from_str(&run.stdout).expect("compare --json prints JSON")
}

/// Half-open ranges of the rows where `flag` holds.
fn ranges_of(flag: &[bool]) -> Vec<[usize; 2]> {
    let mut out = Vec::new();
    let mut i = 0;
    while i < flag.len() {
        if flag[i] {
            let s = i;
            while i < flag.len() && flag[i] {
                i += 1;
            }
            out.push([s, i]);
        } else {
            i += 1;
        }
    }
    out
}

fn rel(a: f64, b: f64) -> f64 {
    (a / b - 1.0).abs()
}

/// Asserts one step's unchanged ranges and factor against the truth: the ranges equal
/// `expected` exactly (so no trained row is among them, and no never-trained row is
/// missed), each range decay-only with the factor within 1e-4 relative of `factor`
/// (or bit-identical when `factor` is 1), and its finding says what decay does.
fn check_step(doc: &Value, t: &Value, step: &Value, expected: &[[usize; 2]], factor: f64) {
    let what = format!("step {} → {}", step["from"], step["to"]);
    assert_eq!(pairs(&step["unchanged"]), expected, "{what}");
    for d in step["unchanged_detail"].as_array().unwrap() {
        let scale = d["scale"].as_f64().unwrap();
        if factor == 1.0 {
            assert_eq!(d["bit_identical"], true, "{what}: {d}");
            assert_eq!(scale, 1.0);
        } else {
            assert_eq!(d["decay_only"], true, "{what}: {d}");
            assert!(
                rel(scale, factor) < 1e-4,
                "{what}: factor {scale} vs truth {factor}"
            );
            // The accumulated rounding is measured and within the stated bound.
            let dev = d["max_deviation"].as_f64().unwrap();
            assert!(dev > 0.0 && dev <= step["unchanged_tolerance"].as_f64().unwrap());
        }
    }
    let findings: Vec<&Value> = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|f| {
            f["code"] == "unchanged-rows"
                && f["step"] == serde_json::json!([step["from"], step["to"]])
        })
        .collect();
    assert_eq!(findings.len(), expected.len(), "{what}: {doc}");
    if factor != 1.0 {
        for f in findings {
            let m = f["message"].as_str().unwrap();
            assert!(
                m.contains("what weight decay alone does to rows that got no gradient"),
                "{m}"
            );
        }
    }
}

const WPE: &str = "transformer.wpe.weight";

/// Rows that got a gradient in steps (from, to] of the decoder run, from the setup:
/// phase 1 (steps 1..=600) indexes `trained_rows_phase_1`, phase 2 (601..=800)
/// `trained_rows_phase_2` (truth.json, `packing`: every batch is full length).
fn decoder_trained_between(dec: &Value, from: u64, to: u64) -> Vec<bool> {
    let p1 = dec["setup"]["phase_1"]["steps"].as_u64().unwrap();
    let p2 = dec["setup"]["phase_2"]["steps"].as_u64().unwrap();
    let rows = dec["shape"][0].as_u64().unwrap() as usize;
    let mut flag = vec![false; rows];
    let phases = [
        (0, p1, &dec["trained_rows_phase_1"]),
        (p1, p1 + p2, &dec["trained_rows_phase_2"]),
    ];
    for (start, end, trained) in phases {
        // steps start+1..=end overlap from+1..=to
        if from < end && to > start {
            for [s, e] in pairs(trained) {
                flag[s..e].iter_mut().for_each(|f| *f = true);
            }
        }
    }
    flag
}

#[test]
fn decoder_unchanged_rows_are_exactly_the_rows_without_gradient_with_the_decay_factor() {
    let truth = training_truth();
    let dec = &truth["models"]["decoder"];
    let saves = [
        "decoder/step-0000",
        "decoder/step-0200",
        "decoder/step-0600",
        "decoder/step-0800",
    ];
    for i in 0..saves.len() {
        for j in i + 1..saves.len() {
            let (a, b) = (&dec["saves"][saves[i]], &dec["saves"][saves[j]]);
            let trained = decoder_trained_between(
                dec,
                a["step"].as_u64().unwrap(),
                b["step"].as_u64().unwrap(),
            );
            let expected = ranges_of(&trained.iter().map(|t| !t).collect::<Vec<_>>());
            // Consistency with the truth's own list: never trained up to the later save.
            assert_eq!(
                expected,
                pairs(&b["never_trained_rows"]),
                "{} → {}",
                saves[i],
                saves[j]
            );
            let factor = b["decay_factor_never_trained"].as_f64().unwrap()
                / a["decay_factor_never_trained"].as_f64().unwrap();
            let doc = compare(&[saves[i], saves[j]]);
            let t = table(&doc, WPE);
            assert_eq!(t["steps"].as_array().unwrap().len(), 1);
            check_step(&doc, t, &t["steps"][0], &expected, factor);
        }
    }
}

#[test]
fn decoder_timeline_never_calls_rows_without_gradient_converged_or_trained() {
    let truth = training_truth();
    let dec = &truth["models"]["decoder"];
    let saves = [
        "decoder/step-0000",
        "decoder/step-0200",
        "decoder/step-0600",
        "decoder/step-0800",
    ];
    let doc = compare(&saves);
    let t = table(&doc, WPE);
    let steps = t["steps"].as_array().unwrap();
    assert_eq!(steps.len(), 3);
    let factor = |k: usize| {
        dec["saves"][saves[k]]["decay_factor_never_trained"]
            .as_f64()
            .unwrap()
    };
    for (k, step) in steps.iter().enumerate() {
        let (a, b) = (&dec["saves"][saves[k]], &dec["saves"][saves[k + 1]]);
        let trained = decoder_trained_between(
            dec,
            a["step"].as_u64().unwrap(),
            b["step"].as_u64().unwrap(),
        );
        let expected = ranges_of(&trained.iter().map(|t| !t).collect::<Vec<_>>());
        check_step(&doc, t, step, &expected, factor(k + 1) / factor(k));
    }
    check_step(
        &doc,
        t,
        &t["first_to_last"],
        &pairs(&dec["never_indexed_rows"]),
        factor(3),
    );
    let tl = &t["timeline"];
    let never = pairs(&dec["never_indexed_rows"]); // [256, 512)
    assert_eq!(never, vec![[256, 512]]);
    let overlaps = |r: &[[usize; 2]]| r.iter().any(|&[s, e]| s < 512 && e > 256);
    assert!(
        !overlaps(&pairs(&tl["converged"])),
        "converged: {}",
        tl["converged"]
    );
    assert!(
        !overlaps(&pairs(&tl["still_moving"])),
        "{}",
        tl["still_moving"]
    );
    assert_eq!(pairs(&tl["never_moved"]), never);
    assert_eq!(pairs(&tl["unchanged_throughout"]), never);
    // Rows trained in the last step (phase 2 indexes rows 0..256 every step) are moving;
    // rows 128..256 first moved in the step into step-0800 (checkpoint 3), rows 0..128
    // in the first step.
    assert_eq!(
        pairs(&tl["still_moving"]),
        pairs(&dec["trained_rows_phase_2"])
    );
    let first = tl["first_moved"].as_array().unwrap();
    let [[s2, e2]] = pairs(&dec["saves"]["decoder/step-0800"]["rows_trained_in_phase_2_only"])[..]
    else {
        panic!("one phase-2-only range in truth.json")
    };
    assert!(first[s2..e2].iter().all(|v| v == 3));
    assert!(first[..s2].iter().all(|v| v == 1));
    assert!(first[256..].iter().all(Value::is_null));
}

#[test]
fn encoder_unchanged_rows_are_the_never_indexed_and_padding_rows() {
    let truth = training_truth();
    let enc = &truth["models"]["encoder"];
    let doc = compare(&["encoder/init", "encoder/final"]);
    let t = table(&doc, enc["table"].as_str().unwrap());
    // No gradient ever: never-indexed rows [0, 1) and [66, 130), and the padding row 1
    // (zero in both; the truth's zero second moments are exactly these rows).
    let mut flag = vec![false; enc["shape"][0].as_u64().unwrap() as usize];
    for [s, e] in pairs(&enc["never_indexed_rows"]) {
        flag[s..e].iter_mut().for_each(|f| *f = true);
    }
    for p in enc["padding_rows"].as_array().unwrap() {
        flag[p.as_u64().unwrap() as usize] = true;
    }
    let expected = ranges_of(&flag);
    assert_eq!(expected, pairs(&enc["exp_avg_sq_zero_rows"]));
    let step = &t["steps"][0];
    check_step(
        &doc,
        t,
        step,
        &expected,
        enc["decay_factor_never_trained"].as_f64().unwrap(),
    );
    // The padding row is reported as a zero row of the first range.
    assert_eq!(step["unchanged_detail"][0]["zero_rows"], 1);
}

/// Half-open ranges of the given bucket indices.
fn bucket_ranges(buckets: &Value, n: usize) -> Vec<[usize; 2]> {
    let mut flag = vec![false; n];
    for b in buckets.as_array().unwrap() {
        flag[b.as_u64().unwrap() as usize] = true;
    }
    ranges_of(&flag)
}

#[test]
fn t5_unreached_buckets_are_unchanged_decayed_or_bit_identical() {
    let truth = training_truth();
    let t5 = &truth["models"]["t5"];
    let n = t5["num_buckets"].as_u64().unwrap() as usize;
    let expected = bucket_ranges(&t5["buckets_unreached_at_training_length"], n);
    for save in ["t5/final-wd0.1", "t5/final-wd0"] {
        let factor = t5["files"][save]["decay_factor_never_trained"]
            .as_f64()
            .unwrap();
        let doc = compare(&["t5/init", save]);
        let t = table(&doc, t5["table"].as_str().unwrap());
        check_step(&doc, t, &t["steps"][0], &expected, factor);
    }
}

#[test]
fn vit_rows_all_trained_none_unchanged() {
    let truth = training_truth();
    let vit = &truth["models"]["vit"];
    assert_eq!(pairs(&vit["trained_rows"]), vec![[0, 17]]);
    let doc = compare(&["vit/init", "vit/final"]);
    let t = table(&doc, vit["table"].as_str().unwrap());
    assert!(
        pairs(&t["steps"][0]["unchanged"]).is_empty(),
        "{}",
        t["steps"][0]["unchanged"]
    );
    assert!(
        !t["findings"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f["code"] == "unchanged-rows")
    );
}
