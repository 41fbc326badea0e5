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
    /// Compare the position tables of two or more checkpoints (steps of one run, or runs).
    ///
    /// Example: posaudit compare step-1000 step-2000 step-3000 --out report/
    Compare(CompareArgs),
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
            panic!("scan expected");
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
