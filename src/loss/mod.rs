//! Smooth convex losses f(x) and the trait the solvers are generic over.
//!
//! A solver minimises F(x) = f(x) + P(x), with P the weighted ℓ1 (+ℓ2) penalty of
//! [`crate::penalty`]. A loss owns its data and answers, at a point x of its domain:
//!
//! * [`Loss::value`] f(x), or `None` outside the domain (e.g. a matrix that is not positive
//!   definite);
//! * [`Loss::gradient`] ∇f(x);
//! * [`Loss::hess_vec`] ∇²f(x)·v.
//!
//! Those three methods are all a downstream loss needs: the provided
//! [`Loss::local_model`] builds a [`LocalModel`] from Hessian-vector products (correct but
//! slow). A loss gets fast by overriding `local_model` with cached products, so that a
//! coordinate update and the line search cost O(n) or less instead of a full pass.
//! [`check_derivatives`] verifies a new loss by finite differences.

mod check;
mod hessvec_model;
mod inner_hints;
mod structure;

pub use check::{check_derivatives, DerivativeReport};
pub use hessvec_model::HessVecModel;
pub use inner_hints::InnerLoopHints;
pub use structure::LossStructure;

use crate::error::Result;
use crate::penalty::ResolvedPenalty;

/// A smooth convex loss over R^m (m = [`Loss::dim`]).
///
/// Contract of the slice arguments: `x`, `v`, `g` and `out` have length m. The solvers,
/// [`check_derivatives`] and the other entry points of the crate check user-supplied
/// points (length, finiteness, domain) before they call these methods, and return typed
/// errors; the methods themselves do not re-check on every call (they sit in the inner
/// loops), so calling one directly with slices of another length is a caller bug that may
/// panic, like indexing a slice out of range.
pub trait Loss: Send + Sync {
    /// Number of coordinates m.
    fn dim(&self) -> usize;

    /// f(x), or `None` if x is outside the domain of f.
    fn value(&self, x: &[f64]) -> Option<f64>;

    /// Writes ∇f(x) into `g` (length m). Only called at points of the domain.
    fn gradient(&self, x: &[f64], g: &mut [f64]);

    /// Writes ∇²f(x)·v into `out` (length m). Only called at points of the domain.
    fn hess_vec(&self, x: &[f64], v: &[f64], out: &mut [f64]);

    /// A short name used in reports ("least-squares", "logistic", ...).
    fn name(&self) -> &str {
        "custom"
    }

    /// Structural factor c_k of the penalty on coordinate k: λ_k = λ·w_k·c_k. Default 1.
    /// Return 0 for coordinates that are never penalised (an intercept), 2 for an
    /// off-diagonal entry of a symmetric matrix stored once (it appears twice in Σ_{i≠j}).
    fn structural_factor(&self, _k: usize) -> f64 {
        1.0
    }

    /// Multiplier applied to coordinate k's KKT residual so that it is reported in the
    /// problem's own convention (default 1; ½ for a symmetric pair stored once, whose
    /// coordinate gradient is twice the matrix gradient entry).
    fn residual_scale(&self, _k: usize) -> f64 {
        1.0
    }

    /// The default starting point (zeros; a log-det loss starts from a positive-definite
    /// diagonal).
    fn start(&self) -> Vec<f64> {
        vec![0.0; self.dim()]
    }

    /// The duality gap F(x) − D(u) at x for a dual-feasible u built from x, where a clean
    /// dual exists; `None` otherwise (the default).
    fn duality_gap(&self, _x: &[f64], _penalty: &ResolvedPenalty) -> Option<f64> {
        None
    }

    /// [`Loss::duality_gap`] at x when the caller already holds g = ∇f(x) (every
    /// coordinate, the smooth loss only: no penalty terms). A loss whose dual point is
    /// built from the gradient overrides this to skip its own pass over the data; the
    /// default ignores `g`. The value is the same as `duality_gap` up to rounding.
    fn duality_gap_with_gradient(
        &self,
        x: &[f64],
        _g: &[f64],
        penalty: &ResolvedPenalty,
    ) -> Option<f64> {
        self.duality_gap(x, penalty)
    }

    /// The smallest λ for which x = [`Loss::start`]-with-penalised-coordinates-zero is
    /// optimal, where the loss knows it (used for grids and scales).
    fn lambda_max(&self, _penalty: &ResolvedPenalty) -> Option<f64> {
        None
    }

    /// The local model at x used by Newton coordinate descent. The default is built from
    /// [`Loss::value`], [`Loss::gradient`] and [`Loss::hess_vec`]; override it with cached
    /// products to make the inner loop fast.
    ///
    /// # Errors
    /// An error if x is outside the domain.
    fn local_model<'a>(&'a self, x: &[f64]) -> Result<Box<dyn LocalModel + 'a>> {
        Ok(Box::new(HessVecModel::new(self, x)?))
    }

    /// Structural information for solvers with closed-form steps (see [`LossStructure`]);
    /// `None` (the default) when the loss does not expose any.
    fn structure(&self) -> Option<LossStructure<'_>> {
        None
    }

    /// An exact screening rule: a mask (length m) of coordinates that are provably zero at
    /// the solution for the resolved penalty `penalty` (for example the block-diagonal rule
    /// of a precision matrix), or `None` (the default) when the loss knows no such rule.
    /// Regularisation paths leave these coordinates out of the working set; their KKT check
    /// still covers them.
    fn provably_zero(&self, _penalty: &ResolvedPenalty) -> Option<Vec<bool>> {
        None
    }

    /// A local model whose gradient is only needed on the coordinates in `subset` (entries
    /// outside it may be left at zero). Screening along a regularisation path uses it so a
    /// solve on a small working set does not pay for a full gradient pass each iteration.
    /// The default computes the full model.
    ///
    /// # Errors
    /// An error if x is outside the domain.
    fn local_model_subset<'a>(
        &'a self,
        x: &[f64],
        _subset: &[usize],
    ) -> Result<Box<dyn LocalModel + 'a>> {
        self.local_model(x)
    }
}

