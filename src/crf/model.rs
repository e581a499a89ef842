//! The fitted Gaussian CRF users keep: predictive mean and covariance, correlated scenario
//! samples, held-out scores, JSON round trip.
//!
//! On the original scale of the data the model is
//!
//! ```text
//! y | x ~ N(μ(x), Σ),   μ(x) = b − ΣΘᵀx,   Σ = Λ⁻¹,
//! ```
//!
//! with b = 0 when the fit neither centred nor scaled (then it is exactly
//! p(y|x) ∝ exp(−½yᵀΛy − xᵀΘy)). If the fit ran on z_x = S_x⁻¹(x − m_x) and
//! z_y = S_y⁻¹(y − m_y) (S diagonal scales, m means) with estimates Λ̃, Θ̃, then
//! Λ = S_y⁻¹Λ̃S_y⁻¹, Θ = S_x⁻¹Θ̃S_y⁻¹ and b = m_y + ΣΘᵀm_x.
//!
//! Scenarios are y = μ(x) + L z with Σ = L Lᵀ (Cholesky) and z ~ N(0, I) from a seeded
//! generator, so a seed reproduces them exactly.

use super::scores;
use crate::error::{check_finite, Error, Result};
use crate::linalg::{cholesky, gemm};
use ndarray::{Array1, Array2, ArrayView1, ArrayView2};
use rand::{rngs::StdRng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

/// A fitted Gaussian CRF on the original scale of the data.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct CrfModel {
    precision: Array2<f64>,
    interaction: Array2<f64>,
    offset: Vec<f64>,
    #[serde(skip_serializing, default)]
    covariance: Array2<f64>,
    /// λ_Λ used in the fit (0 if unknown).
    #[serde(default)]
    pub lambda_precision: f64,
    /// λ_Θ used in the fit (0 if unknown).
    #[serde(default)]
    pub lambda_interaction: f64,
}

/// Mean energy score and per-output mean CRPS of scenario forecasts over held-out rows.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ScenarioScores {
    /// Mean over rows of the energy score.
    pub energy: f64,
    /// Mean over rows of the CRPS, one per output.
    pub crps: Vec<f64>,
}

fn shape_error(what: &str, expected: String, found: String) -> Error {
    Error::ShapeMismatch {
        what: what.into(),
        expected,
        found,
    }
}

/// The most values (scenarios × outputs) one call of [`CrfModel::sample`] draws: 2³⁰
/// doubles, 8 GiB. A guard against a count that could not be allocated.
pub const MAX_SCENARIO_VALUES: usize = 1 << 30;

