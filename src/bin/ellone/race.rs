//! `ellone race`: several solvers on one problem, traces as CSV and an SVG convergence plot.
//!
//! The problem is the one `ellone solve` would solve with the same `--loss`, data and λ
//! options. A reference solve (Newton coordinate descent at KKT tolerance 1e-12) fixes
//! F_best first; each racer then runs from the loss's default start until its relative
//! suboptimality (F − F_best)/|F_best| reaches `--target` or `--budget` seconds pass (see
//! `ellone::race`). Racers run with KKT tolerance 1e-14 and no iteration limit to speak of,
//! so the common target or budget is what stops them.
//!
//! Writes the CSV (`--csv`, one row per solver and iteration), the plot (`--plot`), and a
//! JSON summary on stdout: per solver, the seconds to the target (null if not reached), the
//! final relative suboptimality, iterations and status, fastest first.

use crate::input::{self, option_file};
use crate::output;
use crate::solve::LossKind;
use crate::solvers::SolverKind;
use crate::{CliError, CliResult};
use clap::ValueEnum;
use ellone::crf::{CrfData, CrfLoss, InputMode};
use ellone::loss::precision::LogDet;
use ellone::race::{race, RaceOptions};
use ellone::solver::{Solver, SolverOptions};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use serde::Serialize;
use std::path::PathBuf;
use std::time::Duration;

/// Options of `ellone race`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The loss.
    #[arg(long, value_enum)]
    pub loss: LossKind,
    /// Inputs: dense CSV (no header) or Matrix Market (.mtx), n rows.
    #[arg(long, value_name = "FILE")]
    pub x: Option<PathBuf>,
    /// Responses (least squares, logistic: one per line; gaussian-crf: n × q outputs).
    #[arg(long, value_name = "FILE")]
    pub y: Option<PathBuf>,
    /// Covariance matrix S (precision only; instead of --x).
    #[arg(long, value_name = "FILE")]
    pub cov: Option<PathBuf>,
    /// Regularisation strength λ ≥ 0 (gaussian-crf: on the off-diagonal of Λ).
    #[arg(long, value_name = "L", allow_negative_numbers = true)]
    pub lambda: f64,
    /// gaussian-crf only: λ on the entries of Θ.
    #[arg(long, value_name = "L2", allow_negative_numbers = true)]
    pub lambda_theta: Option<f64>,
    /// Fit an unpenalised intercept (least squares and logistic).
    #[arg(long)]
    pub intercept: bool,
    /// precision from --x and gaussian-crf: subtract the column means first.
    #[arg(long)]
    pub center: bool,
    /// Comma-separated solvers to race: newton-cd, fista, admm, owl-qn.
    #[arg(
        long,
        value_name = "LIST",
        default_value = "newton-cd,fista,admm,owl-qn"
    )]
    pub solvers: String,
    /// Wall-clock budget per solver, in seconds.
    #[arg(
        long,
        value_name = "SECONDS",
        default_value_t = 10.0,
        allow_negative_numbers = true
    )]
    pub budget: f64,
    /// Common accuracy: stop a racer at relative suboptimality ≤ this.
    #[arg(
        long,
        value_name = "EPS",
        default_value_t = 1e-6,
        allow_negative_numbers = true
    )]
    pub target: f64,
    /// Write the per-iteration traces here (CSV).
    #[arg(long, value_name = "FILE")]
    pub csv: PathBuf,
    /// Write the convergence plot here (SVG).
    #[arg(long, value_name = "FILE")]
    pub plot: Option<PathBuf>,
}

/// One line of the JSON summary.
#[derive(Debug, Serialize)]
struct Summary {
    solver: String,
    seconds_to_target: Option<f64>,
    final_relative_suboptimality: f64,
    iterations: usize,
    status: &'static str,
}

/// The JSON summary on stdout.
#[derive(Debug, Serialize)]
struct Report {
    best_objective: f64,
    reference_objective: Option<f64>,
    target: f64,
    ranking: Vec<Summary>,
}

fn parse_solvers(list: &str) -> CliResult<Vec<SolverKind>> {
    let mut out = Vec::new();
    for name in list.split(',').map(str::trim).filter(|s| !s.is_empty()) {
        let kind = SolverKind::from_str(name, true).map_err(|_| {
            CliError::new(format!(
                "--solvers: unknown solver '{name}' (choose from newton-cd, fista, admm, owl-qn)"
            ))
        })?;
        if !out.contains(&kind) {
            out.push(kind);
        }
    }
    if out.is_empty() {
        return Err(CliError::new("--solvers needs at least one solver"));
    }
    Ok(out)
}

