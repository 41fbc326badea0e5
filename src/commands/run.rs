//! Run folders: the checkpoints a training run saved side by side in one folder
//! (`checkpoint-500/`, `step-2000/`, `global_step800/`, `epoch=3-step=1200.ckpt`,
//! `model_1000.safetensors`), found and ordered by the step number in their names, and
//! the labels compare gives to checkpoints and steps.
//!
//! [`step_number`] and [`labels`] are pure; [`find_run`] lists one folder (names and
//! whether each entry holds weights, never the weights themselves).

use std::path::{Path, PathBuf};

use super::WEIGHT_ENDINGS;
use crate::model::compare::{RunEntry, RunFolder};

/// File name endings that make a file in a run folder a checkpoint of its own (the weight
/// files of [`WEIGHT_ENDINGS`] and Lightning's `.ckpt`, a `torch.save` archive).
fn is_checkpoint_file(name: &str) -> bool {
    let lower = name.to_ascii_lowercase();
    lower.ends_with(".ckpt") || WEIGHT_ENDINGS.iter().any(|end| lower.ends_with(end))
}

/// The stem of a checkpoint name: without a checkpoint file's extension (or `.index`).
fn stem(name: &str) -> &str {
    name.rsplit_once('.')
        .filter(|(_, ext)| is_checkpoint_file(&format!(".{ext}")) || *ext == "index")
        .map_or(name, |(stem, _)| stem)
}

/// The training step a checkpoint's name states with a step word: digits after `step`
/// (`step-2000`, `global_step800`, `epoch=3-step=1200`, `step_00120`), else after
/// `checkpoint`, `ckpt` or `iter` (`checkpoint-500`, `iter_0004000`). Separators between
/// the word and the digits may be `-`, `_`, `=`, `.`, a space or nothing.
pub fn step_number(name: &str) -> Option<u64> {
    let lower = stem(name).to_ascii_lowercase();
    ["step", "checkpoint", "ckpt", "iter"]
        .iter()
        .find_map(|word| number_after(&lower, word))
}

/// A trailing counter without a step word: the stem is digits (`000123`), or a word
/// without digits, a separator and digits (`model_1000`, `weights-20`). Names such as
/// `t5-like`, `bf16-angles` or `run2_epoch3` have none.
fn trailing_counter(name: &str) -> Option<(String, u64)> {
    let lower = stem(name).to_ascii_lowercase();
    let digits_at = lower.trim_end_matches(|c: char| c.is_ascii_digit()).len();
    let (head, digits) = lower.split_at(digits_at);
    if digits.is_empty() || head.chars().any(|c| c.is_ascii_digit()) {
        return None;
    }
    if !(head.is_empty() || head.ends_with(['-', '_', '=', '.', ' '])) {
        return None;
    }
    Some((head.to_string(), digits.parse().ok()?))
}

/// The training steps of the checkpoints named `names`, taken together: a step word
/// ([`step_number`]) counts alone; a bare trailing counter (`model_1000`, `000123`)
/// counts only when another name has the same text around its counter, so that a
/// number in a model's own name (`text-base-4096`, `t5-like`) is never read as a step.
pub fn steps_of(names: &[&str]) -> Vec<Option<u64>> {
    let counters: Vec<Option<(String, u64)>> = names.iter().map(|n| trailing_counter(n)).collect();
    names
        .iter()
        .zip(&counters)
        .map(|(name, counter)| {
            step_number(name).or_else(|| {
                let (head, n) = counter.as_ref()?;
                let shared = counters.iter().flatten().filter(|(h, _)| h == head).count() > 1;
                shared.then_some(*n)
            })
        })
        .collect()
}

/// Digits following the last occurrence of `word` in `s` (after optional separators).
fn number_after(s: &str, word: &str) -> Option<u64> {
    s.rmatch_indices(word).find_map(|(at, _)| {
        let rest = s[at + word.len()..].trim_start_matches(['-', '_', '=', '.', ' ']);
        let digits: String = rest.chars().take_while(|c| c.is_ascii_digit()).collect();
        if digits.is_empty() {
            None
        } else {
            digits.parse().ok()
        }
    })
}

/// Lists the checkpoints of the run folder `dir`: sub-folders that hold weight files and
/// checkpoint files, those with a step number in their names ordered by it. `None` when
/// `dir` is not a folder or holds fewer than two such entries with step numbers (it is
/// then one checkpoint, or not a run folder).
pub fn find_run(dir: &Path) -> Option<RunFolder> {
    let entries = std::fs::read_dir(dir).ok()?;
    let mut found = Vec::new();
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        if name.starts_with('.') {
            continue;
        }
        let path = e.path();
        let folder = if path.is_dir() {
            let holds_weights = std::fs::read_dir(&path).is_ok_and(|files| {
                files
                    .flatten()
                    .any(|f| is_checkpoint_file(&f.file_name().to_string_lossy()))
            });
            if !holds_weights {
                continue;
            }
            true
        } else if path.is_file() && is_checkpoint_file(&name) {
            false
        } else {
            continue;
        };
        found.push(RunEntry {
            step: None,
            name,
            folder,
        });
    }
    let names: Vec<&str> = found.iter().map(|e| e.name.as_str()).collect();
    let steps = steps_of(&names);
    for (e, step) in found.iter_mut().zip(steps) {
        e.step = step;
    }
    let (mut checkpoints, mut skipped): (Vec<_>, Vec<_>) =
        found.into_iter().partition(|e| e.step.is_some());
    if checkpoints.len() < 2 {
        return None;
    }
    checkpoints.sort_by(|a, b| a.step.cmp(&b.step).then_with(|| a.name.cmp(&b.name)));
    skipped.sort_by(|a, b| a.name.cmp(&b.name));
    Some(RunFolder {
        path: dir.display().to_string(),
        checkpoints,
        skipped,
    })
}

