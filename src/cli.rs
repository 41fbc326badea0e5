//! The command line, declared once with clap; help text lives on each field.

use std::path::PathBuf;

use clap::{Parser, Subcommand};

// The "Examples:" blocks are macros, not consts, so that `concat!` can join them with
// the notes of the long help (`--help`), while `-h` shows the examples alone. Every
// example line is a real command line: the tests below parse each one with this
// definition.

macro_rules! main_examples {
    () => {
        "Examples:
  posaudit scan model.safetensors
      which position tables the checkpoint holds, and why each was recognised
  posaudit audit examples/demo/checkpoints/showcase --out demo-report
      analyse every table; demo-report/report.md holds the findings and plots
  posaudit compare run/step-1000 run/step-2000 run/step-4000
      how the tables moved between checkpoints of one run"
    };
}

macro_rules! scan_examples {
    () => {
        "Examples:
  posaudit scan model.safetensors
      list the position tables and why each was recognised
  posaudit scan checkpoints/step-20000
      a folder: one model file, or shards with or without their *.index.json
  posaudit scan model.gguf --json > tables.json
      the same as one JSON document (schema posaudit/scan/v1)
  posaudit scan model.safetensors --table encoder.pos_table
      also classify a tensor that the detector passed over
  posaudit scan checkpoints/step-20000 --file model_ema.safetensors
      a folder with several weight files: read this one"
    };
}

macro_rules! audit_examples {
    () => {
        "Examples:
  posaudit audit examples/demo/checkpoints/showcase
      summary on the terminal (the invented demo checkpoint in the source tree)
  posaudit audit checkpoints/step-20000 --out audit-report
      also write audit-report/report.md with its SVG plots, and report.json
  posaudit audit checkpoints/step-20000 --json --fail-on warning > audit.json
      CI gate: exit 1 when a warning or error finding exists
  posaudit audit model.safetensors --table encoder.pos_table
      also analyse a tensor that the detector passed over
  posaudit audit big-model/ --threads 4
      use four threads for the SVDs of large tables
  posaudit audit checkpoints/step-20000 --file model_ema.safetensors
      a folder with several weight files: audit this one"
    };
}

macro_rules! compare_examples {
    () => {
        "Examples:
  posaudit compare run/
      a run folder (run/step-1000, run/step-2000, ...): every checkpoint in
      step order, how the tables moved, with a timeline per position
  posaudit compare run/step-1000 run/step-2000 run/step-4000 run/step-8000
      the same checkpoints named one by one (compared in the order given)
  posaudit compare run-a/step-8000 run-b/step-8000 --out seeds-report
      two seeds: per-row change against rotation-invariant similarity
  posaudit compare old.safetensors new.bin --table model.embed_positions.weight --json
      one table across two formats, as JSON (schema posaudit/compare/v1)
  posaudit compare run/step-1000 run/step-8000 --fail-on warning
      CI gate: exit 1 when a table went missing, changed shape or holds NaN
  posaudit compare run/step-1000 run/step-8000 --threads 1
      on one core; the output is the same for every thread count
  posaudit compare run/ --file model_ema.safetensors
      the EMA weights of every checkpoint, where each folder holds several"
    };
}

macro_rules! extend_examples {
    () => {
        "Examples:
  posaudit extend examples/demo/checkpoints/text-base --table tern.embeddings.position_embeddings.weight --to 4096 --method interpolate --out tern-4096
      resample the 512 trained positions to 4096 (linear); config.json says 4096
  posaudit extend ckpt --table wpe.weight --to 2048 --method cubic --out ckpt-2048 --dry-run
      print the plan (rows, method, new shape, config keys) and write nothing
  posaudit extend ckpt --table wpe.weight --method reinit --rows untrained --std 0.02 --seed 7 --out ckpt-reinit
      redraw only the rows the audit calls untrained
  posaudit extend ckpt --table wpe.weight --to 4096 --method copy --out ckpt-4096 --json
      tile the trained rows to 4096 positions; the document as JSON
  posaudit extend examples/demo/checkpoints/vision-grid --table kittiwake.vision.embeddings.position_embeddings --grid 16x16 --method bicubic --out kittiwake-128
      resize the 12x12 patch grid to 16x16, class row kept; image_size 96 -> 128
  posaudit extend examples/demo/checkpoints/encoder-fixed-bf16-angles --table whimbrel.encoder.embed_positions.weight --method regenerate --out whimbrel-exact --force
      recompute a sine/cosine table from its fitted formula in f64, rounded once
  posaudit extend shards/ --file model.safetensors.index.json --table pos.weight --to 8192 --method interpolate --out shards-8k --threads 2
      a sharded checkpoint: the same shards and index, only the table's shard changes"
    };
}

