//! `posaudit._native`: the glue between Python and the posaudit library.
//!
//! Every function here calls the library's own entry points and returns the JSON text the
//! command line prints with `--json` (written by `report::output::json_text`), so the
//! documents are equal to the CLI's by construction; the pure-Python layer
//! (`posaudit/__init__.py`) parses it. Errors are raised as `posaudit.InputError` with the
//! CLI's one-line message. The GIL is released while the library works.
//!
//! Library entry points used: the command line's own two files (`src/cli.rs`,
//! `src/cli_run.rs`, compiled in here with `#[path]`, so the console command is the same
//! CLI), `commands::{scan, audit, compare}` (`run`, `audit_opened`, `run_with`),
//! `checkpoint::Checkpoint::from_memory`, `config::ConfigHints::from_json`,
//! `report::{audit_files, compare_files}`, `report::output::{json_text, prepare_dir,
//! write_report}`.

use std::ffi::OsString;
use std::path::{Path, PathBuf};
use std::sync::Arc;

#[path = "../../src/cli.rs"]
#[allow(dead_code)]
mod cli;
#[path = "../../src/cli_run.rs"]
mod cli_run;

use posaudit::checkpoint::Checkpoint;
use posaudit::checkpoint::Dtype;
use posaudit::checkpoint::memory::MemoryTensor;
use posaudit::commands::{audit, compare, scan};
use posaudit::config::ConfigHints;
use posaudit::detect::Kind;
use posaudit::report::output::{json_text, prepare_dir, write_report};
use pyo3::create_exception;
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;

create_exception!(
    posaudit,
    InputError,
    PyValueError,
    "The input or the arguments could not be used (the command line's exit code 2); the message is the CLI's one line naming the file and the problem."
);

/// The CLI prints errors as one line; so does the exception.
fn input_error(message: String) -> PyErr {
    InputError::new_err(message.replace('\n', " "))
}

/// The library's errors, as the CLI prints them (one line naming the file).
fn lib_error(e: posaudit::Error) -> String {
    e.one_line()
}

/// Checks an `--out` folder before any work, as the command line does.
fn prepare(out: Option<&Path>) -> Result<(), String> {
    match out {
        Some(dir) => prepare_dir(dir).map_err(lib_error),
        None => Ok(()),
    }
}

/// The document's JSON text; with an `--out` folder, also writes it there as the command
/// line does: the rendered `files`, then `report.json`, each atomically.
fn finish<R: serde::Serialize>(
    report: &R,
    out: Option<&Path>,
    files: impl FnOnce(&R) -> Vec<(String, Vec<u8>)>,
) -> Result<String, String> {
    let json = json_text(report).map_err(lib_error)?;
    if let Some(dir) = out {
        let mut files = files(report);
        files.push(("report.json".into(), json.as_bytes().to_vec()));
        write_report(dir, &files).map_err(lib_error)?;
    }
    Ok(json)
}

/// Runs the command line with `argv` (program name first) and returns its exit code.
/// Output goes to the process's stdout/stderr (file descriptors 1 and 2).
#[pyfunction]
fn run_cli(py: Python<'_>, argv: Vec<OsString>) -> u8 {
    py.detach(move || cli_run::run(argv))
}

/// `posaudit scan PATH [--table NAME]... [--file NAME] --json`, as JSON text.
#[pyfunction]
#[pyo3(signature = (path, tables=Vec::new(), file=None))]
fn scan_json(
    py: Python<'_>,
    path: PathBuf,
    tables: Vec<String>,
    file: Option<String>,
) -> PyResult<String> {
    py.detach(move || {
        let report = scan::run(&scan::ScanOptions { path, tables, file }).map_err(lib_error)?;
        json_text(&report).map_err(lib_error)
    })
    .map_err(input_error)
}

