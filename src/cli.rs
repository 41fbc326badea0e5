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
        let Command::Scan(args) = cli.command;
        assert_eq!(args.tables, vec!["a", "b"]);
    }
}
