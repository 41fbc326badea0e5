//! Folders as people have them: a Hugging Face hub cache entry, a folder with two weight
//! files, a run folder.
//!
//! Sources: the hub cache layout is huggingface_hub's documented cache structure ("Manage
//! the `huggingface_hub` cache-system": `models--{org}--{name}/` with `blobs/` (files named
//! by hash), `refs/main` (a text file holding the revision) and `snapshots/{revision}/`
//! whose files are relative symbolic links into `blobs/`), built here by hand; the weights
//! are `fixtures/formats/reference.safetensors` (written by the safetensors package) and
//! `fixtures/formats/torch_numpy_table.pt` (torch.save), and the run is
//! `fixtures/training/decoder/` (really trained, `fixtures/training/generate.py`).

mod common;

use std::path::Path;

use common::{assert_input_error, fixture, posaudit};
use posaudit::checkpoint::Checkpoint;

fn scan_json(args: &[&str]) -> serde_json::Value {
    let mut all = vec!["scan"];
    all.extend_from_slice(args);
    all.push("--json");
    let run = posaudit(&all);
    assert_eq!(run.code, 0, "{}", run.stderr);
    serde_json::from_str(&run.stdout).unwrap()
}

#[cfg(unix)]
fn hub_entry(root: &Path, revs: &[&str], main: Option<&str>) -> std::path::PathBuf {
    let entry = root.join("models--acme--tiny");
    std::fs::create_dir_all(entry.join("blobs")).unwrap();
    std::fs::create_dir_all(entry.join("refs")).unwrap();
    std::fs::copy(
        fixture("formats/reference.safetensors"),
        entry.join("blobs/5f2c1e0a"),
    )
    .unwrap();
    for rev in revs {
        let snap = entry.join("snapshots").join(rev);
        std::fs::create_dir_all(&snap).unwrap();
        std::os::unix::fs::symlink("../../blobs/5f2c1e0a", snap.join("model.safetensors")).unwrap();
    }
    if let Some(m) = main {
        std::fs::write(entry.join("refs/main"), m).unwrap();
    }
    entry
}

#[cfg(unix)]
#[test]
fn a_hub_cache_entry_reads_the_snapshot_refs_main_names() {
    let dir = tempfile::tempdir().unwrap();
    let entry = hub_entry(dir.path(), &["aaa111", "bbb222"], Some("bbb222"));
    let doc = scan_json(&[entry.to_str().unwrap()]);
    let folder = &doc["checkpoint"]["folder"];
    assert_eq!(folder["snapshot"], "snapshots/bbb222");
    assert_eq!(folder["snapshot_reason"], "the revision refs/main names");
    assert_eq!(
        folder["files"][0], "model.safetensors",
        "named as the snapshot shows it"
    );
    // The same tables as the file itself, each named in the snapshot's file (not the blob).
    let direct = scan_json(&[fixture("formats/reference.safetensors").to_str().unwrap()]);
    let mut tables = doc["tables"].clone();
    for t in tables.as_array_mut().unwrap() {
        assert_eq!(t["file"], "model.safetensors");
        t["file"] = "reference.safetensors".into();
    }
    assert_eq!(tables, direct["tables"]);
    let text = posaudit(&["scan", entry.to_str().unwrap()]);
    assert!(
        text.stdout
            .contains("hub cache: read snapshots/bbb222 (the revision refs/main names)"),
        "{}",
        text.stdout
    );

    // Without refs/main: the only snapshot, or an error listing them.
    let dir = tempfile::tempdir().unwrap();
    let entry = hub_entry(dir.path(), &["ccc333"], None);
    let doc = scan_json(&[entry.to_str().unwrap()]);
    assert_eq!(doc["checkpoint"]["folder"]["snapshot"], "snapshots/ccc333");
    let dir = tempfile::tempdir().unwrap();
    let entry = hub_entry(dir.path(), &["ddd1", "eee2"], None);
    let run = posaudit(&["scan", entry.to_str().unwrap()]);
    assert_input_error(
        &run,
        "models--acme--tiny",
        "hub cache folder with 2 snapshots and no refs/main: give one snapshot folder (snapshots/ddd1, snapshots/eee2)",
    );
    // refs/main naming a revision that is not there.
    let dir = tempfile::tempdir().unwrap();
    let entry = hub_entry(dir.path(), &["fff3"], Some("0123abc"));
    let run = posaudit(&["scan", entry.to_str().unwrap()]);
    assert_input_error(&run, "models--acme--tiny", "snapshots/0123abc is missing");
}

