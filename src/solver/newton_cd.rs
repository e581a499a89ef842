//! Newton coordinate descent: the main driver, generic over [`Loss`].
//!
//! Each outer iteration at the current point x:
//!
//! 1. Build the loss's [`LocalModel`]: f(x), g = ∇f(x), and cheap access to H = ∇²f(x).
//! 2. Free set F = {k : x_k ≠ 0} ∪ {k : |g_k| ≥ λ_k} (unpenalised coordinates always).
//!    Coordinates outside F stay at zero: for them the optimality condition already holds.
//!    From a cold start (no penalised coordinate non-zero) the first F admits only the
//!    strongest violators for models that allow it (`cold_start_entry`;
//!    `CdOptions::first_step_working_set`).
//! 3. Inner loop: cyclic coordinate descent on the penalised quadratic model
//!    `q(d) = gᵀd + ½dᵀHd + Σ_k λ_k|x_k + d_k|` over F. For coordinate k with
//!    a = H_kk, b = g_k + (Hd)_k and c = x_k + d_k, the exact minimiser along k is
//!    `z = S(c − b/a, λ_k/a)` (soft-thresholding), and d_k += z − c.
//!    Sweeps stop when the largest scaled change a·|z − c| of a sweep falls below
//!    `η · KKT(x)` (a forcing rule: loose far from the solution, tight near it; the factor
//!    η itself grows from 0.05 towards ½ while the quadratic model mispredicts F, see
//!    `CdOptions::adaptive_forcing`), or after `max_inner_sweeps`. When sweeps converge
//!    slowly, the updates are over-relaxed, d_k += ω(z − c) with ω ∈ [1, 1.8] estimated from the observed
//!    contraction (successive over-relaxation, applied only where it cannot cross a kink of
//!    |·|), for the models that allow it: on the sparse 20000 × 50000 logistic benchmark
//!    this cut the sweeps from 61 to 37. Inner loops that run past 2K sweeps (K =
//!    `CdOptions::extrapolation`, default 5) on an active set larger than the subspace
//!    Newton step of item 4 takes are Anderson-extrapolated every K sweeps, the candidate
//!    kept only where it lowers the penalised model (see `extrapolation`): on an
//!    ill-conditioned Gaussian CRF (inputs with lag-one correlation 0.999) this cut the
//!    outer iterations 2.3–2.9-fold and the time 2.7–3.5-fold; on the unscaled macrodata
//!    lasso with the subspace step off, the sweeps 19-fold.
//! 4. Subspace Newton step: if the sweeps stall (ill-conditioned H) and the active set
//!    A = {k ∈ F : x_k + d_k ≠ 0} is small, solve the reduced Newton system
//!    `H_AA d_A = −(g_A + λ_A ∘ sign(x_A + d_A))` by Cholesky and use it when it keeps the
//!    signs; this gives the fast local convergence of a proximal Newton method on
//!    ill-conditioned problems where coordinate sweeps crawl.
//! 5. Armijo line search on F(x + αd) ≤ F(x) + σαΔ with
//!    `Δ = gᵀd + Σ_k λ_k(|x_k + d_k| − |x_k|)`, halving α; points outside the domain
//!    (e.g. a matrix that is not positive definite) are rejected like a failed decrease.
//!
//! The ℓ2 (elastic-net) term is treated as part of the smooth function. Stopping: KKT
//! residual (and optionally the duality gap), iteration and time limits, the observer.
//! Since Armijo steps only decrease F, the last iterate is the best one. (Near the limit of
//! floating point, where a predicted decrease is below the rounding noise of evaluating F,
//! full steps are taken while the KKT residual keeps falling; F then moves by rounding
//! noise only, and the run ends with `LineSearchFailed` once the residual stops falling or
//! no step changes x. There is no backtracking in that regime: every comparison of F would
//! be a coin toss, and a long enough series of halvings always finds a winner.)
//!
//! References: "A coordinate gradient descent method for nonsmooth separable
//! minimization", Mathematical Programming, 2009 (the descent-direction framework and the
//! line-search rule); "Proximal Newton-type methods for minimizing composite functions",
//! SIAM J. Optimization, 2014 (inexact inner solves and their forcing terms).

