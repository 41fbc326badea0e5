//! The rendered demo reports committed under `examples/demo/reports/` must be what the
//! current binary writes for the committed demo checkpoints (invented data, see
//! `examples/demo/README.md`). This test runs every command of [`REPORTS`] into a
//! temporary folder and compares the result with the committed copy, file by file and
//! line by line; it fails naming the first file and line that differ, or the file that is
//! missing or extra.
//!
//! When a change to the analyses or the renderers is intended, re-bless the committed
//! copies with
//!
//! ```text
//! POSAUDIT_BLESS_DEMO=1 cargo test --test demo_reports
//! ```
//!
//! which rewrites `examples/demo/reports/` from scratch (and removes report folders
//! that are no longer listed), then review the diff before committing it.
//!
//! Markdown and SVG files must match byte for byte. In `report.json`, numbers are
//! written with full f64 precision, and their last digits depend on the linear-algebra
//! backend (faer or, with `--features lapack`, LAPACK) and on the CPU's vector
//! instructions; there two numbers count as equal when they agree to a relative 1e-6
//! or an absolute 1e-8 (a numerically zero singular value comes out as 0 from one
//! backend and 7e-18 from another). Everything else in a JSON line, and every number
//! outside that tolerance, must match.

use std::fs;
use std::path::{Path, PathBuf};
use std::process::Command;

/// One committed report: its folder under `examples/demo/reports/` and the command
/// line that writes it (without `--out`), relative to the repository root, exactly as
/// `examples/demo/README.md` shows it.
struct DemoReport {
    name: &'static str,
    args: &'static [&'static str],
}

const CKPT: &str = "examples/demo/checkpoints";

/// Every committed report. Audits name `--threads 1`; the output does not depend on
/// the thread count (checked by `demo_reports_are_bit_identical_for_one_and_two_threads`).
const REPORTS: &[DemoReport] = &[
    DemoReport {
        name: "showcase",
        args: &[
            "audit",
            "examples/demo/checkpoints/showcase",
            "--threads",
            "1",
        ],
    },
    DemoReport {
        name: "text-extended",
        args: &[
            "audit",
            "examples/demo/checkpoints/text-extended",
            "--threads",
            "1",
        ],
    },
    DemoReport {
        name: "run-a-step-8000",
        args: &[
            "audit",
            "examples/demo/checkpoints/run-a/step-8000",
            "--threads",
            "1",
        ],
    },
    DemoReport {
        name: "rotary-extended-bf16",
        args: &[
            "audit",
            "examples/demo/checkpoints/rotary-extended-bf16",
            "--threads",
            "1",
        ],
    },
    DemoReport {
        name: "text-base-4096",
        args: &[
            "audit",
            "examples/demo/checkpoints/text-base-4096",
            "--threads",
            "1",
        ],
    },
    DemoReport {
        name: "vision-grid-16x16",
        args: &[
            "audit",
            "examples/demo/checkpoints/vision-grid-16x16",
            "--threads",
            "1",
        ],
    },
    DemoReport {
        name: "compare-run-a",
        args: &["compare", "examples/demo/checkpoints/run-a"],
    },
    DemoReport {
        name: "compare-run-a-run-b",
        args: &[
            "compare",
            "examples/demo/checkpoints/run-a/step-8000",
            "examples/demo/checkpoints/run-b/step-8000",
        ],
    },
    DemoReport {
        name: "compare-text-base-extended",
        args: &[
            "compare",
            "examples/demo/checkpoints/text-base",
            "examples/demo/checkpoints/text-extended",
        ],
    },
];

/// Relative and absolute tolerance for numbers in JSON files (see the module doc).
const JSON_REL_TOL: f64 = 1e-6;
const JSON_ABS_TOL: f64 = 1e-8;

fn repo_root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

fn committed_root() -> PathBuf {
    repo_root().join("examples/demo/reports")
}

