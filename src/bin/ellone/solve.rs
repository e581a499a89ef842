//! `ellone solve`: one penalised problem at one λ, solution and optimality certificate as
//! JSON.
//!
//! The problem is exactly the crate's objective (see the README's conventions table), on the
//! data as given: nothing is standardised, and nothing is centred unless `--center` asks for
//! it. With n rows:
//!
//! * least squares: `(1/(2n)) Σ_i (y_i − b0 − x_iᵀb)² + λ Σ_j w_j|b_j| + (λ₂/2)‖b‖²`;
//! * logistic: `(1/n) Σ_i [log(1 + e^{η_i}) − y_i η_i] + λ Σ_j w_j|b_j| + (λ₂/2)‖b‖²`,
//!   η = b0 + Xb (b0 exists only with `--intercept` and is never penalised);
//! * precision: `−log det Θ + tr(SΘ) + λ Σ_{i≠j} w_ij|Θ_ij|`, S from `--cov`, or
//!   S = X̃ᵀX̃/n from `--x` (X̃ = X, or X minus its column means with `--center`);
//! * gaussian-crf: `−log det Λ + tr(S_yy Λ) + 2 tr(S_yx Θ) + tr(Λ⁻¹ Θᵀ S_xx Θ)
//!   + λ Σ_{i≠j}|Λ_ij| + λ_Θ Σ|Θ_ij|` with S_yy = YᵀY/n, S_yx = YᵀX/n, S_xx = XᵀX/n.
//!
//! Output keys, in this order: `loss`, `solver`, `status`, `objective`, `kkt_residual`,
//! `duality_gap` (null where the loss has no dual), `iterations`, `seconds`, `intercept` (0
//! without `--intercept`), `coefficients`; matrix problems add `precision` (rows) and, for
//! the conditional model, `interaction` (p rows × q columns), with `coefficients` empty.

use crate::input::{self, option_file};
use crate::output::{self, finite, finite_vec};
use crate::solvers::SolverKind;
use crate::{CliError, CliResult};
use ellone::crf::{CrfData, CrfLoss, InputMode};
use ellone::loss::precision::LogDet;
use ellone::precision::{estimate_precision, PrecisionInput, PrecisionOptions};
use ellone::solver::{Solution, SolverOptions, Status};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::Array2;
use serde::Serialize;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::Duration;

/// The problem to solve.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum LossKind {
    /// Least squares, (1/(2n))‖y − b0 − Xb‖².
    LeastSquares,
    /// Logistic regression with labels 0/1.
    Logistic,
    /// Sparse precision (inverse covariance) matrix from --cov or --x.
    Precision,
    /// Sparse Gaussian conditional random field of outputs --y given inputs --x.
    GaussianCrf,
}

impl LossKind {
    fn name(self) -> &'static str {
        match self {
            LossKind::LeastSquares => "least-squares",
            LossKind::Logistic => "logistic",
            LossKind::Precision => "precision",
            LossKind::GaussianCrf => "gaussian-crf",
        }
    }
}

/// Options of `ellone solve`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The loss.
    #[arg(long, value_enum)]
    pub loss: LossKind,
    /// Inputs: dense CSV (no header, comma-separated) or Matrix Market (.mtx), n rows.
    #[arg(long, value_name = "FILE")]
    pub x: Option<PathBuf>,
    /// Responses, one value per line (labels 0/1 for logistic); for gaussian-crf a matrix of
    /// outputs (n rows × q columns).
    #[arg(long, value_name = "FILE")]
    pub y: Option<PathBuf>,
    /// Covariance matrix S (precision only; instead of --x).
    #[arg(long, value_name = "FILE")]
    pub cov: Option<PathBuf>,
    /// Regularisation strength λ ≥ 0 (for gaussian-crf: λ on the off-diagonal of Λ).
    #[arg(long, value_name = "L", allow_negative_numbers = true)]
    pub lambda: f64,
    /// gaussian-crf only: λ on the entries of Θ.
    #[arg(long, value_name = "L2", allow_negative_numbers = true)]
    pub lambda_theta: Option<f64>,
    /// Fit an unpenalised intercept b0 (least squares and logistic).
    #[arg(long)]
    pub intercept: bool,
    /// Convergence tolerance: KKT residual ≤ T·max(1, ‖∇f(x₀)‖∞).
    #[arg(long, value_name = "T", default_value_t = SolverOptions::default().tol,
          allow_negative_numbers = true)]
    pub tol: f64,
    /// Maximum outer iterations.
    #[arg(long, value_name = "N", default_value_t = SolverOptions::default().max_iter)]
    pub max_iter: usize,
    /// Wall-clock limit in seconds (checked once per outer iteration).
    #[arg(long, value_name = "SECONDS", allow_negative_numbers = true)]
    pub time_limit: Option<f64>,
    /// The method.
    #[arg(long, value_enum, default_value_t = SolverKind::NewtonCd)]
    pub solver: SolverKind,
    /// Per-coefficient penalty weights w_j ≥ 0, one per column of --x (0 = unpenalised); for
    /// precision a symmetric p × p matrix of weights w_ij.
    #[arg(long, value_name = "FILE")]
    pub weights: Option<PathBuf>,
    /// Elastic-net term (λ₂/2)‖b‖² with this λ₂ ≥ 0.
    #[arg(
        long,
        value_name = "L2",
        default_value_t = 0.0,
        allow_negative_numbers = true
    )]
    pub l2: f64,
    /// precision from --x and gaussian-crf: subtract the column means of the data first
    /// (otherwise S = XᵀX/n etc. use the data exactly as given).
    #[arg(long)]
    pub center: bool,
    /// precision only: penalise the diagonal of Θ too (λ Σ_i w_ii Θ_ii).
    #[arg(long)]
    pub penalize_diagonal: bool,
    /// Write the JSON here instead of stdout.
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
}

