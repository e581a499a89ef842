//! Sparse precision estimation along a regularisation path and under cross-validation.
//!
//! [`PrecisionProblem`] is the log-det loss of [`crate::loss::precision`] together with the
//! data it came from (when it came from samples). It adds two things to the loss:
//!
//! * **Exact block screening per λ** ([`Loss::provably_zero`]): with λ_ij the penalty level
//!   of entry (i, j), the solution is block diagonal over the connected components of the
//!   graph {(i, j): |S_ij| > λ_ij} ("New insights and faster computations for the graphical
//!   lasso", J. Comput. Graph. Stat., 2011; the argument is in [`crate::precision`]), so every
//!   entry between two components is zero. A path solve at λ leaves those entries out of its
//!   working set; they are never re-added, but the KKT check over all coordinates still
//!   covers them. Along a decreasing grid the components only merge, so an entry proven zero
//!   at λ_i was zero at λ_{i−1} too and warm starts stay valid.
//! * **Held-out Gaussian likelihood** ([`CrossValidate`]): for test rows z_1..z_m (centred by
//!   the means of the other rows when the problem centres), S_test = (1/m) Σ z_i z_iᵀ and the
//!   score is the mean negative log-likelihood of N(0, Θ⁻¹),
//!   ½ [p log 2π − log det Θ + tr(S_test Θ)] (lower is better).

use crate::cv::CrossValidate;
use crate::error::{Error, Result};
use crate::linalg;
use crate::loss::precision::LogDet;
use crate::loss::Loss;
use crate::penalty::ResolvedPenalty;
use crate::precision::{sample_covariance, screening_blocks};
use ndarray::{Array2, ArrayView2};

/// A sparse precision problem: the log-det loss, and the samples it came from (if any).
#[derive(Debug, Clone)]
pub struct PrecisionProblem {
    loss: LogDet,
    /// The samples (n × p) as given, when built from data.
    data: Option<Array2<f64>>,
    centre: bool,
}

impl PrecisionProblem {
    /// The problem for a sample covariance `s` (paths only: there are no rows to
    /// cross-validate).
    ///
    /// # Errors
    /// As [`LogDet::new`].
    pub fn from_covariance(s: ArrayView2<f64>, penalize_diagonal: bool) -> Result<Self> {
        Ok(Self {
            loss: LogDet::new(s, penalize_diagonal)?,
            data: None,
            centre: false,
        })
    }

    /// The problem for samples `x` (n × p, one row per sample): S = X̃ᵀX̃/n, X̃ = X minus its
    /// column means when `centre`, else X.
    ///
    /// # Errors
    /// As [`sample_covariance`] and [`LogDet::new`].
    pub fn from_samples(x: ArrayView2<f64>, centre: bool, penalize_diagonal: bool) -> Result<Self> {
        let s = sample_covariance(x, centre)?;
        Ok(Self {
            loss: LogDet::new(s.view(), penalize_diagonal)?,
            data: Some(x.to_owned()),
            centre,
        })
    }

    /// The log-det loss (coordinates, matrix conversions).
    pub fn log_det(&self) -> &LogDet {
        &self.loss
    }

