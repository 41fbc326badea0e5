//! Training checkpoints that pickle more than tensors, read without executing anything.
//!
//! Sources outside the project:
//! - `fixtures/formats/torch_objects.pt`, `torch_numpy_table.pt`, `torch_runs_code.pt`:
//!   written by `torch.save` (torch 2.15.0, numpy 2.4.6; `generate_objects.py`,
//!   `PROVENANCE_objects.json`). Their reference, `torch_objects_expected.safetensors`, is
//!   what torch's own full unpickler (`torch.load(weights_only=False)`) finds in them: every
//!   tensor and NumPy array by its path, as little-endian C-order copies.
//! - `fixtures/training/decoder/training-step-0800.pt`: a real training checkpoint
//!   (`fixtures/training/generate.py`: model, AdamW `state_dict()`, step, an
//!   `argparse.Namespace`), its tensor list as torch's loader sees it in
//!   `fixtures/formats/torch_objects_expected.json`, its model tensors also saved by the same
//!   run as `decoder/step-0800/model.safetensors`, and the training setup's fact (README
//!   there) that rows [256, 512) of the position table never got a gradient, so their
//!   AdamW `exp_avg_sq` is exactly zero while rows [0, 256) are not.
//! - `fixtures/formats/torch_object_arrays.pt`: written by `torch.save` (torch 2.15.0,
//!   numpy 2.4.6; `generate_object_arrays.py`, `PROVENANCE_object_arrays.json`), with
//!   NumPy arrays of Python objects beside a float32 table; `torch_object_arrays_expected.json`
//!   is every NumPy array torch's full unpickler finds in it, with shape and dtype.

mod common;

use std::collections::BTreeMap;

use common::{assert_input_error, fixture, posaudit};
use posaudit::checkpoint::Checkpoint;

fn open(rel: &str) -> Checkpoint {
    Checkpoint::open(&fixture(rel)).unwrap_or_else(|e| panic!("{rel}: {e}"))
}

/// Asserts `got[name]` has `want[want_name]`'s shape and bit-identical values.
fn assert_same(want: &Checkpoint, want_name: &str, got: &Checkpoint, name: &str) {
    let w = want.tensor(want_name).expect(want_name);
    let g = got
        .tensor(name)
        .unwrap_or_else(|| panic!("{}: no tensor `{name}`", got.path.display()));
    assert_eq!(g.shape, w.shape, "{name}: shape");
    assert_eq!(g.dtype, w.dtype, "{name}: dtype");
    let a = want.read_f64(w).unwrap();
    let b = got.read_f64(g).unwrap();
    let differ = a
        .iter()
        .zip(b.iter())
        .filter(|(x, y)| x.to_bits() != y.to_bits())
        .count();
    assert_eq!(differ, 0, "`{name}` differs in {differ} values");
    if g.dtype.is_integer() {
        assert_eq!(
            want.read_i64(w).unwrap(),
            got.read_i64(g).unwrap(),
            "{name}"
        );
    }
}

fn names(c: &Checkpoint) -> Vec<String> {
    let mut n: Vec<String> = c.tensors.iter().map(|t| t.name.clone()).collect();
    n.sort();
    n
}

#[test]
fn pickled_objects_and_numpy_arrays_read_back_as_torch_load_sees_them() {
    let reference = open("formats/torch_objects_expected.safetensors");
    for stem in ["torch_objects", "torch_numpy_table"] {
        let got = open(&format!("formats/{stem}.pt"));
        let prefix = format!("{stem}/");
        let mut want: Vec<String> = reference
            .tensors
            .iter()
            .filter_map(|t| t.name.strip_prefix(&prefix).map(str::to_string))
            .collect();
        want.sort();
        assert!(!want.is_empty(), "{stem}: reference lists tensors");
        assert_eq!(names(&got), want, "{stem}: the tensors torch.load finds");
        for name in &want {
            assert_same(&reference, &format!("{prefix}{name}"), &got, name);
        }
    }
    // The NumPy arrays of generate_objects.py: Fortran order and big-endian copies of
    // the same table read back equal to it; the scalar `loss` has no dimension.
    let np = open("formats/torch_numpy_table.pt");
    for copy in ["pos_embed_fortran", "pos_embed_big_endian"] {
        assert_same(&np, "pos_embed", &np, copy);
    }
    let objects = open("formats/torch_objects.pt");
    assert_eq!(objects.tensor("loss").unwrap().shape, Vec::<usize>::new());
    // The NumPy copy of the position table is the torch tensor's values.
    assert_same(&objects, "model.wpe.weight", &objects, "pos_table_np");
}