/// The sentence on exit codes, shared by the long help of every command.
macro_rules! exit_codes {
    () => {
        "Exit codes: 0 done; 1 done, but a finding at or above --fail-on exists
(audit and compare); 2 the input or the arguments could not be used (one line on stderr
naming the file and the problem). The checkpoint is opened read-only and never
modified."
    };
}

/// Find the position tables of a transformer checkpoint and check them
///
/// posaudit opens a checkpoint read-only (safetensors, PyTorch zip, NumPy
/// .npy/.npz, GGUF; one file or a folder of shards), finds every position
/// table by itself (learned absolute tables, fixed sine/cosine tables, 2-D
/// patch grids, relative-bias tables, stored rotary frequencies,
/// position-id buffers) and analyses them: which positions were never
/// trained, whether a fixed table is the formula it claims, whether rotary
/// frequencies were rescaled, how tables moved between checkpoints.
///
/// Findings are statistical evidence from the weights alone: confirm them
/// on real inputs before acting on them (README.md, "How to read the
/// findings").
#[derive(Debug, Parser)]
#[command(
    name = "posaudit",
    version,
    propagate_version = true,
    verbatim_doc_comment,
    after_help = concat!(main_examples!(), "\n\nRun `posaudit <COMMAND> --help` for its options."),
    after_long_help = concat!(
        main_examples!(),
        "\n\n",
        exit_codes!(),
        "\n\nRun `posaudit <COMMAND> --help` for its options."
    )
)]
pub struct Cli {
    /// What to do.
    #[command(subcommand)]
    pub command: Command,
}

/// The subcommands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// List the position tables of a checkpoint and why each was recognised
    ///
    /// Reads the headers and at most 24 sampled rows of each candidate tensor,
    /// so it takes the same time on a 100 MB and a 100 GB checkpoint. Prints
    /// one line per table: name, kind (learned-absolute, fixed-sinusoidal,
    /// learned-grid-2d, relative-bias, rotary-frequencies, position-ids),
    /// shape, element type, file, and why (the name, the shape, the sampled
    /// content). A config.json beside the weights is read for hints; a broken
    /// one is a warning, not a failure.
    #[command(
        verbatim_doc_comment,
        after_help = scan_examples!(),
        after_long_help = concat!(scan_examples!(), "\n\n", exit_codes!())
    )]
    Scan(ScanArgs),
    /// Analyse every position table and report the findings
    ///
    /// Reads each detected table and runs the analysis that fits its kind.
    /// Learned tables: which rows look untrained (several independent signals,
    /// with their numbers), norms, neighbour cosines, the spectrum and its
    /// leading components, zero, duplicate and non-finite rows. Fixed
    /// sine/cosine tables: the formula fitted (layout, base, offset) and the
    /// error against it, including angles computed in bf16/f16. Patch grids,
    /// relative-bias tables, rotary frequencies and position-id buffers:
    /// layout, unreachable buckets, the rotary scaling recipe, consecutive ids.
    ///
    /// Prints a summary table and the warning and error findings. Each finding
    /// has a code, a severity (info, warning, error), the rows it concerns, its
    /// evidence and its limits; README.md explains every code and what to do
    /// about it.
    #[command(
        verbatim_doc_comment,
        after_help = audit_examples!(),
        after_long_help = concat!(audit_examples!(), "\n\n", exit_codes!())
    )]
    Audit(AuditArgs),
    /// Compare the position tables of two or more checkpoints
    ///
    /// Checkpoints are compared in the order given: steps of one run (oldest
    /// first), or runs with other seeds or recipes; formats may differ. One
    /// run folder is its checkpoints in step order. Tables
    /// are matched by name, or else by kind and shape. For each consecutive
    /// pair (and first to last with three or more) it reports the change of
    /// every row, the rows that moved most, the rows that did not change
    /// (bit-identical, or identical up to one common factor, which is what
    /// weight decay alone does to rows that get no gradient: finding
    /// `unchanged-rows`), and similarities that ignore rotations of the
    /// embedding space (principal angles, linear CKA, orthogonal Procrustes,
    /// each with its chance level). With three or more checkpoints, a timeline
    /// says when each position first moved. Checkpoints are read one at a time,
    /// so memory does not grow with their number.
    #[command(
        verbatim_doc_comment,
        after_help = compare_examples!(),
        after_long_help = concat!(compare_examples!(), "\n\n", exit_codes!())
    )]
    Compare(CompareArgs),
    /// Write an extended or repaired position table into a new checkpoint
    ///
    /// Audits the input (read-only), then writes a NEW checkpoint folder with
    /// one table rebuilt: a learned 1-D table extended or shrunk to --to N
    /// positions (interpolate, cubic, copy, reinit; --rows untrained replaces
    /// only the rows the audit calls untrained), a patch grid resized to
    /// --grid HxW (bilinear, bicubic; class rows kept), or a fixed sine/cosine
    /// table regenerated from its fitted formula (regenerate). Rows the family
    /// reserves before position 0 stay where they are. Every other tensor is
    /// copied byte for byte, streamed; metadata is kept; shards stay shards.
    /// config.json is updated (maximum positions, image size), each change
    /// listed. The new checkpoint is audited and the table's verdict before
    /// and after printed. A synthesised table must be fine-tuned before it is
    /// trusted.
    #[command(
        verbatim_doc_comment,
        after_help = extend_examples!(),
        after_long_help = concat!(extend_examples!(), "\n\n", exit_codes!())
    )]
    Extend(ExtendArgs),
}

