//! The whole command line as one library function: parse, dispatch, map errors to exit
//! codes. `main.rs` and the Python package's console command both call [`run`], so they
//! behave the same, byte for byte and exit code for exit code.

use std::ffi::OsString;
use std::io::Write;
use std::path::Path;

use clap::Parser;

use super::{AuditArgs, Cli, Command, FailOn};
use crate::report::model::{AuditReport, Severity};
use crate::report::{markdown, output, terminal};

/// Runs the command line `args` (the program name first, as in `std::env::args_os`) and
/// returns the exit code: 0 done; 1 a finding at or above `--fail-on`; 2 the input or
/// the arguments could not be used (one line on stderr). Help and version go to stdout
/// with code 0, usage errors to stderr with code 2, as clap does.
pub fn run(args: Vec<OsString>) -> u8 {
    let cli = match Cli::try_parse_from(args) {
        Ok(cli) => cli,
        Err(e) => {
            // clap prints help/version on stdout and usage errors on stderr.
            let _ = e.print();
            return u8::try_from(e.exit_code()).unwrap_or(2);
        }
    };
    match dispatch(cli) {
        Ok(code) => code,
        Err(message) => {
            // One line, naming the file and the problem (design.md: exit code 2).
            let one_line = message.replace('\n', " ");
            eprintln!("posaudit: {one_line}");
            2
        }
    }
}

/// Writes to stdout; a closed pipe (`posaudit scan x | head`) is not an error.
fn emit(text: &str) -> Result<(), String> {
    let mut out = std::io::stdout().lock();
    match out.write_all(text.as_bytes()).and_then(|_| out.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Ok(()),
        Err(e) => Err(format!("cannot write to stdout: {e}")),
    }
}

fn dispatch(cli: Cli) -> Result<u8, String> {
    match cli.command {
        Command::Scan(args) => {
            let report = crate::scan::scan(&args.path, &args.tables)?;
            if args.json {
                emit(&output::json_text(&report)?)?;
            } else {
                emit(&terminal::scan(&report))?;
            }
            Ok(0)
        }
        Command::Audit(args) => audit(args),
        Command::Compare(args) => {
            emit(&crate::compare::run::command(&args)?)?;
            Ok(0)
        }
    }
}

/// Writes the `--out` folder of an audit: `report.md`, the SVG plots it links and
/// `report.json`, each atomically. The folder must have been prepared with
/// [`output::prepare_dir`].
pub fn write_audit_report(dir: &Path, report: &AuditReport) -> Result<(), String> {
    let (md, figures) = markdown::audit(report);
    let mut files: Vec<(String, Vec<u8>)> = figures
        .into_iter()
        .map(|f| (f.file, f.svg.into_bytes()))
        .collect();
    files.push((
        "report.json".into(),
        output::json_text(report)?.into_bytes(),
    ));
    files.push(("report.md".into(), md.into_bytes()));
    output::write_report(dir, &files).map(|_| ())
}

fn audit(args: AuditArgs) -> Result<u8, String> {
    crate::linalg::set_threads(args.threads.max(1));
    // Fail before the expensive work: the output folder must be writable.
    if let Some(dir) = &args.out {
        output::prepare_dir(dir)?;
    }
    let bar = indicatif::ProgressBar::new(0);
    bar.set_draw_target(indicatif::ProgressDrawTarget::stderr());
    if let Ok(style) = indicatif::ProgressStyle::with_template("{spinner} {pos}/{len} {wide_msg}") {
        bar.set_style(style);
    }
    // Only show progress after a second of work, and only on a terminal (indicatif hides
    // itself when stderr is not one).
    let started = std::time::Instant::now();
    let mut progress = |name: &str, i: usize, total: usize| {
        if started.elapsed().as_secs_f64() > 1.0 {
            bar.set_length(total as u64);
            bar.set_position(i as u64);
            bar.set_message(name.to_string());
        }
    };
    let report = crate::audit::audit(&args.path, &args.tables, &mut progress);
    bar.finish_and_clear();
    let report = report?;
    if let Some(dir) = &args.out {
        write_audit_report(dir, &report)?;
    }
    if args.json {
        emit(&output::json_text(&report)?)?;
    } else {
        let mut text = terminal::audit(&report);
        if let Some(dir) = &args.out {
            text.push_str(&format!(
                "\nreport written to {}\n",
                dir.join("report.md").display()
            ));
        }
        emit(&text)?;
    }
    let level = match args.fail_on {
        Some(FailOn::Warning) => Some(Severity::Warning),
        Some(FailOn::Error) => Some(Severity::Error),
        None => None,
    };
    Ok(match level {
        Some(l) if report.summary.reaches(l) => 1,
        _ => 0,
    })
}