/// Runs one report's command with `--out out` from the repository root, so the paths
/// in the report are the relative ones of the command line.
fn render(report: &DemoReport, out: &Path) {
    let result = Command::new(env!("CARGO_BIN_EXE_posaudit"))
        .current_dir(repo_root())
        .args(report.args)
        .arg("--out")
        .arg(out)
        .output()
        .expect("the posaudit binary runs");
    assert_eq!(
        result.status.code(),
        Some(0),
        "posaudit {} failed: {}",
        report.args.join(" "),
        String::from_utf8_lossy(&result.stderr)
    );
}

/// File names in `dir`, sorted; an absent folder has none.
fn file_names(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = match fs::read_dir(dir) {
        Ok(entries) => entries
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect(),
        Err(_) => Vec::new(),
    };
    names.sort();
    names
}

/// A piece of a line: text, or a number (with its text, for messages).
#[derive(Debug, PartialEq)]
enum Piece<'a> {
    Text(&'a str),
    Number(f64),
}

/// Splits a line into text and numbers. A number starts with a digit (or a minus sign
/// before a digit) that does not continue a word (`t05`, `v1` stay text), and is the
/// longest run of number characters that parses as f64.
fn pieces(line: &str) -> Vec<Piece<'_>> {
    let bytes = line.as_bytes();
    let mut out = Vec::new();
    let mut text_start = 0;
    let mut i = 0;
    while i < bytes.len() {
        let starts_number = {
            let digit_at = |k: usize| bytes.get(k).is_some_and(|b| b.is_ascii_digit());
            let begins = digit_at(i) || (bytes[i] == b'-' && digit_at(i + 1));
            let after_word =
                i > 0 && (bytes[i - 1].is_ascii_alphanumeric() || bytes[i - 1] == b'_');
            begins && !after_word
        };
        if starts_number {
            let mut end = i + 1;
            while end < bytes.len()
                && matches!(bytes[end], b'0'..=b'9' | b'.' | b'e' | b'E' | b'+' | b'-')
            {
                end += 1;
            }
            // Shrink to the longest prefix that is a number and does not end in a dot
            // ("1..2" → "1", "3e" → "3").
            let mut parsed = None;
            while end > i {
                let candidate = &line[i..end];
                if let (false, Ok(v)) = (candidate.ends_with('.'), candidate.parse::<f64>()) {
                    parsed = Some(v);
                    break;
                }
                end -= 1;
            }
            if let Some(v) = parsed {
                if text_start < i {
                    out.push(Piece::Text(&line[text_start..i]));
                }
                out.push(Piece::Number(v));
                text_start = end;
                i = end;
                continue;
            }
        }
        i += 1;
    }
    if text_start < line.len() {
        out.push(Piece::Text(&line[text_start..]));
    }
    out
}

fn numbers_agree(a: f64, b: f64) -> bool {
    let d = (a - b).abs();
    a == b || d <= JSON_ABS_TOL || d <= JSON_REL_TOL * a.abs().max(b.abs())
}

/// Whether two lines of a JSON report agree: same text, numbers within tolerance.
fn json_lines_agree(committed: &str, fresh: &str) -> bool {
    let (a, b) = (pieces(committed), pieces(fresh));
    a.len() == b.len()
        && a.iter().zip(&b).all(|pair| match pair {
            (Piece::Text(x), Piece::Text(y)) => x == y,
            (Piece::Number(x), Piece::Number(y)) => numbers_agree(*x, *y),
            _ => false,
        })
}

/// Compares one file; `None` when they agree, otherwise a message naming the first
/// differing line (1-based).
fn compare_file(label: &str, committed: &[u8], fresh: &[u8]) -> Option<String> {
    if committed == fresh {
        return None;
    }
    let (Ok(a), Ok(b)) = (std::str::from_utf8(committed), std::str::from_utf8(fresh)) else {
        return Some(format!("{label}: binary contents differ"));
    };
    let json = label.ends_with(".json");
    let (la, lb): (Vec<&str>, Vec<&str>) = (a.split('\n').collect(), b.split('\n').collect());
    for (i, (x, y)) in la.iter().zip(&lb).enumerate() {
        let same = if json { json_lines_agree(x, y) } else { x == y };
        if !same {
            let clip = |s: &str| s.chars().take(300).collect::<String>();
            return Some(format!(
                "{label}:{}: committed\n    {}\nregenerated\n    {}",
                i + 1,
                clip(x),
                clip(y)
            ));
        }
    }
    if la.len() != lb.len() {
        return Some(format!(
            "{label}:{}: committed has {} lines, regenerated {}",
            la.len().min(lb.len()) + 1,
            la.len(),
            lb.len()
        ));
    }
    None
}