/// The JSON document `solve` writes.
#[derive(Debug, Serialize)]
pub struct Report {
    loss: &'static str,
    solver: String,
    status: &'static str,
    objective: f64,
    kkt_residual: f64,
    duality_gap: Option<f64>,
    iterations: usize,
    seconds: f64,
    intercept: f64,
    coefficients: Vec<f64>,
    #[serde(skip_serializing_if = "Option::is_none")]
    precision: Option<Vec<Vec<f64>>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    interaction: Option<Vec<Vec<f64>>>,
}

/// Runs `ellone solve`.
pub fn run(args: &Args) -> CliResult<()> {
    check_option_combinations(args)?;
    let options = solver_options(args)?;
    if let Some(out) = &args.out {
        output::check_writable(out)?;
    }
    let report = match args.loss {
        LossKind::LeastSquares | LossKind::Logistic => solve_linear(args, options)?,
        LossKind::Precision => solve_precision(args, options)?,
        LossKind::GaussianCrf => solve_crf(args, options)?,
    };
    if report.status != Status::Converged.as_str() {
        let _ = writeln!(
            std::io::stderr(),
            "ellone: warning: stopped before convergence (status {}); the best iterate is \
             reported with its KKT residual",
            report.status
        );
    }
    output::write_json(&report, args.out.as_deref())
}

/// Rejects options that do not apply to the chosen loss, and missing required files.
fn check_option_combinations(args: &Args) -> CliResult<()> {
    let loss = args.loss.name();
    let reject = |given: bool, option: &str| -> CliResult<()> {
        if given {
            Err(CliError::new(format!(
                "{option} does not apply to --loss {loss}"
            )))
        } else {
            Ok(())
        }
    };
    let require = |given: bool, option: &str| -> CliResult<()> {
        if given {
            Ok(())
        } else {
            Err(CliError::new(format!("--loss {loss} needs {option}")))
        }
    };
    match args.loss {
        LossKind::LeastSquares | LossKind::Logistic => {
            require(args.x.is_some(), "--x FILE")?;
            require(args.y.is_some(), "--y FILE")?;
            reject(args.cov.is_some(), "--cov")?;
            reject(args.lambda_theta.is_some(), "--lambda-theta")?;
            reject(args.center, "--center")?;
            reject(args.penalize_diagonal, "--penalize-diagonal")?;
        }
        LossKind::Precision => {
            if args.x.is_some() == args.cov.is_some() {
                return Err(CliError::new(
                    "--loss precision needs exactly one of --cov FILE or --x FILE",
                ));
            }
            reject(args.y.is_some(), "--y")?;
            reject(args.intercept, "--intercept")?;
            reject(args.lambda_theta.is_some(), "--lambda-theta")?;
            reject(args.l2 != 0.0, "--l2")?;
            reject(args.center && args.cov.is_some(), "--center with --cov")?;
            if args.weights.is_some() && args.solver != SolverKind::NewtonCd {
                return Err(CliError::new(
                    "--weights with --loss precision needs --solver newton-cd",
                ));
            }
        }
        LossKind::GaussianCrf => {
            require(args.x.is_some(), "--x FILE")?;
            require(args.y.is_some(), "--y FILE")?;
            require(args.lambda_theta.is_some(), "--lambda-theta L2")?;
            reject(args.cov.is_some(), "--cov")?;
            reject(args.intercept, "--intercept")?;
            reject(args.weights.is_some(), "--weights")?;
            reject(args.l2 != 0.0, "--l2")?;
            reject(args.penalize_diagonal, "--penalize-diagonal")?;
        }
    }
    Ok(())
}

