//! `ellone path`: the regularisation path of one problem over a λ grid, with warm starts
//! and screening (strong rule + KKT check, and for precision the exact block rule), as JSON,
//! CSV and an SVG plot of the coefficient paths.
//!
//! The problems are those of `ellone solve` (the crate's objectives, on the data as given):
//! least squares and logistic from `--x`/`--y` (optional unpenalised intercept), and
//! precision from samples `--x` (S = X̃ᵀX̃/n, X̃ centred only with `--center`; the diagonal
//! is unpenalised), and the Gaussian CRF of outputs `--y` (n × q) given inputs `--x`
//! (centred only with `--center`) with λ on the off-diagonal of Λ and `--theta-ratio`·λ on Θ.
//!
//! The grid is `--n-lambdas` values log-spaced from λ_max (the smallest λ whose solution is
//! zero in every penalised coordinate) down to `--ratio`·λ_max (default 1e-4 when n > p,
//! 1e-2 otherwise), or the values of `--lambdas`, sorted decreasing.
//!
//! JSON keys: `loss`, `lambda_max`, `kkt_tolerance` (the absolute KKT threshold every point
//! meets when converged), `screening`, `screened_fraction`, `seconds`, `points` (λ
//! decreasing; each `lambda`, `objective`, `kkt_residual`, `nnz`, `iterations`, `seconds`,
//! `status`, `screened`, `violations` (screened coordinates re-added by the KKT check),
//! `intercept` (least squares and logistic, 0 without `--intercept`) and `coefficients`: the
//! non-zeros as `indices` (0-based: the column of --x; for precision the coordinate of the
//! upper triangle, with its `rows` and `cols`, i ≤ j; for gaussian-crf the coordinate of
//! [upper triangle of Λ row by row, Θ row-major] with its `block` ("precision" or
//! "interaction"), `rows` and `cols`) and `values`). CSV: a header and one
//! row per λ with the scalar fields (coefficients are in the JSON).

use crate::input::{self, option_file};
use crate::output::{self, finite, finite_vec};
use crate::{CliError, CliResult};
use ellone::cv::CrossValidate;
use ellone::cv_crf::CrfProblem;
use ellone::cv_precision::PrecisionProblem;
use ellone::path::{fit_path, PathOptions, PathPoint, RegPath};
use ellone::plot::{plot_path, PathPlotOptions};
use ellone::solver::{NewtonCd, SolverOptions};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use serde::Serialize;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// The problems a path can be computed for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum PathLoss {
    /// Least squares, (1/(2n))‖y − b0 − Xb‖².
    LeastSquares,
    /// Logistic regression with labels 0/1.
    Logistic,
    /// Sparse precision (inverse covariance) matrix of the samples in --x.
    Precision,
    /// Sparse Gaussian conditional random field of outputs --y (matrix) given inputs --x.
    GaussianCrf,
}

impl PathLoss {
    /// The name used in output.
    pub fn name(self) -> &'static str {
        match self {
            PathLoss::LeastSquares => "least-squares",
            PathLoss::Logistic => "logistic",
            PathLoss::Precision => "precision",
            PathLoss::GaussianCrf => "gaussian-crf",
        }
    }
}

