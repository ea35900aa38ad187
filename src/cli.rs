//! Command-line definitions (clap). Parsing only: no I/O happens here.

use clap::{Parser, Subcommand};
use std::path::PathBuf;

#[derive(Debug, Parser)]
#[command(
    name = "knotwise",
    version,
    about = "Partially linear additive models with B-spline smooth terms: classical and robust fits, basis-size selection, outlier sensitivity and a reproducible report, from one study spec."
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Fit the study and write report.html, results.json, rows.csv, study.resolved.yaml and manifest.sha256.
    Run {
        /// The study spec (YAML).
        spec: PathBuf,
        /// Output folder (default: `<spec stem>.out` beside the spec).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Exit with code 1 when any fit did not converge.
        #[arg(long)]
        strict: bool,
        /// No progress bar.
        #[arg(long)]
        quiet: bool,
    },
    /// Check the spec and the data and print the resolved spec; fits nothing, writes nothing.
    Check { spec: PathBuf },
    /// Rerun the study recorded in an output folder and say whether every digest still matches.
    Verify {
        /// An output folder written by `knotwise run`.
        dir: PathBuf,
        /// Use this data file instead of the recorded one.
        #[arg(long)]
        data: Option<PathBuf>,
    },
    /// Differences between two result sets (output folders or results.json files).
    Compare {
        a: PathBuf,
        b: PathBuf,
        /// Relative tolerance.
        #[arg(long, default_value_t = 1e-6)]
        rtol: f64,
        /// Absolute tolerance.
        #[arg(long, default_value_t = 1e-9)]
        atol: f64,
    },
    /// Draft a commented study spec from a CSV file's columns (printed to standard output).
    Init {
        data: PathBuf,
        /// The response column (default: the first numeric column).
        #[arg(long)]
        response: Option<String>,
    },
}
