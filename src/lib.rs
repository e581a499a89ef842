//! ellone: Newton coordinate descent for ℓ1-penalised smooth convex problems.
#![deny(missing_docs)]

pub mod crf;
pub mod cv;
pub mod cv_precision;
pub mod design;
pub mod error;
pub mod io;
pub mod linalg;
pub mod loss;
pub mod path;
pub mod precision;
#[cfg(feature = "cli")]
pub mod plot;
pub mod penalty;
pub mod race;
#[cfg(feature = "cli")]
pub mod race_plot;
pub mod scenario;
pub mod solver;

pub use design::Design;
pub use error::{Error, Result};
pub use loss::{LeastSquares, Logistic, Loss};
pub use penalty::Penalty;
pub use solver::{NewtonCd, Solution, Solver, SolverOptions, Status};