/// `--method` of `extend`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ExtendMethod {
    /// Learned 1-D: resample the trained rows along position, linear.
    Interpolate,
    /// Learned 1-D: resample the trained rows, cubic convolution.
    Cubic,
    /// Learned 1-D: tile the trained rows.
    Copy,
    /// Learned 1-D: keep trained rows, draw the rest from N(0, std^2).
    Reinit,
    /// Grid: bilinear resize.
    Bilinear,
    /// Grid: bicubic resize.
    Bicubic,
    /// Fixed sine/cosine: the fitted formula in f64, rounded once.
    Regenerate,
}

/// `--rows` of `extend`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum ExtendRows {
    /// Every position row rebuilt from the trained rows.
    All,
    /// Only the rows the audit calls untrained (and new rows).
    Untrained,
}

/// Parses `HxW` (e.g. `16x16`).
fn grid_size(s: &str) -> Result<(usize, usize), String> {
    let (h, w) = s
        .split_once(['x', 'X'])
        .ok_or_else(|| format!("`{s}` is not HxW (e.g. 16x16)"))?;
    let n = |t: &str| t.trim().parse::<usize>().ok().filter(|&v| v > 0);
    match (n(h), n(w)) {
        (Some(h), Some(w)) => Ok((h, w)),
        _ => Err(format!(
            "`{s}` is not HxW with positive H and W (e.g. 16x16)"
        )),
    }
}