/// Fails when a rendered file holds a machine path (the temporary output folder or the
/// checkout's absolute path): reports must name paths as given on the command line.
fn assert_no_machine_paths(dir: &Path, name: &str, bytes: &[u8]) {
    let text = String::from_utf8_lossy(bytes);
    for machine in [dir.to_string_lossy(), repo_root().to_string_lossy()] {
        assert!(
            !text.contains(machine.as_ref()),
            "{name} contains the machine path {machine}"
        );
    }
}

/// Replaces the committed reports with freshly rendered ones.
fn bless(fresh_root: &Path) {
    let committed = committed_root();
    if committed.exists() {
        fs::remove_dir_all(&committed).unwrap();
    }
    for report in REPORTS {
        let to = committed.join(report.name);
        fs::create_dir_all(&to).unwrap();
        for name in file_names(&fresh_root.join(report.name)) {
            fs::copy(fresh_root.join(report.name).join(&name), to.join(&name)).unwrap();
        }
    }
    eprintln!(
        "re-blessed {} demo reports in {}",
        REPORTS.len(),
        committed.display()
    );
}

#[test]
fn committed_demo_reports_match_the_binary() {
    let tmp = tempfile::tempdir().unwrap();
    for report in REPORTS {
        render(report, &tmp.path().join(report.name));
    }
    for report in REPORTS {
        let dir = tmp.path().join(report.name);
        for name in file_names(&dir) {
            let bytes = fs::read(dir.join(&name)).unwrap();
            assert_no_machine_paths(tmp.path(), &format!("{}/{name}", report.name), &bytes);
        }
    }
    if std::env::var_os("POSAUDIT_BLESS_DEMO").is_some_and(|v| v == "1") {
        bless(tmp.path());
    }

    let committed = committed_root();
    let shown = |rest: &str| format!("examples/demo/reports/{rest}");
    let listed: Vec<&str> = REPORTS.iter().map(|r| r.name).collect();
    for extra in file_names(&committed) {
        assert!(
            listed.contains(&extra.as_str()),
            "{} is committed but no command in tests/demo_reports.rs writes it \
             (re-bless with POSAUDIT_BLESS_DEMO=1 cargo test --test demo_reports)",
            shown(&extra)
        );
    }
    for report in REPORTS {
        let fresh_dir = tmp.path().join(report.name);
        let committed_dir = committed.join(report.name);
        let fresh = file_names(&fresh_dir);
        let kept = file_names(&committed_dir);
        for name in &fresh {
            assert!(
                kept.contains(name),
                "{} is missing: `posaudit {}` writes it \
                 (re-bless with POSAUDIT_BLESS_DEMO=1 cargo test --test demo_reports)",
                shown(&format!("{}/{name}", report.name)),
                report.args.join(" ")
            );
        }
        for name in &kept {
            assert!(
                fresh.contains(name),
                "{} is committed but `posaudit {}` no longer writes it \
                 (re-bless with POSAUDIT_BLESS_DEMO=1 cargo test --test demo_reports)",
                shown(&format!("{}/{name}", report.name)),
                report.args.join(" ")
            );
            let label = shown(&format!("{}/{name}", report.name));
            let a = fs::read(committed_dir.join(name)).unwrap();
            let b = fs::read(fresh_dir.join(name)).unwrap();
            if let Some(diff) = compare_file(&label, &a, &b) {
                panic!(
                    "{diff}\n(`posaudit {} --out DIR` no longer writes the committed \
                     report; if the change is intended, re-bless with \
                     POSAUDIT_BLESS_DEMO=1 cargo test --test demo_reports)",
                    report.args.join(" ")
                );
            }
        }
    }
}

