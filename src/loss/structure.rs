//! Optional structural information a loss can expose to solvers that exploit closed forms.
//!
//! The generic solvers only use value, gradient and Hessian-vector products. A few baseline
//! methods get much faster when they know what the loss *is*: the alternating direction
//! method of multipliers solves its x-update
//! `argmin_x f(x) + (ρ/2)‖x − v‖²` in closed form for least squares (one cached
//! factorisation of the Gram matrix) and for the precision loss (one symmetric
//! eigen-decomposition). A loss opts in through [`crate::loss::Loss::structure`]; the
//! default (`None`) makes those solvers fall back to an inner Newton solve.

use crate::design::Design;
use ndarray::ArrayView2;
use std::borrow::Cow;

/// What a solver may know about a loss's internals. New variants may be added.
#[derive(Debug, Clone)]
#[non_exhaustive]
pub enum LossStructure<'a> {
    /// f(b, b₀) = (1/(2n))‖y − Xb − b₀‖², coordinates `[b, b₀]` (b₀ last, only when
    /// `intercept`).
    LeastSquares {
        /// The design X (n × p).
        design: &'a Design,
        /// The response y (length n).
        y: &'a [f64],
        /// Whether the last coordinate is an intercept b₀.
        intercept: bool,
    },
    /// f(Θ) = −log det Θ + tr(SΘ) over symmetric Θ, one coordinate per stored entry of the
    /// upper triangle.
    Precision {
        /// The p × p matrix S.
        s: ArrayView2<'a, f64>,
        /// `pairs[k] = (i, j)`, i ≤ j: the matrix entry of coordinate k.
        pairs: Cow<'a, [(usize, usize)]>,
    },
}