/// Arguments of `extend`.
#[derive(Debug, clap::Args)]
pub struct ExtendArgs {
    /// The input checkpoint: a .safetensors file, or a folder holding one or its shards
    ///
    /// Opened read-only, exactly as `audit` opens it (config.json beside the
    /// weights read for hints). Only safetensors inputs can be extended; the
    /// output has the same files (one, or the same shards and index).
    #[arg(value_name = "PATH", verbatim_doc_comment)]
    pub path: PathBuf,
    /// The table to rebuild (exact tensor name, as `posaudit scan` lists it)
    ///
    /// Must be a learned-absolute, fixed-sinusoidal or learned-grid-2d table
    /// (a tensor the detector passed over is analysed as with audit --table).
    /// An unknown name is an error that suggests the closest names.
    #[arg(long, value_name = "NAME", verbatim_doc_comment)]
    pub table: String,
    /// New number of positions of a 1-D table (rows after the reserved rows)
    ///
    /// Positions, not rows: for a family that reserves rows before position 0
    /// (OPT, RoBERTa padding rows) the new table has those rows plus N. The
    /// config's maximum-positions keys change by the same number of rows.
    /// Default: the current number (with --rows untrained or regenerate).
    #[arg(long, value_name = "N", verbatim_doc_comment)]
    pub to: Option<usize>,
    /// New grid size of a learned-grid-2d table, HxW (e.g. 16x16)
    ///
    /// The h x w patch rows are resized to H x W; extra rows before the grid
    /// (class, distillation, register tokens) are kept as they are. The
    /// config's image_size becomes H x patch_size when the old one was h x
    /// patch_size.
    #[arg(long, value_name = "HxW", value_parser = grid_size, verbatim_doc_comment)]
    pub grid: Option<(usize, usize)>,
    /// How the new rows are made
    ///
    /// interpolate / cubic: the trained rows resampled along position to N
    /// (align_corners=True: first and last trained rows kept, new position j
    /// reads trained position j(t-1)/(N-1); cubic is Keys' kernel, a=-0.75).
    /// copy: the trained rows tiled. reinit: trained rows kept, the others
    /// drawn from N(0, std^2). bilinear / bicubic: grids (align_corners=False).
    /// regenerate: fixed sine/cosine tables, fitted formula in f64, rounded
    /// once to the stored type (fixes low-precision).
    #[arg(long, value_name = "METHOD", value_enum, verbatim_doc_comment)]
    pub method: ExtendMethod,
    /// Which rows of a learned 1-D table are replaced
    ///
    /// all (default): every position row is rebuilt from the trained rows (the
    /// rows before the untrained tail the audit reports). untrained: only the
    /// rows the audit calls untrained (and any new rows); trained rows stay
    /// bit for bit (copy: tail only; interpolate: gaps between trained rows).
    #[arg(long, value_name = "WHICH", value_enum, default_value_t = ExtendRows::All, verbatim_doc_comment)]
    pub rows: ExtendRows,
    /// Standard deviation of re-initialised rows (reinit)
    ///
    /// Default: the config's initializer_range, else the audit's estimate from
    /// the untrained rows; without either, --std is required. The document
    /// says which was used.
    #[arg(long, value_name = "STD", verbatim_doc_comment)]
    pub std: Option<f64>,
    /// Seed of the re-initialised rows (reinit)
    ///
    /// The same seed gives the same rows on every machine (SplitMix64 and
    /// Box-Muller; the distribution of normal_(0, std), not torch's values).
    /// Default: 0.
    #[arg(long, value_name = "N", default_value_t = 0, verbatim_doc_comment)]
    pub seed: u64,
    /// The new checkpoint folder (created; must not exist unless --force)
    ///
    /// Never the input's folder nor inside it. Gets the weight file(s) with the
    /// same names as the input's, config.json updated, and the other small
    /// files of the input folder (tokenizer files) copied.
    #[arg(long, value_name = "DIR", verbatim_doc_comment)]
    pub out: PathBuf,
    /// Print the plan and write nothing
    ///
    /// Rows kept and synthesised, method, new shape, config keys that would
    /// change, the table's current verdict. The output folder is still checked
    /// (it must be new), so the real run will not fail on it.
    #[arg(long, verbatim_doc_comment)]
    pub dry_run: bool,
    /// Allow an existing --out folder; files of the same names are replaced
    ///
    /// Each file is written under a temporary name and renamed, so a replaced
    /// file is never half-written. The input folder is refused even so.
    #[arg(long, verbatim_doc_comment)]
    pub force: bool,
    /// Print the JSON document on stdout instead of the summary
    ///
    /// Schema posaudit/extend/v1: the input, the plan, the files written, the
    /// config changes, the table's audit before and after, and the cautions.
    /// Nothing else goes to stdout.
    #[arg(long, verbatim_doc_comment)]
    pub json: bool,
    /// A weight file of the folder PATH to read, when it holds several
    ///
    /// As for audit: a file name inside the folder, e.g. `--file
    /// model.safetensors.index.json`. Default: the one audit would read.
    #[arg(long, value_name = "NAME", verbatim_doc_comment)]
    pub file: Option<String>,
    /// Threads for the linear algebra of the two audits
    ///
    /// As for audit: 1 (the default) is the fastest on small or shared
    /// machines; more help only on large tables. 0 is refused.
    #[arg(
        long,
        value_name = "N",
        default_value_t = 1,
        value_parser = clap::builder::TypedValueParser::map(clap::value_parser!(u64).range(1..), |n| n as usize),
        verbatim_doc_comment
    )]
    pub threads: usize,
}

