//! `posaudit scan` end to end, on fixtures written by the reference safetensors writer
//! (fixtures/generate.py, safetensors 0.8.0 for Python) and on damaged copies of them.

mod common;

use std::fs;

use common::{assert_input_error, fixture, posaudit, table};
use serde_json::Value;

fn scan_json(path: &str) -> Value {
    let run = posaudit(&["scan", path, "--json"]);
    assert_eq!(run.code, 0, "stderr: {}", run.stderr);
    serde_json::from_str(&run.stdout).expect("stdout is one JSON document")
}

fn tables(doc: &Value) -> Vec<(String, String)> {
    doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| {
            (
                t["name"].as_str().unwrap().to_string(),
                t["kind"].as_str().unwrap().to_string(),
            )
        })
        .collect()
}

#[test]
fn scan_json_follows_the_contract() {
    let doc = scan_json(fixture("scan/tiny-gpt").to_str().unwrap());
    assert_eq!(doc["schema"], "posaudit/scan/v1");
    let c = &doc["checkpoint"];
    assert_eq!(c["format"], "safetensors");
    assert_eq!(c["files"], 1);
    assert_eq!(c["tensors"], 7);
    let size = fs::metadata(fixture("scan/tiny-gpt/model.safetensors"))
        .unwrap()
        .len();
    assert_eq!(c["bytes"], size);
    let t = &doc["tables"][0];
    assert_eq!(t["name"], "transformer.wpe.weight");
    assert_eq!(t["kind"], "learned-absolute");
    assert_eq!(t["shape"], serde_json::json!([128, 32]));
    assert_eq!(t["dtype"], "F32");
    assert_eq!(t["file"], "model.safetensors");
    assert!(t["why"].as_str().unwrap().contains("wpe"));
    assert_eq!(
        doc["tables"].as_array().unwrap().len(),
        1,
        "wte, norms and weights are not tables"
    );
    // config.json beside the weights is read for hints.
    assert_eq!(doc["config"]["max_positions"]["value"], 128);
    assert_eq!(doc["config"]["max_positions"]["key"], "n_positions");
    assert_eq!(doc["config"]["initializer_range"]["value"], 0.02);
}

#[test]
fn text_output_is_a_summary_line_then_an_aligned_table() {
    let run = posaudit(&["scan", fixture("scan/tiny-gpt").to_str().unwrap()]);
    assert_eq!(run.code, 0);
    let lines: Vec<&str> = run.stdout.lines().collect();
    assert!(
        lines[0].contains("safetensors checkpoint, 1 file, 7 tensors"),
        "{}",
        lines[0]
    );
    let header = lines.iter().position(|l| l.starts_with("name")).unwrap();
    let row = lines[header + 1];
    // Columns line up: each header word starts where its column starts.
    for word in ["kind", "shape", "dtype", "file", "why"] {
        let col = lines[header].find(word).unwrap();
        assert_ne!(row.as_bytes()[col - 1], b'x', "column {word} misaligned");
        assert_eq!(
            &row[col - 2..col],
            "  ",
            "column {word} misaligned in {row:?}"
        );
    }
}

#[test]
fn sharded_folders_open_with_and_without_an_index() {
    let with = scan_json(fixture("scan/sharded").to_str().unwrap());
    let without = scan_json(fixture("scan/shards-noindex").to_str().unwrap());
    let single = scan_json(fixture("scan/tiny-gpt").to_str().unwrap());
    assert_eq!(with["checkpoint"]["files"], 2);
    assert_eq!(without["checkpoint"]["files"], 2);
    assert_eq!(with["checkpoint"]["tensors"], 7);
    assert_eq!(tables(&with), tables(&single));
    assert_eq!(tables(&without), tables(&single));
    assert_eq!(
        with["tables"][0]["file"],
        "model-00002-of-00002.safetensors"
    );
}

#[test]
fn a_shard_missing_from_the_index_is_a_clear_error() {
    let run = posaudit(&["scan", fixture("scan/missing-shard").to_str().unwrap()]);
    assert_input_error(
        &run,
        "model.safetensors.index.json",
        "shard `model-00002-of-00002.safetensors`",
    );
}

