//! Least squares: f(b, b₀) = (1/(2n)) Σ_i (y_i − b₀ − x_iᵀb)².
//!
//! With r = y − Xb − b₀ (the residual):
//!
//! * gradient: ∂f/∂b_j = −x_jᵀr/n, ∂f/∂b₀ = −Σ_i r_i/n;
//! * Hessian: H = [X 1]ᵀ[X 1]/n, constant, so H_kk = ‖x_k‖²/n is computed once;
//! * local model: keeps u = [X 1]d, so (Hd)_k = x_kᵀu/n costs one column and a step
//!   d_k += δ costs one column (u += δ x_k); the line search is exact and O(n):
//!   f(x + αd) = (1/(2n))‖r − αu‖².
//!
//! **Duality gap.** The Fenchel dual of the lasso is max_θ θᵀy − (n/2)‖θ‖² subject to
//! |x_jᵀθ| ≤ λ_j (and 1ᵀθ = 0 with an intercept); θ* = r*/n. From any iterate, θ = s·r̃/n
//! with r̃ the (centred, when there is an intercept) residual and s ∈ \[0, 1\] the largest
//! scaling that makes θ feasible. The elastic-net term (λ₂/2)‖b‖² is handled by the usual
//! augmentation X̃ = [X; √(nλ₂) I], ỹ = [y; 0], which adds −λ₂b_j to each correlation and
//! s²λ₂‖b‖²/2 to the dual's quadratic term.

use super::glm::LinearData;
use super::weighted_columns::{ColumnPool, WeightedColumns};
use super::{LocalModel, Loss};
use crate::design::Design;
use crate::error::Result;
use crate::penalty::ResolvedPenalty;
use ndarray::ArrayView2;
use sprs::CsMat;

/// The least-squares loss on dense or sparse data, with an optional intercept.
///
/// Memory: Newton coordinate descent keeps compact copies of the sparse columns it has
/// visited between iterations (row indices as `u32` plus values: 12 bytes per entry, at
/// most the design's entries once); they live as long as the loss (a clone starts without
/// them).
#[derive(Debug, Clone)]
pub struct LeastSquares {
    data: LinearData,
    /// Copies of visited sparse columns, reused by successive local models.
    pool: ColumnPool,
}

impl LeastSquares {
    /// Least squares of `y` on the design `x`; `intercept` adds an unpenalised b₀ (the last
    /// coordinate).
    ///
    /// # Errors
    /// [`crate::Error::ShapeMismatch`] if `y` does not have one entry per row,
    /// [`crate::Error::NonFinite`] for NaN/Inf in `y`.
    pub fn new(x: Design, y: Vec<f64>, intercept: bool) -> Result<Self> {
        Ok(Self {
            data: LinearData::new(x, y, intercept)?,
            pool: ColumnPool::default(),
        })
    }

    /// From a dense array (any layout; copied once into column-major storage).
    ///
    /// # Errors
    /// As [`Design::dense`] and [`LeastSquares::new`].
    pub fn from_dense(x: ArrayView2<f64>, y: &[f64], intercept: bool) -> Result<Self> {
        Self::new(Design::dense(x)?, y.to_vec(), intercept)
    }

    /// From a sparse matrix (kept sparse).
    ///
    /// # Errors
    /// As [`Design::sparse`] and [`LeastSquares::new`].
    pub fn from_sparse(x: CsMat<f64>, y: &[f64], intercept: bool) -> Result<Self> {
        Self::new(Design::sparse(x)?, y.to_vec(), intercept)
    }

    /// The design matrix.
    pub fn design(&self) -> &Design {
        &self.data.x
    }

    /// The response.
    pub fn response(&self) -> &[f64] {
        &self.data.y
    }

    /// Whether an intercept is fitted.
    pub fn has_intercept(&self) -> bool {
        self.data.intercept
    }

    /// Splits a coordinate vector into (coefficients b, intercept b₀ or 0).
    pub fn split<'s>(&self, x: &'s [f64]) -> (&'s [f64], f64) {
        let p = self.data.p();
        (&x[..p], if self.data.intercept { x[p] } else { 0.0 })
    }

    fn residual(&self, coef: &[f64]) -> Vec<f64> {
        self.residual_from_eta(self.data.eta(coef))
    }

    /// r = y − η, in η's buffer.
    fn residual_from_eta(&self, mut eta: Vec<f64>) -> Vec<f64> {
        for (e, y) in eta.iter_mut().zip(&self.data.y) {
            *e = y - *e;
        }
        eta
    }
}

impl LeastSquares {
    /// The gap from the residual r = y − η at x and the correlations x_jᵀ(r − r̄)/n
    /// (centred when there is an intercept; see the module notes for the dual point).
    fn gap_from(
        &self,
        x: &[f64],
        mut r: Vec<f64>,
        mut corr: Vec<f64>,
        pen: &ResolvedPenalty,
    ) -> Option<f64> {
        let n = self.data.n() as f64;
        let primal = half_mean_sq(&r) + pen.value(x);
        if self.data.intercept {
            let mean = r.iter().sum::<f64>() / n;
            r.iter_mut().for_each(|v| *v -= mean);
        }
        let mut l2_norm = 0.0;
        for (j, c) in corr.iter_mut().enumerate() {
            *c -= pen.l2[j] * x[j];
            l2_norm += pen.l2[j] * x[j] * x[j];
        }
        let s = self.data.dual_scale(&corr, &pen.l1)?;
        let ry: f64 = r.iter().zip(&self.data.y).map(|(a, b)| a * b).sum();
        let rr: f64 = r.iter().map(|v| v * v).sum();
        let dual = s * ry / n - s * s * rr / (2.0 * n) - 0.5 * s * s * l2_norm;
        Some(primal - dual)
    }
}

