//! Accelerated proximal gradient (FISTA) with backtracking, and plain proximal gradient.
//!
//! Reference: "A fast iterative shrinkage-thresholding algorithm for linear inverse
//! problems", SIAM J. Imaging Sciences, 2009.
//!
//! With the smooth part s(x) = f(x) + Σ_k (λ₂/2)x_k² folded into the prox (the prox of
//! t(λ_k|·| + (λ₂/2)(·)²) is `S(v, tλ_k)/(1 + tλ₂)`), each iteration is
//!
//! 1. the momentum point y = x_k + ((t_{k−1} − 1)/t_k)(x_k − x_{k−1});
//! 2. the proximal gradient step z = prox_{P/L}(y − ∇f(y)/L), with **backtracking**: L is
//!    doubled until the quadratic upper bound
//!    `f(z) ≤ f(y) + ∇f(y)ᵀ(z − y) + (L/2)‖z − y‖²` holds. A trial point outside the
//!    domain of f (a log-det loss at a matrix that is not positive definite: `value()`
//!    returns `None`) counts as a failed test, so the step shrinks until z is feasible;
//!    a momentum point y outside the domain restarts the momentum (y = x_k);
//! 3. t_{k+1} = (1 + √(1 + 4t_k²))/2.
//!
//! Two practical safeguards, both options: at the start of each iteration L is reduced by
//! the factor [`FistaOptions::step_growth`] so the step can grow again after a local
//! backtrack (common practice), and a **function-value restart** ("Adaptive restart for
//! accelerated gradient schemes", Foundations of Computational Mathematics, 2015): if
//! F(z) > F(x_k) the momentum is reset and the step is retaken from y = x_k, which makes
//! the method monotone.
//!
//! With [`FistaOptions::accelerate`] off this is the plain proximal gradient method
//! (y = x_k always).
//!
//! Cost per iteration: one gradient at y, one f-value per backtracking trial, and one
//! gradient at the new iterate for its KKT residual (that gradient is reused as ∇f(y) when
//! the momentum is zero). [`Solution::inner`] counts gradient evaluations (data passes).

use super::baseline::{curvature_along_gradient, prox, record, start_value_grad, value_grad};
use super::{Observer, Run, Solution, Solver, SolverOptions, Status};
use crate::error::Result;
use crate::loss::Loss;
use crate::penalty::Penalty;

/// Tuning of [`Fista`].
#[derive(Debug, Clone, PartialEq)]
pub struct FistaOptions {
    /// Nesterov momentum (FISTA) when true, plain proximal gradient when false. Default true.
    pub accelerate: bool,
    /// Function-value restart of the momentum (see the module docs). Default true.
    pub restart: bool,
    /// Factor applied to the Lipschitz estimate L at the start of every iteration (≤ 1;
    /// 1 keeps L non-decreasing as in the original method). Default 0.9.
    pub step_growth: f64,
    /// Factor by which L grows on a failed backtracking test (> 1). Default 2.
    pub backtrack: f64,
    /// Maximum backtracking trials per iteration. Default 60.
    pub max_backtracks: usize,
}

impl Default for FistaOptions {
    fn default() -> Self {
        Self {
            accelerate: true,
            restart: true,
            step_growth: 0.9,
            backtrack: 2.0,
            max_backtracks: 60,
        }
    }
}

/// The FISTA / proximal-gradient baseline.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Fista {
    /// Options shared with every solver.
    pub options: SolverOptions,
    /// Method-specific tuning.
    pub fista: FistaOptions,
}

impl Fista {
    /// FISTA with the given common options and default tuning.
    pub fn new(options: SolverOptions) -> Self {
        Self {
            options,
            fista: FistaOptions::default(),
        }
    }

    /// Plain proximal gradient (no momentum) with the given common options.
    pub fn proximal_gradient(options: SolverOptions) -> Self {
        Self {
            options,
            fista: FistaOptions {
                accelerate: false,
                ..FistaOptions::default()
            },
        }
    }

    fn check_tuning(&self) -> Result<()> {
        let o = &self.fista;
        if !(o.step_growth > 0.0 && o.step_growth <= 1.0) {
            return Err(crate::Error::InvalidArgument(format!(
                "FISTA step_growth must be in (0, 1], got {}",
                o.step_growth
            )));
        }
        if !(o.backtrack > 1.0 && o.backtrack.is_finite()) {
            return Err(crate::Error::InvalidArgument(format!(
                "FISTA backtrack factor must be finite and > 1, got {}",
                o.backtrack
            )));
        }
        Ok(())
    }
}

/// One backtracking proximal gradient step from y. Returns (z, f(z)) or `None` when no
/// step within the backtracking budget passes the test.
struct Stepper<'a> {
    loss: &'a dyn Loss,
    pen: &'a crate::penalty::ResolvedPenalty,
    opts: &'a FistaOptions,
}

