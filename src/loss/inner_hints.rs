//! Which optional inner-loop strategies of Newton coordinate descent suit a local model.
//!
//! Both strategies below speed up logistic regression and were measured to slow down the
//! log-det losses; on least squares they changed nothing measurable (the benchmark inner
//! loops settle within a few sweeps). So a model opts in through
//! [`LocalModel::inner_loop_hints`]; a loss that does not override it (least squares,
//! precision, CRF, downstream losses) gets the plain inner loop.
//!
//! [`LocalModel::inner_loop_hints`]: super::LocalModel::inner_loop_hints

/// Optional strategies of the Newton-CD inner loop a model allows (all off by default).
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct InnerLoopHints {
    /// Adaptive successive over-relaxation of slow inner sweeps
    /// (`CdOptions::relaxation = None`). Suits Hessians Xᵀ W X of weakly coupled sparse
    /// columns that need many sweeps: sparse 20000 × 50000 logistic, 61 → 37 sweeps. On the precision loss
    /// (AR(1), p = 1000) it slowed the solve from 5.4 s to 8.5 s (ω ≤ 1.5) or past 40 s
    /// (ω ≤ 1.8).
    pub over_relaxation: bool,
    /// A cold-start working set for the first outer iteration
    /// (`CdOptions::first_step_working_set`): only the strongest violators enter the first
    /// free set. Suits losses whose curvature changes a lot after the first step from zero
    /// (logistic: the first step's sweeps over 32 600 coordinates drop from 7 to 3 and the
    /// solve time by about 20 %). On the denser precision benchmark it cost an extra Newton
    /// iteration (0.95 s against 0.74 s), and least squares (constant curvature) gains
    /// nothing from it.
    pub cold_start_working_set: bool,
}
