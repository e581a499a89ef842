//! Sparse Gaussian conditional random fields: many correlated outputs y (q) given inputs x
//! (p), with a sparse structure and a dense predictive covariance.
//!
//! The model is p(y | x) ∝ exp(−½ yᵀΛy − xᵀΘy): y | x ~ N(−ΣΘᵀx, Σ) with Σ = Λ⁻¹, Λ (q×q)
//! and Θ (p×q) sparse. Fitting minimises the penalised negative log-likelihood of
//! /work/shared/DESIGN.md,
//!
//! ```text
//! −log det Λ + tr(S_yy Λ) + 2 tr(S_yx Θ) + tr(Λ⁻¹ Θᵀ S_xx Θ) + λ_Λ Σ_{i≠j}|Λ_ij| + λ_Θ Σ|Θ_ij|
//! ```
//!
//! ("Sparse Gaussian conditional random fields: algorithms, theory, and application to
//! energy forecasting", ICML, 2013; "Large-scale optimization algorithms for sparse
//! conditional Gaussian graphical models", AISTATS, 2016).

pub mod data;
mod local;
pub mod loss;

pub use data::{ColumnMap, CrfData, InputMode};
pub use loss::CrfLoss;
