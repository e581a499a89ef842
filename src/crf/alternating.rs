//! The alternating solver for the Gaussian CRF: a Θ-step, then a Λ-step, per outer iteration.
//!
//! * **Θ-step.** For fixed Λ the loss is exactly quadratic in Θ (Hessian 2·Σ⊗S_xx), so the
//!   penalised problem in Θ is a lasso-type problem. Coordinate descent on the free set
//!   F_Θ = {Θ_ij ≠ 0} ∪ {|g_ij| ≥ λ_Θ} with the cached products of the local model
//!   (coordinate (i,j): curvature 2 S_xx,ii Σ_jj, (H vec D)_ij = 2(S_xx D Σ)_ij). The quadratic
//!   model is exact, so the unit step is taken after a cheap Armijo check (no Cholesky: Λ
//!   does not move).
//! * **Λ-step.** For fixed Θ, one Newton step of the log-det problem
//!   −log det Λ + tr(S_yyΛ) + tr(Λ⁻¹Ψ) + λ_Λ Σ_{i≠j}|Λ_ij|: coordinate descent on its
//!   quadratic model over the free set of the upper triangle (Hessian ΣEΣ + ΣEΦ + ΦEΣ),
//!   then an Armijo line search that rejects matrices that are not positive definite.
//!
//! Both steps use the CRF's fast local model; the Λ-step's model skips the O(n·p·q) product,
//! so an outer iteration costs about what one joint Newton iteration costs. Reference:
//! "Large-scale optimization algorithms for sparse conditional Gaussian graphical models",
//! AISTATS, 2016 (the alternating Newton coordinate-descent scheme).

use super::local::CrfLocal;
use super::loss::CrfLoss;
use crate::error::Result;
use crate::loss::{LocalModel, Loss};
use crate::penalty::{Penalty, ResolvedPenalty};
use crate::solver::inner_sweeps::coordinate_sweeps;
use crate::solver::newton_cd::{CdOptions, ROUNDING_DECREASE};
use crate::solver::{Observer, Run, Solution, SolverOptions, Status, TraceRecord};

/// The alternating Θ-step / Λ-step solver (see the module docs).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Alternating {
    /// Options shared with every solver.
    pub options: SolverOptions,
    /// Inner-loop tuning (sweeps, forcing, Armijo constants; the subspace Newton step is
    /// not used).
    pub cd: CdOptions,
}

/// Armijo backtracking along target − x over `free`; updates x and returns whether a step
/// was accepted.
///
/// When the predicted decrease is below what an evaluation of F can resolve (the rounding
/// regime of the Newton-CD driver, `ROUNDING_DECREASE`), the Armijo test would compare
/// rounding noise: the full step (an accurate block minimiser) is then taken if it stays in
/// the domain and the KKT residual `kkt` of the outer iteration is below the one at the
/// last such step of this block (`rounding_kkt`; the scheme converges linearly, so no
/// faster decrease is asked for), and no step otherwise. So the solver ends with
/// `LineSearchFailed` once rounding stops its progress, instead of running to its
/// iteration limit on noise-level steps.
#[allow(clippy::too_many_arguments)]
fn line_search(
    model: &mut dyn LocalModel,
    pen: &ResolvedPenalty,
    cd: &CdOptions,
    g: &[f64],
    free: &[usize],
    target: &[f64],
    x: &mut [f64],
    kkt: f64,
    rounding_kkt: &mut f64,
) -> bool {
    let mut delta = 0.0;
    let mut pen_old = 0.0;
    for &k in free {
        let d = target[k] - x[k];
        delta += (g[k] + pen.l2[k] * x[k]) * d + pen.l1[k] * (target[k].abs() - x[k].abs());
        pen_old += pen.l1[k] * x[k].abs() + 0.5 * pen.l2[k] * x[k] * x[k];
    }
    if delta.is_nan() || delta >= 0.0 {
        return false;
    }
    let f_old = model.value() + pen_old;
    if -delta <= ROUNDING_DECREASE * f_old.abs().max(1.0) {
        let inside = model.value_along(1.0).is_some_and(f64::is_finite);
        if !(inside && kkt < *rounding_kkt) {
            return false;
        }
        *rounding_kkt = kkt;
        for &k in free {
            x[k] = target[k];
        }
        return true;
    }
    let mut alpha = 1.0;
    for _ in 0..cd.max_backtracks {
        if let Some(fa) = model.value_along(alpha) {
            let pen_new: f64 = free
                .iter()
                .map(|&k| {
                    let v = x[k] + alpha * (target[k] - x[k]);
                    pen.l1[k] * v.abs() + 0.5 * pen.l2[k] * v * v
                })
                .sum();
            let f_new = fa + pen_new;
            if f_new.is_finite() && f_new <= f_old + cd.armijo * alpha * delta {
                for &k in free {
                    x[k] += alpha * (target[k] - x[k]);
                }
                return true;
            }
        }
        alpha *= 0.5;
    }
    false
}

