//! ellone: Newton coordinate descent for ℓ1-penalised smooth convex problems.
#![deny(missing_docs)]

pub mod error;
pub mod linalg;
pub mod io;

pub use error::{Error, Result};