/// The second-order model of f around a point x, with a search direction d that the
/// coordinate-descent inner loop builds one coordinate at a time.
///
/// q(d) = f(x) + gᵀd + ½ dᵀHd; the inner loop needs H_kk and (Hd)_k cheaply and updates d
/// through [`LocalModel::step`] so the implementation can keep products such as Xd current.
pub trait LocalModel {
    /// f(x).
    fn value(&self) -> f64;
    /// ∇f(x).
    fn gradient(&self) -> &[f64];
    /// H_kk, the curvature along coordinate k (≥ 0).
    fn curvature(&mut self, k: usize) -> f64;
    /// (H d)_k for the current direction d.
    fn hd(&mut self, k: usize) -> f64;
    /// d_k ← d_k + delta, updating cached products.
    fn step(&mut self, k: usize, delta: f64);
    /// Resets d to exactly zero.
    fn clear(&mut self);
    /// f(x + α d) for the current direction d, or `None` outside the domain. Should reuse
    /// cached products (the line search calls it several times per iteration).
    fn value_along(&mut self, alpha: f64) -> Option<f64>;
    /// Called by the driver when its line search accepts the point `x_new` = x + αd, right
    /// after the model's last [`LocalModel::value_along`] call, which was at this α. A model
    /// may keep what it computed there for the loss's next model at `x_new` (the logistic
    /// model keeps the linear predictor, see `point_memo.rs`). The default does nothing.
    fn accept(&mut self, _alpha: f64, _x_new: &[f64]) {}
    /// The optional Newton-CD inner-loop strategies this model allows (see
    /// [`InnerLoopHints`]; none by default).
    fn inner_loop_hints(&self) -> InnerLoopHints {
        InnerLoopHints::default()
    }
    /// The dense block H_AA (row-major, |A|×|A|) for a small index set A, used by the
    /// driver's subspace Newton step. The default reads it off [`LocalModel::hd`] by
    /// stepping along unit vectors (|A| steps and |A|² reads); it leaves d = 0.
    fn hessian_block(&mut self, idx: &[usize]) -> Vec<f64> {
        let m = idx.len();
        let mut h = vec![0.0; m * m];
        self.clear();
        for (a, &k) in idx.iter().enumerate() {
            self.step(k, 1.0);
            for (b, &j) in idx.iter().enumerate() {
                h[b * m + a] = self.hd(j);
            }
            self.clear();
        }
        // Symmetrise rounding differences.
        for a in 0..m {
            for b in 0..a {
                let v = 0.5 * (h[a * m + b] + h[b * m + a]);
                h[a * m + b] = v;
                h[b * m + a] = v;
            }
        }
        h
    }
}

mod glm;
pub mod least_squares;
pub mod logistic;
mod point_memo;
pub mod precision;
mod weighted_columns;

pub use least_squares::LeastSquares;
pub use logistic::Logistic;

/// Inside `impl Loss for Wrapper`, forwards every [`Loss`] method except
/// [`Loss::provably_zero`] to the field `$field` (a wrapper that adds data around a loss,
/// e.g. for cross-validation, then overrides only what it changes).
macro_rules! forward_loss_methods {
    ($field:ident) => {
        fn dim(&self) -> usize {
            self.$field.dim()
        }
        fn value(&self, x: &[f64]) -> Option<f64> {
            self.$field.value(x)
        }
        fn gradient(&self, x: &[f64], g: &mut [f64]) {
            self.$field.gradient(x, g)
        }
        fn hess_vec(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
            self.$field.hess_vec(x, v, out)
        }
        fn name(&self) -> &str {
            self.$field.name()
        }
        fn structural_factor(&self, k: usize) -> f64 {
            self.$field.structural_factor(k)
        }
        fn residual_scale(&self, k: usize) -> f64 {
            self.$field.residual_scale(k)
        }
        fn start(&self) -> Vec<f64> {
            self.$field.start()
        }
        fn duality_gap(
            &self,
            x: &[f64],
            penalty: &$crate::penalty::ResolvedPenalty,
        ) -> Option<f64> {
            self.$field.duality_gap(x, penalty)
        }
        fn duality_gap_with_gradient(
            &self,
            x: &[f64],
            g: &[f64],
            penalty: &$crate::penalty::ResolvedPenalty,
        ) -> Option<f64> {
            self.$field.duality_gap_with_gradient(x, g, penalty)
        }
        fn lambda_max(&self, penalty: &$crate::penalty::ResolvedPenalty) -> Option<f64> {
            self.$field.lambda_max(penalty)
        }
        fn local_model<'a>(
            &'a self,
            x: &[f64],
        ) -> $crate::Result<Box<dyn $crate::loss::LocalModel + 'a>> {
            self.$field.local_model(x)
        }
        fn structure(&self) -> Option<$crate::loss::LossStructure<'_>> {
            self.$field.structure()
        }
        fn local_model_subset<'a>(
            &'a self,
            x: &[f64],
            subset: &[usize],
        ) -> $crate::Result<Box<dyn $crate::loss::LocalModel + 'a>> {
            self.$field.local_model_subset(x, subset)
        }
    };
}
pub(crate) use forward_loss_methods;