/// The problem and grid options shared by `path` and `cv`.
#[derive(Debug, clap::Args)]
pub struct ProblemArgs {
    /// The loss.
    #[arg(long, value_enum)]
    pub loss: PathLoss,
    /// Inputs: dense CSV (no header, comma-separated) or Matrix Market (.mtx), n rows; for
    /// precision the samples (one row each).
    #[arg(long, value_name = "FILE")]
    pub x: PathBuf,
    /// Responses, one value per line (labels 0/1 for logistic); for gaussian-crf a matrix
    /// of outputs (n rows × q columns); not for precision.
    #[arg(long, value_name = "FILE")]
    pub y: Option<PathBuf>,
    /// Fit an unpenalised intercept b0 (least squares and logistic).
    #[arg(long)]
    pub intercept: bool,
    /// precision and gaussian-crf: subtract the column means of the data first.
    #[arg(long)]
    pub center: bool,
    /// gaussian-crf only: λ_Θ = RHO·λ along the path (λ is the level on Λ's off-diagonal).
    #[arg(long, value_name = "RHO", allow_negative_numbers = true)]
    pub theta_ratio: Option<f64>,
    /// Number of λ values of the generated grid.
    #[arg(long, value_name = "N", default_value_t = 100)]
    pub n_lambdas: usize,
    /// λ_min/λ_max of the generated grid, in (0, 1] (default 1e-4 if n > p, else 1e-2).
    #[arg(long, value_name = "R", allow_negative_numbers = true)]
    pub ratio: Option<f64>,
    /// A λ grid instead of the generated one, comma-separated (sorted decreasing).
    #[arg(
        long,
        value_name = "L1,L2,...",
        value_delimiter = ',',
        allow_negative_numbers = true
    )]
    pub lambdas: Option<Vec<f64>>,
    /// Turn screening off (same answers, slower; for comparison).
    #[arg(long)]
    pub no_screening: bool,
    /// Convergence tolerance at every λ: KKT residual ≤ T·max(1, ‖∇f(x₀)‖∞).
    #[arg(long, value_name = "T", default_value_t = SolverOptions::default().tol,
          allow_negative_numbers = true)]
    pub tol: f64,
    /// Maximum Newton iterations per solve.
    #[arg(long, value_name = "N", default_value_t = SolverOptions::default().max_iter)]
    pub max_iter: usize,
}

/// Options of `ellone path`.
#[derive(Debug, clap::Args)]
pub struct Args {
    #[command(flatten)]
    pub problem: ProblemArgs,
    /// Write the JSON here (default: stdout when neither --json nor --csv is given).
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Write one CSV row per λ here.
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// Write the SVG plot of the coefficient paths against log10 λ here.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
}

/// A loaded problem: one of the losses, usable as a plain loss (paths) or for
/// cross-validation.
pub enum Problem {
    /// Least squares.
    LeastSquares(LeastSquares),
    /// Logistic regression.
    Logistic(Logistic),
    /// Sparse precision.
    Precision(PrecisionProblem),
    /// Sparse Gaussian CRF (boxed: it holds the raw data and is much larger).
    Crf(Box<CrfProblem>),
}

impl Problem {
    /// The loss.
    pub fn loss(&self) -> &dyn Loss {
        match self {
            Problem::LeastSquares(l) => l,
            Problem::Logistic(l) => l,
            Problem::Precision(l) => l,
            Problem::Crf(l) => l.as_ref(),
        }
    }

    /// The loss for cross-validation.
    pub fn cv(&self) -> &dyn CrossValidate {
        match self {
            Problem::LeastSquares(l) => l,
            Problem::Logistic(l) => l,
            Problem::Precision(l) => l,
            Problem::Crf(l) => l.as_ref(),
        }
    }

    /// (n, p) for the default grid ratio.
    pub fn shape(&self) -> (usize, usize) {
        (self.cv().n_samples(), self.cv().n_features())
    }

    /// Number of features p (columns of --x).
    pub fn features(&self) -> usize {
        self.cv().n_features()
    }

    /// Whether coordinate k is drawn in the path plot: coefficients (not the intercept);
    /// for precision the off-diagonal entries.
    fn plotted(&self, k: usize) -> bool {
        match self {
            Problem::Precision(l) => l.structural_factor(k) != 0.0,
            Problem::Crf(l) => l.structural_factor(k) != 0.0,
            _ => k < self.features(),
        }
    }

    /// A legend name per coordinate: b1..bp and "intercept"; Θ(i,j) 1-based for precision.
    fn names(&self) -> Vec<String> {
        let m = self.loss().dim();
        (0..m)
            .map(|k| match self {
                Problem::Precision(l) => match l.log_det().entry(k) {
                    Ok((i, j)) => format!("Θ({},{})", i + 1, j + 1),
                    Err(_) => format!("x[{k}]"),
                },
                Problem::Crf(l) => crf_entry(l, k).map_or(format!("x[{k}]"), |(b, i, j)| {
                    format!("{b}({},{})", i + 1, j + 1)
                }),
                _ if k < self.features() => format!("b{}", k + 1),
                _ => "intercept".into(),
            })
            .collect()
    }
}

