//! Which optional inner-loop strategies of Newton coordinate descent suit a local model.
//!
//! Neither strategy helps every loss, so a model opts in through
//! [`LocalModel::inner_loop_hints`]; a loss that does not override it gets the plain inner
//! loop. Logistic regression takes both; the Gaussian CRF takes the cold-start working set;
//! least squares (no measurable change: its inner loops settle within a few sweeps) and the
//! precision loss (over-relaxation measured slower, the working set inconclusive) take
//! neither.
//!
//! [`LocalModel::inner_loop_hints`]: super::LocalModel::inner_loop_hints

/// Optional strategies of the Newton-CD inner loop a model allows (all off by default).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct InnerLoopHints {
    /// Adaptive successive over-relaxation of slow inner sweeps
    /// (`CdOptions::relaxation = None`). Suits Hessians Xᵀ W X of weakly coupled sparse
    /// columns that need many sweeps: sparse 20000 × 50000 logistic, 61 → 37 sweeps. On
    /// the precision loss (AR(1), p = 1000) it slowed the solve from 5.4 s to 8.5 s
    /// (ω ≤ 1.5) or past 40 s (ω ≤ 1.8).
    pub over_relaxation: bool,
    /// A cold-start working set for the first outer iteration
    /// (`CdOptions::first_step_working_set`): only the strongest violators enter the first
    /// free set. Suits losses whose curvature changes a lot after the first step from zero
    /// (logistic: the first step's sweeps over 32 600 coordinates drop from 7 to 3 and the
    /// solve time by about 20 %; Gaussian CRF with p = 3000 inputs and q = 100 outputs:
    /// 37 s → 16.5 s and 0.15 s → 0.084 s). On the denser precision benchmark it costs an
    /// extra Newton iteration (time within the run-to-run noise: 0.65–0.95 s against
    /// 0.74 s), and least squares (constant curvature) gains nothing from it.
    pub cold_start_working_set: bool,
}