use super::inner_sweeps::coordinate_sweeps;
use super::{Run, Scale, Solution, Solver, SolverOptions, Status, TraceRecord};
use crate::error::Result;
use crate::loss::{LocalModel, Loss};
use crate::penalty::{Penalty, ResolvedPenalty};

/// Relative size of a predicted decrease below which a fresh evaluation of F cannot reliably
/// confirm it: F is a sum of many terms and carries rounding errors from ε·|F| up to about
/// n·ε·|F| (common practice: do not compare a decrease with evaluation noise).
pub(crate) const ROUNDING_DECREASE: f64 = 1e-13;

/// Tuning of the inner loop of Newton coordinate descent.
#[derive(Debug, Clone, PartialEq)]
pub struct CdOptions {
    /// Maximum coordinate sweeps per outer iteration. Default 100.
    pub max_inner_sweeps: usize,
    /// Forcing factor η: inner sweeps stop when the largest scaled coordinate change is
    /// ≤ η·KKT(x). Default 0.05. With `adaptive_forcing` it is the smallest η used.
    pub forcing: f64,
    /// Loosen the forcing factor while the quadratic model predicts F poorly (default
    /// `true`): from the second outer iteration on, η_k = min(½, max(`forcing`, |ρ − 1|))
    /// with ρ the ratio of the actual to the predicted change of F on the previous full step
    /// (see `adaptive_forcing`). Near the solution, and wherever the model is accurate,
    /// this is the fixed `forcing`; in the global phase of the log-det losses, where the
    /// model underestimates the decrease (ρ = 1.1–1.4 on a wide CRF) and full Newton steps
    /// only halve the KKT residual, the inner loop stops earlier instead of solving a poor
    /// model accurately. Measured at the default tolerance (2 cores): see the CHANGELOG.
    pub adaptive_forcing: bool,
    /// Largest active set for the subspace Newton step (0 disables it). Default 600.
    pub newton_block_max: usize,
    /// Armijo sufficient-decrease constant σ. Default 1e-4.
    pub armijo: f64,
    /// Maximum step halvings in the line search. Default 60.
    pub max_backtracks: usize,
    /// Cold-start working set for the first outer iteration (default `true`, for models
    /// that allow it, see [`crate::loss::InnerLoopHints`]): when no penalised coordinate
    /// is non-zero at the start, only the strongest violators enter the first free set
    /// (see `cold_start_entry`); later iterations use the full rule, and the KKT test
    /// always covers every coordinate. Measured on the sparse 20000 × 50000 logistic
    /// benchmark: the first iteration's 7 sweeps over 32 600 coordinates drop to 3, and the
    /// solve time by about 20 %.
    pub first_step_working_set: bool,
    /// Over-relaxation factor ω ∈ (0, 2) of the inner sweeps (see `over_relaxed`; 1 is
    /// plain coordinate descent). `None` (the default) is adaptive for models that allow it
    /// ([`crate::loss::InnerLoopHints`]; logistic regression) and plain otherwise: each
    /// inner loop starts at ω = 1 and, while it keeps running, raises ω every two sweeps
    /// from the contraction it observes; well-conditioned models, which settle in a few
    /// sweeps, are never over-relaxed. Measured: sparse 20000 × 50000 logistic, 61 → 37
    /// sweeps; on log-det losses (precision, CRF) over-relaxation slowed the solves
    /// (precision AR(1), p = 1000: 5.4 s plain, 8.5 s with ω ≤ 1.5, > 40 s with ω ≤ 1.8),
    /// hence plain sweeps there.
    pub relaxation: Option<f64>,
    /// Anderson extrapolation of the inner sweeps: every this many sweeps, the last
    /// iterates are combined into a candidate that is kept only where it lowers the
    /// penalised quadratic model (see `extrapolation`); 0 disables it. Only loops that
    /// run past 2K sweeps with more than `newton_block_max` active coordinates are
    /// extrapolated (smaller stalled loops get the subspace Newton step). Default 5.
    pub extrapolation: usize,
}