/// Labels of the checkpoints at `paths`: the last path component (a file's name without
/// its extension), extended by parent components until the labels are unique
/// (`run-a/step-8000` and `run-b/step-8000`); `#i` is appended to any label still shared.
pub fn labels(paths: &[PathBuf]) -> Vec<String> {
    let parts: Vec<Vec<String>> = paths
        .iter()
        .map(|p| {
            let mut comps: Vec<String> = p
                .components()
                .filter_map(|c| match c {
                    std::path::Component::Normal(s) => Some(s.to_string_lossy().into_owned()),
                    _ => None,
                })
                .collect();
            if let Some(last) = comps.last_mut()
                && p.is_file()
                && let Some((stem, ext)) = last.rsplit_once('.')
                && !stem.is_empty()
                && is_checkpoint_file(&format!(".{ext}"))
            {
                *last = stem.to_string();
            }
            if comps.is_empty() {
                comps.push(p.display().to_string());
            }
            comps
        })
        .collect();
    let label = |i: usize, depth: usize| {
        let c = &parts[i];
        c[c.len().saturating_sub(depth)..].join("/")
    };
    let max_depth = parts.iter().map(Vec::len).max().unwrap_or(1);
    let mut depth = 1;
    let mut out: Vec<String> = (0..paths.len()).map(|i| label(i, depth)).collect();
    while depth < max_depth && has_repeats(&out) {
        depth += 1;
        out = (0..paths.len()).map(|i| label(i, depth)).collect();
    }
    if has_repeats(&out) {
        let copy = out.clone();
        for (i, l) in out.iter_mut().enumerate() {
            if copy.iter().filter(|o| *o == l).count() > 1 {
                l.push_str(&format!(" #{i}"));
            }
        }
    }
    out
}

fn has_repeats(v: &[String]) -> bool {
    v.iter().enumerate().any(|(i, a)| v[..i].contains(a))
}

#[cfg(test)]
mod tests {
    use super::*;

    // The names are the folder and file names common training tools write (common
    // practice: `checkpoint-N` of the transformers Trainer, `global_stepN` of DeepSpeed,
    // `epoch=E-step=S.ckpt` of Lightning, `iter_N` of Megatron, from memory).
    #[test]
    fn step_numbers_of_common_names() {
        assert_eq!(step_number("checkpoint-500"), Some(500));
        assert_eq!(step_number("checkpoint-1000"), Some(1000));
        assert_eq!(step_number("step-2000"), Some(2000));
        assert_eq!(step_number("global_step800"), Some(800));
        assert_eq!(step_number("epoch=3-step=1200.ckpt"), Some(1200));
        assert_eq!(step_number("iter_0004000"), Some(4000));
        assert_eq!(step_number("model.safetensors"), None);
        assert_eq!(step_number("run2_epoch3"), None);
        assert_eq!(step_number("step"), None);
        // Bare counters count only when the names share the text around them.
        assert_eq!(
            steps_of(&["model_1000.pt", "model_500.pt", "000123.safetensors"]),
            vec![Some(1000), Some(500), None]
        );
        assert_eq!(
            steps_of(&["000123.safetensors", "000456.safetensors"]),
            vec![Some(123), Some(456)]
        );
        // Numbers that belong to a model's name are not steps.
        assert_eq!(
            steps_of(&[
                "t5-like",
                "encoder-fixed-bf16-angles",
                "text-base-4096",
                "text-base"
            ]),
            vec![None, None, None, None]
        );
        assert_eq!(
            steps_of(&["step-0800", "training-step-0800.pt"]),
            vec![Some(800), Some(800)]
        );
    }

    #[test]
    fn labels_are_unique_suffixes() {
        let p = |s: &str| PathBuf::from(s);
        assert_eq!(
            labels(&[p("runs/a/step-1000"), p("runs/a/step-2000")]),
            vec!["step-1000", "step-2000"]
        );
        assert_eq!(
            labels(&[p("run-a/step-8000"), p("run-b/step-8000")]),
            vec!["run-a/step-8000", "run-b/step-8000"]
        );
        assert_eq!(labels(&[p("x/m"), p("x/m")]), vec!["x/m #0", "x/m #1"]);
    }

    #[test]
    fn a_run_folder_is_found_and_ordered_numerically() {
        let dir = std::env::temp_dir().join(format!("posaudit-run-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        for sub in [
            "checkpoint-1000",
            "checkpoint-500",
            "checkpoint-20000",
            "logs",
        ] {
            std::fs::create_dir_all(dir.join(sub)).unwrap();
        }
        for sub in ["checkpoint-1000", "checkpoint-500", "checkpoint-20000"] {
            std::fs::write(dir.join(sub).join("model.safetensors"), b"x").unwrap();
        }
        std::fs::write(dir.join("logs").join("events.txt"), b"x").unwrap();
        std::fs::write(dir.join("final.safetensors"), b"x").unwrap();
        std::fs::write(dir.join("notes.txt"), b"x").unwrap();
        let run = find_run(&dir).unwrap();
        let names: Vec<&str> = run.checkpoints.iter().map(|e| e.name.as_str()).collect();
        assert_eq!(
            names,
            vec!["checkpoint-500", "checkpoint-1000", "checkpoint-20000"]
        );
        assert_eq!(run.skipped.len(), 1);
        assert_eq!(run.skipped[0].name, "final.safetensors");
        assert!(find_run(&dir.join("checkpoint-500")).is_none());
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
