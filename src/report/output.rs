//! Writing report files: the output folder is prepared before any analysis runs (so a
//! bad path fails early), and each file is written atomically — to a temporary file in
//! the same folder, then renamed — so an interrupted run never leaves a half-written
//! report behind.

use std::fs;
use std::io::Write;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

fn output_error(path: &Path, problem: String) -> Error {
    Error::Output {
        path: path.to_path_buf(),
        problem,
    }
}

/// Creates `dir` if needed and checks that files can be written in it.
pub fn prepare_dir(dir: &Path) -> Result<()> {
    if dir.exists() && !dir.is_dir() {
        return Err(output_error(
            dir,
            "--out names a file; give a folder (it is created if missing)".into(),
        ));
    }
    fs::create_dir_all(dir)
        .map_err(|e| output_error(dir, format!("cannot create output folder: {e}")))?;
    let probe = dir.join(format!(".posaudit-write-test-{}", std::process::id()));
    fs::write(&probe, b"")
        .map_err(|e| output_error(dir, format!("cannot write in output folder: {e}")))?;
    let _ = fs::remove_file(&probe);
    Ok(())
}

/// Writes `bytes` to `dir/name` atomically (temporary file, fsync, rename).
pub fn write_atomically(dir: &Path, name: &str, bytes: &[u8]) -> Result<PathBuf> {
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
        return Err(output_error(&target, format!("cannot write: {e}")));
    }
    Ok(target)
}

/// True for the names of the plots a report writes (`t01-norms.svg`, `t0-x-change.svg`,
/// `config-rope.svg`): only these are removed as stale from a reused folder.
fn is_report_plot(name: &str) -> bool {
    let Some(stem) = name.strip_suffix(".svg") else {
        return false;
    };
    let numbered = stem
        .strip_prefix('t')
        .is_some_and(|rest| rest.starts_with(|c: char| c.is_ascii_digit()) && rest.contains('-'));
    numbered || stem.starts_with("config-")
}

/// All files of one report, written together: the plots first, then the documents that
/// link them, so a reader never sees a report whose plots are missing. Plots of an
/// earlier report in the same folder that this one does not write are removed
/// afterwards, so the folder holds exactly what `report.md` links.
pub fn write_report(dir: &Path, files: &[(String, Vec<u8>)]) -> Result<Vec<PathBuf>> {
    let mut order: Vec<&(String, Vec<u8>)> = files.iter().collect();
    order.sort_by_key(|(name, _)| !name.ends_with(".svg"));
    let written = order
        .into_iter()
        .map(|(name, bytes)| write_atomically(dir, name, bytes))
        .collect::<Result<Vec<PathBuf>>>()?;
    if let Ok(entries) = fs::read_dir(dir) {
        for entry in entries.flatten() {
            let name = entry.file_name().to_string_lossy().into_owned();
            if is_report_plot(&name) && !files.iter().any(|(n, _)| *n == name) {
                fs::remove_file(entry.path()).map_err(|e| {
                    output_error(&entry.path(), format!("cannot remove a stale plot: {e}"))
                })?;
            }
        }
    }
    Ok(written)
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
        let err = prepare_dir(&file.join("sub")).unwrap_err().to_string();
        assert!(err.contains("plain-file") && !err.contains('\n'), "{err}");
        let err = prepare_dir(&file).unwrap_err().to_string();
        assert!(
            err.contains("names a file") && !err.contains("os error"),
            "{err}"
        );
    }

    #[test]
    fn a_reused_folder_keeps_no_stale_plots() {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path();
        for name in [
            "t01-norms.svg",
            "t02-spectrum.svg",
            "config-rope.svg",
            "mine.svg",
        ] {
            fs::write(out.join(name), b"<svg/>").unwrap();
        }
        write_report(
            out,
            &[
                ("t01-norms.svg".into(), b"<svg/>".to_vec()),
                ("report.md".into(), b"# r".to_vec()),
            ],
        )
        .unwrap();
        let mut names: Vec<String> = fs::read_dir(out)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        names.sort();
        // The user's own file stays; plots the new report does not write are gone.
        assert_eq!(names, vec!["mine.svg", "report.md", "t01-norms.svg"]);
    }
}

/// The JSON text of a report: indented objects, but arrays that hold only numbers,
/// strings, booleans or nulls on one line (per-row signals are long; one number per line
/// made reports ten times longer to scroll). Ends with a newline. Same document as
/// `serde_json::to_string_pretty`, only the whitespace differs.
pub fn json_text<T: serde::Serialize>(value: &T) -> Result<String> {
    let value = serde_json::to_value(value)?;
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