impl CdOptions {
    /// Checks the tuning values.
    ///
    /// # Errors
    /// [`crate::Error::InvalidArgument`] for a relaxation factor outside (0, 2), a
    /// non-positive or non-finite forcing factor, or an Armijo constant outside (0, 1).
    pub fn validate(&self) -> Result<()> {
        let bad = |what: String| Err(crate::Error::InvalidArgument(what));
        if let Some(w) = self.relaxation {
            if !(w > 0.0 && w < 2.0) {
                return bad(format!("relaxation factor must lie in (0, 2), got {w}"));
            }
        }
        if !(self.forcing > 0.0 && self.forcing.is_finite()) {
            return bad(format!(
                "forcing factor must be positive, got {}",
                self.forcing
            ));
        }
        if !(self.armijo > 0.0 && self.armijo < 1.0) {
            return bad(format!(
                "Armijo constant must lie in (0, 1), got {}",
                self.armijo
            ));
        }
        Ok(())
    }
}

impl Default for CdOptions {
    fn default() -> Self {
        Self {
            max_inner_sweeps: 100,
            forcing: 0.05,
            newton_block_max: 600,
            armijo: 1e-4,
            max_backtracks: 60,
            relaxation: None,
            first_step_working_set: true,
            adaptive_forcing: true,
            extrapolation: 5,
        }
    }
}

/// The Newton coordinate-descent solver.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct NewtonCd {
    /// Options shared with every solver.
    pub options: SolverOptions,
    /// Inner-loop tuning.
    pub cd: CdOptions,
}

impl NewtonCd {
    /// A solver with the given common options and the default inner-loop tuning.
    pub fn new(options: SolverOptions) -> Self {
        Self {
            options,
            cd: CdOptions::default(),
        }
    }

    /// The forcing factor of an outer iteration, given the error of the previous model's
    /// prediction (see [`CdOptions::adaptive_forcing`]).
    fn forcing(&self, agreement: Option<f64>) -> f64 {
        match agreement {
            Some(e) if self.cd.adaptive_forcing => adaptive_forcing(e, self.cd.forcing),
            _ => self.cd.forcing,
        }
    }
}

/// The relative error |ρ − 1| of the penalised quadratic model on the full step d, with
/// ρ = (F(x + d) − F(x)) / (q(d) − q(0)) the ratio of the actual to the predicted change:
/// ∞ when F(x + d) is undefined (outside the domain), and 0 (no evidence against the model)
/// when the prediction is unknown or too small to resolve against the rounding noise of F
/// (100 times the `ROUNDING_DECREASE` level, so that noise moves ρ by at most about 1 %).
pub(crate) fn model_agreement(actual: f64, predicted: f64, f_ref: f64) -> f64 {
    if !actual.is_finite() {
        return f64::INFINITY;
    }
    let resolvable = predicted < -100.0 * ROUNDING_DECREASE * f_ref.abs().max(1.0);
    if !resolvable {
        return 0.0;
    }
    (actual / predicted - 1.0).abs()
}

/// The adaptive forcing factor η = min(½, max(η_min, |ρ − 1|)) from the relative error of
/// the previous model's prediction: the function-value analogue of choice 1 of "Choosing
/// the forcing terms in an inexact Newton method" (SIAM J. Sci. Comput., 1996), which sets
/// η from the disagreement between the function and its local model at the last step,
/// floored at the fixed factor η_min and capped at ½. A model that mispredicted the last
/// step by 20 % is not worth solving to 5 % accuracy; a model that predicted it well is
/// solved as tightly as before (which is what keeps the slow but well-modelled problems,
/// whose residual falls slowly only because coordinate sweeps crawl, on the fixed factor).
pub(crate) fn adaptive_forcing(error: f64, floor: f64) -> f64 {
    if error.is_nan() {
        return floor;
    }
    error.min(0.5).max(floor)
}

impl Solver for NewtonCd {
    fn name(&self) -> &'static str {
        "newton-cd"
    }

    fn options(&self) -> &SolverOptions {
        &self.options
    }

    fn solve_observed(
        &self,
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        observer: Option<&mut dyn super::Observer>,
    ) -> Result<Solution> {
        self.run(loss, penalty, start, observer, None)
    }
}