/// `posaudit audit PATH [--table NAME]... [--file NAME] [--out DIR] --json`, as JSON text.
#[pyfunction]
#[pyo3(signature = (path, tables=Vec::new(), out=None, file=None))]
fn audit_json(
    py: Python<'_>,
    path: PathBuf,
    tables: Vec<String>,
    out: Option<PathBuf>,
    file: Option<String>,
) -> PyResult<String> {
    py.detach(move || {
        prepare(out.as_deref())?;
        let options = audit::AuditOptions {
            path,
            tables,
            threads: 1,
            file,
        };
        let report = audit::run(&options, &mut |_, _, _| {}).map_err(lib_error)?;
        finish(&report, out.as_deref(), posaudit::report::audit_files)
    })
    .map_err(input_error)
}

/// `posaudit compare PATH PATH... [--table NAME]... [--out DIR] --json`, as JSON text.
#[pyfunction]
#[pyo3(signature = (paths, tables=Vec::new(), out=None))]
fn compare_json(
    py: Python<'_>,
    paths: Vec<PathBuf>,
    tables: Vec<String>,
    out: Option<PathBuf>,
) -> PyResult<String> {
    py.detach(move || {
        prepare(out.as_deref())?;
        let report = compare::run(&compare::CompareOptions {
            paths,
            tables,
            ..Default::default()
        }).map_err(lib_error)?;
        finish(&report, out.as_deref(), posaudit::report::compare_files)
    })
    .map_err(input_error)
}

/// Bytes of a live array, borrowed for the length of one call.
///
/// The Python layer passes the address and extent of a NumPy array it holds a reference
/// to for the whole call, so the memory stays allocated; nothing here writes to it.
struct Borrowed {
    address: usize,
    len: usize,
}

impl AsRef<[u8]> for Borrowed {
    fn as_ref(&self) -> &[u8] {
        if self.len == 0 || self.address == 0 {
            return &[];
        }
        // SAFETY: `address..address + len` is the extent of a NumPy array's elements
        // (computed from its `__array_interface__` by `posaudit/__init__.py`, which keeps
        // the array alive until this call returns, and from which the checkpoint never
        // escapes). The bytes are only read.
        unsafe { std::slice::from_raw_parts(self.address as *const u8, self.len) }
    }
}

/// One in-memory table as the Python layer describes it:
/// (name, kind or None, address, byte length, dtype, shape, strides in elements or None).
type TableSpec = (
    String,
    Option<String>,
    usize,
    usize,
    String,
    Vec<usize>,
    Option<Vec<usize>>,
    bool,
);

fn parse_kind(kind: &str) -> Result<Kind, String> {
    Kind::ALL
        .iter()
        .copied()
        .find(|k| k.as_str() == kind)
        .ok_or_else(|| {
            format!(
                "unknown kind `{kind}`; expected one of {}",
                Kind::ALL.map(|k| k.as_str()).join(", ")
            )
        })
}

fn parse_dtype(dtype: &str) -> Result<Dtype, String> {
    Ok(match dtype {
        "F64" => Dtype::F64,
        "F32" => Dtype::F32,
        "F16" => Dtype::F16,
        "BF16" => Dtype::BF16,
        "I64" => Dtype::I64,
        "I32" => Dtype::I32,
        other => return Err(format!("unsupported element type {other}")),
    })
}

fn parse_config(config_json: Option<&str>) -> Result<Option<ConfigHints>, String> {
    let Some(text) = config_json else {
        return Ok(None);
    };
    let value: serde_json::Value =
        serde_json::from_str(text).map_err(|e| format!("config: not valid JSON: {e}"))?;
    if !value.is_object() {
        return Err("config: not a JSON object (expected a dict like config.json)".into());
    }
    Ok(Some(ConfigHints::from_json(&value, "config")))
}