impl Stepper<'_> {
    /// Writes z into `z`; returns f(z) (loss only) or `None`.
    fn step(&self, y: &[f64], fy: f64, gy: &[f64], l: &mut f64, z: &mut [f64]) -> Option<f64> {
        let m = y.len();
        // The smooth part includes the ridge term only through the prox, so the upper
        // bound is tested on f alone.
        let slack = 8.0 * f64::EPSILON * fy.abs().max(1.0);
        for _ in 0..self.opts.max_backtracks.max(1) {
            let t = 1.0 / *l;
            for k in 0..m {
                z[k] = prox(y[k] - t * gy[k], t, self.pen.l1[k], self.pen.l2[k]);
            }
            if let Some(fz) = self.loss.value(z).filter(|v| v.is_finite()) {
                let mut lin = 0.0;
                let mut sq = 0.0;
                for k in 0..m {
                    let d = z[k] - y[k];
                    lin += gy[k] * d;
                    sq += d * d;
                }
                if fz <= fy + lin + 0.5 * *l * sq + slack {
                    return Some(fz);
                }
            }
            *l *= self.opts.backtrack;
            if !l.is_finite() {
                return None;
            }
        }
        None
    }
}

impl Solver for Fista {
    fn name(&self) -> &'static str {
        if self.fista.accelerate {
            "fista"
        } else {
            "proximal-gradient"
        }
    }

    fn options(&self) -> &SolverOptions {
        &self.options
    }

    fn solve_observed(
        &self,
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        observer: Option<&mut dyn Observer>,
    ) -> Result<Solution> {
        self.check_tuning()?;
        let (mut run, pen, mut x) = Run::deferred(loss, penalty, start, &self.options, observer)?;
        let m = loss.dim();
        let stepper = Stepper {
            loss,
            pen: &pen,
            opts: &self.fista,
        };
        let mut gx = vec![0.0; m];
        let mut fx = start_value_grad(loss, &x, &mut gx)?;
        run.fix_scale(loss, &gx);
        let mut passes = 1usize;
        let mut lip = curvature_along_gradient(loss, &x, &gx);
        passes += 1;
        let mut x_prev = x.clone();
        let mut y = x.clone();
        let mut gy = vec![0.0; m];
        let mut z = vec![0.0; m];
        let mut t = 1.0f64;
        let mut momentum = false; // whether x_prev ≠ x carries momentum
        let mut iteration = 0usize;
        let (status, known) = loop {
            let (rec, known) = record(
                &run,
                &self.options,
                loss,
                &pen,
                iteration,
                &x,
                fx,
                &gx,
                passes,
            );
            if let Some(s) = run.check(rec) {
                break (s, known);
            }
            let big_fx = known.0;
            lip *= self.fista.step_growth;

            // 1. Momentum point.
            let t_next = 0.5 * (1.0 + (1.0 + 4.0 * t * t).sqrt());
            let beta = if self.fista.accelerate && momentum {
                (t - 1.0) / t_next
            } else {
                0.0
            };
            let mut fy = None;
            if beta > 0.0 {
                for k in 0..m {
                    y[k] = x[k] + beta * (x[k] - x_prev[k]);
                }
                fy = value_grad(loss, &y, &mut gy);
                if fy.is_some() {
                    passes += 1;
                }
            }
            let from_x = fy.is_none();
            let fy = match fy {
                Some(v) => v,
                None => {
                    y.copy_from_slice(&x);
                    gy.copy_from_slice(&gx);
                    fx
                }
            };

            // 2. Backtracking proximal gradient step.
            let mut fz = stepper.step(&y, fy, &gy, &mut lip, &mut z);
            let objective_at = |z: &[f64], fz: f64| fz + pen.value(z);
            let mut restarted = from_x;
            if !from_x && self.fista.restart {
                let worse = match fz {
                    Some(v) => objective_at(&z, v) > big_fx,
                    None => true,
                };
                if worse {
                    // Function-value restart: retake the step from x without momentum.
                    y.copy_from_slice(&x);
                    gy.copy_from_slice(&gx);
                    fz = stepper.step(&x, fx, &gx, &mut lip, &mut z);
                    restarted = true;
                }
            }
            let Some(fz) = fz else {
                break (Status::LineSearchFailed, known);
            };
            if restarted && (objective_at(&z, fz) > big_fx || z == x) {
                // Even a plain proximal step does not decrease F: rounding level reached.
                break (Status::LineSearchFailed, known);
            }

            // 3. Accept z, gradient for the next record.
            std::mem::swap(&mut x_prev, &mut x);
            x.copy_from_slice(&z);
            loss.gradient(&x, &mut gx);
            passes += 1;
            fx = fz;
            momentum = self.fista.accelerate;
            // After a restart t = 1, so the next momentum coefficient is 0 and acceleration
            // resumes one step later.
            t = if restarted { 1.0 } else { t_next };
            iteration += 1;
        };
        run.finish(
            self.name(),
            loss,
            &pen,
            x,
            Some(known),
            status,
            iteration,
            passes,
        )
    }
}
