//! Solvers for min_x f(x) + P(x): options, results, traces and the observer hook shared by
//! Newton coordinate descent ([`newton_cd`]) and the baseline methods.
//!
//! Every solver returns a [`Solution`] with the same optimality measures, computed by the
//! same code ([`certify`]):
//!
//! * the **KKT residual**, ‖min-norm subgradient of F at x‖∞ (see
//!   [`crate::penalty::coordinate_residual`]), and
//! * the **duality gap** where the loss has a clean dual.
//!
//! Convergence is declared when the KKT residual is at most `tol · max(1, s)`, where
//! s = ‖∇f(x₀)‖∞ at the loss's default start x₀ — the problem's own gradient scale (for the
//! lasso s = λ_max when no coordinate is unpenalised). Non-convergence is a [`Status`], never
//! an error, and the returned point is the best iterate found.

pub mod admm;
mod baseline;
mod extrapolation;
pub mod fista;
pub(crate) mod inner_sweeps;
pub mod newton_cd;
pub mod owlqn;

pub use admm::Admm;
pub use fista::Fista;
pub use newton_cd::{NewtonCd, WorkingSet};
pub use owlqn::Owlqn;

use crate::error::{Error, Result};
use crate::loss::Loss;
use crate::penalty::{Penalty, ResolvedPenalty};
use std::time::{Duration, Instant};

/// Why a solver stopped.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Status {
    /// The KKT residual (or, if requested, the duality gap) met the tolerance.
    Converged,
    /// The iteration limit was reached first.
    IterationLimit,
    /// The time limit was reached first.
    TimeLimit,
    /// The observer asked to stop.
    StoppedByObserver,
    /// No step along the search direction decreased the objective (typically at the limit
    /// of floating-point precision); the best iterate is returned.
    LineSearchFailed,
}

impl Status {
    /// The snake-case name used in JSON output.
    pub fn as_str(&self) -> &'static str {
        match self {
            Status::Converged => "converged",
            Status::IterationLimit => "iteration_limit",
            Status::TimeLimit => "time_limit",
            Status::StoppedByObserver => "stopped_by_observer",
            Status::LineSearchFailed => "line_search_failed",
        }
    }
}

/// Options common to all solvers.
#[derive(Debug, Clone, PartialEq)]
pub struct SolverOptions {
    /// Relative KKT tolerance: converged when residual ≤ tol·max(1, ‖∇f(x₀)‖∞). Default 1e-7.
    pub tol: f64,
    /// Optional duality-gap tolerance (relative to max(1, |F|)); converged when either test
    /// passes. Default `None` (KKT only).
    pub gap_tol: Option<f64>,
    /// Maximum outer iterations. Default 1000.
    pub max_iter: usize,
    /// Wall-clock limit, checked once per outer iteration. Default none.
    pub time_limit: Option<Duration>,
    /// Record a [`TraceRecord`] per outer iteration. Default false.
    pub trace: bool,
    /// Compute the duality gap in every trace record (costs about one pass). Default false.
    pub trace_gap: bool,
}

impl Default for SolverOptions {
    fn default() -> Self {
        Self {
            tol: 1e-7,
            gap_tol: None,
            max_iter: 1000,
            time_limit: None,
            trace: false,
            trace_gap: false,
        }
    }
}

impl SolverOptions {
    /// Validates the options.
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] for a non-positive or non-finite tolerance.
    pub fn validate(&self) -> Result<()> {
        if !(self.tol.is_finite() && self.tol > 0.0) {
            return Err(Error::InvalidArgument(format!(
                "tolerance must be finite and > 0, got {}",
                self.tol
            )));
        }
        if let Some(g) = self.gap_tol {
            if !(g.is_finite() && g > 0.0) {
                return Err(Error::InvalidArgument(format!(
                    "gap tolerance must be finite and > 0, got {g}"
                )));
            }
        }
        Ok(())
    }
}

/// One outer iteration as seen by the trace and the observer.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct TraceRecord {
    /// Outer iteration (0 = the starting point).
    pub iteration: usize,
    /// Seconds since the solve started.
    pub seconds: f64,
    /// F(x) = f(x) + P(x).
    pub objective: f64,
    /// KKT residual at x.
    pub kkt_residual: f64,
    /// Duality gap at x, when computed.
    pub duality_gap: Option<f64>,
    /// Number of non-zero coordinates.
    pub nnz: usize,
    /// Cumulative inner coordinate sweeps (Newton-CD) or gradient evaluations (baselines).
    pub inner: usize,
}

