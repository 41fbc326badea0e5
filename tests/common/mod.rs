//! Helpers shared by the integration tests: run the binary, find fixtures.
#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// The result of one run of the `posaudit` binary.
pub struct Run {
    pub code: i32,
    pub stdout: String,
    pub stderr: String,
}

/// Runs `posaudit` with `args` and captures everything.
pub fn posaudit(args: &[&str]) -> Run {
    let out = Command::new(env!("CARGO_BIN_EXE_posaudit"))
        .args(args)
        .output()
        .expect("the posaudit binary runs");
    Run {
        code: out.status.code().unwrap_or(-1),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    }
}

/// A fixture path under `fixtures/`.
pub fn fixture(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures")
        .join(rel)
}

/// Asserts an input error: exit 2, exactly one stderr line, naming `file` and `problem`.
pub fn assert_input_error(run: &Run, file: &str, problem: &str) {
    assert_eq!(run.code, 2, "stderr: {}", run.stderr);
    let lines: Vec<&str> = run.stderr.lines().collect();
    assert_eq!(
        lines.len(),
        1,
        "one stderr line expected, got: {:?}",
        run.stderr
    );
    assert!(lines[0].starts_with("posaudit: "), "{}", lines[0]);
    assert!(
        lines[0].contains(file),
        "`{file}` not named in: {}",
        lines[0]
    );
    assert!(
        lines[0].contains(problem),
        "`{problem}` not said in: {}",
        lines[0]
    );
    assert!(
        run.stdout.is_empty(),
        "no partial output on stdout: {}",
        run.stdout
    );
}

/// The table entry named `name` in a scan, audit or compare JSON document.
pub fn table<'a>(doc: &'a serde_json::Value, name: &str) -> &'a serde_json::Value {
    doc["tables"]
        .as_array()
        .expect("the document lists tables")
        .iter()
        .find(|t| t["name"] == name)
        .unwrap_or_else(|| panic!("no table {name} in {}", doc["tables"]))
}

/// A JSON array of `[start, end]` pairs as half-open row ranges.
pub fn pairs(v: &serde_json::Value) -> Vec<[usize; 2]> {
    v.as_array()
        .unwrap_or_else(|| panic!("not an array of ranges: {v}"))
        .iter()
        .map(|r| {
            [
                r[0].as_u64().unwrap() as usize,
                r[1].as_u64().unwrap() as usize,
            ]
        })
        .collect()
}

/// `fixtures/training/truth.json`, the truth the training generator wrote from its setup.
pub fn training_truth() -> serde_json::Value {
    let text = std::fs::read_to_string(fixture("training/truth.json")).expect("truth.json");
    serde_json::from_str(&text).expect("truth.json is JSON")
}