/// A working set for a restricted solve: coordinates outside it are held at their starting
/// values (zero, for screened coordinates).
#[derive(Debug, Clone, Copy)]
pub struct WorkingSet<'w> {
    /// The coordinates that may move, in increasing order.
    pub coordinates: &'w [usize],
    /// The gradient scale ‖∇f(x₀)‖∞ of the full problem (see
    /// [`gradient_scale`](super::gradient_scale)), so the relative tolerance matches.
    pub gradient_scale: f64,
}

impl NewtonCd {
    /// Solves with only the coordinates of `working` free to move; the KKT residual of the
    /// returned solution covers those coordinates only (the caller checks the rest — this is
    /// the inner solve of screening along a path). The gradient is requested through
    /// [`Loss::local_model_subset`], so a loss that supports it pays O(|working set|)
    /// columns per iteration instead of a full pass.
    ///
    /// # Errors
    /// As [`Solver::solve_observed`]; [`crate::Error::InvalidArgument`] for an index out of
    /// range.
    pub fn solve_restricted(
        &self,
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        working: WorkingSet<'_>,
    ) -> Result<Solution> {
        if working.coordinates.iter().any(|&k| k >= loss.dim()) {
            return Err(crate::Error::InvalidArgument(
                "working-set index out of range".into(),
            ));
        }
        self.run(loss, penalty, start, None, Some(working))
    }

