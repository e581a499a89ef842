//! Solver races: several solvers on one problem, with honest, reproducible traces.
//!
//! [`race`] runs each solver in turn on the same loss and penalty, from the same start,
//! and records every outer iteration through the solver's observer hook (so the trace is
//! what the solver reports, with its own clock): wall time, objective F, KKT residual,
//! non-zero count and data passes. Suboptimality is measured against F_best, the smallest
//! objective known: a reference solve by Newton coordinate descent at KKT tolerance 1e-12
//! (when [`RaceOptions::reference`] is set) or the best objective any racer reached,
//! whichever is lower:
//!
//! ```text
//! suboptimality          = F − F_best
//! relative suboptimality = (F − F_best) / |F_best|      (absolute when F_best = 0)
//! ```
//!
//! Each racer stops at a common accuracy (relative suboptimality ≤ [`RaceOptions::target`],
//! which needs the reference solve) or at the common time budget, whichever comes first
//! (or earlier, by its own stopping rule: build racers with a tight tolerance and generous
//! iteration limits, as the command-line tool does). The timings include the per-iteration
//! optimality measures every solver computes for its own stopping test.
//!
//! [`RaceResult::write_csv`] writes one row per solver and iteration; the SVG convergence
//! plot is in `race_plot` (feature `cli`).

use crate::error::{Error, Result};
use crate::loss::Loss;
use crate::penalty::Penalty;
use crate::solver::{Control, NewtonCd, Solver, SolverOptions, Status, TraceRecord};
use std::io::Write;
use std::path::Path;
use std::time::Duration;

/// How a race is run.
#[derive(Debug, Clone, PartialEq)]
pub struct RaceOptions {
    /// Wall-clock budget per solver. Default 10 s.
    pub budget: Duration,
    /// Common accuracy: a racer is stopped once its relative suboptimality is at most this
    /// (only when a reference objective is known). Default 1e-6.
    pub target: f64,
    /// Compute the reference objective first with Newton coordinate descent at KKT
    /// tolerance 1e-12 (its time is not part of the race). Default true.
    pub reference: bool,
}

impl Default for RaceOptions {
    fn default() -> Self {
        Self {
            budget: Duration::from_secs(10),
            target: 1e-6,
            reference: true,
        }
    }
}

/// One solver's run in a race.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct RaceEntry {
    /// The solver's name.
    pub solver: String,
    /// One record per outer iteration, as the solver reported it.
    pub records: Vec<TraceRecord>,
    /// Why the solver stopped ([`Status::StoppedByObserver`] at the target or budget).
    pub status: Status,
    /// The final objective.
    pub objective: f64,
    /// Wall-clock seconds of the whole run.
    pub seconds: f64,
}

/// The outcome of [`race`].
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct RaceResult {
    /// One entry per racer, in the order given.
    pub entries: Vec<RaceEntry>,
    /// The reference objective, when a reference solve was run.
    pub reference: Option<f64>,
    /// F_best: the smallest objective known (reference or any racer's).
    pub best_objective: f64,
    /// The common accuracy the racers were stopped at.
    pub target: f64,
}

/// Relative suboptimality of `objective` against `best` (see the module docs).
fn relative_gap(objective: f64, best: f64) -> f64 {
    let d = objective - best;
    if best == 0.0 {
        d
    } else {
        d / best.abs()
    }
}

impl RaceResult {
    /// F − F_best.
    pub fn suboptimality(&self, objective: f64) -> f64 {
        objective - self.best_objective
    }

    /// (F − F_best)/|F_best| (absolute when F_best = 0).
    pub fn relative_suboptimality(&self, objective: f64) -> f64 {
        relative_gap(objective, self.best_objective)
    }

    /// Seconds until entry `i` first reached relative suboptimality ≤ `target`, if it did.
    pub fn time_to(&self, i: usize, target: f64) -> Option<f64> {
        self.entries.get(i).and_then(|e| {
            e.records
                .iter()
                .find(|r| self.relative_suboptimality(r.objective) <= target)
                .map(|r| r.seconds)
        })
    }

    /// Entry indices from fastest to slowest: by time to the race's target; racers that
    /// never reached it follow, by their final relative suboptimality.
    pub fn ranking(&self) -> Vec<usize> {
        let mut idx: Vec<usize> = (0..self.entries.len()).collect();
        let key = |i: usize| -> (u8, f64) {
            match self.time_to(i, self.target) {
                Some(t) => (0, t),
                None => (1, self.relative_suboptimality(self.entries[i].objective)),
            }
        };
        idx.sort_by(|&a, &b| {
            let (ka, kb) = (key(a), key(b));
            ka.0.cmp(&kb.0).then(ka.1.total_cmp(&kb.1))
        });
        idx
    }