#[test]
fn a_broken_config_is_a_warning_not_a_failure() {
    let doc = scan_json(fixture("scan/broken-config").to_str().unwrap());
    assert!(doc["config"].is_null());
    let w = doc["warnings"][0].as_str().unwrap();
    assert!(
        w.contains("config.json") && w.contains("not valid JSON"),
        "{w}"
    );
    assert_eq!(tables(&doc).len(), 1);
}

#[test]
fn non_position_tensors_are_not_tables_and_an_unnamed_sinusoid_is() {
    let doc = scan_json(fixture("scan/mixed.safetensors").to_str().unwrap());
    let found = tables(&doc);
    assert!(
        found.contains(&("encoder.buffer_7".into(), "fixed-sinusoidal".into())),
        "{found:?}"
    );
    assert!(found.contains(&(
        "embeddings.position_embeddings.weight".into(),
        "learned-absolute".into()
    )));
    for not_a_table in [
        "token_type",
        "word_embeddings",
        "LayerNorm",
        "cls_token",
        "mixer",
    ] {
        assert!(
            !found.iter().any(|(n, _)| n.contains(not_a_table)),
            "{not_a_table} listed: {found:?}"
        );
    }
}

#[test]
fn every_float_type_is_read_exactly_and_8_bit_floats_are_skipped_with_a_reason() {
    use posaudit::checkpoint::Checkpoint;
    let ckpt = Checkpoint::open(&fixture("scan/dtypes.safetensors")).unwrap();
    // The values numpy/ml_dtypes stored for each copy, widened to float64 by numpy.
    let expected = read_npy_f64(&fixture("scan/dtypes_expected_f64.npy"));
    for (k, prefix) in ["f64", "f32", "f16", "bf16"].iter().enumerate() {
        let t = ckpt
            .tensor(&format!("{prefix}.position_embeddings.weight"))
            .unwrap();
        let table = ckpt.read_table(t).unwrap();
        assert_eq!(table.dim(), (48, 16));
        for (i, v) in table.iter().enumerate() {
            assert_eq!(
                v.to_bits(),
                expected[k * 48 * 16 + i].to_bits(),
                "{prefix} element {i}"
            );
        }
    }
    let ids = ckpt
        .read_i64(ckpt.tensor("embeddings.position_ids").unwrap())
        .unwrap();
    assert_eq!(ids.to_vec(), (0..48).collect::<Vec<i64>>());
    let doc = scan_json(fixture("scan/dtypes.safetensors").to_str().unwrap());
    assert_eq!(doc["skipped"][0]["name"], "f8.position_embeddings.weight");
    assert_eq!(doc["skipped"][0]["dtype"], "F8_E4M3");
    assert!(
        doc["skipped"][0]["reason"]
            .as_str()
            .unwrap()
            .contains("not analysable")
    );
    assert_eq!(tables(&doc).len(), 5);
}

/// Minimal reader for the little-endian float64 C-order .npy the generator writes
/// (NumPy format spec v1.0: magic, version, header length, dict header, data).
fn read_npy_f64(path: &std::path::Path) -> Vec<f64> {
    let b = fs::read(path).unwrap();
    assert_eq!(&b[..6], b"\x93NUMPY");
    let hlen = u16::from_le_bytes([b[8], b[9]]) as usize;
    let header = std::str::from_utf8(&b[10..10 + hlen]).unwrap();
    assert!(
        header.contains("'<f8'") && header.contains("False"),
        "{header}"
    );
    b[10 + hlen..]
        .chunks_exact(8)
        .map(|c| f64::from_le_bytes(c.try_into().unwrap()))
        .collect()
}

#[test]
fn other_kinds_are_recognised_by_name_and_shape() {
    let doc = scan_json(fixture("scan/kinds.safetensors").to_str().unwrap());
    let found = tables(&doc);
    assert!(found.contains(&(
        "vit.embeddings.position_embeddings".into(),
        "learned-grid-2d".into()
    )));
    assert!(found.contains(&(
        "encoder.block.0.layer.0.SelfAttention.relative_attention_bias.weight".into(),
        "relative-bias".into()
    )));
    assert!(found.contains(&(
        "model.layers.0.self_attn.rotary_emb.inv_freq".into(),
        "rotary-frequencies".into()
    )));
    assert!(!found.iter().any(|(n, _)| n.contains("cls_token")));
}