#[test]
fn stood_in_objects_are_listed_and_the_unknown_ones_warned_about() {
    // generate_objects.py pickles one Namespace, one PurePosixPath, one enum member and
    // one dataclass defined in the script (so `__main__.*`, which posaudit cannot know).
    let c = open("formats/torch_objects.pt");
    let got: BTreeMap<String, (usize, bool)> = c
        .stand_ins
        .iter()
        .map(|s| (s.global.clone(), (s.count, s.known)))
        .collect();
    let want: BTreeMap<String, (usize, bool)> = [
        ("argparse.Namespace", (1, true)),
        ("pathlib.PurePosixPath", (1, true)),
        ("__main__.Phase", (1, false)),
        ("__main__.TrainConfig", (1, false)),
    ]
    .into_iter()
    .map(|(k, v)| (k.to_string(), v))
    .collect();
    assert_eq!(got, want);
    let unknown: Vec<&String> = c
        .warnings
        .iter()
        .filter(|w| w.contains("read as inert data"))
        .collect();
    assert_eq!(unknown.len(), 2, "{:?}", c.warnings);
    for g in ["`__main__.Phase`", "`__main__.TrainConfig`"] {
        assert!(
            unknown
                .iter()
                .any(|w| w.contains(g) && w.contains("would import module `__main__`")),
            "{g}: {unknown:?}"
        );
    }

    // The JSON document carries them (checkpoint.stand_ins), and both renderings say so.
    let path = fixture("formats/torch_objects.pt");
    let run = posaudit(&["scan", path.to_str().unwrap(), "--json"]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let doc: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let listed = doc["checkpoint"]["stand_ins"].as_array().unwrap();
    assert_eq!(listed.len(), 4, "{listed:?}");
    assert!(
        listed.iter().any(|s| s["global"] == "__main__.TrainConfig"
            && s["count"] == 1
            && s["known"] == false)
    );
    let text = posaudit(&["scan", path.to_str().unwrap()]);
    assert!(
        text.stdout.contains("read as inert data (never run)")
            && text.stdout.contains("argparse.Namespace ×1"),
        "{}",
        text.stdout
    );
}

#[test]
fn a_pickle_that_would_run_a_command_is_refused_with_its_global() {
    // generate_objects.py: `__reduce__` returns os.system; on Linux Python pickles it
    // as `posix.system`.
    let path = fixture("formats/torch_runs_code.pt");
    let run = posaudit(&["scan", path.to_str().unwrap()]);
    assert_input_error(
        &run,
        "torch_runs_code.pt",
        "refuses global `posix.system` (posaudit never executes pickled code)",
    );
    assert!(
        run.stderr
            .contains("loading this file with full unpickling (pickle.load, torch.load with weights_only=False) would run it"),
        "{}",
        run.stderr
    );
}

const TRAINING_PT: &str = "training/decoder/training-step-0800.pt";

#[test]
fn the_training_checkpoint_opens_with_every_tensor_torch_load_finds() {
    let c = open(TRAINING_PT);
    let listed: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(fixture("formats/torch_objects_expected.json")).unwrap(),
    )
    .unwrap();
    let want = listed["fixtures/training/decoder/training-step-0800.pt"]
        .as_object()
        .unwrap();
    let mut want_names: Vec<String> = want.keys().cloned().collect();
    want_names.sort();
    assert_eq!(names(&c), want_names);
    for (name, w) in want {
        let t = c.tensor(name).unwrap();
        let shape: Vec<usize> = w["shape"]
            .as_array()
            .unwrap()
            .iter()
            .map(|d| d.as_u64().unwrap() as usize)
            .collect();
        assert_eq!(t.shape, shape, "{name}");
        assert_eq!(w["dtype"], "float32", "{name}");
    }
    assert_eq!(c.stand_ins.len(), 1);
    assert_eq!(c.stand_ins[0].global, "argparse.Namespace");
    assert!(c.stand_ins[0].known && c.stand_ins[0].count == 1);
    assert!(c.warnings.is_empty(), "{:?}", c.warnings);

    // The model part is the state dict the same run saved as safetensors.
    let st = open("training/decoder/step-0800/model.safetensors");
    assert_eq!(st.tensors.len() + 3 * 29, c.tensors.len());
    for t in &st.tensors {
        assert_same(&st, &t.name, &c, &format!("model.{}", t.name));
    }

    // Optimizer moments stay readable by name: the position table is parameter 1; rows
    // [256, 512) never got a gradient, so their second moment is exactly zero.
    let v = c
        .read_f64(c.tensor("optimizer.state.1.exp_avg_sq").unwrap())
        .unwrap();
    assert_eq!(v.shape(), &[512, 32]);
    for (r, row) in v.outer_iter().enumerate() {
        let zero = row.iter().all(|x| *x == 0.0);
        assert_eq!(zero, r >= 256, "row {r} of exp_avg_sq");
    }
    let step = c
        .read_f64(c.tensor("optimizer.state.1.step").unwrap())
        .unwrap();
    assert_eq!(step.iter().copied().collect::<Vec<_>>(), vec![800.0]);
}