fn free_set(
    range: std::ops::Range<usize>,
    x: &[f64],
    g: &[f64],
    pen: &ResolvedPenalty,
    out: &mut Vec<usize>,
) {
    out.clear();
    for k in range {
        let gk = g[k] + pen.l2[k] * x[k];
        if x[k] != 0.0 || gk.abs() >= pen.l1[k] {
            out.push(k);
        }
    }
}

impl Alternating {
    /// A solver with the given common options and the default inner-loop tuning.
    pub fn new(options: SolverOptions) -> Self {
        Self {
            options,
            cd: CdOptions::default(),
        }
    }

    /// The solver's name in results.
    pub fn name(&self) -> &'static str {
        "crf-alternating"
    }

    /// Minimises `loss + penalty` from `start` (the loss's start when `None`).
    ///
    /// # Errors
    /// As [`crate::Solver::solve_observed`]: invalid options, a start of the wrong length or
    /// outside the domain, penalty weights of the wrong length.
    pub fn solve(
        &self,
        loss: &CrfLoss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        observer: Option<&mut dyn Observer>,
    ) -> Result<Solution> {
        self.cd.validate()?;
        let (mut run, pen, mut x) = Run::new(loss, penalty, start, &self.options, observer)?;
        let m = loss.dim();
        let nl = loss.precision_coordinates();
        let mut target = x.clone();
        let mut free = Vec::new();
        let mut g = vec![0.0; m];
        let mut inner = 0usize;
        let mut iteration = 0usize;
        // KKT residual at the last rounding-regime step of the Θ- and the Λ-block.
        let mut rounding_kkt = [f64::INFINITY; 2];
        let (status, known) = loop {
            let mut model = CrfLocal::new(loss, &x, true)?;
            g.copy_from_slice(model.gradient());
            let objective = model.value() + pen.value(&x);
            let kkt = crate::solver::kkt_residual(loss, &pen, &x, &g);
            let gap = if run.wants_gap(&self.options) {
                loss.duality_gap(&x, &pen)
            } else {
                None
            };
            let rec = TraceRecord {
                iteration,
                seconds: run.seconds(),
                objective,
                kkt_residual: kkt,
                duality_gap: gap,
                nnz: x.iter().filter(|v| **v != 0.0).count(),
                inner,
            };
            if let Some(s) = run.check(rec) {
                break (s, Some((objective, kkt)));
            }
            // Θ-step: exact quadratic in Θ for fixed Λ.
            let (sweeps, moved_theta) = self.block_step(
                &mut model,
                &pen,
                &g,
                nl..m,
                &mut x,
                &mut target,
                &mut free,
                kkt,
                &mut rounding_kkt[0],
            );
            inner += sweeps;
            drop(model);
            // Λ-step: one log-det Newton step for fixed Θ.
            let mut model = CrfLocal::new(loss, &x, false)?;
            g[..nl].copy_from_slice(&model.gradient()[..nl]);
            let (sweeps, moved_lambda) = self.block_step(
                &mut model,
                &pen,
                &g,
                0..nl,
                &mut x,
                &mut target,
                &mut free,
                kkt,
                &mut rounding_kkt[1],
            );
            inner += sweeps;
            iteration += 1;
            if !moved_theta && !moved_lambda {
                break (Status::LineSearchFailed, None);
            }
        };
        run.finish(self.name(), loss, &pen, x, known, status, iteration, inner)
    }

    /// One block step over the coordinates `range` from the block's local model: its free
    /// set, inner sweeps to the forcing threshold of the outer KKT residual `kkt`, then
    /// the line search (`rounding_kkt` is this block's rounding-regime state). `target`
    /// and `free` are scratch. Returns (sweeps, whether x moved).
    #[allow(clippy::too_many_arguments)]
    fn block_step(
        &self,
        model: &mut dyn LocalModel,
        pen: &ResolvedPenalty,
        g: &[f64],
        range: std::ops::Range<usize>,
        x: &mut [f64],
        target: &mut [f64],
        free: &mut Vec<usize>,
        kkt: f64,
        rounding_kkt: &mut f64,
    ) -> (usize, bool) {
        free_set(range, x, g, pen, free);
        for &k in free.iter() {
            target[k] = x[k];
        }
        let threshold = self.cd.forcing * kkt;
        let sweeps = coordinate_sweeps(model, pen, g, free, target, threshold, &self.cd, 0).count;
        let moved = line_search(model, pen, &self.cd, g, free, target, x, kkt, rounding_kkt);
        (sweeps, moved)
    }
}
