//! Writing report files: the output folder is prepared before any analysis runs (so a
//! bad path fails early), and each file is written atomically — to a temporary file in
//! the same folder, then renamed — so an interrupted run never leaves a half-written
//! report behind.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Creates `dir` if needed and checks that files can be written in it.
pub fn prepare_dir(dir: &Path) -> Result<(), String> {
    fs::create_dir_all(dir)
        .map_err(|e| format!("{}: cannot create output folder: {e}", dir.display()))?;
    let probe = dir.join(format!(".posaudit-write-test-{}", std::process::id()));
    fs::write(&probe, b"")
        .map_err(|e| format!("{}: cannot write in output folder: {e}", dir.display()))?;
    let _ = fs::remove_file(&probe);
    Ok(())
}

/// Writes `bytes` to `dir/name` atomically (temporary file, fsync, rename).
pub fn write_atomically(dir: &Path, name: &str, bytes: &[u8]) -> Result<PathBuf, String> {
    let target = dir.join(name);
    let tmp = dir.join(format!(".{name}.tmp-{}", std::process::id()));
    let result = (|| -> std::io::Result<()> {
        let mut f = fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        fs::rename(&tmp, &target)
    })();
    if let Err(e) = result {
        let _ = fs::remove_file(&tmp);
        return Err(format!("{}: cannot write: {e}", target.display()));
    }
    Ok(target)
}

/// All files of one report, written together: the plots first, then the documents that
/// link them, so a reader never sees a report whose plots are missing.
pub fn write_report(dir: &Path, files: &[(String, Vec<u8>)]) -> Result<Vec<PathBuf>, String> {
    let mut order: Vec<&(String, Vec<u8>)> = files.iter().collect();
    order.sort_by_key(|(name, _)| !name.ends_with(".svg"));
    order
        .into_iter()
        .map(|(name, bytes)| write_atomically(dir, name, bytes))
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn writes_files_and_leaves_no_temporaries() {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("nested/out");
        prepare_dir(&out).unwrap();
        write_report(
            &out,
            &[
                ("report.md".into(), b"# r".to_vec()),
                ("a.svg".into(), b"<svg/>".to_vec()),
            ],
        )
        .unwrap();
        let mut names: Vec<String> = fs::read_dir(&out)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        assert_eq!(names, vec!["a.svg", "report.md"]);
        assert_eq!(fs::read(out.join("report.md")).unwrap(), b"# r");
    }

    #[test]
    fn an_unwritable_folder_is_a_one_line_error() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join("plain-file");
        fs::write(&file, b"x").unwrap();
        let err = prepare_dir(&file.join("sub")).unwrap_err();
        assert!(err.contains("plain-file") && !err.contains('\n'), "{err}");
    }
}

/// The JSON text of a report: indented objects, but arrays that hold only numbers,
/// strings, booleans or nulls on one line (per-row signals are long; one number per line
/// made reports ten times longer to scroll). Ends with a newline. Same document as
/// `serde_json::to_string_pretty`, only the whitespace differs.
pub fn json_text<T: serde::Serialize>(value: &T) -> Result<String, String> {
    let value =
        serde_json::to_value(value).map_err(|e| format!("cannot serialise the report: {e}"))?;
    let mut out = String::new();
    write_json(&value, 0, &mut out);
    out.push('\n');
    Ok(out)
}

fn write_json(v: &serde_json::Value, depth: usize, out: &mut String) {
    use serde_json::Value;
    let indent = |out: &mut String, d: usize| out.extend(std::iter::repeat_n("  ", d));
    match v {
        Value::Array(items) if items.is_empty() => out.push_str("[]"),
        Value::Array(items) if items.iter().all(|x| !x.is_array() && !x.is_object()) => {
            out.push('[');
            for (i, x) in items.iter().enumerate() {
                if i > 0 {
                    out.push_str(", ");
                }
                out.push_str(&x.to_string());
            }
            out.push(']');
        }
        Value::Array(items) => {
            out.push_str("[\n");
            for (i, x) in items.iter().enumerate() {
                indent(out, depth + 1);
                write_json(x, depth + 1, out);
                out.push_str(if i + 1 < items.len() { ",\n" } else { "\n" });
            }
            indent(out, depth);
            out.push(']');
        }
        Value::Object(map) if map.is_empty() => out.push_str("{}"),
        Value::Object(map) => {
            out.push_str("{\n");
            for (i, (k, x)) in map.iter().enumerate() {
                indent(out, depth + 1);
                out.push_str(&Value::String(k.clone()).to_string());
                out.push_str(": ");
                write_json(x, depth + 1, out);
                out.push_str(if i + 1 < map.len() { ",\n" } else { "\n" });
            }
            indent(out, depth);
            out.push('}');
        }
        scalar => out.push_str(&scalar.to_string()),
    }
}

#[cfg(test)]
mod json_tests {
    use super::json_text;

    #[test]
    fn json_text_is_the_same_document_as_serde_json_pretty() {
        let v = serde_json::json!({
            "a": [1.5, 2, null, "x\"y"],
            "b": {"c": [], "d": {}, "e": [[1, 2], {"f": true}]},
            "g": 1e-300
        });
        let text = json_text(&v).unwrap();
        assert!(text.contains("\"a\": [1.5, 2, null, \"x\\\"y\"]"), "{text}");
        assert!(text.ends_with("}\n"));
        let back: serde_json::Value = serde_json::from_str(&text).unwrap();
        assert_eq!(back, v);
    }
}