/// Reads the data and builds the problem, rejecting options that do not apply.
pub fn load(args: &ProblemArgs) -> CliResult<Problem> {
    let loss = args.loss.name();
    let x_path = args.x.as_path();
    if args.theta_ratio.is_some() && args.loss != PathLoss::GaussianCrf {
        return Err(CliError::new(format!(
            "--theta-ratio does not apply to --loss {loss}"
        )));
    }
    match args.loss {
        PathLoss::LeastSquares | PathLoss::Logistic => {
            if args.center {
                return Err(CliError::new(format!(
                    "--center does not apply to --loss {loss}"
                )));
            }
            let y_path = args
                .y
                .as_deref()
                .ok_or_else(|| CliError::new(format!("--loss {loss} needs --y FILE")))?;
            let design = input::design("x", x_path)?;
            let n = design.nrows();
            let y = input::vector("y", y_path, Some((n, "the number of rows of --x")))?;
            let context = |e: ellone::Error| CliError::from(e).context(option_file("y", y_path));
            Ok(if args.loss == PathLoss::Logistic {
                input::check_labels("y", y_path, &y)?;
                Problem::Logistic(Logistic::new(design, y, args.intercept).map_err(context)?)
            } else {
                Problem::LeastSquares(
                    LeastSquares::new(design, y, args.intercept).map_err(context)?,
                )
            })
        }
        PathLoss::Precision => {
            if args.y.is_some() {
                return Err(CliError::new("--y does not apply to --loss precision"));
            }
            if args.intercept {
                return Err(CliError::new(
                    "--intercept does not apply to --loss precision",
                ));
            }
            let x = input::dense_matrix(x_path)?;
            Ok(Problem::Precision(
                PrecisionProblem::from_samples(x.view(), args.center, false)
                    .map_err(|e| CliError::from(e).context(option_file("x", x_path)))?,
            ))
        }
        PathLoss::GaussianCrf => {
            if args.intercept {
                return Err(CliError::new(
                    "--intercept does not apply to --loss gaussian-crf",
                ));
            }
            let y_path = args
                .y
                .as_deref()
                .ok_or_else(|| CliError::new("--loss gaussian-crf needs --y FILE"))?;
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
            let ratio = args.theta_ratio.unwrap_or(1.0);
            Ok(Problem::Crf(Box::new(
                CrfProblem::new(x.view(), y.view(), args.center, false, ratio).map_err(
                    |e| match e {
                        ellone::Error::InvalidLambda { .. } => {
                            CliError::from(e).context("--theta-ratio")
                        }
                        other => CliError::from(other).context(option_file("y", y_path)),
                    },
                )?,
            )))
        }
    }
}

/// For coordinate k of a CRF: ("Λ", i, j) with i ≤ j in the upper triangle of Λ, or
/// ("Θ", i, j) for input i and output j.
fn crf_entry(l: &CrfProblem, k: usize) -> Option<(&'static str, usize, usize)> {
    let loss = l.crf_loss();
    let nl = loss.precision_coordinates();
    let q = loss.data().outputs();
    if k < nl {
        // Row-by-row upper triangle: row i holds q − i entries.
        let (mut i, mut start) = (0, 0);
        while i < q && k >= start + (q - i) {
            start += q - i;
            i += 1;
        }
        (i < q).then_some(("Λ", i, i + (k - start)))
    } else {
        let t = k - nl;
        (t < loss.data().inputs() * q).then_some(("Θ", t / q, t % q))
    }
}