    fn run(
        &self,
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        observer: Option<&mut dyn super::Observer>,
        working: Option<WorkingSet<'_>>,
    ) -> Result<Solution> {
        self.cd.validate()?;
        let (mut run, pen, mut x) = Run::with_scale(
            loss,
            penalty,
            start,
            &self.options,
            observer,
            match working {
                Some(w) => Scale::Known(w.gradient_scale),
                None => Scale::deferred_unless(start),
            },
        )?;
        run.skip_gap = working.is_some();
        let m = loss.dim();
        let all: Vec<usize>;
        let candidates: &[usize] = match working {
            Some(w) => w.coordinates,
            None => {
                all = (0..m).collect();
                &all
            }
        };
        // The loss's scale of each coordinate's KKT residual, read once.
        let scale: Vec<f64> = (0..m).map(|k| loss.residual_scale(k)).collect();
        let mut target = x.clone(); // x + d on the free set
        let mut free: Vec<usize> = Vec::new();
        let mut g = vec![0.0; m];
        let mut inner_total = 0usize;
        let mut iteration = 0usize;
        // KKT residual at the last step accepted in the rounding regime (see the line search).
        let mut rounding_kkt = f64::INFINITY;
        // How well the previous quadratic model predicted F on its full step (for the
        // adaptive forcing factor).
        let mut agreement: Option<f64> = None;
        let (status, known) = loop {
            let mut model = match working {
                Some(w) => loss.local_model_subset(&x, w.coordinates)?,
                None => loss.local_model(&x)?,
            };
            g.copy_from_slice(model.gradient());
            if iteration == 0 {
                run.fix_scale(loss, &g); // x is the default start if the scale was deferred
            }
            let objective = model.value() + pen.value(&x);
            if iteration == 0 && !objective.is_finite() {
                // Data whose loss overflows (e.g. a response of 1e300 in least squares)
                // would otherwise "converge" to an infinite objective.
                return Err(crate::Error::Numerical(
                    "the objective is not finite at the starting point (rescale the data)".into(),
                ));
            }
            // The KKT residual and the free set F = {x_k ≠ 0} ∪ {|g_k| ≥ λ_k} in one pass over
            // the candidates (the free set is rebuilt below for a cold-start working set).
            free.clear();
            let mut kkt = 0.0f64;
            for &k in candidates {
                let gk = g[k] + pen.l2[k] * x[k];
                let v = crate::penalty::coordinate_residual(x[k], gk, pen.l1[k]) * scale[k];
                if v > kkt || v.is_nan() {
                    kkt = v;
                }
                if x[k] != 0.0 || gk.abs() >= pen.l1[k] {
                    free.push(k);
                }
            }
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
                inner: inner_total,
            };
            if let Some(s) = run.check(rec) {
                break (s, (objective, kkt));
            }

            // 2. Free set (built above), or from a cold start only the strongest violators.
            if iteration == 0
                && self.cd.first_step_working_set
                && model.inner_loop_hints().cold_start_working_set
            {
                let entry = cold_start_entry(candidates, &x, &g, &pen);
                if entry != 1.0 {
                    free.retain(|&k| {
                        x[k] != 0.0 || (g[k] + pen.l2[k] * x[k]).abs() >= pen.l1[k] * entry
                    });
                }
            }
            for &k in &free {
                target[k] = x[k];
            }

            // 3. Inner coordinate-descent sweeps.
            let mut sweep = coordinate_sweeps(
                model.as_mut(),
                &pen,
                &g,
                &free,
                &mut target,
                self.forcing(agreement) * kkt,
                &self.cd,
                self.cd.newton_block_max,
            );
            inner_total += sweep.count;

            // 4. Subspace Newton step when the sweeps stalled.
            if !sweep.settled
                && self.cd.newton_block_max > 0
                && subspace_newton(
                    model.as_mut(),
                    &pen,
                    &x,
                    &g,
                    &free,
                    &mut target,
                    self.cd.newton_block_max,
                )
            {
                // The direction is no longer the sweeps' one: its model change is unknown.
                sweep.model_change = f64::NAN;
            }

            // 5. Armijo line search.
            let mut delta = 0.0;
            let mut pen_free_old = 0.0;
            for &k in &free {
                let d = target[k] - x[k];
                delta += (g[k] + pen.l2[k] * x[k]) * d + pen.l1[k] * (target[k].abs() - x[k].abs());
                pen_free_old += pen.l1[k] * x[k].abs() + 0.5 * pen.l2[k] * x[k] * x[k];
            }
            if delta.is_nan() || delta >= 0.0 {
                // No descent direction left: x is optimal up to rounding.
                break (Status::LineSearchFailed, (objective, kkt));
            }
            let pen_rest = pen.value(&x) - pen_free_old;
            let f_old = model.value();
            let mut accepted = None;
            let mut alpha = 1.0;
            let f_ref = f_old + pen_rest + pen_free_old;
            // Rounding regime: the predicted decrease is below what a fresh evaluation of F
            // can resolve, so any comparison of F values is a coin toss (and backtracking
            // would toss it until some trial wins). Take the full (Newton /
            // coordinate-descent) step, whose model is exact to third order, only while the
            // KKT residual keeps falling (which rules out looping on gradient noise), and
            // otherwise stop. F may then move by rounding noise only.
            let rounding = -delta <= ROUNDING_DECREASE * f_ref.abs().max(1.0);
            let trials = if rounding { 1 } else { self.cd.max_backtracks };
            // The quadratic model's accuracy on the full step, for the next forcing factor.
            agreement = None;
            for _ in 0..trials {
                if let Some(fa) = model.value_along(alpha) {
                    let pen_new: f64 = free
                        .iter()
                        .map(|&k| {
                            let v = x[k] + alpha * (target[k] - x[k]);
                            pen.l1[k] * v.abs() + 0.5 * pen.l2[k] * v * v
                        })
                        .sum();
                    let f_new = fa + pen_rest + pen_new;
                    if alpha == 1.0 {
                        agreement = Some(model_agreement(f_new - f_ref, sweep.model_change, f_ref));
                    }
                    if rounding {
                        if f_new.is_finite() && kkt < rounding_kkt {
                            rounding_kkt = kkt;
                            accepted = Some(alpha);
                        }
                        break;
                    }
                    if f_new.is_finite() && f_new <= f_ref + self.cd.armijo * alpha * delta {
                        accepted = Some(alpha);
                        break;
                    }
                } else if alpha == 1.0 {
                    agreement = Some(f64::INFINITY);
                }
                alpha *= 0.5;
            }
            let Some(alpha) = accepted else {
                break (Status::LineSearchFailed, (objective, kkt));
            };
            let mut moved = false;
            // The model outlives the update of x so that `accept` can hand the values of its
            // accepted trial to the next model (see `LocalModel::accept`).
            for &k in &free {
                let v = if alpha == 1.0 {
                    target[k]
                } else {
                    x[k] + alpha * (target[k] - x[k])
                };
                moved |= v != x[k];
                x[k] = v;
            }
            if !moved {
                // The accepted step is below the resolution of x (the decrease test passed
                // only because F(x + αd) rounds to F(x)): the next iteration would rebuild
                // the same model and direction, so stop here instead of looping.
                break (Status::LineSearchFailed, (objective, kkt));
            }
            model.accept(alpha, &x);
            drop(model);
            iteration += 1;
        };
        // Every exit leaves g = ∇f(x) at the final x; over all coordinates unless the
        // solve was restricted to a working set.
        run.finish_with_gradient(
            "newton-cd",
            loss,
            &pen,
            x,
            Some(known),
            working.is_none().then_some(g.as_slice()),
            status,
            iteration,
            inner_total,
        )
    }
}