/// What an observer tells the solver after seeing an iteration.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Control {
    /// Keep going.
    Continue,
    /// Stop now and return the best iterate with [`Status::StoppedByObserver`].
    Stop,
}

/// Sees every outer iteration; can stop the run (progress display, cancellation, custom
/// stopping rules). Any `FnMut(&TraceRecord) -> Control` is an observer.
pub trait Observer {
    /// Called once per outer iteration, after the optimality measures are computed.
    fn observe(&mut self, record: &TraceRecord) -> Control;
}

impl<F: FnMut(&TraceRecord) -> Control> Observer for F {
    fn observe(&mut self, record: &TraceRecord) -> Control {
        self(record)
    }
}

/// The result of a solve.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Solution {
    /// The solver's name ("newton-cd", "fista", ...).
    pub solver: String,
    /// The best iterate found.
    pub x: Vec<f64>,
    /// F(x).
    pub objective: f64,
    /// KKT residual at x.
    pub kkt_residual: f64,
    /// Duality gap at x where the loss defines one.
    pub duality_gap: Option<f64>,
    /// Why the solver stopped.
    pub status: Status,
    /// Outer iterations performed.
    pub iterations: usize,
    /// Wall-clock seconds.
    pub seconds: f64,
    /// Cumulative inner sweeps (Newton-CD) or gradient evaluations (baselines).
    pub inner: usize,
    /// Per-iteration records when [`SolverOptions::trace`] was set.
    pub trace: Vec<TraceRecord>,
}

impl Solution {
    /// Number of non-zero coordinates of x.
    pub fn nnz(&self) -> usize {
        self.x.iter().filter(|v| **v != 0.0).count()
    }

    /// True when the status is [`Status::Converged`].
    pub fn converged(&self) -> bool {
        self.status == Status::Converged
    }
}

/// A solver of min f(x) + P(x) for any [`Loss`]; lets callers race methods side by side.
pub trait Solver: Send + Sync {
    /// Short name ("newton-cd", "fista", "admm", "owl-qn").
    fn name(&self) -> &'static str;
    /// The options in use.
    fn options(&self) -> &SolverOptions;
    /// Minimises `loss + penalty` from `start` (the loss's default start when `None`),
    /// reporting each outer iteration to `observer`.
    ///
    /// # Errors
    /// Typed errors for invalid options, a start of the wrong length or outside the domain,
    /// or penalty weights of the wrong length.
    fn solve_observed(
        &self,
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        observer: Option<&mut dyn Observer>,
    ) -> Result<Solution>;

    /// [`Solver::solve_observed`] without a start or an observer.
    ///
    /// # Errors
    /// As [`Solver::solve_observed`].
    fn solve(&self, loss: &dyn Loss, penalty: &Penalty) -> Result<Solution> {
        self.solve_observed(loss, penalty, None, None)
    }
}

/// The KKT residual of `loss + penalty` at x given ∇f(x).
pub fn kkt_residual(loss: &dyn Loss, pen: &ResolvedPenalty, x: &[f64], g: &[f64]) -> f64 {
    pen.kkt_residual(x, g, |k| loss.residual_scale(k))
}

/// Objective value, KKT residual and duality gap at x, computed the same way for every
/// solver. Returns `None` if x is outside the domain.
pub fn certify(
    loss: &dyn Loss,
    pen: &ResolvedPenalty,
    x: &[f64],
) -> Option<(f64, f64, Option<f64>)> {
    let f = loss.value(x)?;
    let mut g = vec![0.0; x.len()];
    loss.gradient(x, &mut g);
    Some((
        f + pen.value(x),
        kkt_residual(loss, pen, x, &g),
        loss.duality_gap(x, pen),
    ))
}

/// max(1, ‖∇f(x₀)‖∞) at the loss's default start x₀: the scale of the relative KKT test.
///
/// Each gradient entry is taken in the same per-entry convention as the KKT residual
/// (multiplied by [`Loss::residual_scale`]), so the test compares like with like.
pub fn gradient_scale(loss: &dyn Loss) -> f64 {
    let x0 = loss.start();
    let mut g = vec![0.0; x0.len()];
    loss.gradient(&x0, &mut g);
    scale_of(loss, &g)
}