/// The loss and penalty `ellone solve` would use for the same options.
fn problem(args: &Args) -> CliResult<(Box<dyn Loss>, Penalty)> {
    let lambda = || Penalty::l1(args.lambda).map_err(|e| CliError::from(e).context("--lambda"));
    let need = |p: &Option<PathBuf>, what: &str| -> CliResult<PathBuf> {
        p.clone()
            .ok_or_else(|| CliError::new(format!("this --loss needs {what}")))
    };
    match args.loss {
        LossKind::LeastSquares | LossKind::Logistic => {
            let (x_path, y_path) = (need(&args.x, "--x FILE")?, need(&args.y, "--y FILE")?);
            let design = input::design("x", &x_path)?;
            let n = design.nrows();
            let y = input::vector("y", &y_path, Some((n, "the number of rows of --x")))?;
            let ctx = |e: ellone::Error| CliError::from(e).context(option_file("y", &y_path));
            let loss: Box<dyn Loss> = if args.loss == LossKind::Logistic {
                input::check_labels("y", &y_path, &y)?;
                Box::new(Logistic::new(design, y, args.intercept).map_err(ctx)?)
            } else {
                Box::new(LeastSquares::new(design, y, args.intercept).map_err(ctx)?)
            };
            Ok((loss, lambda()?))
        }
        LossKind::Precision => {
            let (s, label) =
                input::covariance(args.cov.as_deref(), args.x.as_deref(), args.center)?;
            let ctx = |e: ellone::Error| CliError::from(e).context(label.clone());
            let loss = LogDet::new(s.view(), false).map_err(ctx)?;
            Ok((Box::new(loss), lambda()?))
        }
        LossKind::GaussianCrf => {
            let (x_path, y_path) = (need(&args.x, "--x FILE")?, need(&args.y, "--y FILE")?);
            let x = input::dense_matrix(&x_path)?;
            let y = input::dense_matrix(&y_path)?;
            let data = CrfData::new(x.view(), y.view(), args.center, false, InputMode::Auto)
                .map_err(|e| CliError::from(e).context(option_file("y", &y_path)))?;
            let lambda_theta = args
                .lambda_theta
                .ok_or_else(|| CliError::new("--loss gaussian-crf needs --lambda-theta L2"))?;
            let loss = CrfLoss::new(data, args.lambda, lambda_theta)
                .map_err(|e| CliError::from(e).context("--lambda / --lambda-theta"))?;
            // The loss carries both penalty levels in its structural factors: λ = 1.
            Ok((Box::new(loss), Penalty::l1(1.0)?))
        }
    }
}

/// Runs `ellone race`.
pub fn run(args: &Args) -> CliResult<()> {
    if !(args.budget.is_finite() && args.budget > 0.0) {
        return Err(CliError::new(format!(
            "--budget must be a positive number of seconds, got {}",
            args.budget
        )));
    }
    if !(args.target.is_finite() && args.target > 0.0) {
        return Err(CliError::new(format!(
            "--target must be a positive number, got {}",
            args.target
        )));
    }
    let kinds = parse_solvers(&args.solvers)?;
    let (loss, pen) = problem(args)?;
    let options = SolverOptions {
        tol: 1e-14,
        max_iter: usize::MAX / 2,
        ..SolverOptions::default()
    };
    let built: Vec<Box<dyn Solver>> = kinds.iter().map(|k| k.build(options.clone())).collect();
    let racers: Vec<&dyn Solver> = built.iter().map(|b| b.as_ref()).collect();
    let race_options = RaceOptions {
        budget: Duration::from_secs_f64(args.budget.min(1e9)),
        target: args.target,
        reference: true,
    };
    let result = race(loss.as_ref(), &pen, &racers, &race_options)?;
    result
        .write_csv_file(&args.csv)
        .map_err(|e| CliError::from(e).context("--csv"))?;
    if let Some(plot) = &args.plot {
        ellone::race_plot::plot_race(&result, plot, 900, 560)
            .map_err(|e| CliError::from(e).context("--plot"))?;
    }
    let ranking = result
        .ranking()
        .into_iter()
        .map(|i| {
            let e = &result.entries[i];
            Summary {
                solver: e.solver.clone(),
                seconds_to_target: result.time_to(i, result.target),
                final_relative_suboptimality: result.relative_suboptimality(e.objective),
                iterations: e.records.last().map_or(0, |r| r.iteration),
                status: e.status.as_str(),
            }
        })
        .collect();
    let report = Report {
        best_objective: result.best_objective,
        reference_objective: result.reference,
        target: result.target,
        ranking,
    };
    output::write_json(&report, None)
}
