//! README.md is the user's guide to the findings: its "How to read the findings" tables
//! must have a row for every finding code the source can emit, so a user who meets a
//! code in a report can look it up.

use std::fs;
use std::path::Path;

/// Every `.rs` file under `dir`, recursively.
fn rust_files(dir: &Path, out: &mut Vec<std::path::PathBuf>) {
    for entry in fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The finding codes set in the source: the quoted kebab-case strings on lines that
/// assign a finding's `code:` field (`code: "zero-rows"`, or
/// `code: if tail { "untrained-tail" } else { "untrained-rows" }`).
fn codes_in_source() -> Vec<String> {
    let mut files = Vec::new();
    rust_files(
        &Path::new(env!("CARGO_MANIFEST_DIR")).join("src"),
        &mut files,
    );
    let mut codes = Vec::new();
    for file in files {
        let text = fs::read_to_string(&file).unwrap();
        for line in text.lines().filter(|l| l.trim_start().starts_with("code:")) {
            for (i, quoted) in line.split('"').enumerate() {
                let kebab = !quoted.is_empty()
                    && quoted.chars().all(|c| c.is_ascii_lowercase() || c == '-');
                if i % 2 == 1 && kebab && !codes.contains(&quoted.to_string()) {
                    codes.push(quoted.to_string());
                }
            }
        }
    }
    codes.sort();
    codes
}

#[test]
fn readme_explains_every_finding_code() {
    let readme =
        fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("README.md")).unwrap();
    let codes = codes_in_source();
    // The six contract codes of design.md ("Finding codes") are among them.
    for contract in [
        "untrained-tail",
        "untrained-rows",
        "sinusoid-mismatch",
        "low-precision",
        "unchanged-rows",
        "non-finite",
    ] {
        assert!(
            codes.iter().any(|c| c == contract),
            "{contract} not found in src/"
        );
    }
    for code in &codes {
        let row = format!("| `{code}` |");
        assert!(
            readme.lines().any(|l| l.starts_with(&row)),
            "README.md has no findings-table row for `{code}`"
        );
    }
}
