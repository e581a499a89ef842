//! K-fold cross-validation along a regularisation path, and the choice of λ.
//!
//! The rows are shuffled once with a seeded generator and dealt into K folds (so the folds
//! are reproducible). For each fold the path is fitted on the other K − 1 folds over the
//! λ grid of the full data, with warm starts and screening ([`crate::path`]), and scored on
//! the held-out fold. Folds run in parallel (rayon); each fold's computation is
//! deterministic and results are collected in fold order, so a parallel run is
//! bit-identical to a serial one.
//!
//! For each λ the mean score over folds and its standard error `sd/√K` are reported, and two
//! choices are made: the λ with the minimum mean score, and the largest λ whose mean is
//! within one standard error of that minimum (the "one-standard-error rule", common
//! practice since "Classification and Regression Trees", Wadsworth, 1984).

use crate::error::{check_rows, Error, Result};
use crate::loss::{LeastSquares, Logistic, Loss};
use crate::path::{fit_path, lambda_max, log_grid, PathOptions};
use crate::penalty::Penalty;
use crate::solver::Status;
use rand::{rngs::StdRng, seq::SliceRandom, SeedableRng};
use rayon::prelude::*;

/// A loss that can be refitted on a subset of its samples and scored on held-out samples.
pub trait CrossValidate: Loss {
    /// Number of samples (rows) n.
    fn n_samples(&self) -> usize;
    /// Number of features, used only for the default λ ratio.
    fn n_features(&self) -> usize;
    /// The same loss on the rows `rows` (training fold).
    ///
    /// # Errors
    /// Typed errors if the subset is invalid (e.g. empty).
    fn subset(&self, rows: &[usize]) -> Result<Box<dyn CrossValidate>>;
    /// Held-out scores of coordinates `x` on rows `rows`: the primary score (lower is
    /// better) first, then any secondary scores (NaN where a score is undefined at `x`).
    ///
    /// # Errors
    /// [`Error::Empty`] for no rows, [`Error::InvalidArgument`] for a row index out of
    /// range, [`Error::ShapeMismatch`] for coordinates of the wrong length.
    fn held_out(&self, rows: &[usize], x: &[f64]) -> Result<Vec<f64>>;
    /// Names of the scores returned by [`CrossValidate::held_out`].
    fn score_names(&self) -> Vec<&'static str>;
}

impl CrossValidate for LeastSquares {
    fn n_samples(&self) -> usize {
        self.design().nrows()
    }
    fn n_features(&self) -> usize {
        self.design().ncols()
    }
    fn subset(&self, rows: &[usize]) -> Result<Box<dyn CrossValidate>> {
        // `select_rows` checks the rows.
        let x = self.design().select_rows(rows)?;
        let y = rows.iter().map(|&i| self.response()[i]).collect();
        Ok(Box::new(LeastSquares::new(x, y, self.has_intercept())?))
    }
    /// Mean squared prediction error.
    fn held_out(&self, rows: &[usize], x: &[f64]) -> Result<Vec<f64>> {
        check_rows(rows, self.n_samples())?;
        check_coordinates(x, self.dim())?;
        let eta = predictor(self.design(), self.split(x), rows);
        let mse = rows
            .iter()
            .zip(&eta)
            .map(|(&i, e)| (self.response()[i] - e).powi(2))
            .sum::<f64>()
            / rows.len() as f64;
        Ok(vec![mse])
    }
    fn score_names(&self) -> Vec<&'static str> {
        vec!["mean_squared_error"]
    }
}

impl CrossValidate for Logistic {
    fn n_samples(&self) -> usize {
        self.design().nrows()
    }
    fn n_features(&self) -> usize {
        self.design().ncols()
    }
    fn subset(&self, rows: &[usize]) -> Result<Box<dyn CrossValidate>> {
        // `select_rows` checks the rows.
        let x = self.design().select_rows(rows)?;
        let y = rows.iter().map(|&i| self.labels()[i]).collect();
        Ok(Box::new(Logistic::new(x, y, self.has_intercept())?))
    }
    /// Mean deviance 2·Σ[softplus(η) − yη]/m, then the misclassification rate.
    fn held_out(&self, rows: &[usize], x: &[f64]) -> Result<Vec<f64>> {
        check_rows(rows, self.n_samples())?;
        check_coordinates(x, self.dim())?;
        let eta = predictor(self.design(), self.split(x), rows);
        let m = rows.len() as f64;
        let (mut dev, mut wrong) = (0.0, 0.0);
        for (&i, &e) in rows.iter().zip(&eta) {
            let y = self.labels()[i];
            dev += 2.0 * (crate::loss::logistic::softplus(e) - y * e);
            if (e > 0.0) != (y == 1.0) {
                wrong += 1.0;
            }
        }
        Ok(vec![dev / m, wrong / m])
    }
    fn score_names(&self) -> Vec<&'static str> {
        vec!["deviance", "misclassification"]
    }
}