/// The entry threshold of the first free set from a cold start, as a multiple of λ_k: with
/// r_k = |g_k|/λ_k the violation ratio of a zero penalised coordinate and r_max the largest,
/// zero coordinates enter only if r_k ≥ min(2, (1 + r_max)/2) (at least the largest one,
/// so the set is never empty while some coordinate violates its condition). Returns 1 (the
/// plain rule) for a warm start, i.e. when some penalised coordinate is already non-zero,
/// or when nothing violates.
///
/// The first Newton step from zero otherwise works on every coordinate whose gradient
/// exceeds its penalty, most of which end at zero (on the sparse logistic benchmark 32 600
/// free coordinates for an 11 200-coordinate solution); those just above the penalty get
/// their chance from the second iteration on. This is a working set, not a screening rule:
/// nothing is discarded for good. The factor 2 is an empirical choice: on the sparse
/// logistic benchmark, entry factors 1 / 1.5 / 2 / 3 gave solve times of about
/// 99 / 80 / 71 / 81 ms in one run.
fn cold_start_entry(candidates: &[usize], x: &[f64], g: &[f64], pen: &ResolvedPenalty) -> f64 {
    let mut r_max = 0.0f64;
    for &k in candidates {
        if pen.l1[k] <= 0.0 {
            continue;
        }
        if x[k] != 0.0 {
            return 1.0;
        }
        // x_k = 0 here, so the ℓ2 term adds nothing to the gradient.
        let r = g[k].abs() / pen.l1[k];
        if r > r_max {
            r_max = r;
        }
    }
    if r_max.is_finite() && r_max > 1.0 {
        (0.5 * (1.0 + r_max)).min(2.0)
    } else {
        1.0
    }
}

/// Rounds of truncated Newton steps that [`subspace_newton`] takes, each on a smaller
/// active set.
const NEWTON_ROUNDS: usize = 8;

