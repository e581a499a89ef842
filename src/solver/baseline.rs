//! Small helpers shared by the baseline solvers ([`super::fista`], [`super::admm`],
//! [`super::owlqn`]): the proximal operator of the penalty, evaluation of f and ∇f with
//! domain checks, and the per-iteration record built exactly as Newton coordinate descent
//! builds it (same objective, same KKT residual, same optional duality gap).

use super::{Run, SolverOptions, TraceRecord};
use crate::error::{Error, Result};
use crate::loss::Loss;
use crate::penalty::{soft_threshold, ResolvedPenalty};

/// The proximal operator of t·(λ_k|·| + (λ₂/2)(·)²) at v:
/// `argmin_z λ_k|z| + (λ₂/2)z² + (z − v)²/(2t) = S(v, tλ_k) / (1 + tλ₂)`.
#[inline]
pub(crate) fn prox(v: f64, t: f64, l1: f64, l2: f64) -> f64 {
    soft_threshold(v, t * l1) / (1.0 + t * l2)
}

/// f(x) and ∇f(x) (into `g`), or `None` if x is outside the domain (then `g` is untouched).
pub(crate) fn value_grad(loss: &dyn Loss, x: &[f64], g: &mut [f64]) -> Option<f64> {
    let f = loss.value(x)?;
    if !f.is_finite() {
        return None;
    }
    loss.gradient(x, g);
    Some(f)
}

/// f at the starting point, as a typed error if the default start is outside the domain.
pub(crate) fn start_value_grad(loss: &dyn Loss, x: &[f64], g: &mut [f64]) -> Result<f64> {
    value_grad(loss, x, g).ok_or_else(|| {
        Error::Numerical("the loss's default starting point is outside its domain".into())
    })
}

/// The smooth part of the objective, f(x) + Σ (λ₂_k/2) x_k², and its gradient written into
/// `gs` from ∇f(x) = `g`.
pub(crate) fn smooth_part(
    pen: &ResolvedPenalty,
    x: &[f64],
    f: f64,
    g: &[f64],
    gs: &mut [f64],
) -> f64 {
    let mut ridge = 0.0;
    for k in 0..x.len() {
        gs[k] = g[k] + pen.l2[k] * x[k];
        ridge += 0.5 * pen.l2[k] * x[k] * x[k];
    }
    f + ridge
}

/// Σ_k λ_k |x_k| (the ℓ1 part of the penalty only).
pub(crate) fn l1_value(pen: &ResolvedPenalty, x: &[f64]) -> f64 {
    x.iter().zip(&pen.l1).map(|(v, l)| l * v.abs()).sum()
}

/// Number of non-zero coordinates.
pub(crate) fn nnz(x: &[f64]) -> usize {
    x.iter().filter(|v| **v != 0.0).count()
}

/// The trace record at x, given f(x) (loss only) and ∇f(x): objective f + P, the KKT
/// residual of [`super::kkt_residual`] and the duality gap when the run asks for it.
/// Returns the record and the (objective, KKT residual) pair for [`Run::finish`].
#[allow(clippy::too_many_arguments)]
pub(crate) fn record(
    run: &Run<'_>,
    opts: &SolverOptions,
    loss: &dyn Loss,
    pen: &ResolvedPenalty,
    iteration: usize,
    x: &[f64],
    f: f64,
    g: &[f64],
    inner: usize,
) -> (TraceRecord, (f64, f64)) {
    let objective = f + pen.value(x);
    let kkt = super::kkt_residual(loss, pen, x, g);
    let gap = if run.wants_gap(opts) {
        loss.duality_gap(x, pen)
    } else {
        None
    };
    (
        TraceRecord {
            iteration,
            seconds: run.seconds(),
            objective,
            kkt_residual: kkt,
            duality_gap: gap,
            nnz: nnz(x),
            inner,
        },
        (objective, kkt),
    )
}

/// A curvature scale of f at x along its gradient: the Rayleigh quotient gᵀHg / gᵀg (one
/// Hessian-vector product), or 1 when it is not positive and finite. Used to initialise
/// step sizes and penalty parameters.
pub(crate) fn curvature_along_gradient(loss: &dyn Loss, x: &[f64], g: &[f64]) -> f64 {
    let gg: f64 = g.iter().map(|v| v * v).sum();
    if !(gg > 0.0 && gg.is_finite()) {
        return 1.0;
    }
    let mut hg = vec![0.0; g.len()];
    loss.hess_vec(x, g, &mut hg);
    let q = g.iter().zip(&hg).map(|(a, b)| a * b).sum::<f64>() / gg;
    if q > 0.0 && q.is_finite() {
        q
    } else {
        1.0
    }
}

pub(crate) use crate::kernels::dot;

/// F(x') − F(x) estimated without cancellation, for steps whose change of F is below the
/// rounding noise of evaluating F, from the loss gradients g = ∇f(x) and g' = ∇f(x'): f by
/// the trapezoidal rule ½(g + g')ᵀ(x' − x) (exact for quadratics, third-order accurate
/// otherwise), the ℓ2 term exactly as ½λ₂(x'² − x²) and the ℓ1 term coordinate by
/// coordinate. The "approximate Wolfe" idea of "A new conjugate gradient method with
/// guaranteed descent and an efficient line search", SIAM J. Optimization, 2005.
pub(crate) fn rounding_change(
    pen: &ResolvedPenalty,
    x: &[f64],
    xn: &[f64],
    g: &[f64],
    gn: &[f64],
) -> f64 {
    let mut change = 0.0;
    for k in 0..x.len() {
        let (a, b) = (x[k], xn[k]);
        change += 0.5 * (g[k] + gn[k]) * (b - a)
            + 0.5 * pen.l2[k] * (b * b - a * a)
            + pen.l1[k] * (b.abs() - a.abs());
    }
    change
}
