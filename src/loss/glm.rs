//! Data shared by the losses on a linear predictor η = X b + b₀ (least squares, logistic).
//!
//! Coordinates are laid out as `[b_0, …, b_{p−1}, b₀]`: the p feature coefficients, then the
//! intercept when one is fitted. The intercept behaves as an extra all-ones column that is
//! never penalised.

use crate::design::Design;
use crate::error::{check_finite, Error, Result};

/// A design matrix, a response and the intercept flag.
#[derive(Debug, Clone)]
pub(crate) struct LinearData {
    pub(crate) x: Design,
    pub(crate) y: Vec<f64>,
    pub(crate) intercept: bool,
    /// ‖x_k‖² per coordinate (n for the intercept).
    pub(crate) col_sq: Vec<f64>,
    /// Σ_i x_ik per feature (for centring correlations without a pass over the data).
    pub(crate) col_sum: Vec<f64>,
}

impl LinearData {
    pub(crate) fn new(x: Design, y: Vec<f64>, intercept: bool) -> Result<Self> {
        if x.nrows() == 0 || x.ncols() == 0 {
            // The design constructors reject this; checked again for safety of the divisions by n.
            return Err(Error::Empty(format!(
                "design matrix ({}×{})",
                x.nrows(),
                x.ncols()
            )));
        }
        if y.len() != x.nrows() {
            return Err(Error::ShapeMismatch {
                what: "rows of x vs length of y".into(),
                expected: x.nrows().to_string(),
                found: y.len().to_string(),
            });
        }
        check_finite("y", &y, |i| format!("row {i}"))?;
        let mut col_sq: Vec<f64> = (0..x.ncols()).map(|j| x.col_sq_norm(j)).collect();
        if intercept {
            col_sq.push(x.nrows() as f64);
        }
        let col_sum = (0..x.ncols()).map(|j| x.col_sum(j)).collect();
        Ok(Self {
            x,
            y,
            intercept,
            col_sq,
            col_sum,
        })
    }

    pub(crate) fn n(&self) -> usize {
        self.x.nrows()
    }

    pub(crate) fn p(&self) -> usize {
        self.x.ncols()
    }

    pub(crate) fn dim(&self) -> usize {
        self.p() + usize::from(self.intercept)
    }

    pub(crate) fn is_intercept(&self, k: usize) -> bool {
        self.intercept && k == self.p()
    }

    /// η = X b + b₀.
    pub(crate) fn eta(&self, coef: &[f64]) -> Vec<f64> {
        let mut eta = vec![0.0; self.n()];
        let p = self.p();
        self.x.matvec(&coef[..p], &mut eta);
        self.add_intercept(coef, &mut eta);
        eta
    }

    /// η ← η + b₀ (nothing without an intercept or when b₀ = 0).
    pub(crate) fn add_intercept(&self, coef: &[f64], eta: &mut [f64]) {
        let p = self.p();
        if self.intercept && coef[p] != 0.0 {
            eta.iter_mut().for_each(|e| *e += coef[p]);
        }
    }

    /// x_kᵀ v (Σ v for the intercept).
    #[inline]
    pub(crate) fn col_dot(&self, k: usize, v: &[f64]) -> f64 {
        if self.is_intercept(k) {
            v.iter().sum()
        } else {
            self.x.col_dot(k, v)
        }
    }

    /// out_k ← x_kᵀ v for every coordinate (one pass over the data).
    pub(crate) fn tmatvec(&self, v: &[f64], out: &mut [f64]) {
        let p = self.p();
        self.x.tmatvec(v, &mut out[..p]);
        if self.intercept {
            out[p] = v.iter().sum();
        }
    }

    /// out_k ← x_kᵀ v for the coordinates in `subset` only (others untouched).
    pub(crate) fn tmatvec_subset(&self, v: &[f64], subset: &[usize], out: &mut [f64]) {
        for &k in subset {
            out[k] = self.col_dot(k, v);
        }
    }

    /// The correlations x_jᵀv/n of every feature with a vector v (one pass over the data).
    pub(crate) fn correlations(&self, v: &[f64]) -> Vec<f64> {
        let mut corr = vec![0.0; self.p()];
        self.x.tmatvec(v, &mut corr);
        let n = self.n() as f64;
        corr.iter_mut().for_each(|c| *c /= n);
        corr
    }

    /// The correlations x_jᵀ(ρ − ρ̄)/n of every feature with a residual ρ (centred when
    /// there is an intercept, ρ̄ = Σρ/n; not centred otherwise), from the gradient
    /// g = −[X 1]ᵀρ/n of a loss whose gradient has that form (least squares: ρ = y − η;
    /// logistic: ρ = y − σ(η)). Since g₀ = −ρ̄ for the intercept,
    /// x_jᵀ(ρ − ρ̄)/n = −g_j + g₀ · (Σ_i x_ij)/n: no pass over the data.
    pub(crate) fn correlations_from_gradient(&self, g: &[f64]) -> Vec<f64> {
        let p = self.p();
        let n = self.n() as f64;
        let shift = if self.intercept { g[p] / n } else { 0.0 };
        (0..p).map(|j| -g[j] + shift * self.col_sum[j]).collect()
    }

    /// The largest feasible scaling s ∈ [0, 1] of a dual direction with correlations
    /// `corr_k` (one per feature, excluding the intercept): s·|corr_k| ≤ λ_k. Returns `None`
    /// when an unpenalised feature has a non-zero correlation (no scaling makes it feasible).
    pub(crate) fn dual_scale(&self, corr: &[f64], l1: &[f64]) -> Option<f64> {
        let mut s = 1.0f64;
        for (j, &c) in corr.iter().enumerate().take(self.p()) {
            let a = c.abs();
            if a == 0.0 {
                continue;
            }
            if l1[j] == 0.0 {
                if a > 1e-12 {
                    return None;
                }
                continue;
            }
            s = s.min(l1[j] / a);
        }
        Some(s)
    }
}