/// Checks that a coordinate vector has the problem's dimension.
pub(crate) fn check_coordinates(x: &[f64], dim: usize) -> Result<()> {
    if x.len() == dim {
        return Ok(());
    }
    Err(Error::ShapeMismatch {
        what: "coordinates".into(),
        expected: format!("{dim} entries"),
        found: format!("{} entries", x.len()),
    })
}

/// η_i = x_iᵀb + b₀ for the given rows.
fn predictor(x: &crate::Design, (b, b0): (&[f64], f64), rows: &[usize]) -> Vec<f64> {
    let mut full = vec![0.0; x.nrows()];
    x.matvec(b, &mut full);
    rows.iter().map(|&i| full[i] + b0).collect()
}

/// Options of a cross-validation run.
#[derive(Debug, Clone, PartialEq)]
pub struct CvOptions {
    /// Number of folds K ≥ 2. Default 10.
    pub folds: usize,
    /// Seed of the fold assignment. Default 0.
    pub seed: u64,
    /// Path options (grid, screening, solver).
    pub path: PathOptions,
    /// Run folds in parallel. Default true.
    pub parallel: bool,
}

impl Default for CvOptions {
    fn default() -> Self {
        Self {
            folds: 10,
            seed: 0,
            path: PathOptions::default(),
            parallel: true,
        }
    }
}

/// Cross-validation results.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct CvResult {
    /// The λ grid, decreasing.
    pub lambdas: Vec<f64>,
    /// Names of the scores (the first is the one λ is chosen by).
    pub score_names: Vec<String>,
    /// `scores[s][f][l]`: score s, fold f, λ index l.
    pub scores: Vec<Vec<Vec<f64>>>,
    /// Mean over folds of the primary score, per λ.
    pub mean: Vec<f64>,
    /// Standard error sd/√K of the primary score, per λ.
    pub std_error: Vec<f64>,
    /// Index of the λ with the minimum mean score.
    pub best: usize,
    /// Index of the largest λ within one standard error of the minimum.
    pub one_se: usize,
    /// The fold of each row.
    pub fold_of_row: Vec<usize>,
    /// `statuses[f][l]`: how the fit of fold f at λ index l stopped (its scores are those
    /// of the returned iterate either way; see [`CvResult::unconverged`]).
    #[serde(default)]
    pub statuses: Vec<Vec<Status>>,
}

impl CvResult {
    /// The number of fold fits that stopped before convergence (iteration or time limit,
    /// failed line search); their held-out scores are those of the best iterate.
    pub fn unconverged(&self) -> usize {
        self.statuses
            .iter()
            .flatten()
            .filter(|s| **s != Status::Converged)
            .count()
    }

    /// λ with the minimum mean score.
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] when `best` is not an index of `lambdas` (only a
    /// hand-built or edited result can be so).
    pub fn lambda_best(&self) -> Result<f64> {
        self.lambda_at(self.best, "best")
    }

    /// The largest λ within one standard error of the minimum.
    ///
    /// # Errors
    /// As [`Self::lambda_best`], for `one_se`.
    pub fn lambda_one_se(&self) -> Result<f64> {
        self.lambda_at(self.one_se, "one_se")
    }

    fn lambda_at(&self, index: usize, field: &str) -> Result<f64> {
        self.lambdas.get(index).copied().ok_or_else(|| {
            Error::InvalidArgument(format!(
                "cross-validation result: {field} = {index} is outside its {} λ values",
                self.lambdas.len()
            ))
        })
    }
}