#[test]
fn two_weight_files_say_which_was_read_and_file_picks_the_other() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(
        fixture("formats/reference.safetensors"),
        dir.path().join("model.safetensors"),
    )
    .unwrap();
    std::fs::copy(
        fixture("formats/torch_numpy_table.pt"),
        dir.path().join("model_ema.pt"),
    )
    .unwrap();
    let d = dir.path().to_str().unwrap();
    let doc = scan_json(&[d]);
    let folder = &doc["checkpoint"]["folder"];
    assert_eq!(folder["files"][0], "model.safetensors");
    assert_eq!(folder["others"][0], "model_ema.pt");
    assert!(
        folder["reason"]
            .as_str()
            .unwrap()
            .contains("conventional name model.safetensors")
    );
    let text = posaudit(&["scan", d]);
    assert!(
        text.stdout
            .contains("also in the folder, not read: model_ema.pt (pick one with --file NAME)"),
        "{}",
        text.stdout
    );

    let picked = scan_json(&[d, "--file", "model_ema.pt"]);
    assert_eq!(picked["checkpoint"]["format"], "pytorch");
    assert_eq!(
        picked["checkpoint"]["folder"]["reason"],
        "named with --file"
    );
    assert_eq!(picked["checkpoint"]["folder"]["named"], true);
    assert_eq!(folder["named"], false);
    // The audit summary of a file named with --file says so, without the hint to pick one.
    let audited = posaudit(&["audit", d, "--file", "model_ema.pt"]);
    assert_ne!(audited.code, 2, "{}", audited.stderr);
    assert!(
        audited.stdout.contains(
            "read model_ema.pt (named with --file); also in the folder, not read: model.safetensors\n"
        ),
        "{}",
        audited.stdout
    );
    assert!(!audited.stdout.contains("pick one"), "{}", audited.stdout);
    let alone = Checkpoint::open(&fixture("formats/torch_numpy_table.pt")).unwrap();
    assert_eq!(
        picked["checkpoint"]["tensors"].as_u64().unwrap() as usize,
        alone.tensors.len()
    );
    let run = posaudit(&["audit", d, "--file", "../model.safetensors"]);
    assert_input_error(
        &run,
        d,
        "--file `../model.safetensors` is not a file of this folder",
    );
    let run = posaudit(&["scan", d, "--file", "missing.bin"]);
    assert_input_error(
        &run,
        d,
        "(weight files here: model.safetensors, model_ema.pt)",
    );
}

#[test]
fn a_run_folder_shows_the_compare_command() {
    // The decoder run: four step folders and one training .pt of its own.
    let run_dir = fixture("training/decoder");
    let run = posaudit(&["audit", run_dir.to_str().unwrap()]);
    assert_ne!(run.code, 2, "{}", run.stderr);
    let d = run_dir.display().to_string();
    let want = format!("holds 4 checkpoints in sub-folders; compare them: `posaudit compare {d}`");
    assert!(run.stdout.contains(&want), "{}", run.stdout);
    // The command shown works: the run folder's checkpoints in step order (the four
    // step folders and the training file of step 800 beside them).
    let shown = posaudit(&["compare", &d, "--json"]);
    assert_eq!(shown.code, 0, "{}", shown.stderr);
    let doc: serde_json::Value = serde_json::from_str(&shown.stdout).unwrap();
    let steps: Vec<u64> = doc["checkpoints"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["step"].as_u64().unwrap())
        .collect();
    assert_eq!(steps, vec![0, 200, 600, 800, 800]);
    assert_eq!(
        doc["run"]["checkpoints"][4]["name"],
        "training-step-0800.pt"
    );
    assert_eq!(
        doc["tables"][0]["steps"][0]["label"],
        "step-0000 → step-0200"
    );

    // Without weights of its own: refused with the same command.
    let dir = tempfile::tempdir().unwrap();
    for step in ["step-0200", "step-0600"] {
        let sub = dir.path().join(step);
        std::fs::create_dir(&sub).unwrap();
        std::fs::copy(
            fixture(&format!("training/decoder/{step}/model.safetensors")),
            sub.join("model.safetensors"),
        )
        .unwrap();
    }
    let d = dir.path().display().to_string();
    let run = posaudit(&["audit", &d]);
    assert_input_error(&run, &d, &format!("compare them: `posaudit compare {d}`"));
    let shown = posaudit(&["compare", &d]);
    assert_eq!(shown.code, 0, "{}", shown.stderr);
    assert!(
        shown
            .stdout
            .contains("2 checkpoints found, ordered by step number: step-0200, step-0600"),
        "{}",
        shown.stdout
    );
}