/// Replaces the coordinate-descent direction by reduced Newton steps on the active set.
///
/// With the sweeps' point z_c = target and its signs s fixed, the quadratic model is the
/// smooth q_s(z) = gᵀ(z − x) + ½(z − x)ᵀH(z − x) + λsᵀz on the active coordinates (the
/// others fixed at their values), and its minimiser z_N solves one linear system. q_s
/// falls along the segment z_c + t(z_N − z_c), t ∈ [0, 1], and while the segment stays in
/// the closed orthant of s, q_s is the penalised model itself. So each round steps to z_N
/// when the signs hold, and otherwise to the first point where a coordinate reaches zero
/// (set exactly to zero, and fixed there for the next round, which solves on the smaller
/// active set): never a worse model value than the sweeps' point ("orthant-wise"
/// truncation, as in "Scalable training of L1-regularized log-linear models", ICML, 2007).
/// At most [`NEWTON_ROUNDS`] rounds. On a 5-sample, 8-variable precision problem (a
/// singular S, λ = 0.01) the sweeps stalled at their cap and Newton-CD needed more than
/// 3 000 iterations with the untruncated step (used only when it kept every sign); with
/// these rounds it converges.
///
/// Returns whether the direction changed. On return the model's cached direction matches
/// `target − x`.
fn subspace_newton(
    model: &mut dyn LocalModel,
    pen: &ResolvedPenalty,
    x: &[f64],
    g: &[f64],
    free: &[usize],
    target: &mut [f64],
    max_size: usize,
) -> bool {
    let mut active: Vec<usize> = free
        .iter()
        .copied()
        .filter(|&k| target[k] != 0.0 || pen.l1[k] == 0.0)
        .collect();
    active.sort_unstable(); // looked up by binary search below
    let na = active.len();
    if na == 0 || na > max_size {
        return false;
    }
    let mut h_full = model.hessian_block(&active);
    for (a, &k) in active.iter().enumerate() {
        h_full[a * na + a] += pen.l2[k];
    }
    let full = active.clone();
    let mut changed = false;
    for _ in 0..NEWTON_ROUNDS {
        let Some(d) = newton_point(model, pen, x, g, free, target, &active, &h_full, &full) else {
            break;
        };
        let crosses = |k: usize, zc: f64, zn: f64| {
            pen.l1[k] != 0.0 && !(zn.signum() == zc.signum() && zn != 0.0)
        };
        let reach = active.iter().zip(&d).fold(1.0f64, |t, (&k, &dk)| {
            let (zc, zn) = (target[k], x[k] + dk);
            if crosses(k, zc, zn) {
                t.min(zc / (zc - zn))
            } else {
                t
            }
        });
        if reach <= 0.0 {
            break;
        }
        changed = true;
        for (&k, &dk) in active.iter().zip(&d) {
            let (zc, zn) = (target[k], x[k] + dk);
            // The coordinates that reach the boundary first land exactly on zero.
            target[k] = if crosses(k, zc, zn) && zc / (zc - zn) <= reach {
                0.0
            } else {
                zc + reach * (zn - zc)
            };
        }
        if reach == 1.0 {
            break;
        }
        active.retain(|&k| target[k] != 0.0 || pen.l1[k] == 0.0);
        if active.is_empty() {
            break;
        }
    }
    // Rebuild the model's cached direction for the final target.
    model.clear();
    for &k in free {
        let dk = target[k] - x[k];
        if dk != 0.0 {
            model.step(k, dk);
        }
    }
    changed
}

