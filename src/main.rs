//! The `posaudit` binary: runs the command line ([`cli_run::run`]) and exits with its
//! code (0 done, 1 a finding at or above `--fail-on`, 2 the input or the arguments could
//! not be used).

mod cli;
mod cli_run;

use std::process::ExitCode;

fn main() -> ExitCode {
    ExitCode::from(cli_run::run(std::env::args_os().collect()))
}
