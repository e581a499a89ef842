//! `ellone`, the command-line front end of the crate.
//!
//! # Adding a subcommand
//!
//! Each subcommand lives in its own file in this folder and is wired in with three lines:
//!
//! 1. create `NAME.rs` with `pub struct Args` (deriving `clap::Args`, one doc comment per
//!    option: it becomes the `--help` text) and `pub fn run(args: &Args) -> CliResult<()>`;
//! 2. add `mod NAME;` below;
//! 3. add one variant `Name(NAME::Args)` to `Command` and one arm to `dispatch`.
//!
//! Shared helpers: `input` reads matrices, vectors and weights with errors that name the
//! file; `output` writes JSON to stdout or `--out FILE` and refuses non-finite numbers;
//! `solvers` maps `--solver NAME` to a library solver (new solvers add one variant there);
//! `error` is the error type every `run` returns. Subcommands: `solve` (one problem),
//! `race` (solvers side by side), `path` and `cv` (regularisation paths, cross-validation).
//!
//! Exit codes: 0 success, 1 a failure while running (bad file, bad value, I/O), 2 a
//! command-line usage error. Nothing here panics on bad input; every failure becomes a
//! one-line message on stderr.

mod cv;
mod error;
mod input;
mod output;
mod path;
mod race;
mod solve;
mod solvers;

use clap::{Parser, Subcommand};
use std::io::Write;
use std::process::ExitCode;

pub use error::{CliError, CliResult};

/// ℓ1-penalised fitting with certified optimality (KKT residual, duality gap).
#[derive(Debug, Parser)]
#[command(name = "ellone", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

/// The subcommands; one variant per file in src/bin/ellone/.
#[derive(Debug, Subcommand)]
enum Command {
    /// Solve one penalised problem at one λ and print the solution as JSON.
    Solve(solve::Args),
    /// Race several solvers on one problem: traces as CSV, convergence plot as SVG.
    Race(race::Args),
    /// Regularisation path over a λ grid (warm starts, screening): JSON, CSV, SVG plot.
    Path(path::Args),
    /// K-fold cross-validation over a λ grid; the minimum and one-standard-error choices.
    Cv(cv::Args),
}

/// Runs the chosen subcommand.
fn dispatch(command: &Command) -> CliResult<()> {
    match command {
        Command::Solve(args) => solve::run(args),
        Command::Race(args) => race::run(args),
        Command::Path(args) => path::run(args),
        Command::Cv(args) => cv::run(args),
    }
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            // --help and --version arrive here too and are not failures.
            let _ = e.print();
            return if e.use_stderr() {
                ExitCode::from(2)
            } else {
                ExitCode::SUCCESS
            };
        }
    };
    match dispatch(&cli.command) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            // Writing to stderr may fail (closed pipe); never panic over it.
            let _ = writeln!(std::io::stderr(), "ellone: error: {e}");
            ExitCode::FAILURE
        }
    }
}