#[test]
fn table_forces_a_tensor_and_an_unknown_name_suggests_the_closest() {
    let path = fixture("scan/mixed.safetensors");
    let p = path.to_str().unwrap();
    let doc = scan_json_args(&["scan", p, "--table", "encoder.mixer.weight", "--json"]);
    let forced = doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["name"] == "encoder.mixer.weight")
        .unwrap();
    assert!(
        forced["why"]
            .as_str()
            .unwrap()
            .starts_with("forced with --table")
    );
    let run = posaudit(&["scan", p, "--table", "encoder.mixer"]);
    assert_input_error(&run, "mixed.safetensors", "no tensor named `encoder.mixer`");
    assert!(
        run.stderr.contains("`encoder.mixer.weight`"),
        "{}",
        run.stderr
    );
}

fn scan_json_args(args: &[&str]) -> Value {
    let run = posaudit(args);
    assert_eq!(run.code, 0, "stderr: {}", run.stderr);
    serde_json::from_str(&run.stdout).unwrap()
}

// ---- bad input: one test per kind of damage, each exit 2 with one line naming the file.

fn valid_bytes() -> Vec<u8> {
    fs::read(fixture("scan/tiny-gpt/model.safetensors")).unwrap()
}

fn write_tmp(dir: &tempfile::TempDir, name: &str, bytes: &[u8]) -> String {
    let p = dir.path().join(name);
    fs::write(&p, bytes).unwrap();
    p.to_str().unwrap().to_string()
}

/// Replaces the JSON header of a valid file with `header` (re-encoding its length).
fn with_header(header: &str, data: &[u8]) -> Vec<u8> {
    let mut out = (header.len() as u64).to_le_bytes().to_vec();
    out.extend_from_slice(header.as_bytes());
    out.extend_from_slice(data);
    out
}

#[test]
fn truncated_file_is_rejected() {
    let dir = tempfile::tempdir().unwrap();
    let b = valid_bytes();
    let p = write_tmp(&dir, "cut.safetensors", &b[..b.len() - 100]);
    assert_input_error(&posaudit(&["scan", &p]), "cut.safetensors", "truncated");
    let p = write_tmp(&dir, "stub.safetensors", &b[..5]);
    assert_input_error(&posaudit(&["scan", &p]), "stub.safetensors", "too short");
}

#[test]
fn absurd_header_length_is_rejected() {
    let dir = tempfile::tempdir().unwrap();
    let mut b = valid_bytes();
    b[..8].copy_from_slice(&u64::MAX.to_le_bytes());
    let p = write_tmp(&dir, "huge.safetensors", &b);
    assert_input_error(
        &posaudit(&["scan", &p]),
        "huge.safetensors",
        "header length 18446744073709551615 is absurd",
    );
    b[..8].copy_from_slice(&50_000_000u64.to_le_bytes());
    let p = write_tmp(&dir, "long.safetensors", &b);
    assert_input_error(
        &posaudit(&["scan", &p]),
        "long.safetensors",
        "runs past the end of the file",
    );
}

#[test]
fn offsets_past_the_end_are_rejected() {
    let dir = tempfile::tempdir().unwrap();
    let h = r#"{"a":{"dtype":"F32","shape":[4,4],"data_offsets":[0,64]}}"#;
    let p = write_tmp(&dir, "past.safetensors", &with_header(h, &[0u8; 32]));
    assert_input_error(
        &posaudit(&["scan", &p]),
        "past.safetensors",
        "offsets past the end",
    );
}

#[test]
fn overlapping_tensors_are_rejected() {
    let dir = tempfile::tempdir().unwrap();
    let h = r#"{"a":{"dtype":"F32","shape":[4,4],"data_offsets":[0,64]},"b":{"dtype":"F32","shape":[4,4],"data_offsets":[32,96]}}"#;
    let p = write_tmp(&dir, "overlap.safetensors", &with_header(h, &[0u8; 96]));
    assert_input_error(&posaudit(&["scan", &p]), "overlap.safetensors", "overlap");
}

