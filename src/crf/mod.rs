//! Sparse Gaussian conditional random fields: many correlated outputs y (q) given inputs x
//! (p), with a sparse structure and a dense predictive covariance.
//!
//! The model is p(y | x) ∝ exp(−½ yᵀΛy − xᵀΘy): y | x ~ N(−ΣΘᵀx, Σ) with Σ = Λ⁻¹, Λ (q×q)
//! and Θ (p×q) sparse. Fitting minimises the penalised negative log-likelihood of
//! DESIGN.md,
//!
//! ```text
//! −log det Λ + tr(S_yy Λ) + 2 tr(S_yx Θ) + tr(Λ⁻¹ Θᵀ S_xx Θ) + λ_Λ Σ_{i≠j}|Λ_ij| + λ_Θ Σ|Θ_ij|
//! ```
//!
//! ("Sparse Gaussian conditional random fields: algorithms, theory, and application to
//! energy forecasting", ICML, 2013; "Large-scale optimization algorithms for sparse
//! conditional Gaussian graphical models", AISTATS, 2016).
//!
//! * [`data`]: validation, centring/scaling, sufficient statistics; S_xx only when p is
//!   small, otherwise products go through X.
//! * [`bounded`]: whether the objective has a minimiser when λ_Θ or λ_Λ is 0 (checked by
//!   [`CrfLoss::new`]).
//! * [`loss`]: the loss over `[upper triangle of Λ, Θ]` for the generic solvers.
//! * `local`: the fast local model (O(q) / O(|R| + q) per coordinate).
//! * `gram_cache`: the Gram block S_xx[R, R] kept from one local model to the next.
//! * [`alternating`]: the alternating Θ-step / Λ-step solver.
//! * [`fit`](mod@fit): the entry point [`fit()`](fit::fit) and its options.
//! * [`model`]: the fitted model (predict, covariance, scenarios, scores, JSON).
//! * [`scores`]: energy score and CRPS.

pub mod alternating;
pub mod bounded;
pub mod data;
pub mod fit;
mod gram_cache;
mod local;
pub mod loss;
pub mod model;
pub mod scores;

pub use alternating::Alternating;
pub use data::{ColumnMap, CrfData, InputMode};
pub use fit::{fit, fit_observed, model_from_solution, CrfFit, CrfMethod, CrfOptions};
pub use loss::CrfLoss;
pub use model::{CrfModel, ScenarioScores, MAX_SCENARIO_VALUES};
