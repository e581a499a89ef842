//! The sparse Gaussian CRF along a regularisation path and under cross-validation.
//!
//! [`CrfProblem`] is the CRF loss of [`crate::crf::loss`] together with the raw data it came
//! from. On a path the two penalty levels move together: λ_Λ = λ and λ_Θ = ρ·λ for a fixed
//! ratio ρ (the loss is built with levels (1, ρ) and the path's λ scales both; see the
//! module docs of [`crate::crf::loss`]).
//!
//! **Held-out score** ([`CrossValidate`]): the mean conditional negative log-likelihood of
//! the test rows, (1/m) Σ_i ½[q log 2π − log det Λ + (y_i − μ_i)ᵀΛ(y_i − μ_i)],
//! μ_i = b − ΣΘᵀx_i, computed by [`crate::crf::CrfModel::negative_log_likelihood`] on the
//! model mapped back to the original scale by [`crate::crf::model_from_solution`]. A fold's
//! coordinates live on the scale of its training rows (their means and standard deviations
//! when centring/standardising), so the back-transformation uses the training rows' maps:
//! the training rows are taken to be all rows not held out (as in K-fold cross-validation).

use crate::crf::{model_from_solution, CrfData, CrfLoss, InputMode};
use crate::cv::CrossValidate;
use crate::error::Result;
use crate::loss::Loss;
use crate::penalty::ResolvedPenalty;
use ndarray::{Array2, ArrayView2, Axis};
use std::sync::{Arc, Mutex};

/// How many training-fold losses [`CrfProblem`] keeps for scoring (one per fold in use).
const CACHE_SIZE: usize = 32;

/// A sparse Gaussian CRF problem with its raw data.
#[derive(Debug)]
pub struct CrfProblem {
    loss: CrfLoss,
    x: Array2<f64>,
    y: Array2<f64>,
    center: bool,
    standardize: bool,
    ratio: f64,
    /// Training-row losses by held-out row set, for back-transforming fold coordinates.
    cache: Mutex<Vec<(Vec<usize>, Arc<CrfLoss>)>>,
}

impl Clone for CrfProblem {
    fn clone(&self) -> Self {
        Self {
            loss: self.loss.clone(),
            x: self.x.clone(),
            y: self.y.clone(),
            center: self.center,
            standardize: self.standardize,
            ratio: self.ratio,
            cache: Mutex::new(Vec::new()),
        }
    }
}

impl CrfProblem {
    /// The problem for inputs `x` (n×p) and outputs `y` (n×q), centred and/or standardised
    /// as [`CrfData::new`] does, with λ_Θ = `ratio`·λ_Λ along the path.
    ///
    /// # Errors
    /// As [`CrfData::new`]; [`Error::InvalidLambda`](crate::Error::InvalidLambda) for a negative or non-finite ratio.
    pub fn new(
        x: ArrayView2<f64>,
        y: ArrayView2<f64>,
        center: bool,
        standardize: bool,
        ratio: f64,
    ) -> Result<Self> {
        let data = CrfData::new(x, y, center, standardize, InputMode::Auto)?;
        Ok(Self {
            loss: CrfLoss::new(data, 1.0, ratio)?,
            x: x.to_owned(),
            y: y.to_owned(),
            center,
            standardize,
            ratio,
            cache: Mutex::new(Vec::new()),
        })
    }

    /// The CRF loss (coordinates, Λ and Θ of a coordinate vector).
    pub fn crf_loss(&self) -> &CrfLoss {
        &self.loss
    }

    /// The loss of the rows not in `held` (from the cache when seen before).
    fn training_loss(&self, held: &[usize]) -> Result<Arc<CrfLoss>> {
        let mut key = held.to_vec();
        key.sort_unstable();
        if let Ok(cache) = self.cache.lock() {
            if let Some((_, l)) = cache.iter().find(|(k, _)| *k == key) {
                return Ok(Arc::clone(l));
            }
        }
        let n = self.x.nrows();
        let mut is_held = vec![false; n];
        key.iter().for_each(|&i| is_held[i] = true);
        let train: Vec<usize> = (0..n).filter(|&i| !is_held[i]).collect();
        let loss = if train.is_empty() {
            Arc::new(self.loss.clone())
        } else {
            Arc::new(self.subset_problem(&train)?.loss)
        };
        if let Ok(mut cache) = self.cache.lock() {
            if cache.len() >= CACHE_SIZE {
                cache.remove(0);
            }
            cache.push((key, Arc::clone(&loss)));
        }
        Ok(loss)
    }

    fn subset_problem(&self, rows: &[usize]) -> Result<Self> {
        crate::error::check_rows(rows, self.x.nrows())?;
        let x = self.x.select(Axis(0), rows);
        let y = self.y.select(Axis(0), rows);
        Self::new(
            x.view(),
            y.view(),
            self.center,
            self.standardize,
            self.ratio,
        )
    }

    /// The mean held-out conditional negative log-likelihood of the rows `rows` for the
    /// coordinates `x` fitted on the other rows (see the module docs).
    ///
    /// # Errors
    /// [`Error::Empty`](crate::Error::Empty) for no rows, [`Error::InvalidArgument`](crate::Error::InvalidArgument) for a row out of range;
    /// errors of [`model_from_solution`] (wrong length, Λ not positive definite).
    pub fn held_out_nll(&self, rows: &[usize], x: &[f64]) -> Result<f64> {
        let n = self.x.nrows();
        crate::error::check_rows(rows, n)?;
        let train = self.training_loss(rows)?;
        let model = model_from_solution(&train, x)?;
        let xt = self.x.select(Axis(0), rows);
        let yt = self.y.select(Axis(0), rows);
        model.negative_log_likelihood(xt.view(), yt.view())
    }
}

impl Loss for CrfProblem {
    crate::loss::forward_loss_methods!(loss);
    fn provably_zero(&self, penalty: &ResolvedPenalty) -> Option<Vec<bool>> {
        self.loss.provably_zero(penalty)
    }
}

impl CrossValidate for CrfProblem {
    fn n_samples(&self) -> usize {
        self.x.nrows()
    }
    /// The number of inputs p (for the default grid ratio).
    fn n_features(&self) -> usize {
        self.x.ncols()
    }
    fn subset(&self, rows: &[usize]) -> Result<Box<dyn CrossValidate>> {
        Ok(Box::new(self.subset_problem(rows)?))
    }
    /// The mean held-out conditional negative log-likelihood; NaN where it is undefined.
    fn held_out(&self, rows: &[usize], x: &[f64]) -> Result<Vec<f64>> {
        crate::error::check_rows(rows, self.x.nrows())?;
        Ok(vec![self.held_out_nll(rows, x).unwrap_or(f64::NAN)])
    }
    fn score_names(&self) -> Vec<&'static str> {
        vec!["negative_log_likelihood"]
    }
}
