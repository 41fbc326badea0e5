//! The command line, declared once with clap; help text lives on each field.

use std::path::PathBuf;

use clap::{Parser, Subcommand};

/// Finds the position tables of a transformer checkpoint and tells you what they are:
/// which positions were trained, whether a fixed table is the formula it claims, whether
/// rotary frequencies were rescaled, and how tables moved between checkpoints.
///
/// The checkpoint is opened read-only and never modified.
/// Exit codes: 0 done; 1 done but a finding at or above --fail-on exists;
/// 2 the input or the arguments could not be used.
#[derive(Debug, Parser)]
#[command(name = "posaudit", version, propagate_version = true)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// List the position tables of a checkpoint (reads headers and a few sampled rows).
    ///
    /// Example: posaudit scan path/to/model.safetensors
    ///          posaudit scan path/to/sharded-folder --json
    Scan(ScanArgs),
    /// Analyse every position table and write the findings report.
    ///
    /// Examples:
    ///   posaudit audit model.safetensors                      summary on the terminal
    ///   posaudit audit ckpt/ --out audit-report               report.json, report.md, plots
    ///   posaudit audit ckpt/ --json --fail-on warning         CI gate: exit 1 on warnings
    Audit(AuditArgs),
    /// Compare the position tables of two or more checkpoints (steps of one run, or runs).
    ///
    /// Example: posaudit compare step-1000 step-2000 step-3000 --out report/
    Compare(CompareArgs),
}

/// The level at which `--fail-on` makes the exit code 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FailOn {
    /// Exit 1 when any warning or error finding exists.
    Warning,
    /// Exit 1 only when an error finding exists.
    Error,
}

/// Arguments of `audit`.
#[derive(Debug, clap::Args)]
pub struct AuditArgs {
    /// A checkpoint file, or a folder holding one.
    #[arg(value_name = "PATH")]
    pub path: PathBuf,
    /// Treat this tensor as a position table even if the detector would not (repeatable).
    #[arg(long = "table", value_name = "NAME")]
    pub tables: Vec<String>,
    /// Write report.json, report.md and the SVG plots it links into this folder (created
    /// if needed; files are replaced atomically).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Print the JSON document (schema posaudit/audit/v1) on stdout and nothing else there.
    #[arg(long)]
    pub json: bool,
    /// Exit with code 1 when a finding at or above this level exists (for CI gates).
    #[arg(long, value_name = "LEVEL", value_enum)]
    pub fail_on: Option<FailOn>,
    /// Threads for the linear algebra (default 1: the fastest on small shared machines).
    #[arg(long, value_name = "N", default_value_t = 1)]
    pub threads: usize,
}

/// Arguments of `scan`.
#[derive(Debug, clap::Args)]
pub struct ScanArgs {
    /// A checkpoint file, or a folder holding one (a single file, or shards with or
    /// without their *.index.json).
    #[arg(value_name = "PATH")]
    pub path: PathBuf,
    /// Treat this tensor as a position table even if the detector would not (repeatable).
    /// An unknown name is an error that lists the closest names.
    #[arg(long = "table", value_name = "NAME")]
    pub tables: Vec<String>,
    /// Print the JSON document (schema posaudit/scan/v1) on stdout and nothing else there.
    #[arg(long)]
    pub json: bool,
}

/// Arguments of `compare`.
#[derive(Debug, clap::Args)]
pub struct CompareArgs {
    /// Two or more checkpoints (files or folders, any mix of formats), in order: each is
    /// compared with the next, and the first with the last when there are three or more.
    #[arg(value_name = "PATH", num_args = 2.., required = true)]
    pub paths: Vec<PathBuf>,
    /// Compare only this tensor (repeatable), treated as a position table even if the
    /// detector would not. It must exist in at least one checkpoint.
    #[arg(long = "table", value_name = "NAME")]
    pub tables: Vec<String>,
    /// Write report.json, report.md and the SVG plots it links into this folder
    /// (created if needed; each file written atomically).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Print the JSON document (schema posaudit/compare/v1) on stdout and nothing else there.
    #[arg(long)]
    pub json: bool,
}

#[cfg(test)]
mod tests {
    #[test]
    fn fail_on_takes_warning_or_error() {
        let cli = Cli::try_parse_from(["posaudit", "audit", "m", "--fail-on", "warning"]).unwrap();
        let Command::Audit(args) = cli.command else {
            panic!("audit expected")
        };
        assert_eq!(args.fail_on, Some(FailOn::Warning));
        assert!(Cli::try_parse_from(["posaudit", "audit", "m", "--fail-on", "sometimes"]).is_err());
    }

    use super::*;
    use clap::CommandFactory;

    #[test]
    fn command_line_definition_is_consistent() {
        Cli::command().debug_assert();
    }

    #[test]
    fn table_is_repeatable() {
        let cli = Cli::try_parse_from([
            "posaudit",
            "scan",
            "m.safetensors",
            "--table",
            "a",
            "--table",
            "b",
        ])
        .unwrap();
        let Command::Scan(args) = cli.command else {
            panic!("scan expected")
        };
        assert_eq!(args.tables, vec!["a", "b"]);
    }

    #[test]
    fn compare_needs_two_paths() {
        assert!(Cli::try_parse_from(["posaudit", "compare", "a.safetensors"]).is_err());
        let cli = Cli::try_parse_from(["posaudit", "compare", "a", "b", "c", "--json"]).unwrap();
        let Command::Compare(args) = cli.command else {
            panic!("compare expected");
        };
        assert_eq!(args.paths.len(), 3);
        assert!(args.json && args.out.is_none());
    }
}
