//! Fitting a Gaussian CRF from X and Y: the library entry point.
//!
//! [`fit`] validates the data, optionally centres/scales it, solves the DESIGN.md objective
//! with the chosen method and returns the [`CrfModel`] on the original scale together with
//! the solver's [`Solution`] (whose `x` holds the coordinates
//! `[upper triangle of Λ, Θ row-major]` of the problem actually solved, i.e. on the
//! transformed scale when centring/scaling was asked for).

use super::alternating::Alternating;
use super::data::{CrfData, InputMode};
use super::loss::CrfLoss;
use super::model::CrfModel;
use crate::error::{check_lambda, Result};
use crate::linalg::gemm;
use crate::penalty::Penalty;
use crate::solver::{NewtonCd, Observer, Owlqn, Solution, Solver, SolverOptions};
use ndarray::{ArrayView2, Axis};

/// Which solver fits the CRF.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CrfMethod {
    /// Newton coordinate descent on (Λ, Θ) jointly ([`NewtonCd`] with the CRF's local
    /// model). The default: both methods need one O(n·p·q) product per outer iteration, and
    /// the joint method needs fewer of them. Measured with benches/crf.rs (2 cores, default
    /// tolerance): 2.0–2.1× faster than the alternating scheme at 0.3M and 4M parameters
    /// (4M: 12.3 s, 7 iterations, vs 24.8 s, 12 iterations), 3–10× at small sizes.
    #[default]
    Joint,
    /// Alternating exact Θ-steps and log-det Newton Λ-steps ([`Alternating`]).
    Alternating,
    /// The orthant-wise quasi-Newton method ([`Owlqn`], default history). It can be the
    /// faster choice on wide problems with a dense solution: with p = 3000 inputs, n = 1000
    /// samples, q = 100 outputs and about 43 000 non-zeros it reached 10⁻⁶ suboptimality in
    /// 3.3 s against 6.7 s for the joint method (benches/baselines.rs, `crf-wide`),
    /// while on the same sizes with a sparse solution (about 740 non-zeros) it was 16×
    /// slower. Race the methods on your own data (`ellone race`) to choose.
    QuasiNewton,
}

/// Options of [`fit`].
#[derive(Debug, Clone, PartialEq)]
pub struct CrfOptions {
    /// λ_Λ ≥ 0, the penalty on the off-diagonal entries of Λ.
    pub lambda_precision: f64,
    /// λ_Θ ≥ 0, the penalty on the entries of Θ.
    pub lambda_interaction: f64,
    /// Subtract column means of X and Y before fitting. Default false (the DESIGN.md
    /// objective on the raw data). Use it unless a constant input column models the
    /// offset; the fitted model adds the means back when predicting.
    pub center: bool,
    /// Divide columns of X and Y by their standard deviations (after centring, if asked).
    /// Default false. Use it when inputs or outputs have different units, so that λ_Λ and
    /// λ_Θ act evenly on every entry (the ℓ1 penalty is not scale-invariant); Λ and Θ are
    /// reported on the original scale either way. A zero-deviation column is left unscaled.
    pub standardize: bool,
    /// How products with S_xx are computed. Default [`InputMode::Auto`]. (Independently of
    /// this, each outer iteration forms S_xx[R, R] for the rows R of Θ the inner loop may
    /// touch: rows with a non-zero entry or a gradient entry ≥ λ_Θ. With λ_Θ = 0 that is
    /// every row, i.e. p² doubles.)
    pub input_mode: InputMode,
    /// The solver. Default [`CrfMethod::Joint`].
    pub method: CrfMethod,
    /// Tolerances and limits.
    pub solver: SolverOptions,
}

impl CrfOptions {
    /// Options with the two penalty levels and every other setting at its default.
    pub fn new(lambda_precision: f64, lambda_interaction: f64) -> Self {
        Self {
            lambda_precision,
            lambda_interaction,
            center: false,
            standardize: false,
            input_mode: InputMode::Auto,
            method: CrfMethod::default(),
            solver: SolverOptions::default(),
        }
    }
}

/// A fitted model and the solve that produced it.
#[derive(Debug, Clone)]
pub struct CrfFit {
    /// The model on the original scale.
    pub model: CrfModel,
    /// The solver's result (objective, KKT residual, status, iterations, time, trace).
    pub solution: Solution,
}