/// The solver options from --tol, --max-iter and --time-limit (validated by the library).
fn solver_options(args: &Args) -> CliResult<SolverOptions> {
    let time_limit = match args.time_limit {
        None => None,
        Some(t) if t.is_finite() && t > 0.0 => Some(Duration::from_secs_f64(t.min(1e12))),
        Some(t) => {
            return Err(CliError::new(format!(
                "--time-limit must be a positive number of seconds, got {t}"
            )))
        }
    };
    let options = SolverOptions {
        tol: args.tol,
        max_iter: args.max_iter,
        time_limit,
        ..SolverOptions::default()
    };
    options
        .validate()
        .map_err(|e| CliError::from(e).context("--tol"))?;
    Ok(options)
}

/// The penalty λ·Σ w_j|b_j| (+ λ₂/2‖b‖²) over `dim` coordinates, the first `p` of which are
/// the coefficients (an intercept, if any, is unpenalised by the loss whatever its weight).
fn penalty(args: &Args, p: usize, dim: usize) -> CliResult<Penalty> {
    let mut pen = Penalty::l1(args.lambda)
        .map_err(|e| CliError::from(e).context("--lambda"))?
        .with_l2(args.l2)
        .map_err(|e| CliError::from(e).context("--l2"))?;
    if let Some(path) = &args.weights {
        let mut w = input::vector("weights", path, Some((p, "the number of columns of --x")))?;
        w.resize(dim, 1.0);
        pen = pen
            .with_weights(w)
            .map_err(|e| CliError::from(e).context(option_file("weights", path)))?;
    }
    Ok(pen)
}

/// Least squares or logistic regression.
fn solve_linear(args: &Args, options: SolverOptions) -> CliResult<Report> {
    let (x_path, y_path) = match (&args.x, &args.y) {
        (Some(x), Some(y)) => (x.as_path(), y.as_path()),
        _ => return Err(CliError::new("--x and --y are required")),
    };
    let design = input::design("x", x_path)?;
    let (n, p) = (design.nrows(), design.ncols());
    let y = input::vector("y", y_path, Some((n, "the number of rows of --x")))?;
    let loss: Box<dyn Loss> = match args.loss {
        LossKind::Logistic => {
            input::check_labels("y", y_path, &y)?;
            Box::new(build(Logistic::new(design, y, args.intercept), y_path)?)
        }
        _ => Box::new(build(LeastSquares::new(design, y, args.intercept), y_path)?),
    };
    let pen = penalty(args, p, loss.dim())?;
    let solution = args.solver.build(options).solve(loss.as_ref(), &pen)?;
    linear_report(args.loss, &solution, p, args.intercept)
}

fn build<L>(loss: ellone::Result<L>, y_path: &Path) -> CliResult<L> {
    loss.map_err(|e| CliError::from(e).context(option_file("y", y_path)))
}

/// The report of a problem whose coordinates are (b, b0): the intercept is the last one.
fn linear_report(loss: LossKind, s: &Solution, p: usize, intercept: bool) -> CliResult<Report> {
    let coefficients = finite_vec("coefficient", &s.x[..p])?;
    let b0 = if intercept {
        finite("intercept", s.x[p])?
    } else {
        0.0
    };
    common_report(loss, s, b0, coefficients)
}

/// The fields every problem reports. A non-finite duality gap is reported as undefined.
fn common_report(
    loss: LossKind,
    s: &Solution,
    intercept: f64,
    coefficients: Vec<f64>,
) -> CliResult<Report> {
    Ok(Report {
        loss: loss.name(),
        solver: s.solver.clone(),
        status: s.status.as_str(),
        objective: finite("objective", s.objective)?,
        kkt_residual: finite("KKT residual", s.kkt_residual)?,
        duality_gap: s.duality_gap.filter(|g| g.is_finite()),
        iterations: s.iterations,
        seconds: finite("time", s.seconds)?,
        intercept,
        coefficients,
        precision: None,
        interaction: None,
    })
}

/// A matrix as an array of rows, every entry finite (−0 written as 0).
fn rows(what: &str, a: &Array2<f64>) -> CliResult<Vec<Vec<f64>>> {
    a.rows()
        .into_iter()
        .map(|r| finite_vec(what, &r.to_vec()))
        .collect()
}