impl CrfModel {
    /// A model from Λ (q×q, symmetric positive definite), Θ (p×q) and the mean offset b (q).
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`], [`Error::NonFinite`], [`Error::NotSymmetric`] or
    /// [`Error::NotPositiveDefinite`] for inconsistent parts.
    pub fn from_parts(
        precision: Array2<f64>,
        interaction: Array2<f64>,
        offset: Vec<f64>,
    ) -> Result<Self> {
        let q = precision.nrows();
        if q == 0 {
            return Err(Error::Empty("precision matrix".into()));
        }
        if precision.ncols() != q {
            return Err(shape_error(
                "precision matrix",
                format!("{q}×{q}"),
                format!("{q}×{}", precision.ncols()),
            ));
        }
        if interaction.ncols() != q {
            return Err(shape_error(
                "columns of the interaction matrix vs outputs",
                q.to_string(),
                interaction.ncols().to_string(),
            ));
        }
        if offset.len() != q {
            return Err(shape_error(
                "offset vs outputs",
                q.to_string(),
                offset.len().to_string(),
            ));
        }
        check_finite("precision", precision.iter(), |i| {
            format!("row {}, column {}", i / q, i % q)
        })?;
        check_finite("interaction", interaction.iter(), |i| {
            format!("row {}, column {}", i / q, i % q)
        })?;
        check_finite("offset", offset.iter(), |i| format!("entry {i}"))?;
        for i in 0..q {
            for j in 0..i {
                let diff = (precision[[i, j]] - precision[[j, i]]).abs();
                let scale = precision[[i, j]]
                    .abs()
                    .max(precision[[j, i]].abs())
                    .max(1.0);
                if diff > 1e-12 * scale {
                    return Err(Error::NotSymmetric {
                        what: "precision".into(),
                        row: i,
                        col: j,
                        diff,
                    });
                }
            }
        }
        let ch = cholesky(precision.view())
            .ok_or_else(|| Error::NotPositiveDefinite("precision".into()))?;
        let covariance = ch.inverse();
        // A factor that exists but is numerically singular (e.g. Λ = 10⁻³²⁰·I) gives an
        // infinite covariance: every prediction would be meaningless.
        check_finite("covariance Λ⁻¹", covariance.iter(), |i| {
            format!(
                "row {}, column {} (Λ is numerically singular)",
                i / q,
                i % q
            )
        })?;
        Ok(Self {
            precision,
            interaction,
            offset,
            covariance,
            lambda_precision: 0.0,
            lambda_interaction: 0.0,
        })
    }

    /// Number of inputs p.
    pub fn inputs(&self) -> usize {
        self.interaction.nrows()
    }

    /// Number of outputs q.
    pub fn outputs(&self) -> usize {
        self.precision.nrows()
    }

    /// Λ (q×q).
    pub fn precision(&self) -> ArrayView2<'_, f64> {
        self.precision.view()
    }

    /// Θ (p×q).
    pub fn interaction(&self) -> ArrayView2<'_, f64> {
        self.interaction.view()
    }

    /// The mean offset b (zeros unless the fit centred or scaled).
    pub fn offset(&self) -> &[f64] {
        &self.offset
    }

    /// The predictive covariance Σ = Λ⁻¹ (the same for every x).
    pub fn covariance(&self) -> ArrayView2<'_, f64> {
        self.covariance.view()
    }

    fn check_inputs(&self, x: &ArrayView2<f64>) -> Result<()> {
        if x.ncols() != self.inputs() {
            return Err(shape_error(
                "columns of X vs model inputs",
                self.inputs().to_string(),
                x.ncols().to_string(),
            ));
        }
        let p = x.ncols().max(1);
        check_finite("x", x.iter(), |i| {
            format!("row {}, column {}", i / p, i % p)
        })
    }

    /// Predictive means μ(x) = b − ΣΘᵀx for every row of X (n×p); returns n×q.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if X has the wrong number of columns, [`Error::NonFinite`].
    pub fn predict(&self, x: ArrayView2<f64>) -> Result<Array2<f64>> {
        self.check_inputs(&x)?;
        // X Θ Σ, then b − ·.
        let xt = gemm(x, self.interaction.view());
        let mut mu = gemm(xt.view(), self.covariance.view());
        for mut row in mu.rows_mut() {
            row.iter_mut()
                .zip(&self.offset)
                .for_each(|(v, b)| *v = b - *v);
        }
        Ok(mu)
    }

    /// `scenarios` draws from N(μ(x), Σ) for one input vector x (p); returns scenarios×q.
    /// The same seed gives the same draws.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`], [`Error::NonFinite`], [`Error::InvalidArgument`] for zero
    /// scenarios or more than [`MAX_SCENARIO_VALUES`] values in all (scenarios × q).
    pub fn sample(&self, x: ArrayView1<f64>, scenarios: usize, seed: u64) -> Result<Array2<f64>> {
        let values = scenarios.checked_mul(self.outputs());
        if scenarios == 0 || values.is_none_or(|v| v > MAX_SCENARIO_VALUES) {
            return Err(Error::InvalidArgument(format!(
                "the number of scenarios must be at least 1 and scenarios × outputs at most \
                 {MAX_SCENARIO_VALUES} (got {scenarios} × {})",
                self.outputs()
            )));
        }
        let xr = x.to_owned().insert_axis(ndarray::Axis(0));
        let mu = self.predict(xr.view())?;
        let l = cholesky(self.covariance.view())
            .ok_or_else(|| Error::Numerical("the covariance is not positive definite".into()))?
            .lower();
        let q = self.outputs();
        let mut rng = StdRng::seed_from_u64(seed);
        let z = Array2::from_shape_fn((scenarios, q), |_| StandardNormal.sample(&mut rng));
        // Rows y = μ + L z ⇒ Y = 1μᵀ + Z Lᵀ.
        let mut y = gemm(z.view(), l.t());
        for mut row in y.rows_mut() {
            row += &mu.row(0);
        }
        Ok(y)
    }

    fn check_outputs(&self, x: &ArrayView2<f64>, y: &ArrayView2<f64>) -> Result<()> {
        if x.nrows() != y.nrows() {
            return Err(shape_error(
                "rows of X vs rows of Y",
                x.nrows().to_string(),
                y.nrows().to_string(),
            ));
        }
        if y.ncols() != self.outputs() {
            return Err(shape_error(
                "columns of Y vs model outputs",
                self.outputs().to_string(),
                y.ncols().to_string(),
            ));
        }
        if y.nrows() == 0 {
            return Err(Error::Empty("held-out data (0 rows)".into()));
        }
        let q = y.ncols();
        check_finite("y", y.iter(), |i| {
            format!("row {}, column {}", i / q, i % q)
        })
    }

    /// Mean negative log-likelihood per row of held-out (X, Y):
    /// (1/n) Σ_i ½[q·log 2π − log det Λ + (y_i − μ_i)ᵀΛ(y_i − μ_i)].
    ///
    /// # Errors
    /// Shape mismatches, non-finite values, no rows.
    pub fn negative_log_likelihood(&self, x: ArrayView2<f64>, y: ArrayView2<f64>) -> Result<f64> {
        self.check_outputs(&x, &y)?;
        let mu = self.predict(x)?;
        let r = &y - &mu;
        let rl = gemm(r.view(), self.precision.view());
        let quad: f64 = (&rl * &r).sum();
        let log_det = cholesky(self.precision.view())
            .ok_or_else(|| Error::NotPositiveDefinite("precision".into()))?
            .log_det();
        let n = y.nrows() as f64;
        let q = self.outputs() as f64;
        Ok(0.5 * (q * (2.0 * std::f64::consts::PI).ln() - log_det) + 0.5 * quad / n)
    }

    /// Draws `scenarios` samples for every held-out row (seed + row index) and returns the
    /// mean energy score and mean per-output CRPS against Y (see [`super::scores`]).
    ///
    /// # Errors
    /// Shape mismatches, non-finite values, no rows, zero scenarios.
    pub fn scenario_scores(
        &self,
        x: ArrayView2<f64>,
        y: ArrayView2<f64>,
        scenarios: usize,
        seed: u64,
    ) -> Result<ScenarioScores> {
        self.check_outputs(&x, &y)?;
        let n = x.nrows();
        let mut energy = 0.0;
        let mut crps = Array1::<f64>::zeros(self.outputs());
        for i in 0..n {
            let s = self.sample(x.row(i), scenarios, seed.wrapping_add(i as u64))?;
            energy += scores::energy_score(s.view(), y.row(i))?;
            crps += &Array1::from(scores::crps(s.view(), y.row(i))?);
        }
        Ok(ScenarioScores {
            energy: energy / n as f64,
            crps: crps.iter().map(|v| v / n as f64).collect(),
        })
    }

    /// The model as JSON (keys `precision`, `interaction`, `offset`, `lambda_precision`,
    /// `lambda_interaction`; matrices in ndarray's serde layout).
    ///
    /// # Errors
    /// [`Error::Numerical`] if serialisation fails (it does not for finite values).
    pub fn to_json(&self) -> Result<String> {
        serde_json::to_string(self).map_err(|e| Error::Numerical(e.to_string()))
    }

    /// Loads a model written by [`CrfModel::to_json`], re-validating it.
    ///
    /// # Errors
    /// [`Error::Parse`] for malformed JSON; the errors of [`CrfModel::from_parts`] for
    /// inconsistent contents.
    pub fn from_json(text: &str) -> Result<Self> {
        let raw: CrfModel = serde_json::from_str(text).map_err(|e| Error::Parse {
            file: "<input>".into(),
            line: e.line(),
            column: e.column(),
            message: e.to_string(),
        })?;
        crate::error::check_lambda("lambda_precision", raw.lambda_precision)?;
        crate::error::check_lambda("lambda_interaction", raw.lambda_interaction)?;
        let mut model = Self::from_parts(raw.precision, raw.interaction, raw.offset)?;
        model.lambda_precision = raw.lambda_precision;
        model.lambda_interaction = raw.lambda_interaction;
        Ok(model)
    }
}