/// Fits p(y|x) ∝ exp(−½yᵀΛy − xᵀΘy) to X (n×p) and Y (n×q) by minimising
/// −log det Λ + tr(S_yyΛ) + 2tr(S_yxΘ) + tr(Λ⁻¹ΘᵀS_xxΘ) + λ_Λ Σ_{i≠j}|Λ_ij| + λ_Θ Σ|Θ_ij|.
///
/// ```
/// use ndarray::array;
/// use ellone::crf::{fit, CrfOptions};
/// let x = array![[1.0, 0.0], [0.0, 1.0], [1.0, 1.0], [-1.0, 0.5], [0.3, -1.0], [0.0, 0.0]];
/// let y = array![[1.1, 0.9], [0.2, -0.1], [1.0, 1.2], [-1.3, -0.4], [0.5, 0.1], [0.1, -0.2]];
/// let fitted = fit(x.view(), y.view(), &CrfOptions::new(0.05, 0.05)).unwrap();
/// assert!(fitted.solution.converged());
/// let mean = fitted.model.predict(x.view()).unwrap();
/// assert_eq!(mean.dim(), (6, 2));
/// ```
///
/// # Errors
/// [`crate::Error::InvalidLambda`] for a negative or non-finite λ; the data errors of
/// [`CrfData::new`] (row-count mismatch, NaN/Inf, q = 0, ...); invalid solver options;
/// [`crate::Error::Unbounded`] when no minimiser exists (e.g. λ_Θ = 0 with n ≤ p; see
/// [`CrfLoss::new`]).
/// Non-convergence is not an error: see `solution.status`.
pub fn fit(x: ArrayView2<f64>, y: ArrayView2<f64>, options: &CrfOptions) -> Result<CrfFit> {
    fit_observed(x, y, options, None)
}

/// [`fit`] with an observer that sees every outer iteration (progress, cancellation).
///
/// # Errors
/// As [`fit`].
pub fn fit_observed(
    x: ArrayView2<f64>,
    y: ArrayView2<f64>,
    options: &CrfOptions,
    observer: Option<&mut dyn Observer>,
) -> Result<CrfFit> {
    check_lambda("lambda", options.lambda_precision)?;
    check_lambda("lambda_theta", options.lambda_interaction)?;
    options.solver.validate()?;
    let data = CrfData::new(
        x,
        y,
        options.center,
        options.standardize,
        options.input_mode,
    )?;
    let loss = CrfLoss::new(data, options.lambda_precision, options.lambda_interaction)?;
    let penalty = Penalty::l1(1.0)?;
    let solution =
        match options.method {
            CrfMethod::Joint => NewtonCd::new(options.solver.clone())
                .solve_observed(&loss, &penalty, None, observer)?,
            CrfMethod::Alternating => {
                Alternating::new(options.solver.clone()).solve(&loss, &penalty, None, observer)?
            }
            CrfMethod::QuasiNewton => Owlqn::new(options.solver.clone())
                .solve_observed(&loss, &penalty, None, observer)?,
        };
    let mut model = model_from_solution(&loss, &solution.x)?;
    model.lambda_precision = options.lambda_precision;
    model.lambda_interaction = options.lambda_interaction;
    Ok(CrfFit { model, solution })
}

/// The model on the original scale from a coordinate vector of `loss` (see
/// [`super::model`] for the back-transformation).
///
/// # Errors
/// [`crate::Error::ShapeMismatch`] for a vector of the wrong length,
/// [`crate::Error::NotPositiveDefinite`] if its Λ is not positive definite.
pub fn model_from_solution(loss: &CrfLoss, x: &[f64]) -> Result<CrfModel> {
    let data = loss.data();
    let (xm, ym) = (data.x_map(), data.y_map());
    let mut lam = loss.precision_of(x)?;
    let mut theta = loss.interaction_of(x)?;
    for ((i, j), v) in lam.indexed_iter_mut() {
        *v /= ym.scale[i] * ym.scale[j];
    }
    for ((i, j), v) in theta.indexed_iter_mut() {
        *v /= xm.scale[i] * ym.scale[j];
    }
    let mut model = CrfModel::from_parts(lam, theta, vec![0.0; data.outputs()])?;
    // b = m_y + ΣΘᵀm_x = m_y − μ₀(m_x) where μ₀ is the mean with b = 0.
    if xm.shift.iter().chain(&ym.shift).any(|v| *v != 0.0) {
        let mx = ndarray::Array1::from(xm.shift.clone()).insert_axis(Axis(0));
        let t = gemm(mx.view(), model.interaction());
        let st = gemm(t.view(), model.covariance());
        let offset: Vec<f64> = ym.shift.iter().zip(st.row(0)).map(|(a, b)| a + b).collect();
        let mut m2 = CrfModel::from_parts(
            model.precision().to_owned(),
            model.interaction().to_owned(),
            offset,
        )?;
        std::mem::swap(&mut model, &mut m2);
    }
    Ok(model)
}