    /// Writes the traces as CSV with the header
    /// `solver,iteration,seconds,objective,suboptimality,relative_suboptimality,kkt_residual,nnz,passes`,
    /// one row per solver and outer iteration.
    ///
    /// # Errors
    /// [`Error::Io`] if writing fails.
    pub fn write_csv<W: Write>(&self, mut out: W) -> Result<()> {
        let io = |e: std::io::Error| Error::Io {
            file: "<race csv>".into(),
            message: e.to_string(),
        };
        writeln!(
            out,
            "solver,iteration,seconds,objective,suboptimality,relative_suboptimality,kkt_residual,nnz,passes"
        )
        .map_err(io)?;
        for e in &self.entries {
            for r in &e.records {
                writeln!(
                    out,
                    "{},{},{:e},{:e},{:e},{:e},{:e},{},{}",
                    e.solver,
                    r.iteration,
                    r.seconds,
                    r.objective,
                    self.suboptimality(r.objective),
                    self.relative_suboptimality(r.objective),
                    r.kkt_residual,
                    r.nnz,
                    r.inner
                )
                .map_err(io)?;
            }
        }
        Ok(())
    }

    /// [`RaceResult::write_csv`] to a file.
    ///
    /// # Errors
    /// [`Error::Io`] if the file cannot be created or written.
    pub fn write_csv_file(&self, path: &Path) -> Result<()> {
        let io = |e: std::io::Error| Error::Io {
            file: path.display().to_string(),
            message: e.to_string(),
        };
        let mut file = std::io::BufWriter::new(std::fs::File::create(path).map_err(io)?);
        self.write_csv(&mut file).map_err(|e| match e {
            Error::Io { message, .. } => Error::Io {
                file: path.display().to_string(),
                message,
            },
            other => other,
        })?;
        file.flush().map_err(io)
    }
}

/// Races `solvers` on min `loss` + `penalty`: see the module docs.
///
/// # Errors
/// [`Error::InvalidArgument`] for no solvers, a zero budget or a non-positive target;
/// any error a solver returns (invalid penalty weights, ...).
pub fn race(
    loss: &dyn Loss,
    penalty: &Penalty,
    solvers: &[&dyn Solver],
    options: &RaceOptions,
) -> Result<RaceResult> {
    if solvers.is_empty() {
        return Err(Error::InvalidArgument(
            "a race needs at least one solver".into(),
        ));
    }
    if options.budget.is_zero() {
        return Err(Error::InvalidArgument(
            "the race budget must be positive".into(),
        ));
    }
    if !(options.target > 0.0 && options.target.is_finite()) {
        return Err(Error::InvalidArgument(format!(
            "the race target must be finite and > 0, got {}",
            options.target
        )));
    }
    let reference = if options.reference {
        let solver = NewtonCd::new(SolverOptions {
            tol: 1e-12,
            max_iter: 100_000,
            time_limit: Some(options.budget.saturating_mul(10)),
            ..Default::default()
        });
        Some(solver.solve(loss, penalty)?.objective)
    } else {
        None
    };
    let budget = options.budget.as_secs_f64();
    let mut entries = Vec::with_capacity(solvers.len());
    for solver in solvers {
        let mut records: Vec<TraceRecord> = Vec::new();
        let mut observer = |rec: &TraceRecord| {
            records.push(rec.clone());
            let at_target =
                reference.is_some_and(|f| relative_gap(rec.objective, f) <= options.target);
            if at_target || rec.seconds >= budget {
                Control::Stop
            } else {
                Control::Continue
            }
        };
        let sol = solver.solve_observed(loss, penalty, None, Some(&mut observer))?;
        entries.push(RaceEntry {
            solver: sol.solver.clone(),
            records,
            status: sol.status,
            objective: sol.objective,
            seconds: sol.seconds,
        });
    }
    let mut best = reference.unwrap_or(f64::INFINITY);
    for e in &entries {
        best = best.min(e.objective);
        for r in &e.records {
            best = best.min(r.objective);
        }
    }
    Ok(RaceResult {
        entries,
        reference,
        best_objective: best,
        target: options.target,
    })
}
