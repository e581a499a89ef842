//! `ellone cv`: K-fold cross-validation over a λ grid and the two usual choices of λ.
//!
//! The problem and grid options are those of `ellone path`. The rows are dealt into
//! `--folds` folds by a shuffle seeded with `--seed` (the same seed gives the same folds);
//! for each fold the path is fitted on the other rows over the grid of the full data and
//! scored on the held-out rows: mean squared error (least squares), mean deviance and
//! misclassification rate (logistic), mean negative Gaussian log-likelihood (precision). λ
//! is chosen by the first score: `lambda_best` minimises its mean over folds,
//! `lambda_one_se` is the largest λ whose mean is within one standard error of that minimum.
//!
//! JSON keys: `loss`, `folds`, `seed`, `score`, `lambdas` (decreasing), `mean`,
//! `std_error`, `lambda_best`, `lambda_one_se`, `best_index`, `one_se_index` (0-based into
//! `lambdas`), `secondary` (the other scores' means per λ, by name), `unconverged_fits`
//! (fold fits that stopped before convergence, also warned about on stderr), `seconds`.
//! CSV: a header
//! `lambda,mean,std_error` (plus one mean column per secondary score) and one row per λ.

use crate::output::{self, finite, finite_vec};
use crate::path::{check_writable, load, path_options, warn, write_text, ProblemArgs};
use crate::{CliError, CliResult};
use ellone::cv::{cross_validate, CvOptions, CvResult};
use ellone::plot::plot_cv;
use ellone::Penalty;
use serde::Serialize;
use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::path::PathBuf;
use std::time::Instant;

/// Options of `ellone cv`.
#[derive(Debug, clap::Args)]
pub struct Args {
    #[command(flatten)]
    pub problem: ProblemArgs,
    /// Number of folds K (2 ≤ K ≤ n).
    #[arg(long, value_name = "K", default_value_t = 10)]
    pub folds: usize,
    /// Seed of the fold assignment.
    #[arg(long, value_name = "S", default_value_t = 0)]
    pub seed: u64,
    /// Write the JSON here (default: stdout when neither --json nor --csv is given).
    #[arg(long, value_name = "FILE")]
    pub json: Option<PathBuf>,
    /// Write one CSV row per λ here.
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// Write the SVG plot of the CV curve (mean ± 1 s.e., both chosen λ marked) here.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
}

/// The JSON document of `cv`.
#[derive(Debug, Serialize)]
struct Report {
    loss: &'static str,
    folds: usize,
    seed: u64,
    score: String,
    lambdas: Vec<f64>,
    mean: Vec<f64>,
    std_error: Vec<f64>,
    lambda_best: f64,
    lambda_one_se: f64,
    best_index: usize,
    one_se_index: usize,
    secondary: BTreeMap<String, Vec<f64>>,
    /// Fold fits that stopped before convergence (of folds × λ values).
    unconverged_fits: usize,
    seconds: f64,
}

/// The mean over folds of score `s` at every λ.
fn score_mean(cv: &CvResult, s: usize) -> Vec<f64> {
    let folds = &cv.scores[s];
    (0..cv.lambdas.len())
        .map(|l| folds.iter().map(|f| f[l]).sum::<f64>() / folds.len().max(1) as f64)
        .collect()
}

fn csv(cv: &CvResult) -> String {
    let mut out = String::from("lambda,mean,std_error");
    for name in cv.score_names.iter().skip(1) {
        let _ = write!(out, ",mean_{name}");
    }
    out.push('\n');
    let secondary: Vec<Vec<f64>> = (1..cv.score_names.len())
        .map(|s| score_mean(cv, s))
        .collect();
    for l in 0..cv.lambdas.len() {
        let _ = write!(out, "{},{},{}", cv.lambdas[l], cv.mean[l], cv.std_error[l]);
        for m in &secondary {
            let _ = write!(out, ",{}", m[l]);
        }
        out.push('\n');
    }
    out
}

/// Runs `ellone cv`.
pub fn run(args: &Args) -> CliResult<()> {
    let clock = Instant::now();
    for (option, file) in [
        ("json", &args.json),
        ("csv", &args.csv),
        ("plot", &args.plot),
    ] {
        if let Some(f) = file {
            check_writable(option, f)?;
        }
    }
    let path = path_options(&args.problem)?;
    let problem = load(&args.problem)?;
    let n = problem.cv().n_samples();
    if args.folds < 2 || args.folds > n {
        return Err(CliError::new(format!(
            "--folds must be between 2 and the number of rows of --x ({n}), got {}",
            args.folds
        )));
    }
    let opts = CvOptions {
        folds: args.folds,
        seed: args.seed,
        path,
        parallel: true,
    };
    let cv = cross_validate(problem.cv(), &Penalty::l1(1.0)?, &opts)?;
    let secondary = cv
        .score_names
        .iter()
        .enumerate()
        .skip(1)
        .map(|(s, name)| Ok((name.clone(), finite_vec(name, &score_mean(&cv, s))?)))
        .collect::<CliResult<BTreeMap<_, _>>>()?;
    let report = Report {
        loss: args.problem.loss.name(),
        folds: args.folds,
        seed: args.seed,
        score: cv.score_names.first().cloned().unwrap_or_default(),
        lambdas: finite_vec("λ", &cv.lambdas)?,
        mean: finite_vec("mean score", &cv.mean)?,
        std_error: finite_vec("standard error", &cv.std_error)?,
        lambda_best: finite("λ", cv.lambda_best()?)?,
        lambda_one_se: finite("λ", cv.lambda_one_se()?)?,
        best_index: cv.best,
        one_se_index: cv.one_se,
        secondary,
        unconverged_fits: cv.unconverged(),
        seconds: clock.elapsed().as_secs_f64(),
    };
    if report.unconverged_fits > 0 {
        warn(&format!(
            "{} of {} fold fits stopped before convergence; their held-out scores are those of \
             the best iterate (raise --max-iter or loosen --tol)",
            report.unconverged_fits,
            args.folds * cv.lambdas.len()
        ));
    }
    if let Some(f) = &args.plot {
        let title = format!(
            "{}-fold cross-validation ({})",
            args.folds,
            args.problem.loss.name()
        );
        plot_cv(&cv, f, &title, 900, 600).map_err(|e| CliError::from(e).context("--plot"))?;
    }
    if let Some(f) = &args.csv {
        write_text("csv", f, &csv(&cv))?;
    }
    if args.json.is_some() || args.csv.is_none() {
        output::write_json(&report, args.json.as_deref())?;
    }
    Ok(())
}