/// The command of `report` with `--threads n` (replacing the one it has, if any).
fn with_threads(report: &DemoReport, n: &str) -> Vec<String> {
    let mut args: Vec<String> = Vec::new();
    let mut skip = false;
    for a in report.args {
        if skip {
            skip = false;
            continue;
        }
        if *a == "--threads" {
            skip = true;
            continue;
        }
        args.push(a.to_string());
    }
    args.extend(["--threads".to_string(), n.to_string()]);
    args
}

#[test]
fn demo_reports_are_bit_identical_for_one_and_two_threads() {
    // Determinism (src/linalg/mod.rs, "Threads and determinism"): every file the
    // command writes, JSON included, must be the same bytes whatever the thread count.
    let tmp = tempfile::tempdir().unwrap();
    for report in REPORTS {
        let mut dirs = Vec::new();
        for n in ["1", "2"] {
            let out = tmp.path().join(format!("{}-{n}", report.name));
            let args = with_threads(report, n);
            let result = Command::new(env!("CARGO_BIN_EXE_posaudit"))
                .current_dir(repo_root())
                .args(&args)
                .arg("--out")
                .arg(&out)
                .output()
                .expect("the posaudit binary runs");
            assert_eq!(result.status.code(), Some(0), "posaudit {}", args.join(" "));
            dirs.push(out);
        }
        let names = file_names(&dirs[0]);
        assert_eq!(names, file_names(&dirs[1]), "{}", report.name);
        for name in names {
            let a = fs::read(dirs[0].join(&name)).unwrap();
            let b = fs::read(dirs[1].join(&name)).unwrap();
            assert!(
                a == b,
                "{}/{name} differs between --threads 1 and --threads 2",
                report.name
            );
        }
    }
}

#[test]
fn every_demo_report_reads_committed_checkpoints() {
    for report in REPORTS {
        let paths: Vec<&&str> = report.args.iter().filter(|a| a.starts_with(CKPT)).collect();
        assert!(
            !paths.is_empty(),
            "{} names no demo checkpoint",
            report.name
        );
        for p in paths {
            assert!(repo_root().join(p).exists(), "{p} does not exist");
        }
    }
}

// The comparison itself: invented lines, checked against the rule in the module doc.

#[test]
fn pieces_split_numbers_from_words() {
    use Piece::*;
    assert_eq!(
        pieces("  \"x\": -1.5e-3, t05 rows 512..2048"),
        vec![
            Text("  \"x\": "),
            Number(-1.5e-3),
            Text(", t05 rows "),
            Number(512.0),
            Text(".."),
            Number(2048.0),
        ]
    );
}

#[test]
fn json_numbers_agree_within_the_tolerance_only() {
    // Last digits of a full-precision f64 (seen between faer and LAPACK): equal.
    assert!(json_lines_agree(
        "      0.9223549780441949,",
        "      0.9223549780441944,"
    ));
    // A numerically zero singular value: 0 from one backend, 7e-18 from another.
    assert!(json_lines_agree("0.0,", "7.076852826311271e-18,"));
    // A real change in the fourth digit, a changed count, changed text: different.
    assert!(!json_lines_agree(
        "0.9223549780441949,",
        "0.9224549780441949,"
    ));
    assert!(!json_lines_agree("\"count\": 257,", "\"count\": 258,"));
    assert!(!json_lines_agree(
        "\"code\": \"untrained-tail\"",
        "\"code\": \"untrained-rows\""
    ));
    assert!(!json_lines_agree("1.0, 2.0", "1.0"));
}

#[test]
fn compare_file_names_the_first_differing_line() {
    let a = b"line one\nline two\nline three\n";
    let b = b"line one\nline 2\nline three\n";
    let msg = compare_file("x/report.md", a, b).unwrap();
    assert!(msg.starts_with("x/report.md:2:"), "{msg}");
    // Markdown is exact: a tiny number change is a difference there.
    assert!(compare_file("r.md", b"1.0000000001", b"1.0000000002").is_some());
    // JSON tolerates last-digit noise but not a missing line.
    assert!(compare_file("r.json", b"[\n1.00000000000001\n]", b"[\n1.0\n]").is_none());
    let msg = compare_file("r.json", b"[\n1,\n2\n]", b"[\n1,\n2,\n3\n]").unwrap();
    assert!(msg.starts_with("r.json:3:"), "{msg}");
}