/// The level at which `--fail-on` makes the exit code 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum FailOn {
    /// Exit 1 when any warning or error finding exists.
    Warning,
    /// Exit 1 only when an error finding exists (e.g. non-finite values).
    Error,
}

/// Arguments of `audit`.
#[derive(Debug, clap::Args)]
pub struct AuditArgs {
    /// A checkpoint file, or a folder holding one
    ///
    /// A single .safetensors, .bin/.pt/.pth/.ckpt (PyTorch zip), .npy/.npz or
    /// .gguf file; or a folder with one model file, or shards with or without
    /// their *.index.json. A config.json beside the weights is read for hints
    /// (declared positions, widths, rotary settings, initializer range).
    #[arg(value_name = "PATH", verbatim_doc_comment)]
    pub path: PathBuf,
    /// Also analyse this tensor as a position table (repeatable)
    ///
    /// For a table the detector passed over (an unusual name, an unusual
    /// shape). Give the exact tensor name, as `posaudit scan` or the
    /// checkpoint's index lists it; an unknown name is an error that suggests
    /// the closest names. The detected tables are analysed as well. Default:
    /// only the detected tables.
    #[arg(long = "table", value_name = "NAME", verbatim_doc_comment)]
    pub tables: Vec<String>,
    /// The weight file to read, when PATH is a folder holding several
    ///
    /// A file name inside the folder (or inside the hub snapshot it resolves
    /// to), e.g. `--file model_ema.safetensors`. Default: the index of shards,
    /// else the conventional name (model.safetensors, pytorch_model.bin,
    /// model.onnx), else the only weight file; the summary says which was read
    /// and lists the others.
    #[arg(long, value_name = "NAME", verbatim_doc_comment)]
    pub file: Option<String>,
    /// Write report.md, the SVG plots it links, and report.json into DIR
    ///
    /// DIR is created if needed and checked for writing before any analysis
    /// starts. Each file is written to a temporary file and then renamed, so an
    /// interrupted run never leaves a half-written report. Files of the same
    /// names are replaced; other files in DIR are left alone. The summary is
    /// still printed. Default: no files.
    #[arg(long, value_name = "DIR", verbatim_doc_comment)]
    pub out: Option<PathBuf>,
    /// Print the JSON document on stdout instead of the summary
    ///
    /// Schema posaudit/audit/v1: the checkpoint, the config hints, and per
    /// table its kind, shape, analysis and findings (code, severity, positions,
    /// message, evidence, limits). Nothing else goes to stdout, so it can be
    /// redirected to a file or piped into another program. Combines with --out
    /// and --fail-on.
    #[arg(long, verbatim_doc_comment)]
    pub json: bool,
    /// Exit with code 1 when a finding at or above LEVEL exists (CI gate)
    ///
    /// `warning` fails on warnings and errors, `error` only on errors. The
    /// report is printed and written either way. Default: exit 0 whatever the
    /// findings (2 still means the input or the arguments could not be used).
    #[arg(long, value_name = "LEVEL", value_enum, verbatim_doc_comment)]
    pub fail_on: Option<FailOn>,
    /// Threads for the linear algebra
    ///
    /// Default: the cores this process may use. The output is the same, bit for
    /// bit, for every thread count: the work is cut into pieces fixed by the
    /// table shapes, and each sum runs in one order whatever thread computes it.
    /// 0 is refused.
    #[arg(
        long,
        value_name = "N",
        default_value_t = posaudit::linalg::available_threads(),
        value_parser = clap::builder::TypedValueParser::map(clap::value_parser!(u64).range(1..), |n| n as usize),
        verbatim_doc_comment
    )]
    pub threads: usize,
}

