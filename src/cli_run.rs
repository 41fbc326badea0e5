//! The command line as one function, [`run`]: parse, run the command, render its
//! document, write stdout and `--out` (through [`deliver`], the one place that writes),
//! and map the outcome to an exit code (0 done, 1 a finding at or above `--fail-on`, 2
//! the input or the arguments could not be used). The binary (`main.rs`) and the Python
//! package's console command both call it, so they behave the same.

use std::ffi::OsString;
use std::io::Write;
use std::path::Path;

use crate::cli::{self, Cli, Command, FailOn};
use clap::Parser;
use posaudit::commands::{audit, compare, extend, scan};
use posaudit::model::Severity;
use posaudit::report::{self, output, terminal};
use posaudit::{Error, Result};

/// Runs the command line `args` (the program name first, as `std::env::args_os` gives
/// it) and returns the exit code.
pub fn run(args: Vec<OsString>) -> u8 {
    let cli = match Cli::try_parse_from(args) {
        Ok(cli) => cli,
        Err(e) => return cli::report_parse_error(e),
    };
    match dispatch(cli) {
        Ok(code) => code,
        Err(e) => {
            // One line, naming the file and the problem (design.md: exit code 2).
            eprintln!("posaudit: {}", e.one_line());
            2
        }
    }
}

/// Writes to stdout; a closed pipe (`posaudit scan x | head`) is not an error.
fn emit(text: &str) -> Result<()> {
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|_| out.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        Err(e) => Err(Error::Usage(format!("cannot write to stdout: {e}"))),
    }
}

/// What a command's document renders to.
struct Rendered {
    /// The JSON document.
    json: String,
    /// The terminal summary.
    terminal: String,
    /// `report.md` and the plots it links, for `--out`.
    files: Vec<(String, Vec<u8>)>,
}

/// The one writer: the `--out` folder (plots, then `report.json` and `report.md`, each
/// atomically), then stdout (the JSON with `--json`, else the terminal summary).
fn deliver(rendered: Rendered, out: Option<&Path>, json: bool) -> Result<()> {
    if let Some(dir) = out {
        let mut files = rendered.files;
        files.push(("report.json".into(), rendered.json.clone().into_bytes()));
        output::write_report(dir, &files)?;
    }
    if json {
        emit(&rendered.json)
    } else {
        let mut text = rendered.terminal;
        if let Some(dir) = out {
            text.push_str(&format!(
                "\nreport written to {}\n",
                dir.join("report.md").display()
            ));
        }
        emit(&text)
    }
}

fn fail_level(fail_on: Option<FailOn>) -> Option<Severity> {
    fail_on.map(|f| match f {
        FailOn::Warning => Severity::Warning,
        FailOn::Error => Severity::Error,
    })
}

fn dispatch(cli: Cli) -> Result<u8> {
    match cli.command {
        Command::Scan(args) => {
            let report = scan::run(&scan::ScanOptions {
                path: args.path,
                tables: args.tables,
                file: args.file,
            })?;
            let rendered = Rendered {
                json: output::json_text(&report)?,
                terminal: terminal::scan(&report),
                files: Vec::new(),
            };
            deliver(rendered, None, args.json)?;
            Ok(0)
        }
        Command::Audit(args) => {
            // Fail before the expensive work: the output folder must be writable.
            if let Some(dir) = &args.out {
                output::prepare_dir(dir)?;
            }
            let options = audit::AuditOptions {
                path: args.path,
                tables: args.tables,
                threads: args.threads,
                file: args.file,
            };
            let report = with_progress(|progress| audit::run(&options, progress))?;
            let files = report::audit_files(&report);
            let rendered = Rendered {
                json: output::json_text(&report)?,
                terminal: terminal::audit(&report),
                files,
            };
            deliver(rendered, args.out.as_deref(), args.json)?;
            Ok(match fail_level(args.fail_on) {
                Some(level) if report.summary.reaches(level) => 1,
                _ => 0,
            })
        }
        Command::Compare(args) => {
            if let Some(dir) = &args.out {
                output::prepare_dir(dir)?;
            }
            let options = compare::CompareOptions {
                paths: args.paths,
                file: args.file,
                tables: args.tables,
                threads: args.threads,
            };
            // On a terminal, a bar after a second of work (as for audit).
            let report = with_progress(|progress| compare::run_progress(&options, progress))?;
            let files = report::compare_files(&report);
            let rendered = Rendered {
                json: output::json_text(&report)?,
                terminal: terminal::compare(&report),
                files,
            };
            deliver(rendered, args.out.as_deref(), args.json)?;
            Ok(match fail_level(args.fail_on) {
                Some(level) if report.reaches(level) => 1,
                _ => 0,
            })
        }
        Command::Extend(args) => {
            let method = match args.method {
                cli::ExtendMethod::Interpolate => extend::Method::Interpolate,
                cli::ExtendMethod::Cubic => extend::Method::Cubic,
                cli::ExtendMethod::Copy => extend::Method::Copy,
                cli::ExtendMethod::Reinit => extend::Method::Reinit,
                cli::ExtendMethod::Bilinear => extend::Method::Bilinear,
                cli::ExtendMethod::Bicubic => extend::Method::Bicubic,
                cli::ExtendMethod::Regenerate => extend::Method::Regenerate,
            };
            // The new checkpoint folder is extend's own output, written by the command
            // (through checkpoint::write); stdout is written here.
            let report = extend::run(&extend::ExtendOptions {
                path: args.path,
                file: args.file,
                table: args.table,
                to: args.to,
                grid: args.grid,
                method,
                untrained_only: args.rows == cli::ExtendRows::Untrained,
                std: args.std,
                seed: args.seed,
                out: args.out,
                dry_run: args.dry_run,
                force: args.force,
                threads: args.threads,
            })?;
            let rendered = Rendered {
                json: output::json_text(&report)?,
                terminal: report::extend::terminal(&report),
                files: Vec::new(),
            };
            deliver(rendered, None, args.json)?;
            Ok(0)
        }
    }
}

/// Runs `work` with a progress bar on stderr that shows only after a second of work,
/// and only on a terminal (indicatif hides itself when stderr is not one).
fn with_progress<T>(work: impl FnOnce(&mut dyn FnMut(&str, usize, usize)) -> T) -> T {
    let bar = indicatif::ProgressBar::new(0);
    bar.set_draw_target(indicatif::ProgressDrawTarget::stderr());
    if let Ok(style) = indicatif::ProgressStyle::with_template("{spinner} {pos}/{len} {wide_msg}") {
        bar.set_style(style);
    }
    let started = std::time::Instant::now();
    let mut progress = |name: &str, i: usize, total: usize| {
        if started.elapsed().as_secs_f64() > 1.0 {
            bar.set_length(total as u64);
            bar.set_position(i as u64);
            bar.set_message(name.to_string());
        }
    };
    let result = work(&mut progress);
    bar.finish_and_clear();
    result
}
