//! The command tree (clap) and the dispatch from a parsed command to its module.

use crate::cmd;
use crate::context::Ctx;
use clap::{Args, Parser, Subcommand};
use std::path::PathBuf;

/// Train and evaluate your own P&ID symbol detectors on a CPU, and prove how far
/// their output can be trusted.
///
/// Automated symbol output supports, and does not replace, review by qualified
/// people under the site's procedures and local codes.
#[derive(Debug, Parser)]
#[command(name = "symtrust", version, about, long_about = None)]
pub struct Cli {
    /// Options every command takes.
    #[command(flatten)]
    pub global: GlobalArgs,
    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// Options every command takes.
#[derive(Debug, Args)]
pub struct GlobalArgs {
    /// Site folder (default: the current folder).
    #[arg(long, global = true, value_name = "DIR")]
    pub site: Option<PathBuf>,
    /// No progress bars or messages; errors are still printed.
    #[arg(long, short = 'q', global = true)]
    pub quiet: bool,
    /// Print the result as JSON on standard output.
    #[arg(long, global = true)]
    pub json: bool,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Create a new site folder.
    #[command(after_help = "Example:\n  symtrust init ./north-unit")]
    Init(cmd::init::InitArgs),
    /// Write a complete, labelled site of the synthetic plant.
    #[command(
        after_help = "Example:\n  symtrust synth --out ./plant-b --sheets 20 --style b --seed 7"
    )]
    Synth(cmd::synth::SynthArgs),
    /// Register raster sheets.
    Sheets(cmd::sheets::SheetsArgs),
    /// Check label quality, and import or export labels as CSV or COCO-format JSON.
    #[command(after_help = "Example:\n  symtrust labels check --site ./north-unit --json")]
    Labels(cmd::labels::LabelsArgs),
    /// Build crop libraries.
    Crops(cmd::crops::CropsArgs),
    /// Train a symbol classifier on a crop library and write `models/<id>/`.
    #[command(after_help = "Example:\n  symtrust train --site ./north-unit --epochs 20 --seed 7")]
    Train(cmd::train::TrainArgs),
    /// Sweep a model over whole sheets and write the detections (CSV or JSON).
    #[command(
        after_help = "Example:\n  symtrust detect --site ./north-unit --model models/20261201T101500-3fa2c1d0 --out found.csv fp-a-0007"
    )]
    Detect(cmd::detect::DetectArgs),
    /// Measure a detector on the held-out sheets: PR curves, AP, operating
    /// point, confusion tables, calibration and bootstrap intervals.
    #[command(
        after_help = "Examples:\n  symtrust eval --site ./north-unit --model models/20261201T101500-3fa2c1d0 --out evals/first\n  symtrust eval --site ./north-unit --detections vendor.csv --target-precision 0.95 --out evals/vendor"
    )]
    Eval(cmd::eval::EvalArgs),
    /// Compare a challenger with the champion on the same frozen held-out sheets
    /// (exit code 3 when the challenger is worse).
    #[command(
        after_help = "Example:\n  symtrust compare --site ./north-unit --champion models/20261201T101500-3fa2c1d0 --challenger models/20261202T020000-9b1e77aa --out comparisons/nightly-1202"
    )]
    Compare(cmd::compare::CompareArgs),
    /// Retrain on newly reviewed labels and promote only a challenger that is not
    /// worse (exit 0 promoted, 3 rejected, 4 nothing to do).
    #[command(
        after_help = "Example (crontab, every night at 01:30):\n  30 1 * * * symtrust nightly --site /srv/north-unit --quiet --log /srv/north-unit/nightly.log"
    )]
    Nightly(cmd::nightly::NightlyArgs),
    /// Render an evaluation folder into a report (HTML, Markdown, CSV, sheet
    /// overlays, audit stamp), or re-check a report with --verify (exit code 3
    /// when its inputs changed).
    #[command(
        after_help = "Examples:\n  symtrust report --site ./north-unit evals/first\n  symtrust report evals/style-b-before --beside evals/style-b-after --title before --title after\n  symtrust report --verify ./north-unit/reports/first"
    )]
    Report(cmd::report::ReportArgs),
    /// Serve the local review page: label sheets, accept or reject model proposals.
    #[command(after_help = "Example:\n  symtrust review --site ./north-unit --port 8765")]
    Review(cmd::review::ReviewArgs),
    /// Run the whole job on the built-in synthetic plant.
    #[command(after_help = "Example:\n  symtrust demo --out ./symtrust-demo")]
    Demo(cmd::demo::DemoArgs),
}

/// Runs a parsed command and returns its exit code.
pub fn dispatch(ctx: &Ctx, command: Command) -> anyhow::Result<u8> {
    match command {
        Command::Init(args) => cmd::init::run(ctx, &args),
        Command::Synth(args) => cmd::synth::run(ctx, &args),
        Command::Sheets(args) => cmd::sheets::run(ctx, &args),
        Command::Labels(args) => cmd::labels::run(ctx, &args),
        Command::Crops(args) => cmd::crops::run(ctx, &args),
        Command::Train(args) => cmd::train::run(ctx, &args),
        Command::Demo(args) => cmd::demo::run(ctx, &args),
        Command::Detect(args) => cmd::detect::run(ctx, &args),
        Command::Eval(args) => cmd::eval::run(ctx, &args),
        Command::Compare(args) => cmd::compare::run(ctx, &args),
        Command::Nightly(args) => cmd::nightly::run(ctx, &args),
        Command::Report(args) => cmd::report::run(ctx, &args),
        Command::Review(args) => cmd::review::run(ctx, &args),
    }
}