/// The path options from the command line (validated by the library when used).
pub fn path_options(args: &ProblemArgs) -> CliResult<PathOptions> {
    let solver = SolverOptions {
        tol: args.tol,
        max_iter: args.max_iter,
        ..SolverOptions::default()
    };
    solver
        .validate()
        .map_err(|e| CliError::from(e).context("--tol"))?;
    if args.n_lambdas == 0 {
        return Err(CliError::new("--n-lambdas must be at least 1"));
    }
    if let Some(r) = args.ratio {
        if !(r > 0.0 && r <= 1.0) {
            return Err(CliError::new(format!("--ratio must be in (0, 1], got {r}")));
        }
    }
    if let Some(l) = &args.lambdas {
        if l.is_empty() {
            return Err(CliError::new("--lambdas needs at least one value"));
        }
        if let Some(v) = l.iter().find(|v| !(v.is_finite() && **v >= 0.0)) {
            return Err(CliError::new(format!(
                "--lambdas: every λ must be finite and >= 0, got {v}"
            )));
        }
    }
    Ok(PathOptions {
        n_lambdas: args.n_lambdas,
        ratio: args.ratio,
        lambdas: args.lambdas.clone(),
        screening: !args.no_screening,
        solver: NewtonCd::new(solver),
        duality_gaps: false,
    })
}

/// Fails early (before a long computation) if `path` cannot be written.
pub fn check_writable(option: &str, path: &Path) -> CliResult<()> {
    let dir = path.parent().filter(|d| !d.as_os_str().is_empty());
    if dir.is_some_and(|d| !d.is_dir()) || path.is_dir() {
        return Err(CliError::new(format!(
            "cannot write --{option} {}: no such directory, or it is a directory",
            path.display()
        )));
    }
    Ok(())
}

/// Prints a warning on stderr (never fails: a closed stderr is ignored).
pub fn warn(message: &str) {
    use std::io::Write;
    let _ = writeln!(std::io::stderr(), "ellone: warning: {message}");
}

/// Writes `text` to `path`, naming the option on failure.
pub fn write_text(option: &str, path: &Path, text: &str) -> CliResult<()> {
    std::fs::write(path, text)
        .map_err(|e| CliError::new(format!("cannot write --{option} {}: {e}", path.display())))
}

/// The non-zero coordinates of one point.
#[derive(Debug, Serialize)]
struct SparseOut {
    indices: Vec<usize>,
    #[serde(skip_serializing_if = "Option::is_none")]
    block: Option<Vec<&'static str>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    rows: Option<Vec<usize>>,
    #[serde(skip_serializing_if = "Option::is_none")]
    cols: Option<Vec<usize>>,
    values: Vec<f64>,
}

/// One point in the JSON.
#[derive(Debug, Serialize)]
struct PointOut {
    lambda: f64,
    objective: f64,
    kkt_residual: f64,
    nnz: usize,
    iterations: usize,
    seconds: f64,
    status: &'static str,
    screened: usize,
    violations: usize,
    #[serde(skip_serializing_if = "Option::is_none")]
    intercept: Option<f64>,
    coefficients: SparseOut,
}

/// The JSON document of `path`.
#[derive(Debug, Serialize)]
struct Report {
    loss: &'static str,
    lambda_max: f64,
    kkt_tolerance: f64,
    screening: bool,
    screened_fraction: f64,
    seconds: f64,
    points: Vec<PointOut>,
}