/// Deterministic fold assignment of n rows: a seeded shuffle dealt round-robin into K
/// folds, so fold sizes differ by at most one.
///
/// # Errors
/// [`Error::Empty`] for n = 0; [`Error::InvalidArgument`] for K = 0, K > n (a fold would be
/// empty) or an n too large to allocate.
pub fn assign_folds(n: usize, k: usize, seed: u64) -> Result<Vec<usize>> {
    if n == 0 {
        return Err(Error::Empty("rows to assign to folds".into()));
    }
    if k == 0 || k > n {
        return Err(Error::InvalidArgument(format!(
            "the number of folds must be between 1 and n = {n}, got {k}"
        )));
    }
    let mut order: Vec<usize> = crate::error::filled(n, "a fold assignment")?;
    order.iter_mut().enumerate().for_each(|(i, o)| *o = i);
    order.shuffle(&mut StdRng::seed_from_u64(seed));
    let mut fold = crate::error::filled(n, "a fold assignment")?;
    for (pos, &i) in order.iter().enumerate() {
        fold[i] = pos % k;
    }
    Ok(fold)
}

/// K-fold cross-validation of `loss + penalty` over a λ grid (the penalty's λ is ignored).
///
/// # Errors
/// [`Error::InvalidArgument`] for K < 2 or K > n, and any error of the path fits.
pub fn cross_validate(
    loss: &dyn CrossValidate,
    penalty: &Penalty,
    opts: &CvOptions,
) -> Result<CvResult> {
    let n = loss.n_samples();
    let k = opts.folds;
    if k < 2 || k > n {
        return Err(Error::InvalidArgument(format!(
            "the number of folds must be between 2 and n = {n}, got {k}"
        )));
    }
    let lambdas = match &opts.path.lambdas {
        Some(l) => {
            let mut l = l.clone();
            l.sort_by(|a, b| b.total_cmp(a));
            l
        }
        None => {
            let lmax = lambda_max(loss, penalty)?;
            let ratio = opts
                .path
                .ratio
                .unwrap_or_else(|| crate::path::default_ratio(n, loss.n_features()));
            log_grid(lmax, ratio, opts.path.n_lambdas)?
        }
    };
    let fold_of_row = assign_folds(n, k, opts.seed)?;
    let path_opts = PathOptions {
        lambdas: Some(lambdas.clone()),
        duality_gaps: false,
        ..opts.path.clone()
    };
    // Per fold: the scores and the solver status at every λ.
    type FoldResult = (Vec<Vec<f64>>, Vec<Status>);
    let run_fold = |f: usize| -> Result<FoldResult> {
        let train: Vec<usize> = (0..n).filter(|&i| fold_of_row[i] != f).collect();
        let test: Vec<usize> = (0..n).filter(|&i| fold_of_row[i] == f).collect();
        let sub = loss.subset(&train)?;
        let path = fit_path(
            sub.as_ref(),
            penalty,
            (train.len(), loss.n_features()),
            &path_opts,
        )?;
        // per λ: the scores
        let scores = path
            .points
            .iter()
            .map(|p| loss.held_out(&test, &p.x.to_dense()?))
            .collect::<Result<Vec<_>>>()?;
        Ok((scores, path.points.iter().map(|p| p.status).collect()))
    };
    let (per_fold, statuses): (Vec<Vec<Vec<f64>>>, Vec<Vec<Status>>) = if opts.parallel {
        (0..k)
            .into_par_iter()
            .map(run_fold)
            .collect::<Result<Vec<_>>>()?
    } else {
        (0..k).map(run_fold).collect::<Result<Vec<_>>>()?
    }
    .into_iter()
    .unzip();
    let names = loss.score_names();
    let scores: Vec<Vec<Vec<f64>>> = (0..names.len())
        .map(|s| {
            per_fold
                .iter()
                .map(|fold| fold.iter().map(|v| v[s]).collect())
                .collect()
        })
        .collect();
    let nl = lambdas.len();
    let mut mean = vec![0.0; nl];
    let mut std_error = vec![0.0; nl];
    for l in 0..nl {
        let vals: Vec<f64> = scores[0].iter().map(|fold| fold[l]).collect();
        let m = vals.iter().sum::<f64>() / k as f64;
        let var = vals.iter().map(|v| (v - m).powi(2)).sum::<f64>() / (k - 1) as f64;
        mean[l] = m;
        std_error[l] = (var / k as f64).sqrt();
    }
    let best = (0..nl)
        .min_by(|&a, &b| mean[a].total_cmp(&mean[b]))
        .unwrap_or(0);
    let limit = mean[best] + std_error[best];
    // λ decreasing: the first index within the limit is the largest such λ.
    let one_se = (0..=best).find(|&l| mean[l] <= limit).unwrap_or(best);
    Ok(CvResult {
        lambdas,
        score_names: names.iter().map(|s| s.to_string()).collect(),
        scores,
        mean,
        std_error,
        best,
        one_se,
        fold_of_row,
        statuses,
    })
}