#[test]
fn compare_reads_the_file_named_with_file_in_every_folder_and_lists_stand_ins() {
    // Weights from the committed training run (fixtures/training, written by torch's
    // safetensors writer): in both folders model.safetensors is step 0 (so the default
    // comparison sees no change at all), model_ema.safetensors is step 200 and step 600
    // (wpe rows 128..512 untouched but for weight decay, rows 0..128 trained).
    let dir = tempfile::tempdir().unwrap();
    let step = |s: &str| fixture(&format!("training/decoder/{s}/model.safetensors"));
    for (sub, ema) in [("step-1", "step-0200"), ("step-2", "step-0600")] {
        let d = dir.path().join(sub);
        std::fs::create_dir(&d).unwrap();
        std::fs::copy(step("step-0000"), d.join("model.safetensors")).unwrap();
        std::fs::copy(step(ema), d.join("model_ema.safetensors")).unwrap();
    }
    let run = dir.path().to_str().unwrap();
    let json = |extra: &[&str]| -> serde_json::Value {
        let mut args = vec![
            "compare",
            run,
            "--json",
            "--table",
            "transformer.wpe.weight",
        ];
        args.extend_from_slice(extra);
        let r = posaudit(&args);
        assert_eq!(r.code, 0, "{}", r.stderr);
        serde_json::from_str(&r.stdout).unwrap()
    };
    let plain = json(&[]);
    let s = &plain["tables"][0]["steps"][0];
    assert_eq!(s["label"], "step-1 → step-2");
    assert_eq!(s["mean_change"], 0.0);
    assert_eq!(s["unchanged_rows"], 512);
    assert_eq!(
        plain["checkpoints"][0]["folder"]["others"][0],
        "model_ema.safetensors"
    );

    let ema = json(&["--file", "model_ema.safetensors"]);
    for c in ema["checkpoints"].as_array().unwrap() {
        assert_eq!(c["folder"]["files"][0], "model_ema.safetensors");
        assert_eq!(c["folder"]["named"], true);
    }
    let s = &ema["tables"][0]["steps"][0];
    assert!(s["mean_change"].as_f64().unwrap() > 1e-3, "{s}");
    assert_eq!(s["unchanged"], serde_json::json!([[128, 512]]));

    // A training checkpoint that pickles an argparse.Namespace (written by torch.save):
    // compare lists what was stood in for, in the JSON and in the terminal summary.
    let dec = fixture("training/decoder");
    let (a, b) = (
        dec.join("step-0800").display().to_string(),
        dec.join("training-step-0800.pt").display().to_string(),
    );
    let r = posaudit(&["compare", &a, &b, "--json"]);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let doc: serde_json::Value = serde_json::from_str(&r.stdout).unwrap();
    assert_eq!(
        doc["checkpoints"][1]["stand_ins"][0]["global"],
        "argparse.Namespace"
    );
    let text = posaudit(&["compare", &a, &b]);
    assert!(
        text.stdout
            .contains("pickled objects read as inert data (never run): argparse.Namespace ×1"),
        "{}",
        text.stdout
    );
}