fn half_mean_sq(r: &[f64]) -> f64 {
    0.5 * r.iter().map(|v| v * v).sum::<f64>() / r.len() as f64
}

impl Loss for LeastSquares {
    fn dim(&self) -> usize {
        self.data.dim()
    }

    fn name(&self) -> &str {
        "least-squares"
    }

    fn value(&self, x: &[f64]) -> Option<f64> {
        Some(half_mean_sq(&self.residual(x)))
    }

    fn gradient(&self, x: &[f64], g: &mut [f64]) {
        let r = self.residual(x);
        self.data.tmatvec(&r, g);
        let n = self.data.n() as f64;
        g.iter_mut().for_each(|v| *v = -*v / n);
    }

    fn hess_vec(&self, _x: &[f64], v: &[f64], out: &mut [f64]) {
        let u = self.data.eta(v);
        self.data.tmatvec(&u, out);
        let n = self.data.n() as f64;
        out.iter_mut().for_each(|o| *o /= n);
    }

    fn structure(&self) -> Option<super::LossStructure<'_>> {
        Some(super::LossStructure::LeastSquares {
            design: &self.data.x,
            y: &self.data.y,
            intercept: self.data.intercept,
        })
    }

    fn structural_factor(&self, k: usize) -> f64 {
        if self.data.is_intercept(k) {
            0.0
        } else {
            1.0
        }
    }

    fn duality_gap(&self, x: &[f64], pen: &ResolvedPenalty) -> Option<f64> {
        let r = self.residual(x);
        let n = self.data.n() as f64;
        let shift = if self.data.intercept {
            r.iter().sum::<f64>() / n
        } else {
            0.0
        };
        let centred: Vec<f64> = r.iter().map(|v| v - shift).collect();
        let corr = self.data.correlations(&centred);
        self.gap_from(x, r, corr, pen)
    }

    fn duality_gap_with_gradient(
        &self,
        x: &[f64],
        g: &[f64],
        pen: &ResolvedPenalty,
    ) -> Option<f64> {
        if g.len() != self.dim() {
            return self.duality_gap(x, pen);
        }
        let corr = self.data.correlations_from_gradient(g);
        self.gap_from(x, self.residual(x), corr, pen)
    }

    fn local_model<'a>(&'a self, x: &[f64]) -> Result<Box<dyn LocalModel + 'a>> {
        self.model(x, None)
    }

    fn local_model_subset<'a>(
        &'a self,
        x: &[f64],
        subset: &[usize],
    ) -> Result<Box<dyn LocalModel + 'a>> {
        self.model(x, Some(subset))
    }
}

impl LeastSquares {
    fn model<'a>(
        &'a self,
        x: &[f64],
        subset: Option<&[usize]>,
    ) -> Result<Box<dyn LocalModel + 'a>> {
        let cols = WeightedColumns::unweighted(&self.data.x, &self.pool);
        // r = y − X b − b₀, with X b from the stored columns.
        let mut eta = vec![0.0; self.data.n()];
        cols.matvec(x, &mut eta);
        self.data.add_intercept(x, &mut eta);
        let r = self.residual_from_eta(eta);
        let n = self.data.n() as f64;
        let mut g = vec![0.0; self.dim()];
        match subset {
            Some(s) => self.data.tmatvec_subset(&r, s, &mut g),
            None => self.data.tmatvec(&r, &mut g),
        }
        g.iter_mut().for_each(|v| *v = -*v / n);
        Ok(Box::new(LsModel {
            data: &self.data,
            cols,
            f: half_mean_sq(&r),
            u: vec![0.0; r.len()],
            r,
            g,
            inv_n: 1.0 / n,
        }))
    }
}

/// Local model of least squares: exact (the loss is quadratic). Sparse columns are read
/// from compact copies made on their first visit (see [`WeightedColumns`]; no weights
/// here), which streams through contiguous memory in the sweeps.
struct LsModel<'a> {
    data: &'a LinearData,
    cols: WeightedColumns<'a>,
    r: Vec<f64>,
    f: f64,
    g: Vec<f64>,
    /// u = [X 1] d.
    u: Vec<f64>,
    inv_n: f64,
}

impl LocalModel for LsModel<'_> {
    fn value(&self) -> f64 {
        self.f
    }
    fn gradient(&self) -> &[f64] {
        &self.g
    }
    fn curvature(&mut self, k: usize) -> f64 {
        self.data.col_sq[k] * self.inv_n
    }
    fn hd(&mut self, k: usize) -> f64 {
        let dot = if self.data.is_intercept(k) {
            self.u.iter().sum()
        } else {
            self.cols.keep(k);
            self.cols.dot(k, &self.u)
        };
        dot * self.inv_n
    }
    fn step(&mut self, k: usize, delta: f64) {
        if self.data.is_intercept(k) {
            self.u.iter_mut().for_each(|e| *e += delta);
        } else {
            self.cols.axpy(k, delta, &mut self.u);
        }
    }
    fn clear(&mut self) {
        self.u.iter_mut().for_each(|v| *v = 0.0);
    }
    fn value_along(&mut self, alpha: f64) -> Option<f64> {
        let s: f64 = self
            .r
            .iter()
            .zip(&self.u)
            .map(|(r, u)| {
                let e = r - alpha * u;
                e * e
            })
            .sum();
        Some(0.5 * s * self.inv_n)
    }
}
