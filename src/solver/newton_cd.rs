//! Newton coordinate descent: the main driver, generic over [`Loss`].
//!
//! Each outer iteration at the current point x:
//!
//! 1. Build the loss's [`LocalModel`]: f(x), g = ∇f(x), and cheap access to H = ∇²f(x).
//! 2. Free set F = {k : x_k ≠ 0} ∪ {k : |g_k| ≥ λ_k} (unpenalised coordinates always).
//!    Coordinates outside F stay at zero: for them the optimality condition already holds.
//! 3. Inner loop: cyclic coordinate descent on the penalised quadratic model
//!    `q(d) = gᵀd + ½dᵀHd + Σ_k λ_k|x_k + d_k|` over F. For coordinate k with
//!    a = H_kk, b = g_k + (Hd)_k and c = x_k + d_k, the exact minimiser along k is
//!    `z = S(c − b/a, λ_k/a)` (soft-thresholding), and d_k += z − c.
//!    Sweeps stop when the largest scaled change a·|z − c| of a sweep falls below
//!    `forcing · KKT(x)` (an adaptive forcing rule: loose far from the solution, tight near
//!    it), or after `max_inner_sweeps`.
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
//! full steps are taken while the KKT residual keeps halving; F then moves by rounding
//! noise only, and the run ends with `LineSearchFailed` once no step changes x.)
//!
//! References: "A coordinate gradient descent method for nonsmooth separable
//! minimization", Mathematical Programming, 2009 (the descent-direction framework and the
//! line-search rule); "Proximal Newton-type methods for minimizing composite functions",
//! SIAM J. Optimization, 2014 (inexact inner solves and their forcing terms).

use super::{Run, Solution, Solver, SolverOptions, Status, TraceRecord};
use crate::error::Result;
use crate::loss::{LocalModel, Loss};
use crate::penalty::{soft_threshold, Penalty, ResolvedPenalty};

/// Relative size of a predicted decrease below which a fresh evaluation of F cannot reliably
/// confirm it: F is a sum of many terms and carries rounding errors from ε·|F| up to about
/// n·ε·|F| (common practice: do not compare a decrease with evaluation noise).
const ROUNDING_DECREASE: f64 = 1e-13;

/// Tuning of the inner loop of Newton coordinate descent.
#[derive(Debug, Clone, PartialEq)]
pub struct CdOptions {
    /// Maximum coordinate sweeps per outer iteration. Default 100.
    pub max_inner_sweeps: usize,
    /// Forcing factor η: inner sweeps stop when the largest scaled coordinate change is
    /// ≤ η·KKT(x). Default 0.05.
    pub forcing: f64,
    /// Largest active set for the subspace Newton step (0 disables it). Default 600.
    pub newton_block_max: usize,
    /// Armijo sufficient-decrease constant σ. Default 1e-4.
    pub armijo: f64,
    /// Maximum step halvings in the line search. Default 60.
    pub max_backtracks: usize,
}