fn memory_checkpoint(
    label: &str,
    specs: &[TableSpec],
    config: Option<ConfigHints>,
) -> Result<Checkpoint, String> {
    let mut tensors = Vec::with_capacity(specs.len());
    for (name, kind, address, len, dtype, shape, strides, big_endian) in specs {
        tensors.push(MemoryTensor {
            name: name.clone(),
            dtype: parse_dtype(dtype).map_err(|e| format!("{label}: `{name}`: {e}"))?,
            shape: shape.clone(),
            strides: strides.clone(),
            element_offset: 0,
            big_endian: *big_endian,
            bytes: Arc::new(Borrowed {
                address: *address,
                len: *len,
            }),
            kind: kind
                .as_deref()
                .map(parse_kind)
                .transpose()
                .map_err(|e| format!("{label}: `{name}`: {e}"))?,
        });
    }
    Checkpoint::from_memory(label, tensors, config).map_err(|e| e.to_string())
}

/// Audits tables held in memory (one checkpoint); JSON text of the audit document.
#[pyfunction]
#[pyo3(signature = (label, tables, config_json=None, out=None))]
fn audit_memory_json(
    py: Python<'_>,
    label: String,
    tables: Vec<TableSpec>,
    config_json: Option<String>,
    out: Option<PathBuf>,
) -> PyResult<String> {
    py.detach(move || {
        posaudit::linalg::set_threads(1);
        let config = parse_config(config_json.as_deref())?;
        prepare(out.as_deref())?;
        let ckpt = memory_checkpoint(&label, &tables, config)?;
        let names: Vec<String> = tables.iter().map(|t| t.0.clone()).collect();
        let report = audit::audit_opened(&ckpt, &names, &mut |_, _, _| {}).map_err(lib_error)?;
        drop(ckpt);
        finish(&report, out.as_deref(), posaudit::report::audit_files)
    })
    .map_err(input_error)
}

/// Compares checkpoints held in memory (one list of tables per step, each step labelled);
/// JSON text of the compare document.
#[pyfunction]
#[pyo3(signature = (labels, steps, config_json=None, out=None))]
fn compare_memory_json(
    py: Python<'_>,
    labels: Vec<String>,
    steps: Vec<Vec<TableSpec>>,
    config_json: Option<String>,
    out: Option<PathBuf>,
) -> PyResult<String> {
    py.detach(move || {
        if labels.len() != steps.len() {
            return Err(format!("{} labels for {} steps", labels.len(), steps.len()));
        }
        let config = parse_config(config_json.as_deref())?;
        prepare(out.as_deref())?;
        let paths: Vec<PathBuf> = labels.iter().map(PathBuf::from).collect();
        let open = |path: &Path| -> posaudit::Result<Checkpoint> {
            let index = paths.iter().position(|p| p == path).ok_or_else(|| {
                posaudit::Error::Usage(format!("{}: no such step", path.display()))
            })?;
            memory_checkpoint(&labels[index], &steps[index], config.clone())
                .map_err(posaudit::Error::Usage)
        };
        // Every named table is compared, detected or not (as with `--table`).
        let mut names: Vec<String> = Vec::new();
        for spec in steps.iter().flatten() {
            if !names.contains(&spec.0) {
                names.push(spec.0.clone());
            }
        }
        let options = compare::CompareOptions {
            paths: paths.clone(),
            tables: names,
            ..Default::default()
        };
        let report = compare::run_with(&options, &open).map_err(lib_error)?;
        finish(&report, out.as_deref(), posaudit::report::compare_files)
    })
    .map_err(input_error)
}

/// The native half of the `posaudit` package; use the functions of `posaudit` instead.
#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("InputError", m.py().get_type::<InputError>())?;
    m.add_function(wrap_pyfunction!(run_cli, m)?)?;
    m.add_function(wrap_pyfunction!(scan_json, m)?)?;
    m.add_function(wrap_pyfunction!(audit_json, m)?)?;
    m.add_function(wrap_pyfunction!(compare_json, m)?)?;
    m.add_function(wrap_pyfunction!(audit_memory_json, m)?)?;
    m.add_function(wrap_pyfunction!(compare_memory_json, m)?)?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add("KINDS", Kind::ALL.map(|k| k.as_str()).to_vec())?;
    Ok(())
}
