//! Synthetic scenarios with a *known* sparse model behind them.
//!
//! A scenario generator draws inputs from a physically motivated simulation and outputs from an
//! exactly specified sparse Gaussian conditional random field (see the crate documentation for
//! the convention p(y | x) ∝ exp(−½ yᵀΛy − xᵀΘy)). Because the true Λ and Θ are returned with
//! the data, an estimator can be scored on support recovery, on the error of its parameters and
//! on the calibration of its predictive distribution, not only on held-out likelihood.
//!
//! | module | scenario |
//! |---|---|
//! | [`district_heating`] | next-day hourly heat demand at the substations of a district-heating network |

pub mod district_heating;
#[cfg(feature = "cli")]
pub mod figures;
pub mod pipeline;

pub use district_heating::{generate, HeatingConfig, HeatingData, YearSplit};