#[test]
fn header_that_is_not_json_is_rejected() {
    let dir = tempfile::tempdir().unwrap();
    let p = write_tmp(
        &dir,
        "text.safetensors",
        &with_header("{not json at all", &[]),
    );
    assert_input_error(
        &posaudit(&["scan", &p]),
        "text.safetensors",
        "not valid safetensors JSON",
    );
    let p = write_tmp(
        &dir,
        "latin1.safetensors",
        &with_header("{\"\u{fffd}\"", &[])
            .iter()
            .map(|&c| if c == 0xEF { 0xFF } else { c })
            .collect::<Vec<_>>(),
    );
    assert_input_error(&posaudit(&["scan", &p]), "latin1.safetensors", "not UTF-8");
}

#[test]
fn empty_file_is_rejected() {
    let dir = tempfile::tempdir().unwrap();
    let p = write_tmp(&dir, "empty.safetensors", &[]);
    assert_input_error(
        &posaudit(&["scan", &p]),
        "empty.safetensors",
        "file is empty",
    );
}

#[test]
fn folder_with_no_checkpoint_is_rejected() {
    let dir = tempfile::tempdir().unwrap();
    write_tmp(&dir, "notes.txt", b"hello");
    let p = dir.path().to_str().unwrap();
    assert_input_error(&posaudit(&["scan", p]), p, "folder holds no checkpoint");
}

#[test]
fn unreadable_files_are_rejected() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("nowhere.safetensors");
    assert_input_error(
        &posaudit(&["scan", missing.to_str().unwrap()]),
        "nowhere.safetensors",
        "cannot read",
    );
    // A dangling link named like a checkpoint: listed by the folder, unreadable when opened.
    #[cfg(unix)]
    {
        std::os::unix::fs::symlink(
            dir.path().join("gone"),
            dir.path().join("model.safetensors"),
        )
        .unwrap();
        let p = dir.path().to_str().unwrap();
        let run = posaudit(&["scan", p]);
        assert_eq!(run.code, 2);
        assert_eq!(run.stderr.lines().count(), 1, "{}", run.stderr);
    }
}

#[test]
fn missing_arguments_are_a_usage_error_with_exit_2() {
    assert_eq!(posaudit(&["scan"]).code, 2);
    assert_eq!(posaudit(&["frobnicate"]).code, 2);
}

#[test]
fn the_checkpoint_is_never_modified() {
    let dir = tempfile::tempdir().unwrap();
    let b = valid_bytes();
    let p = write_tmp(&dir, "model.safetensors", &b);
    let before = fs::metadata(&p).unwrap().modified().unwrap();
    assert_eq!(posaudit(&["scan", &p, "--json"]).code, 0);
    assert_eq!(fs::read(&p).unwrap(), b);
    assert_eq!(fs::metadata(&p).unwrap().modified().unwrap(), before);
}

// ---- mutation test: flipped and cut bytes never panic.

/// SplitMix64 (Steele, Lea & Flood 2014): a tiny deterministic generator for mutations.
struct SplitMix(u64);
impl SplitMix {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    fn below(&mut self, n: usize) -> usize {
        (self.next() % n.max(1) as u64) as usize
    }
}

/// Mutates `b`: flip random bits (mostly in the header, where structure lives), or cut.
fn mutate(rng: &mut SplitMix, b: &[u8]) -> Vec<u8> {
    let mut m = b.to_vec();
    let header_end = (u64::from_le_bytes(b[..8].try_into().unwrap()) as usize + 8).min(b.len());
    match rng.below(4) {
        0 => {
            let cut = rng.below(m.len());
            m.truncate(cut);
        }
        1 | 2 => {
            for _ in 0..1 + rng.below(4) {
                let i = if rng.below(4) > 0 {
                    rng.below(header_end)
                } else {
                    rng.below(m.len())
                };
                m[i] ^= 1 << rng.below(8);
            }
        }
        _ => {
            // Replace a digit of the header (offsets, shapes) with another digit.
            let digits: Vec<usize> = (8..header_end).filter(|&i| m[i].is_ascii_digit()).collect();
            if !digits.is_empty() {
                let i = digits[rng.below(digits.len())];
                m[i] = b'0' + rng.below(10) as u8;
            }
        }
    }
    m
}

