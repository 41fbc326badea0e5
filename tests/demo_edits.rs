//! The demo's edited checkpoints (`examples/demo/checkpoints/text-base-4096/`,
//! `vision-grid-16x16/`) are what `posaudit extend` writes today from the committed
//! demo checkpoints (invented data). This test runs each command of [`EDITS`] into a
//! temporary folder and compares the written `model.safetensors` and `config.json`
//! byte for byte with the committed copies. Their audit reports are committed with
//! the others (`tests/demo_reports.rs`).
//!
//! Re-bless after an intended change with
//!
//! ```text
//! POSAUDIT_BLESS_DEMO=1 cargo test --test demo_edits
//! POSAUDIT_BLESS_DEMO=1 cargo test --test demo_reports
//! ```

use std::fs;
use std::path::Path;
use std::process::Command;

/// One edited checkpoint: its folder under `examples/demo/checkpoints/` and the
/// `extend` arguments that write it (without `--out`), as the README shows them.
struct DemoEdit {
    name: &'static str,
    args: &'static [&'static str],
}

const EDITS: &[DemoEdit] = &[
    DemoEdit {
        name: "text-base-4096",
        args: &[
            "extend",
            "examples/demo/checkpoints/text-base",
            "--table",
            "tern.embeddings.position_embeddings.weight",
            "--to",
            "4096",
            "--method",
            "interpolate",
        ],
    },
    DemoEdit {
        name: "vision-grid-16x16",
        args: &[
            "extend",
            "examples/demo/checkpoints/vision-grid",
            "--table",
            "kittiwake.vision.embeddings.position_embeddings",
            "--grid",
            "16x16",
            "--method",
            "bicubic",
        ],
    },
];

const FILES: [&str; 2] = ["model.safetensors", "config.json"];

#[test]
fn committed_demo_edits_match_the_binary() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let tmp = tempfile::tempdir().unwrap();
    let bless = std::env::var_os("POSAUDIT_BLESS_DEMO").is_some_and(|v| v == "1");
    for edit in EDITS {
        let out = tmp.path().join(edit.name);
        let run = Command::new(env!("CARGO_BIN_EXE_posaudit"))
            .current_dir(root)
            .args(edit.args)
            .arg("--out")
            .arg(&out)
            .output()
            .unwrap();
        assert_eq!(
            run.status.code(),
            Some(0),
            "posaudit {}: {}",
            edit.args.join(" "),
            String::from_utf8_lossy(&run.stderr)
        );
        let committed = root.join("examples/demo/checkpoints").join(edit.name);
        let mut written: Vec<String> = fs::read_dir(&out)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        written.sort();
        assert_eq!(
            written,
            ["config.json", "model.safetensors"],
            "{}",
            edit.name
        );
        if bless {
            fs::create_dir_all(&committed).unwrap();
            for f in FILES {
                fs::copy(out.join(f), committed.join(f)).unwrap();
            }
        }
        for f in FILES {
            let a = fs::read(committed.join(f)).unwrap_or_default();
            let b = fs::read(out.join(f)).unwrap();
            assert!(
                a == b,
                "examples/demo/checkpoints/{}/{f} is not what `posaudit {}` writes \
                 (re-bless with POSAUDIT_BLESS_DEMO=1 cargo test --test demo_edits)",
                edit.name,
                edit.args.join(" ")
            );
        }
    }
}