    /// The mean held-out negative log-likelihood of Θ (coordinates `x`) on the sample rows
    /// `rows`, centred by the means of the remaining rows when the problem centres.
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] without samples or for a row out of range,
    /// [`Error::Empty`] for no rows;
    /// [`Error::NotPositiveDefinite`] if Θ is not positive definite; shape errors of
    /// [`LogDet::to_matrix`].
    pub fn held_out_nll(&self, rows: &[usize], x: &[f64]) -> Result<f64> {
        let data = self.data.as_ref().ok_or_else(|| {
            Error::InvalidArgument("the problem was built from a covariance: no samples".into())
        })?;
        let (n, p) = data.dim();
        crate::error::check_rows(rows, n)?;
        let theta = self.loss.to_matrix(x)?;
        let chol = linalg::cholesky(theta.view())
            .ok_or_else(|| Error::NotPositiveDefinite("precision matrix".into()))?;
        let mut mean = vec![0.0; p];
        if self.centre {
            let mut held = vec![false; n];
            rows.iter().for_each(|&i| held[i] = true);
            let train: Vec<usize> = (0..n).filter(|&i| !held[i]).collect();
            let from = if train.is_empty() { rows } else { &train[..] };
            for &i in from {
                for (m, v) in mean.iter_mut().zip(data.row(i)) {
                    *m += v;
                }
            }
            mean.iter_mut().for_each(|m| *m /= from.len() as f64);
        }
        // tr(S_test Θ) = (1/m) Σ_i z_iᵀ Θ z_i.
        let mut quad = 0.0;
        let mut z = vec![0.0; p];
        for &i in rows {
            for (zj, (v, m)) in z.iter_mut().zip(data.row(i).iter().zip(&mean)) {
                *zj = v - m;
            }
            for a in 0..p {
                let row = theta.row(a);
                quad += z[a] * row.iter().zip(&z).map(|(t, zb)| t * zb).sum::<f64>();
            }
        }
        let trace = quad / rows.len() as f64;
        Ok(0.5 * (p as f64 * (2.0 * std::f64::consts::PI).ln() - chol.log_det() + trace))
    }
}

impl Loss for PrecisionProblem {
    crate::loss::forward_loss_methods!(loss);

    /// Entries (i, j), i < j, between two connected components of {|S_ij| > λ_ij}, with
    /// λ_ij = l1_k / 2 (the penalty of coordinate k counts the pair twice).
    fn provably_zero(&self, penalty: &ResolvedPenalty) -> Option<Vec<bool>> {
        let p = self.loss.p();
        let m = self.loss.dim();
        if penalty.l1.len() != m {
            return None;
        }
        let mut w = Array2::zeros((p, p));
        for (k, &l1) in penalty.l1.iter().enumerate() {
            let (i, j) = self.loss.entry(k).ok()?;
            if i != j {
                w[[i, j]] = 0.5 * l1;
                w[[j, i]] = 0.5 * l1;
            }
        }
        let blocks =
            screening_blocks(self.loss.covariance_input().view(), 1.0, Some(w.view())).ok()?;
        let mut block_of = vec![0usize; p];
        for (b, members) in blocks.iter().enumerate() {
            members.iter().for_each(|&i| block_of[i] = b);
        }
        Some(
            (0..m)
                .map(|k| {
                    self.loss
                        .entry(k)
                        .is_ok_and(|(i, j)| i != j && block_of[i] != block_of[j])
                })
                .collect(),
        )
    }
}

impl CrossValidate for PrecisionProblem {
    /// The number of samples (0 for a problem built from a covariance, which therefore
    /// cannot be cross-validated).
    fn n_samples(&self) -> usize {
        self.data.as_ref().map_or(0, |d| d.nrows())
    }
    fn n_features(&self) -> usize {
        self.loss.p()
    }
    fn subset(&self, rows: &[usize]) -> Result<Box<dyn CrossValidate>> {
        let data = self.data.as_ref().ok_or_else(|| {
            Error::InvalidArgument("the problem was built from a covariance: no samples".into())
        })?;
        crate::error::check_rows(rows, data.nrows())?;
        let sub = data.select(ndarray::Axis(0), rows);
        Ok(Box::new(PrecisionProblem::from_samples(
            sub.view(),
            self.centre,
            self.loss.penalizes_diagonal(),
        )?))
    }
    /// The mean held-out negative log-likelihood ([`PrecisionProblem::held_out_nll`]); NaN
    /// where it is undefined.
    fn held_out(&self, rows: &[usize], x: &[f64]) -> Result<Vec<f64>> {
        crate::error::check_rows(rows, self.n_samples())?;
        crate::cv::check_coordinates(x, self.loss.dim())?;
        Ok(vec![self.held_out_nll(rows, x).unwrap_or(f64::NAN)])
    }
    fn score_names(&self) -> Vec<&'static str> {
        vec!["negative_log_likelihood"]
    }
}
