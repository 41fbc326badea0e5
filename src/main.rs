//! The `posaudit` binary: parse, dispatch, map errors to exit codes.

use std::io::Write;
use std::process::ExitCode;

use clap::Parser;
use posaudit::cli::{AuditArgs, Cli, Command, FailOn};
use posaudit::report::model::Severity;
use posaudit::report::terminal;
use posaudit::report::{markdown, output};

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(code) => code,
        Err(message) => {
            // One line, naming the file and the problem (design.md: exit code 2).
            let one_line = message.replace('\n', " ");
            eprintln!("posaudit: {one_line}");
            ExitCode::from(2)
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

fn run(cli: Cli) -> Result<ExitCode, String> {
    match cli.command {
        Command::Scan(args) => {
            let report = posaudit::scan::scan(&args.path, &args.tables)?;
            if args.json {
                emit(&posaudit::report::output::json_text(&report)?)?;
            } else {
                emit(&terminal::scan(&report))?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Audit(args) => audit(args),
        Command::Compare(args) => {
            emit(&posaudit::compare::run::command(&args)?)?;
            Ok(ExitCode::SUCCESS)
        }
    }
}

fn to_json<T: serde::Serialize>(value: &T) -> Result<String, String> {
    posaudit::report::output::json_text(value)
}

fn audit(args: AuditArgs) -> Result<ExitCode, String> {
    posaudit::linalg::set_threads(args.threads.max(1));
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
    let report = posaudit::audit::audit(&args.path, &args.tables, &mut progress);
    bar.finish_and_clear();
    let report = report?;
    if let Some(dir) = &args.out {
        let (md, figures) = markdown::audit(&report);
        let mut files: Vec<(String, Vec<u8>)> = figures
            .into_iter()
            .map(|f| (f.file, f.svg.into_bytes()))
            .collect();
        files.push(("report.json".into(), to_json(&report)?.into_bytes()));
        files.push(("report.md".into(), md.into_bytes()));
        output::write_report(dir, &files)?;
    }
    if args.json {
        emit(&to_json(&report)?)?;
    } else {
        let mut text = posaudit::report::terminal::audit(&report);
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
        Some(l) if report.summary.reaches(l) => ExitCode::from(1),
        _ => ExitCode::SUCCESS,
    })
}