impl Default for CdOptions {
    fn default() -> Self {
        Self {
            max_inner_sweeps: 100,
            forcing: 0.05,
            newton_block_max: 600,
            armijo: 1e-4,
            max_backtracks: 60,
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
        let (mut run, pen, mut x) = Run::with_scale(
            loss,
            penalty,
            start,
            &self.options,
            observer,
            working.map(|w| w.gradient_scale),
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
        let mut target = x.clone(); // x + d on the free set
        let mut free: Vec<usize> = Vec::new();
        let mut g = vec![0.0; m];
        let mut inner_total = 0usize;
        let mut iteration = 0usize;
        // KKT residual at the last step accepted in the rounding regime (see the line search).
        let mut rounding_kkt = f64::INFINITY;
        let (status, known) = loop {
            let mut model = match working {
                Some(w) => loss.local_model_subset(&x, w.coordinates)?,
                None => loss.local_model(&x)?,
            };
            g.copy_from_slice(model.gradient());
            let objective = model.value() + pen.value(&x);
            let kkt = candidates.iter().fold(0.0f64, |r, &k| {
                let gk = g[k] + pen.l2[k] * x[k];
                let v = crate::penalty::coordinate_residual(x[k], gk, pen.l1[k])
                    * loss.residual_scale(k);
                if v > r || v.is_nan() {
                    v
                } else {
                    r
                }
            });
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

            // 2. Free set.
            free.clear();
            for &k in candidates {
                let gk = g[k] + pen.l2[k] * x[k];
                if x[k] != 0.0 || gk.abs() >= pen.l1[k] {
                    free.push(k);
                }
            }
            for &k in &free {
                target[k] = x[k];
            }

            // 3. Inner coordinate-descent sweeps.
            let (sweeps, settled) = coordinate_sweeps(
                model.as_mut(),
                &pen,
                &g,
                &free,
                &mut target,
                self.cd.forcing * kkt,
                self.cd.max_inner_sweeps,
            );
            inner_total += sweeps;

            // 4. Subspace Newton step when the sweeps stalled.
            if !settled && self.cd.newton_block_max > 0 {
                subspace_newton(
                    model.as_mut(),
                    &pen,
                    &x,
                    &g,
                    &free,
                    &mut target,
                    self.cd.newton_block_max,
                );
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
            for _ in 0..self.cd.max_backtracks {
                if let Some(fa) = model.value_along(alpha) {
                    let pen_new: f64 = free
                        .iter()
                        .map(|&k| {
                            let v = x[k] + alpha * (target[k] - x[k]);
                            pen.l1[k] * v.abs() + 0.5 * pen.l2[k] * v * v
                        })
                        .sum();
                    let f_new = fa + pen_rest + pen_new;
                    let f_ref = f_old + pen_rest + pen_free_old;
                    if f_new.is_finite() && f_new <= f_ref + self.cd.armijo * alpha * delta {
                        accepted = Some(alpha);
                        break;
                    }
                    // Rounding regime: the predicted decrease is below what a fresh
                    // evaluation of F can resolve, so the comparison above is noise. Take
                    // the full (Newton / coordinate-descent) step, whose model is exact to
                    // third order, as long as the KKT residual keeps falling geometrically
                    // (which rules out looping on gradient noise). F may then move by
                    // rounding noise only.
                    if alpha == 1.0
                        && f_new.is_finite()
                        && -delta <= ROUNDING_DECREASE * f_ref.abs().max(1.0)
                        && kkt <= 0.5 * rounding_kkt
                    {
                        rounding_kkt = kkt;
                        accepted = Some(alpha);
                        break;
                    }
                }
                alpha *= 0.5;
            }
            drop(model);
            let Some(alpha) = accepted else {
                break (Status::LineSearchFailed, (objective, kkt));
            };
            let mut moved = false;
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
            iteration += 1;
        };
        run.finish(
            "newton-cd",
            loss,
            &pen,
            x,
            Some(known),
            status,
            iteration,
            inner_total,
        )
    }
}

/// Cyclic coordinate descent over `free` on the penalised quadratic model
/// `q(d) = gᵀd + ½dᵀHd + Σ_k λ_k|x_k + d_k|` (ℓ2 term included), with `target = x + d`
/// updated in place: for a = H_kk, b = g_k + (Hd)_k, c = x_k + d_k the new value is
/// `S(c − b/a, λ_k/a)`. Stops after a sweep whose largest scaled change a·|Δ| is at most
/// `threshold`, or after `max_sweeps`. Returns (sweeps done, whether the threshold was met).
pub(crate) fn coordinate_sweeps(
    model: &mut dyn LocalModel,
    pen: &ResolvedPenalty,
    g: &[f64],
    free: &[usize],
    target: &mut [f64],
    threshold: f64,
    max_sweeps: usize,
) -> (usize, bool) {
    let mut count = 0;
    for _ in 0..max_sweeps.max(1) {
        let mut biggest = 0.0f64;
        for &k in free {
            let a = model.curvature(k) + pen.l2[k];
            if !(a > 0.0 && a.is_finite()) {
                continue;
            }
            let c = target[k];
            let b = g[k] + pen.l2[k] * c + model.hd(k);
            let z = soft_threshold(c - b / a, pen.l1[k] / a);
            if z != c {
                model.step(k, z - c);
                target[k] = z;
                biggest = biggest.max(a * (z - c).abs());
            }
        }
        count += 1;
        if biggest <= threshold {
            return (count, true);
        }
    }
    (count, false)
}

/// Replaces the coordinate-descent direction by the reduced Newton direction on the active
/// set when that is well defined and keeps the signs; otherwise leaves it unchanged.
/// On return the model's cached direction matches `target − x`.
fn subspace_newton(
    model: &mut dyn LocalModel,
    pen: &ResolvedPenalty,
    x: &[f64],
    g: &[f64],
    free: &[usize],
    target: &mut [f64],
    max_size: usize,
) {
    let active: Vec<usize> = free
        .iter()
        .copied()
        .filter(|&k| target[k] != 0.0 || pen.l1[k] == 0.0)
        .collect();
    let na = active.len();
    if na == 0 || na > max_size {
        return;
    }
    let mut h = model.hessian_block(&active);
    let mut max_diag = 0.0f64;
    for (a, &k) in active.iter().enumerate() {
        h[a * na + a] += pen.l2[k];
        max_diag = max_diag.max(h[a * na + a]);
    }
    // Coordinates of the free set that the sweeps sent to zero stay there: d_k = −x_k. Their
    // effect on the active block enters the right-hand side through (H d_Z)_A.
    model.clear();
    let mut zeroed = false;
    for &k in free {
        if target[k] == 0.0 && pen.l1[k] != 0.0 && x[k] != 0.0 {
            model.step(k, -x[k]);
            zeroed = true;
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
            let coupling = if zeroed { model.hd(k) } else { 0.0 };
            -(g[k] + pen.l2[k] * x[k] + pen.l1[k] * s + coupling)
        })
        .collect();
    let hm = ndarray::Array2::from_shape_vec((na, na), h).ok();
    let mut newton = None;
    if let Some(mut hm) = hm {
        for attempt in 0..2 {
            if attempt == 1 {
                // A tiny ridge for singular blocks (duplicate or collinear columns).
                for a in 0..na {
                    hm[[a, a]] += 1e-12 * max_diag.max(f64::MIN_POSITIVE);
                }
            }
            if let Some(ch) = crate::linalg::cholesky(hm.view()) {
                let d = ch.solve(&rhs);
                if d.iter().all(|v| v.is_finite()) {
                    newton = Some(d);
                    break;
                }
            }
        }
    }
    let consistent = newton.as_ref().is_some_and(|d| {
        active.iter().zip(d).all(|(&k, &dk)| {
            pen.l1[k] == 0.0 || (x[k] + dk).signum() == target[k].signum() && x[k] + dk != 0.0
        })
    });
    // Rebuild the model's cached direction for the chosen d (zeroed coordinates keep
    // target 0 in both cases).
    model.clear();
    if consistent {
        let d = newton.unwrap_or_default();
        for (&k, &dk) in active.iter().zip(&d) {
            target[k] = x[k] + dk;
        }
    }
    for &k in free {
        let dk = target[k] - x[k];
        if dk != 0.0 {
            model.step(k, dk);
        }
    }
}
