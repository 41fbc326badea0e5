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