/// Where a solve takes the scale max(1, ‖∇f(x₀)‖∞) of its relative KKT test from.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Scale {
    /// Given by the caller (a path solver computes it once instead of once per λ).
    Known(f64),
    /// Computed up front with one gradient at the loss's default start x₀.
    AtStart,
    /// Taken from the first gradient the solver computes, which must be at x₀ (a solve
    /// without a starting point): saves the separate gradient pass of `AtStart`. The
    /// solver calls [`Run::fix_scale`] before its first [`Run::check`].
    FromFirstGradient,
}

impl Scale {
    /// `FromFirstGradient` for a solve from the default start, `AtStart` otherwise.
    pub(crate) fn deferred_unless(start: Option<&[f64]>) -> Self {
        if start.is_none() {
            Self::FromFirstGradient
        } else {
            Self::AtStart
        }
    }
}

/// The scale max(1, max_k |g_k|·residual_scale(k)) of a gradient g at x₀.
fn scale_of(loss: &dyn Loss, g: &[f64]) -> f64 {
    g.iter()
        .enumerate()
        .fold(1.0f64, |a, (k, v)| a.max(v.abs() * loss.residual_scale(k)))
}

/// Shared bookkeeping for one solve: clock, limits, trace, observer, best iterate.
pub(crate) struct Run<'o> {
    pub(crate) start: Instant,
    pub(crate) trace: Vec<TraceRecord>,
    observer: Option<&'o mut dyn Observer>,
    pub(crate) tol_abs: f64,
    record_trace: bool,
    max_iter: usize,
    time_limit: Option<Duration>,
    gap_tol: Option<f64>,
    /// Leave the duality gap out of the final solution (restricted solves inside a path,
    /// whose caller certifies the full problem itself).
    pub(crate) skip_gap: bool,
    /// `tol_abs` still waits for [`Run::fix_scale`] (see [`Scale::FromFirstGradient`]).
    scale_pending: bool,
    tol: f64,
}

impl<'o> Run<'o> {
    /// Validates the inputs and fixes the absolute KKT threshold tol·max(1, ‖∇f(x₀)‖∞).
    #[allow(dead_code)] // used by the baseline solvers
    pub(crate) fn new(
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        opts: &SolverOptions,
        observer: Option<&'o mut dyn Observer>,
    ) -> Result<(Self, ResolvedPenalty, Vec<f64>)> {
        Self::with_scale(loss, penalty, start, opts, observer, Scale::AtStart)
    }

    /// As [`Run::new`], with the scale taken from the solver's first gradient when the
    /// solve starts from the default point ([`Scale::deferred_unless`]); the solver then
    /// calls [`Run::fix_scale`] with that gradient.
    pub(crate) fn deferred(
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        opts: &SolverOptions,
        observer: Option<&'o mut dyn Observer>,
    ) -> Result<(Self, ResolvedPenalty, Vec<f64>)> {
        let scale = Scale::deferred_unless(start);
        Self::with_scale(loss, penalty, start, opts, observer, scale)
    }

    /// As [`Run::new`], with the source of the gradient scale ‖∇f(x₀)‖∞ chosen by the
    /// caller.
    pub(crate) fn with_scale(
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        opts: &SolverOptions,
        observer: Option<&'o mut dyn Observer>,
        scale: Scale,
    ) -> Result<(Self, ResolvedPenalty, Vec<f64>)> {
        opts.validate()?;
        let m = loss.dim();
        let pen = ResolvedPenalty::new(penalty, m, |k| loss.structural_factor(k))?;
        let x0 = loss.start();
        let x = match start {
            Some(s) => {
                if s.len() != m {
                    return Err(Error::ShapeMismatch {
                        what: "starting point vs number of coordinates".into(),
                        expected: m.to_string(),
                        found: s.len().to_string(),
                    });
                }
                crate::error::check_finite("starting point", s, |i| format!("index {i}"))?;
                if !loss.value(s).is_some_and(f64::is_finite) {
                    return Err(Error::InvalidArgument(
                        "the starting point is outside the domain of the loss, or the loss \
                         is not finite there"
                            .into(),
                    ));
                }
                s.to_vec()
            }
            None => x0.clone(),
        };
        let scale = match scale {
            Scale::Known(s) => s.max(1.0),
            Scale::AtStart => gradient_scale(loss),
            Scale::FromFirstGradient if start.is_none() => f64::NAN,
            Scale::FromFirstGradient => {
                return Err(Error::InvalidArgument(
                    "internal: a scale from the first gradient needs the default start".into(),
                ))
            }
        };
        let run = Run {
            start: Instant::now(),
            trace: Vec::new(),
            observer,
            tol_abs: opts.tol * if scale.is_finite() { scale } else { 1.0 },
            scale_pending: scale.is_nan(),
            tol: opts.tol,
            record_trace: opts.trace,
            max_iter: opts.max_iter,
            time_limit: opts.time_limit,
            gap_tol: opts.gap_tol,
            skip_gap: false,
        };
        Ok((run, pen, x))
    }