/// Arguments of `scan`.
#[derive(Debug, clap::Args)]
pub struct ScanArgs {
    /// A checkpoint file, or a folder holding one
    ///
    /// A single .safetensors, .bin/.pt/.pth/.ckpt (PyTorch zip), .npy/.npz or
    /// .gguf file; or a folder with one model file, or shards with or without
    /// their *.index.json.
    #[arg(value_name = "PATH", verbatim_doc_comment)]
    pub path: PathBuf,
    /// Also list this tensor as a position table (repeatable)
    ///
    /// For a table the detector passed over: it is classified by its shape and
    /// content and listed with "forced with --table". Give the exact tensor
    /// name; an unknown name is an error that lists the closest names. Default:
    /// only the detected tables.
    #[arg(long = "table", value_name = "NAME", verbatim_doc_comment)]
    pub tables: Vec<String>,
    /// The weight file to read, when PATH is a folder holding several
    ///
    /// A file name inside the folder (or inside the hub snapshot it resolves
    /// to), e.g. `--file model_ema.safetensors`. Default: the index of shards,
    /// else the conventional name (model.safetensors, pytorch_model.bin,
    /// model.onnx), else the only weight file; the summary says which was read
    /// and lists the others.
    #[arg(long, value_name = "NAME", verbatim_doc_comment)]
    pub file: Option<String>,
    /// Print the JSON document on stdout instead of the table
    ///
    /// Schema posaudit/scan/v1: the checkpoint (path, format, files, tensors,
    /// bytes) and per table its name, kind, shape, dtype, file and why. Nothing
    /// else goes to stdout.
    #[arg(long, verbatim_doc_comment)]
    pub json: bool,
}

/// Arguments of `compare`.
#[derive(Debug, clap::Args)]
pub struct CompareArgs {
    /// Two or more checkpoints (files or folders), oldest first; or one run folder
    ///
    /// Each is compared with the next, and the first with the last when there
    /// are three or more. Any mix of formats. One folder that holds checkpoints
    /// named with a step number (checkpoint-500/, step-2000/, global_step800/,
    /// epoch=3-step=1200.ckpt, model_1000.pt) is a run: its checkpoints are
    /// compared in step order (checkpoint-1000 after checkpoint-500), and the
    /// report says what was found. Given one by one, the order is kept.
    #[arg(value_name = "PATH", num_args = 1.., required = true, verbatim_doc_comment)]
    pub paths: Vec<PathBuf>,
    /// The weight file to read in each checkpoint folder that holds several
    ///
    /// As for audit: a file name inside each folder, e.g. `--file
    /// model_ema.safetensors`. Default: the file posaudit chooses (the summary
    /// says which, and lists the others).
    #[arg(long, value_name = "NAME", verbatim_doc_comment)]
    pub file: Option<String>,
    /// Compare only this tensor (repeatable)
    ///
    /// Restricts the comparison to the named tensors, treated as position
    /// tables even if the detector would not. Each name must exist in at least
    /// one checkpoint (an unknown name is an error that suggests the closest
    /// ones); a checkpoint without it is reported with a `table-missing`
    /// finding. Default: every detected table, matched across checkpoints.
    #[arg(long = "table", value_name = "NAME", verbatim_doc_comment)]
    pub tables: Vec<String>,
    /// Write report.md, the SVG plots it links, and report.json into DIR
    ///
    /// DIR is created if needed and checked for writing before any checkpoint
    /// is read; each file is written atomically (temporary file, then rename).
    /// Files of the same names are replaced; other files in DIR are left alone.
    /// Default: no files.
    #[arg(long, value_name = "DIR", verbatim_doc_comment)]
    pub out: Option<PathBuf>,
    /// Print the JSON document on stdout instead of the summary
    ///
    /// Schema posaudit/compare/v1: the checkpoints, and per table and step the
    /// change of every row, the unchanged ranges, the similarities and the
    /// findings. Nothing else goes to stdout. Combines with --out.
    #[arg(long, verbatim_doc_comment)]
    pub json: bool,
    /// Exit with code 1 when a finding at or above LEVEL exists (CI gate)
    ///
    /// `warning` fails on warnings and errors, `error` only on errors. Levels:
    /// `non-finite` is an error; `shape-changed` and `table-missing` are
    /// warnings; `unchanged-rows` is info (never fails the gate). The report is
    /// printed and written either way. Default: exit 0 whatever the findings.
    #[arg(long, value_name = "LEVEL", value_enum, verbatim_doc_comment)]
    pub fail_on: Option<FailOn>,
    /// Threads for the linear algebra
    ///
    /// Default: the cores this process may use. The output is the same, bit for
    /// bit, for every thread count: the work is cut into pieces fixed by the
    /// table shapes, and each sum runs in one order whatever thread computes it.
    /// 0 is refused.
    #[arg(
        long,
        value_name = "N",
        default_value_t = posaudit::linalg::available_threads(),
        value_parser = clap::builder::TypedValueParser::map(clap::value_parser!(u64).range(1..), |n| n as usize),
        verbatim_doc_comment
    )]
    pub threads: usize,
}

