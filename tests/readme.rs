//! README.md is the user's guide to the findings: its "How to read the findings" tables
//! must have a row for every finding code the source can emit (`FindingCode::ALL`), so
//! a user who meets a code in a report can look it up.

use std::fs;
use std::path::Path;

use posaudit::model::FindingCode;

#[test]
fn readme_explains_every_finding_code() {
    let readme =
        fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("README.md")).unwrap();
    let codes: Vec<&str> = FindingCode::ALL.iter().map(|c| c.as_str()).collect();
    // The six contract codes of design.md ("Finding codes") are among them.
    for contract in [
        "untrained-tail",
        "untrained-rows",
        "sinusoid-mismatch",
        "low-precision",
        "unchanged-rows",
        "non-finite",
    ] {
        assert!(codes.contains(&contract), "{contract} not found in src/");
    }
    for code in &codes {
        let row = format!("| `{code}` |");
        assert!(
            readme.lines().any(|l| l.starts_with(&row)),
            "README.md has no findings-table row for `{code}`"
        );
    }
}