    /// Fixes the KKT threshold from the gradient at x₀ when the scale was deferred
    /// ([`Scale::FromFirstGradient`]); does nothing otherwise.
    pub(crate) fn fix_scale(&mut self, loss: &dyn Loss, g_at_start: &[f64]) {
        if self.scale_pending {
            let scale = scale_of(loss, g_at_start);
            self.tol_abs = self.tol * if scale.is_finite() { scale } else { 1.0 };
            self.scale_pending = false;
        }
    }

    pub(crate) fn seconds(&self) -> f64 {
        self.start.elapsed().as_secs_f64()
    }

    /// Records an iteration and decides whether to stop; returns the stopping status.
    pub(crate) fn check(&mut self, rec: TraceRecord) -> Option<Status> {
        let converged = rec.kkt_residual <= self.tol_abs
            || matches!((self.gap_tol, rec.duality_gap),
                (Some(t), Some(g)) if g <= t * rec.objective.abs().max(1.0));
        let stop = match self.observer.as_mut() {
            Some(o) => o.observe(&rec) == Control::Stop,
            None => false,
        };
        let iteration = rec.iteration;
        if self.record_trace {
            self.trace.push(rec);
        }
        if converged {
            Some(Status::Converged)
        } else if stop {
            Some(Status::StoppedByObserver)
        } else if iteration >= self.max_iter {
            Some(Status::IterationLimit)
        } else if self.time_limit.is_some_and(|t| self.start.elapsed() >= t) {
            Some(Status::TimeLimit)
        } else {
            None
        }
    }

    /// Whether the caller should compute the duality gap for this record.
    pub(crate) fn wants_gap(&self, opts: &SolverOptions) -> bool {
        self.gap_tol.is_some() || (opts.trace && opts.trace_gap)
    }

    /// Builds the final solution at x. `known` carries (F(x), KKT residual) when the solver
    /// has just computed them at this very x (they are recomputed otherwise); the duality gap
    /// is always computed here, so every solver reports identical measures.
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn finish(
        self,
        solver: &str,
        loss: &dyn Loss,
        pen: &ResolvedPenalty,
        x: Vec<f64>,
        known: Option<(f64, f64)>,
        status: Status,
        iterations: usize,
        inner: usize,
    ) -> Result<Solution> {
        self.finish_with_gradient(solver, loss, pen, x, known, None, status, iterations, inner)
    }

    /// As [`Run::finish`], with ∇f(x) (every coordinate) when the solver holds it, which
    /// lets the loss compute the duality gap without another pass over the data
    /// ([`Loss::duality_gap_with_gradient`]).
    #[allow(clippy::too_many_arguments)]
    pub(crate) fn finish_with_gradient(
        self,
        solver: &str,
        loss: &dyn Loss,
        pen: &ResolvedPenalty,
        x: Vec<f64>,
        known: Option<(f64, f64)>,
        gradient: Option<&[f64]>,
        status: Status,
        iterations: usize,
        inner: usize,
    ) -> Result<Solution> {
        let (objective, kkt, gap) = match known {
            Some((f, r)) if self.skip_gap => (f, r, None),
            Some((f, r)) => {
                let gap = match gradient {
                    Some(g) => loss.duality_gap_with_gradient(&x, g, pen),
                    None => loss.duality_gap(&x, pen),
                };
                (f, r, gap)
            }
            None => certify(loss, pen, &x).ok_or_else(|| {
                Error::Numerical("the final iterate left the domain of the loss".into())
            })?,
        };
        Ok(Solution {
            solver: solver.to_string(),
            x,
            objective,
            kkt_residual: kkt,
            duality_gap: gap,
            status,
            iterations,
            seconds: self.seconds(),
            inner,
            trace: self.trace,
        })
    }
}