/// Reports a command-line error. Help and version requests print as clap prints them
/// (exit 0); `posaudit` alone prints the help on stderr (exit 2); every other argument
/// error is one line on stderr, `posaudit: <what is wrong> (see --help)`, exit 2.
pub fn report_parse_error(e: clap::Error) -> u8 {
    use clap::error::ErrorKind;
    match e.kind() {
        ErrorKind::DisplayHelp
        | ErrorKind::DisplayVersion
        | ErrorKind::DisplayHelpOnMissingArgumentOrSubcommand => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            code
        }
        _ => {
            eprintln!("posaudit: {}", parse_error_line(&e));
            2
        }
    }
}

/// The first line of clap's message without its `error: ` prefix, with a pointer to the
/// help of the subcommand.
fn parse_error_line(e: &clap::Error) -> String {
    let text = e.render().to_string();
    let first = text
        .lines()
        .find(|l| !l.trim().is_empty())
        .unwrap_or("invalid arguments")
        .trim();
    let first = first.strip_prefix("error: ").unwrap_or(first);
    format!("{first} (see --help)")
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
    fn zero_threads_is_refused_in_one_line() {
        let e = Cli::try_parse_from(["posaudit", "audit", "m", "--threads", "0"]).unwrap_err();
        let line = parse_error_line(&e);
        assert!(line.contains("--threads") && !line.contains('\n'), "{line}");
        let ok = Cli::try_parse_from(["posaudit", "audit", "m", "--threads", "3"]).unwrap();
        let Command::Audit(args) = ok.command else {
            panic!("audit expected")
        };
        assert_eq!(args.threads, 3);
    }

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

    /// The example lines (`  posaudit ...`) of a help text's "Examples:" block.
    fn example_lines(help: &str) -> Vec<String> {
        let block = help
            .split_once("Examples:\n")
            .map(|(_, rest)| rest)
            .unwrap_or("");
        block
            .lines()
            .take_while(|l| !l.trim().is_empty())
            .filter(|l| l.trim_start().starts_with("posaudit "))
            .map(|l| l.trim().to_string())
            .collect()
    }

    /// The arguments of an example line as a shell would pass them, up to a
    /// redirection or pipe (the examples use no quotes).
    fn example_argv(line: &str) -> Vec<&str> {
        line.split_whitespace()
            .take_while(|w| !matches!(*w, ">" | "|"))
            .collect()
    }

    fn user_args(cmd: &clap::Command) -> Vec<clap::Arg> {
        cmd.get_arguments()
            .filter(|a| !matches!(a.get_id().as_str(), "help" | "version"))
            .cloned()
            .collect()
    }

    #[test]
    fn every_subcommand_help_explains_every_option_and_shows_examples() {
        let mut cli = Cli::command();
        cli.build();
        let names: Vec<String> = cli
            .get_subcommands()
            .map(|c| c.get_name().to_string())
            .filter(|n| n != "help")
            .collect();
        assert_eq!(names, ["scan", "audit", "compare", "extend"]);
        for name in &names {
            let sub = cli.find_subcommand_mut(name).unwrap();
            let long = sub.render_long_help().to_string();
            let short = sub.render_help().to_string();
            let args = user_args(sub);
            assert!(!args.is_empty(), "{name} has arguments");
            for arg in &args {
                let id = arg.get_id().as_str();
                // Every argument has a one-line help and a longer explanation.
                let help = arg.get_help().map(|h| h.to_string()).unwrap_or_default();
                let more = arg
                    .get_long_help()
                    .map(|h| h.to_string())
                    .unwrap_or_default();
                assert!(!help.trim().is_empty(), "{name}: `{id}` has no help");
                assert!(
                    more.len() > help.len() + 40,
                    "{name}: `{id}` has no long help beyond its summary"
                );
                // clap indents continuation lines: compare with whitespace collapsed.
                let flat = |t: &str| t.split_whitespace().collect::<Vec<_>>().join(" ");
                assert!(
                    flat(&long).contains(&flat(&more)),
                    "{name} --help omits `{id}`'s long help"
                );
                match arg.get_long() {
                    Some(flag) => {
                        let flag = format!("--{flag}");
                        assert!(long.contains(&flag), "{name} --help omits {flag}");
                        // Every option is shown in use in at least one example.
                        assert!(
                            example_lines(&long)
                                .iter()
                                .any(|l| example_argv(l).contains(&flag.as_str())),
                            "no example of `posaudit {name}` uses {flag}"
                        );
                    }
                    None => {
                        let value = arg.get_value_names().unwrap()[0].to_string();
                        assert!(long.contains(&format!("<{value}>")), "{name}: <{value}>");
                    }
                }
            }
            // Examples in both -h and --help; --help adds the exit codes.
            for help in [&short, &long] {
                assert!(help.contains("Examples:"), "{name} help has no examples");
                assert!(example_lines(help).len() >= 2, "{name}: too few examples");
            }
            assert!(long.contains("Exit codes: 0 done; 1"), "{name}");
        }
    }

    #[test]
    fn every_example_is_a_valid_command_line_of_its_subcommand() {
        let mut cli = Cli::command();
        cli.build();
        let mut blocks = vec![(None, cli.render_long_help().to_string())];
        for name in ["scan", "audit", "compare"] {
            let sub = cli.find_subcommand_mut(name).unwrap();
            blocks.push((Some(name), sub.render_long_help().to_string()));
        }
        let mut checked = 0;
        for (name, help) in blocks {
            let lines = example_lines(&help);
            assert!(!lines.is_empty(), "{name:?}: no examples");
            for line in lines {
                let argv = example_argv(&line);
                if let Err(e) = Cli::try_parse_from(&argv) {
                    panic!("example `{line}` does not parse: {e}");
                }
                if let Some(name) = name {
                    assert_eq!(argv[1], name, "`{line}` is not a `{name}` example");
                }
                checked += 1;
            }
        }
        assert!(checked >= 10, "{checked} examples");
    }

    #[test]
    fn scan_help_names_every_kind() {
        // The kind strings are contract strings (design.md, "Kinds of table").
        let mut cli = Cli::command();
        let help = cli
            .find_subcommand_mut("scan")
            .unwrap()
            .render_long_help()
            .to_string();
        for kind in [
            "learned-absolute",
            "fixed-sinusoidal",
            "learned-grid-2d",
            "relative-bias",
            "rotary-frequencies",
            "position-ids",
        ] {
            assert!(help.contains(kind), "scan --help omits {kind}");
        }
    }

    #[test]
    fn compare_takes_a_run_folder_or_several_paths() {
        assert!(Cli::try_parse_from(["posaudit", "compare"]).is_err());
        // One path parses: a run folder (whether it is one is decided when it is read).
        let cli = Cli::try_parse_from(["posaudit", "compare", "run"]).unwrap();
        let Command::Compare(args) = cli.command else {
            panic!("compare expected");
        };
        assert_eq!(args.paths.len(), 1);
        let cli = Cli::try_parse_from(["posaudit", "compare", "a", "b", "c", "--json"]).unwrap();
        let Command::Compare(args) = cli.command else {
            panic!("compare expected");
        };
        assert_eq!(args.paths.len(), 3);
        assert!(args.json && args.out.is_none());
    }
}