fn point_out(problem: &Problem, p: &PathPoint) -> CliResult<PointOut> {
    let features = problem.features();
    let (intercept, keep): (Option<f64>, Vec<usize>) = match problem {
        Problem::Precision(_) | Problem::Crf(_) => (None, (0..p.x.indices.len()).collect()),
        _ => {
            let b0 =
                p.x.indices
                    .iter()
                    .position(|&k| k == features)
                    .map_or(0.0, |t| p.x.values[t]);
            let keep = (0..p.x.indices.len())
                .filter(|&t| p.x.indices[t] < features)
                .collect();
            (Some(finite("intercept", b0)?), keep)
        }
    };
    let indices: Vec<usize> = keep.iter().map(|&t| p.x.indices[t]).collect();
    let values: Vec<f64> = keep.iter().map(|&t| p.x.values[t]).collect();
    let mut block = None;
    let (rows, cols) = match problem {
        Problem::Precision(l) => {
            let mut rows = Vec::with_capacity(indices.len());
            let mut cols = Vec::with_capacity(indices.len());
            for &k in &indices {
                let (i, j) = l.log_det().entry(k)?;
                rows.push(i);
                cols.push(j);
            }
            (Some(rows), Some(cols))
        }
        Problem::Crf(l) => {
            let mut rows = Vec::with_capacity(indices.len());
            let mut cols = Vec::with_capacity(indices.len());
            let mut blocks = Vec::with_capacity(indices.len());
            for &k in &indices {
                let (b, i, j) = crf_entry(l, k)
                    .ok_or_else(|| CliError::new(format!("coordinate {k} out of range")))?;
                blocks.push(if b == "Λ" {
                    "precision"
                } else {
                    "interaction"
                });
                rows.push(i);
                cols.push(j);
            }
            block = Some(blocks);
            (Some(rows), Some(cols))
        }
        _ => (None, None),
    };
    Ok(PointOut {
        lambda: finite("λ", p.lambda)?,
        objective: finite("objective", p.objective)?,
        kkt_residual: finite("KKT residual", p.kkt_residual)?,
        nnz: p.nnz,
        iterations: p.iterations,
        seconds: finite("time", p.seconds)?,
        status: p.status.as_str(),
        screened: p.screened,
        violations: p.violations,
        intercept,
        coefficients: SparseOut {
            indices,
            block,
            rows,
            cols,
            values: finite_vec("coefficient", &values)?,
        },
    })
}

/// The CSV text: a header and one row per λ.
fn csv(path: &RegPath) -> String {
    let mut out = String::from(
        "lambda,objective,kkt_residual,nnz,iterations,seconds,status,screened,violations\n",
    );
    for p in &path.points {
        let _ = writeln!(
            out,
            "{},{},{},{},{},{},{},{},{}",
            p.lambda,
            p.objective,
            p.kkt_residual,
            p.nnz,
            p.iterations,
            p.seconds,
            p.status.as_str(),
            p.screened,
            p.violations
        );
    }
    out
}

/// Runs `ellone path`.
pub fn run(args: &Args) -> CliResult<()> {
    for (option, file) in [
        ("json", &args.json),
        ("csv", &args.csv),
        ("plot", &args.plot),
    ] {
        if let Some(f) = file {
            check_writable(option, f)?;
        }
    }
    let opts = path_options(&args.problem)?;
    let problem = load(&args.problem)?;
    let loss = problem.loss();
    let pen = Penalty::l1(1.0)?;
    let path = fit_path(loss, &pen, problem.shape(), &opts)?;
    let unconverged = path
        .points
        .iter()
        .filter(|p| p.status != ellone::Status::Converged)
        .count();
    if unconverged > 0 {
        warn(&format!(
            "{unconverged} of {} path points stopped before convergence; they are reported \
             with their status and KKT residual",
            path.points.len()
        ));
    }
    let report = Report {
        loss: args.problem.loss.name(),
        lambda_max: finite("λ_max", path.lambda_max)?,
        kkt_tolerance: opts.solver.options.tol * ellone::solver::gradient_scale(loss),
        screening: opts.screening,
        screened_fraction: path.screened_fraction(),
        seconds: finite("time", path.seconds)?,
        points: path
            .points
            .iter()
            .map(|p| point_out(&problem, p))
            .collect::<CliResult<_>>()?,
    };
    if let Some(f) = &args.plot {
        let names = problem.names();
        let plot = PathPlotOptions {
            title: format!("Regularisation path ({})", args.problem.loss.name()),
            coordinates: Some((0..loss.dim()).filter(|&k| problem.plotted(k)).collect()),
            names: Some(names),
            ..Default::default()
        };
        plot_path(&path, f, &plot).map_err(|e| CliError::from(e).context("--plot"))?;
    }
    if let Some(f) = &args.csv {
        write_text("csv", f, &csv(&path))?;
    }
    if args.json.is_some() || args.csv.is_none() {
        output::write_json(&report, args.json.as_deref())?;
    }
    Ok(())
}
