//! The linear predictor at a point, handed from one local model to the next.
//!
//! A Newton iteration of a generalised linear loss builds its model at x from
//! η = X b + b₀ (one pass over the non-zero columns), π = σ(η) and the loss terms (one
//! exponential and one logarithm per row). The line search of the previous iteration has
//! just computed all three at x + αd, from η + αu with u = X d: when it accepts α, the model
//! leaves them here, keyed by the accepted point, and the next model (and the final duality
//! gap, see [`crate::loss::LocalModel::accept`]) takes them instead of recomputing.
//!
//! The key is the whole coordinate vector, compared exactly, so a memo is only ever used
//! at the point it was computed for. η + αu equals X(x + αd) up to rounding (a few units
//! in the last place of η), so a solve that reuses the memo follows the same iterates as
//! one that does not to that accuracy, not bit for bit.
//!
//! Measured on the sparse 20000 × 50000 logistic benchmark: see the CHANGELOG.

/// η, π = σ(η) and Σ_i ℓ(η_i) at one point x.
#[derive(Debug, Default)]
pub(crate) struct PointMemo {
    /// The point (empty: no memo).
    pub(crate) x: Vec<f64>,
    /// η = X b + b₀ at x.
    pub(crate) eta: Vec<f64>,
    /// π_i = σ(η_i).
    pub(crate) pi: Vec<f64>,
    /// Σ_i (softplus(η_i) − y_i η_i), not divided by n.
    pub(crate) total: f64,
}

impl PointMemo {
    /// Whether this memo was computed at exactly `x`.
    pub(crate) fn matches(&self, x: &[f64]) -> bool {
        !self.x.is_empty() && self.x == x
    }
}