#[test]
fn mutated_files_give_a_result_or_an_input_error_never_a_panic() {
    use posaudit::checkpoint::Checkpoint;
    let dir = tempfile::tempdir().unwrap();
    let sources = [
        fixture("scan/tiny-gpt/model.safetensors"),
        fixture("scan/mixed.safetensors"),
        fixture("scan/dtypes.safetensors"),
    ];
    let mut rng = SplitMix(7);
    let mut outcomes = [0usize; 2];
    for (s, src) in sources.iter().enumerate() {
        let b = fs::read(src).unwrap();
        for k in 0..300 {
            let m = mutate(&mut rng, &b);
            let p = dir.path().join(format!("m{s}_{k}.safetensors"));
            fs::write(&p, &m).unwrap();
            let result = std::panic::catch_unwind(|| {
                let Ok(ckpt) = Checkpoint::open(&p) else {
                    return false;
                };
                // Read every tensor too, not just the header.
                for t in &ckpt.tensors {
                    let _ = ckpt.read_f64(t);
                }
                posaudit::commands::scan::scan_opened(&ckpt, &[]).is_ok()
            });
            let ok =
                result.unwrap_or_else(|_| panic!("panic on mutation {k} of {}", src.display()));
            outcomes[usize::from(ok)] += 1;
            let _ = fs::remove_file(&p);
        }
    }
    // Both outcomes occur, so the mutations exercise the error paths and the read paths.
    assert!(
        outcomes[0] > 50 && outcomes[1] > 50,
        "errors/successes: {outcomes:?}"
    );
    // The binary agrees: exit 0 or 2, never a crash, on a sample of mutations.
    let b = valid_bytes();
    for k in 0..40 {
        let m = mutate(&mut rng, &b);
        let p = write_tmp(&dir, &format!("bin{k}.safetensors"), &m);
        let run = posaudit(&["scan", &p, "--json"]);
        assert!(
            run.code == 0 || run.code == 2,
            "exit {} on mutation {k}: {}",
            run.code,
            run.stderr
        );
        if run.code == 2 {
            assert_eq!(run.stderr.lines().count(), 1, "{}", run.stderr);
        }
    }
}

// ---- detection that generalises (fixtures/scan/names, written by fixtures/generate.py's
// name_fixtures with the gguf, numpy and safetensors writers; invented data) ----------

#[test]
fn gguf_canonical_position_table_name_is_recognised() {
    // GGUF's own name for the learned position table of the GPT-2 family is
    // `position_embd` (gguf package, gguf.constants.TENSOR_NAMES[MODEL_TENSOR.POS_EMBD]).
    let doc = scan_json(fixture("scan/names/gpt2-family.gguf").to_str().unwrap());
    assert_eq!(
        tables(&doc),
        vec![(
            "position_embd.weight".to_string(),
            "learned-absolute".to_string()
        )],
        "token_embd, norms and weight matrices are not tables"
    );
    let why = table(&doc, "position_embd.weight")["why"].as_str().unwrap();
    for part in [
        "`position` + `embd`",
        "64 rows = gpt2.context_length 64",
        "width 32",
    ] {
        assert!(why.contains(part), "`{part}` missing from why: {why}");
    }
}

#[test]
fn position_encodings_named_tables_are_found_by_name_learned_and_fixed() {
    let doc = scan_json(fixture("scan/names/speech").to_str().unwrap());
    let mut got = tables(&doc);
    got.sort();
    assert_eq!(
        got,
        vec![
            (
                "decoder.embed.position_encodings".to_string(),
                "learned-absolute".to_string()
            ),
            (
                "encoder.embed.position_encodings".to_string(),
                "fixed-sinusoidal".to_string()
            ),
        ]
    );
    let enc = table(&doc, "encoder.embed.position_encodings")["why"]
        .as_str()
        .unwrap();
    assert!(enc.contains("`position` + `encodings`"), "{enc}");
    assert!(!enc.contains("no position word"), "{enc}");
    assert!(enc.contains("150 rows = max_source_positions 150"), "{enc}");
    let dec = table(&doc, "decoder.embed.position_encodings")["why"]
        .as_str()
        .unwrap();
    assert!(dec.contains("112 rows = max_target_positions 112"), "{dec}");
    assert!(dec.contains("width 64 = d_model"), "{dec}");
}

