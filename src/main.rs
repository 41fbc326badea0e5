//! The `posaudit` binary: the command line lives in [`posaudit::cli::run`], shared with
//! the Python package's console command.

use std::process::ExitCode;

fn main() -> ExitCode {
    ExitCode::from(posaudit::cli::run(std::env::args_os().collect()))
}