/// The minimiser x + d over the `active` coordinates of the quadratic model with the signs
/// of `target` fixed, the other free coordinates held at `target` (their effect enters the
/// right-hand side through (H d_Z)_A); `h_full` is the Hessian block of the first round's
/// active set `full` (sorted, a superset of `active`). `None` when the block is not
/// numerically positive definite even with a tiny ridge.
#[allow(clippy::too_many_arguments)]
fn newton_point(
    model: &mut dyn LocalModel,
    pen: &ResolvedPenalty,
    x: &[f64],
    g: &[f64],
    free: &[usize],
    target: &[f64],
    active: &[usize],
    h_full: &[f64],
    full: &[usize],
) -> Option<Vec<f64>> {
    let na = active.len();
    let nf = full.len();
    let idx: Vec<usize> = active
        .iter()
        .map(|k| full.binary_search(k).ok())
        .collect::<Option<_>>()?;
    let mut hm = ndarray::Array2::from_shape_fn((na, na), |(a, b)| h_full[idx[a] * nf + idx[b]]);
    let max_diag = (0..na).fold(0.0f64, |m, a| m.max(hm[[a, a]]));
    // Fixed coordinates: d_k = target_k − x_k for the free coordinates not in `active`.
    model.clear();
    let mut fixed = false;
    for &k in free {
        let dk = target[k] - x[k];
        if dk != 0.0 && active.binary_search(&k).is_err() {
            model.step(k, dk);
            fixed = true;
        }
    }
    let rhs: Vec<f64> = active
        .iter()
        .map(|&k| {
            let s = if pen.l1[k] == 0.0 {
                0.0
            } else {
                target[k].signum()
            };
            let coupling = if fixed { model.hd(k) } else { 0.0 };
            -(g[k] + pen.l2[k] * x[k] + pen.l1[k] * s + coupling)
        })
        .collect();
    for attempt in 0..2 {
        if attempt == 1 {
            // A tiny ridge for singular blocks (duplicate or collinear columns).
            for a in 0..na {
                hm[[a, a]] += 1e-12 * max_diag.max(f64::MIN_POSITIVE);
            }
        }
        if let Some(ch) = crate::linalg::cholesky(hm.view()) {
            let d = ch.apply_inverse(&rhs);
            if d.iter().all(|v| v.is_finite()) {
                return Some(d);
            }
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The forcing rule (after choice 1 of "Choosing the forcing terms in an inexact
    /// Newton method", SIAM J. Sci. Comput., 1996), with our floor and cap.
    #[test]
    fn adaptive_forcing_follows_the_model_error() {
        // ρ = 1.2: η = 0.2; ρ = 1.01: the floor; outside the domain: the cap.
        let e = model_agreement(-1.2, -1.0, 10.0);
        assert!((e - 0.2).abs() < 1e-15);
        assert!((adaptive_forcing(e, 0.05) - 0.2).abs() < 1e-15);
        assert_eq!(
            adaptive_forcing(model_agreement(-1.01, -1.0, 10.0), 0.05),
            0.05
        );
        assert_eq!(model_agreement(f64::NAN, -1.0, 10.0), f64::INFINITY);
        assert_eq!(adaptive_forcing(f64::INFINITY, 0.05), 0.5);
        // Unknown or unresolvable predictions are no evidence: the floor.
        assert_eq!(model_agreement(-1.0, f64::NAN, 10.0), 0.0);
        assert_eq!(model_agreement(-1e-12, -1e-12, 10.0), 0.0);
        assert_eq!(adaptive_forcing(f64::NAN, 0.05), 0.05);
        // A floor above the cap wins (the fixed factor is the user's choice).
        assert_eq!(adaptive_forcing(3.0, 0.7), 0.7);
        // The solver uses it only from the second iteration and only when enabled.
        let mut s = NewtonCd::default();
        assert_eq!(s.forcing(None), 0.05);
        assert!((s.forcing(Some(0.3)) - 0.3).abs() < 1e-15);
        s.cd.adaptive_forcing = false;
        assert_eq!(s.forcing(Some(0.3)), 0.05);
    }

    #[test]
    fn cold_start_entry_threshold() {
        // λ = 1 on four penalised coordinates and one unpenalised (index 4).
        let pen = ResolvedPenalty {
            l1: vec![1.0, 1.0, 1.0, 1.0, 0.0],
            l2: vec![0.0; 5],
        };
        let all = [0usize, 1, 2, 3, 4];
        let zero = [0.0; 5];
        // Strong violators: min(2, (1 + 5)/2) = 2.
        assert_eq!(
            cold_start_entry(&all, &zero, &[5.0, -3.0, 0.5, 1.5, 9.0], &pen),
            2.0
        );
        // Mild ones: (1 + 1.5)/2 = 1.25, so the largest still enters.
        let e = cold_start_entry(&all, &zero, &[1.5, -1.2, 0.5, 0.1, 9.0], &pen);
        assert_eq!(e, 1.25);
        assert!(1.5 >= e);
        // No violator, or a warm start: the plain rule.
        assert_eq!(
            cold_start_entry(&all, &zero, &[0.5, 0.2, 0.0, 0.1, 9.0], &pen),
            1.0
        );
        let warm = [0.0, 0.3, 0.0, 0.0, 0.0];
        assert_eq!(
            cold_start_entry(&all, &warm, &[5.0, 0.0, 0.5, 1.5, 9.0], &pen),
            1.0
        );
    }

    #[test]
    fn invalid_inner_options_are_errors() {
        for bad in [
            CdOptions {
                relaxation: Some(2.0),
                ..Default::default()
            },
            CdOptions {
                relaxation: Some(0.0),
                ..Default::default()
            },
            CdOptions {
                forcing: f64::NAN,
                ..Default::default()
            },
            CdOptions {
                armijo: 1.0,
                ..Default::default()
            },
        ] {
            assert!(matches!(
                bad.validate(),
                Err(crate::Error::InvalidArgument(_))
            ));
        }
        assert!(CdOptions::default().validate().is_ok());
    }
}