/// Sparse precision matrix: −log det Θ + tr(SΘ) + λ Σ_{i≠j} w_ij|Θ_ij| (+ the diagonal with
/// `--penalize-diagonal`), S from `--cov` or S = X̃ᵀX̃/n from `--x` (X̃ centred only with
/// `--center`). Newton coordinate descent runs through the library's estimator (exact block
/// screening); other solvers run on the log-det loss directly.
fn solve_precision(args: &Args, options: SolverOptions) -> CliResult<Report> {
    let pen = Penalty::l1(args.lambda).map_err(|e| CliError::from(e).context("--lambda"))?;
    let (s, label) = input::covariance(args.cov.as_deref(), args.x.as_deref(), args.center)?;
    let context = |e: ellone::Error| CliError::from(e).context(label.clone());
    if args.solver == SolverKind::NewtonCd {
        let weights = match &args.weights {
            Some(path) => {
                let w = input::dense_matrix(path)?;
                if w.dim() != s.dim() {
                    return Err(CliError::new(format!(
                        "a {}×{} matrix, but the covariance is {}×{}",
                        w.nrows(),
                        w.ncols(),
                        s.nrows(),
                        s.ncols()
                    ))
                    .context(option_file("weights", path)));
                }
                Some(w)
            }
            None => None,
        };
        let precision_options = PrecisionOptions {
            penalize_diagonal: args.penalize_diagonal,
            weights,
            centre: false,
            standardise: false,
            solver: options,
            ..PrecisionOptions::default()
        };
        let fit = estimate_precision(
            PrecisionInput::Covariance(s.view()),
            args.lambda,
            &precision_options,
        )
        .map_err(|e| {
            let about_weights = match &e {
                ellone::Error::InvalidLambda { name, .. } => name.starts_with("weight"),
                ellone::Error::NotSymmetric { what, .. } => what.contains("weight"),
                _ => false,
            };
            match (&args.weights, about_weights) {
                (Some(path), true) => CliError::from(e).context(option_file("weights", path)),
                _ => context(e),
            }
        })?;
        let solution = Solution {
            solver: "newton-cd".into(),
            x: Vec::new(),
            objective: fit.objective,
            kkt_residual: fit.kkt_residual,
            duality_gap: fit.duality_gap,
            status: fit.status,
            iterations: fit.newton_iterations,
            seconds: fit.seconds,
            inner: fit.inner_sweeps,
            trace: Vec::new(),
        };
        let mut report = common_report(args.loss, &solution, 0.0, Vec::new())?;
        report.precision = Some(rows("precision", &fit.precision)?);
        return Ok(report);
    }
    let loss = LogDet::new(s.view(), args.penalize_diagonal).map_err(context)?;
    let solution = args.solver.build(options).solve(&loss, &pen)?;
    let theta = loss.to_matrix(&solution.x)?;
    let mut report = common_report(args.loss, &solution, 0.0, Vec::new())?;
    report.precision = Some(rows("precision", &theta)?);
    Ok(report)
}

/// Sparse Gaussian CRF of outputs `--y` (n × q) given inputs `--x` (n × p):
/// −log det Λ + tr(S_yy Λ) + 2 tr(S_yx Θ) + tr(Λ⁻¹ Θᵀ S_xx Θ) + λ Σ_{i≠j}|Λ_ij| + λ_Θ Σ|Θ_ij|,
/// on the data as given (centred only with `--center`). Reports Λ as `precision` and Θ
/// (p × q) as `interaction`.
fn solve_crf(args: &Args, options: SolverOptions) -> CliResult<Report> {
    let (x_path, y_path) = match (&args.x, &args.y) {
        (Some(x), Some(y)) => (x.as_path(), y.as_path()),
        _ => return Err(CliError::new("--loss gaussian-crf needs --x and --y")),
    };
    let x = input::dense_matrix(x_path)?;
    let y = input::dense_matrix(y_path)?;
    if x.nrows() != y.nrows() {
        return Err(CliError::new(format!(
            "--x {} has {} rows but --y {} has {}",
            x_path.display(),
            x.nrows(),
            y_path.display(),
            y.nrows()
        )));
    }
    let data = CrfData::new(x.view(), y.view(), args.center, false, InputMode::Auto)
        .map_err(|e| CliError::from(e).context(option_file("y", y_path)))?;
    let lambda_theta = args.lambda_theta.unwrap_or(0.0);
    let loss = CrfLoss::new(data, args.lambda, lambda_theta).map_err(|e| match e {
        ellone::Error::InvalidLambda { ref name, .. } if name == "lambda_theta" => {
            CliError::from(e).context("--lambda-theta")
        }
        unbounded @ ellone::Error::Unbounded(_) => CliError::from(unbounded),
        other => CliError::from(other).context("--lambda"),
    })?;
    // The loss carries both penalty levels in its structural factors (see ellone::crf), so
    // the driver's λ is 1.
    let pen = Penalty::l1(1.0)?;
    let solution = args.solver.build(options).solve(&loss, &pen)?;
    let mut report = common_report(args.loss, &solution, 0.0, Vec::new())?;
    report.precision = Some(rows("precision", &loss.precision_of(&solution.x)?)?);
    report.interaction = Some(rows("interaction", &loss.interaction_of(&solution.x)?)?);
    Ok(report)
}
