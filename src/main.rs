//! The `posaudit` binary: parse, dispatch, map errors to exit codes.

use std::io::Write;
use std::process::ExitCode;

use clap::Parser;
use posaudit::cli::{Cli, Command};
use posaudit::report::terminal;

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
                let mut json = serde_json::to_string_pretty(&report).map_err(|e| e.to_string())?;
                json.push('\n');
                emit(&json)?;
            } else {
                emit(&terminal::scan(&report))?;
            }
            Ok(ExitCode::SUCCESS)
        }
        Command::Compare(args) => {
            emit(&posaudit::compare::run::command(&args)?)?;
            Ok(ExitCode::SUCCESS)
        }
    }
}