#[test]
fn optimizer_moments_are_never_listed_as_position_tables() {
    let path = fixture(TRAINING_PT);
    for cmd in ["scan", "audit"] {
        let run = posaudit(&[cmd, path.to_str().unwrap(), "--json"]);
        assert_ne!(run.code, 2, "{cmd}: {}", run.stderr);
        let doc: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
        let tables: Vec<&str> = doc["tables"]
            .as_array()
            .unwrap()
            .iter()
            .map(|t| t["name"].as_str().unwrap())
            .collect();
        assert_eq!(tables, vec!["model.transformer.wpe.weight"], "{cmd}");
        // The moments are evidence about the table (audit's `optimizer` entry names the
        // second moment it read), never a table, a skipped candidate or a finding's table.
        let text = run.stdout.to_lowercase();
        let moment_mentions = text.matches("exp_avg").count();
        let as_evidence = doc["tables"]
            .as_array()
            .unwrap()
            .iter()
            .map(|t| {
                let opt = t["optimizer"]["tensor"].as_str().map_or(0, |_| 1);
                let in_findings = t["findings"].as_array().map_or(0, |f| {
                    f.iter()
                        .map(|f| f.to_string().to_lowercase().matches("exp_avg").count())
                        .sum::<usize>()
                });
                opt + in_findings
            })
            .sum::<usize>();
        assert_eq!(moment_mentions, as_evidence, "{cmd}: {}", run.stdout);
        if cmd == "audit" {
            assert_eq!(
                doc["tables"][0]["optimizer"]["tensor"],
                "optimizer.state.1.exp_avg_sq"
            );
        }
        assert_eq!(
            doc["checkpoint"]["stand_ins"][0]["global"], "argparse.Namespace",
            "{cmd}"
        );
    }
}

#[test]
fn numpy_object_arrays_are_listed_as_skipped_with_the_reason() {
    let expected: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(fixture("formats/torch_object_arrays_expected.json")).unwrap(),
    )
    .unwrap();
    let arrays = expected["torch_object_arrays.pt"].as_object().unwrap();
    let ckpt = open("formats/torch_object_arrays.pt");
    let mut want_numeric = Vec::new();
    let mut want_objects = Vec::new();
    for (name, a) in arrays {
        let shape: Vec<usize> = a["shape"]
            .as_array()
            .unwrap()
            .iter()
            .map(|d| d.as_u64().unwrap() as usize)
            .collect();
        let t = ckpt
            .tensor(name)
            .unwrap_or_else(|| panic!("no tensor `{name}`"));
        assert_eq!(t.shape, shape, "{name}: shape as torch.load sees it");
        if a["dtype"] == "object" {
            want_objects.push(name.clone());
        } else {
            want_numeric.push(name.clone());
        }
    }
    assert_eq!(
        want_objects.len(),
        3,
        "the generator writes three object arrays"
    );

    let run = posaudit(&[
        "scan",
        fixture("formats/torch_object_arrays.pt").to_str().unwrap(),
        "--json",
    ]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let doc: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let mut skipped: Vec<String> = doc["skipped"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| {
            assert_eq!(s["dtype"], "object", "{s}");
            assert!(
                s["reason"]
                    .as_str()
                    .unwrap()
                    .contains("a NumPy array of Python objects"),
                "{s}"
            );
            s["name"].as_str().unwrap().to_string()
        })
        .collect();
    skipped.sort();
    want_objects.sort();
    assert_eq!(skipped, want_objects);
    let tables: Vec<&str> = doc["tables"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t["name"].as_str().unwrap())
        .collect();
    assert_eq!(tables, want_numeric);
    // The audit reads the numeric table and lists the same skipped arrays.
    let run = posaudit(&[
        "audit",
        fixture("formats/torch_object_arrays.pt").to_str().unwrap(),
        "--json",
    ]);
    assert_ne!(run.code, 2, "{}", run.stderr);
    let doc: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    assert_eq!(doc["skipped"].as_array().unwrap().len(), 3);
    assert_eq!(doc["tables"][0]["name"], "pos_embed");
}