#[test]
fn a_numpy_dump_named_after_its_table_is_found() {
    let doc = scan_json(fixture("scan/names/position_table.npy").to_str().unwrap());
    assert_eq!(
        tables(&doc),
        vec![("position_table".to_string(), "learned-absolute".to_string())]
    );
    assert!(
        table(&doc, "position_table")["why"]
            .as_str()
            .unwrap()
            .contains("`position` + `table`")
    );
}

#[test]
fn a_half_untrained_table_is_found_by_its_smooth_region_and_the_rows_are_named() {
    // Rows 256..512 are initial noise (std 0.02): the median neighbour cosine over all
    // sampled pairs is below the bar, the smooth region of the first half is not.
    let doc = scan_json(fixture("scan/names/half-noise").to_str().unwrap());
    assert_eq!(
        tables(&doc),
        vec![(
            "model.lookup.weight".to_string(),
            "learned-absolute".to_string()
        )],
        "the same-shaped noise matrix is not a table"
    );
    let why = table(&doc, "model.lookup.weight")["why"].as_str().unwrap();
    let rows = why
        .split("over rows ")
        .nth(1)
        .unwrap_or_else(|| panic!("rows used not named: {why}"));
    let (a, b) = rows.split_once("..").unwrap();
    let a: usize = a.parse().unwrap();
    let b: usize = b
        .split(|c: char| !c.is_ascii_digit())
        .next()
        .unwrap()
        .parse()
        .unwrap();
    assert!(a < 8 && b <= 300 && b > 128, "region {a}..{b} in: {why}");
    assert!(why.contains("no position word"), "{why}");
}

#[test]
fn a_position_word_alone_needs_the_config_rows_and_says_so() {
    // 66 rows = max_position_embeddings 64 + pad_token_id + 1 (the RoBERTa-style offset);
    // its content is initial noise, so the shape is what decides.
    let doc = scan_json(fixture("scan/names/config-rows").to_str().unwrap());
    assert_eq!(
        tables(&doc),
        vec![(
            "decoder.positions".to_string(),
            "learned-absolute".to_string()
        )]
    );
    let why = table(&doc, "decoder.positions")["why"].as_str().unwrap();
    assert!(
        why.contains("66 rows = max_position_embeddings 64 + pad_token_id + 1"),
        "{why}"
    );
    assert!(why.contains("width 32 = hidden_size"), "{why}");
}

#[test]
fn optimizer_moments_of_a_training_checkpoint_are_never_tables() {
    // fixtures/formats/torch_training.ckpt: 20 real Adam steps (generate_training.py);
    // exp_avg / exp_avg_sq have the shapes of wpe and wte.
    let doc = scan_json(fixture("formats/torch_training.ckpt").to_str().unwrap());
    assert_eq!(
        tables(&doc),
        vec![(
            "state_dict.wpe.weight".to_string(),
            "learned-absolute".to_string()
        )]
    );
    let audit = posaudit(&[
        "audit",
        fixture("formats/torch_training.ckpt").to_str().unwrap(),
        "--json",
    ]);
    assert!(audit.code == 0 || audit.code == 1, "{}", audit.stderr);
    // The moments are never tables; audit may name the second moment it read as
    // evidence about wpe (its `optimizer` entry), nowhere else.
    let doc: serde_json::Value = serde_json::from_str(&audit.stdout).unwrap();
    for t in doc["tables"].as_array().unwrap() {
        assert!(!t["name"].as_str().unwrap().contains("exp_avg"), "{t}");
    }
    let skipped = doc["skipped"].to_string();
    assert!(
        !skipped.contains("exp_avg"),
        "no moment among the skipped: {skipped}"
    );
}

#[test]
fn forcing_a_table_still_works_on_a_weight_of_another_role() {
    let run = posaudit(&[
        "scan",
        fixture("scan/names/gpt2-family.gguf").to_str().unwrap(),
        "--table",
        "token_embd.weight",
        "--json",
    ]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let doc: Value = serde_json::from_str(&run.stdout).unwrap();
    let t = table(&doc, "token_embd.weight");
    assert!(
        t["why"]
            .as_str()
            .unwrap()
            .starts_with("forced with --table")
    );
    assert_eq!(tables(&doc).len(), 2);
}
