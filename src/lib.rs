//! # ellone
//!
//! Sparse models fitted by **Newton coordinate descent**, with certified optimality.
//! Every problem has the form
//!
//! ```text
//! minimise  F(x) = f(x) + Σ_k λ_k |x_k| (+ (λ₂/2) Σ_k x_k²),      λ_k = λ · w_k · c_k,
//! ```
//!
//! with f smooth and convex ([`Loss`]), per-coordinate weights w_k ≥ 0 ([`Penalty`]) and
//! structural factors c_k from the loss (0 for an intercept or an unpenalised diagonal).
//! The objectives, exactly as solved (n = number of rows):
//!
//! | loss | f |
//! |---|---|
//! | least squares | (1/(2n)) Σ_i (y_i − b₀ − x_iᵀb)² |
//! | logistic, y_i ∈ {0,1} | (1/n) Σ_i [log(1 + e^{η_i}) − y_i η_i],  η_i = b₀ + x_iᵀb |
//! | precision (log-det) | −log det Θ + tr(SΘ), penalty λ Σ_{i≠j} \|Θ_ij\| |
//! | Gaussian CRF | −log det Λ + tr(S_yy Λ) + 2 tr(S_yx Θ) + tr(Λ⁻¹ Θᵀ S_xx Θ), penalties λ_Λ Σ_{i≠j} \|Λ_ij\| + λ_Θ Σ \|Θ_ij\| |
//!
//! **Optimality.** Every solver reports the KKT residual ‖min-norm subgradient‖∞: per
//! coordinate |g_k + λ_k sign(x_k)| if x_k ≠ 0, else max(|g_k| − λ_k, 0); for matrix
//! problems per matrix entry. Where a clean dual exists (least squares, logistic,
//! precision) the duality gap is reported too. The default stopping rule is
//! KKT ≤ 10⁻⁷ · max(1, ‖∇f(x₀)‖∞) (x₀ the loss's default start). Non-convergence is a
//! [`Status`], never an error, and the best iterate is returned.
//!
//! **The method** ([`solver::newton_cd`]): at x, build the second-order model of f, sweep
//! coordinate descent with soft-thresholding over the free set of the penalised quadratic
//! model, fall back to a reduced Newton solve on small ill-conditioned active sets, then an
//! Armijo line search that rejects points outside the domain (e.g. a matrix that is not
//! positive definite). Losses make the inner loop cheap through cached products
//! ([`loss::LocalModel`]).
//!
//! ## Least squares (lasso)
//! ```
//! use ellone::{LeastSquares, NewtonCd, Penalty, Solver};
//! use ndarray::array;
//! let x = array![[1.0, 0.0], [0.0, 1.0], [1.0, 1.0], [2.0, -1.0]];
//! let y = [1.0, -1.0, 0.2, 3.1];
//! let loss = LeastSquares::from_dense(x.view(), &y, true)?; // with an intercept
//! let sol = NewtonCd::default().solve(&loss, &Penalty::l1(0.1)?)?;
//! assert!(sol.converged());
//! let (b, b0) = loss.split(&sol.x);
//! println!("b = {b:?}, b0 = {b0}, KKT = {:.1e}, gap = {:?}", sol.kkt_residual, sol.duality_gap);
//! # Ok::<(), ellone::Error>(())
//! ```
//!
//! ## Logistic regression
//! ```
//! use ellone::{Logistic, NewtonCd, Penalty, Solver};
//! use ndarray::array;
//! let x = array![[0.5, 1.0], [1.5, -0.5], [-1.0, 0.3], [0.2, 0.2], [2.0, 1.0], [-0.7, -1.2]];
//! let y = [1.0, 1.0, 0.0, 0.0, 1.0, 0.0];
//! let loss = Logistic::from_dense(x.view(), &y, true)?;
//! let sol = NewtonCd::default().solve(&loss, &Penalty::l1(0.05)?)?;
//! assert!(sol.converged());
//! # Ok::<(), ellone::Error>(())
//! ```
//!
//! ## Sparse precision matrix
//! ```
//! use ellone::precision::{estimate_precision, PrecisionInput, PrecisionOptions};
//! use ndarray::array;
//! let s = array![[1.0, 0.5, 0.1], [0.5, 1.0, 0.3], [0.1, 0.3, 1.0]];
//! let fit = estimate_precision(PrecisionInput::Covariance(s.view()), 0.2, &PrecisionOptions::default())?;
//! println!("Θ = {}\nedges = {:?}", fit.precision, fit.edges);
//! assert!(fit.kkt_residual <= 1e-6);
//! # Ok::<(), ellone::Error>(())
//! ```
//!
//! ## Sparse Gaussian conditional random field
//! ```
//! use ellone::crf::{fit, CrfOptions};
//! use ndarray::array;
//! let x = array![[1.0, 0.0], [0.0, 1.0], [1.0, 1.0], [-1.0, 0.5], [0.3, -1.0], [0.0, 0.0]];
//! let y = array![[1.1, 0.9], [0.2, -0.1], [1.0, 1.2], [-1.3, -0.4], [0.5, 0.1], [0.1, -0.2]];
//! let fitted = fit(x.view(), y.view(), &CrfOptions::new(0.05, 0.05))?;
//! let mean = fitted.model.predict(x.view())?;           // −Λ⁻¹Θᵀx per row
//! let scenarios = fitted.model.sample(x.row(0), 100, 7)?; // correlated draws, seeded
//! assert_eq!((mean.nrows(), scenarios.nrows()), (6, 100));
//! # Ok::<(), ellone::Error>(())
//! ```
//!
//! ## Paths and cross-validation
//! [`path::fit_path`] computes a warm-started path from λ_max down with strong-rule
//! screening and a KKT check (exact); [`cv::cross_validate`] chooses λ by K-fold
//! cross-validation (minimum and one-standard-error rules).
//!
//! ## Module map
//! - [`loss`]: the [`Loss`] trait, [`loss::LocalModel`], the shipped losses and the
//!   derivative checker [`loss::check_derivatives`] for your own.
//! - [`solver`]: [`NewtonCd`] and the baselines (FISTA, ADMM, OWL-QN), options, statuses,
//!   traces and observers. [`race`] runs solvers side by side.
//! - [`precision`], [`crf`]: the matrix problems and the fitted CRF model (predict,
//!   covariance, scenarios, scores).
//! - [`path`], [`cv`]: regularisation paths and λ selection.
//! - [`design`], [`penalty`], [`linalg`] (dense backend seam: faer, or OpenBLAS with the
//!   `openblas` feature), [`io`] (CSV and Matrix Market), [`scenario`] (synthetic
//!   district-heating data for the demo and benches).
//!
//! Forecasts produced with this crate are decision support: validate them against your own
//! data and operating standards before operational use.
#![deny(missing_docs)]

pub mod crf;
pub mod cv;
pub mod cv_crf;
pub mod cv_precision;
pub mod design;
pub mod error;
pub mod io;
mod kernels;
pub mod linalg;
pub mod loss;
pub mod path;
pub mod penalty;
#[cfg(feature = "cli")]
pub mod plot;
pub mod precision;
pub mod race;
#[cfg(feature = "cli")]
pub mod race_plot;
mod reuse;
pub mod scenario;
pub mod solver;

pub use design::Design;
pub use error::{Error, Result};
pub use loss::{LeastSquares, Logistic, Loss};
pub use penalty::Penalty;
pub use solver::{NewtonCd, Solution, Solver, SolverOptions, Status};
