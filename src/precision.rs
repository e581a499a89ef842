//! Sparse precision-matrix estimation: the high-level entry point.
//!
//! Given a sample covariance S (p × p) or the data it comes from, [`estimate_precision`]
//! minimises over positive-definite Θ
//!
//! ```text
//! F(Θ) = −log det Θ + tr(SΘ) + λ Σ_{i≠j} w_ij |Θ_ij|   (+ λ Σ_i w_ii Θ_ii if asked)
//! ```
//!
//! with the log-det loss of [`crate::loss::precision`] and Newton coordinate descent.
//!
//! # Exact block-diagonal screening
//!
//! Let G be the graph on the variables with an edge (i, j) whenever |S_ij| > λ·w_ij. If its
//! connected components are C₁, …, C_m, the solution is block diagonal with these blocks,
//! and each block is the solution of the same problem restricted to S_CC
//! ("New insights and faster computations for the graphical lasso", J. Comput. Graph. Stat.,
//! 2011). Proof sketch: a block-diagonal Θ has a block-diagonal inverse W, so for i, j in
//! different blocks Θ_ij = 0, W_ij = 0 and the optimality condition |S_ij − W_ij| ≤ λ_ij
//! is exactly |S_ij| ≤ λ_ij, which holds by construction; inside each block the conditions
//! are those of the restricted problem. Blocks are solved independently (in parallel), a
//! block of one variable in closed form: min_θ −log θ + S_ii θ + λ_ii θ gives
//! θ = 1/(S_ii + λ_ii) (λ_ii = 0 for an unpenalised diagonal).
//!
//! # Results
//!
//! [`PrecisionFit`] holds Θ, Σ̂ = Θ⁻¹ (assembled block by block: the inverse of a
//! block-diagonal matrix is block diagonal), the partial correlations
//! ρ_ij = −Θ_ij/√(Θ_iiΘ_jj), the edge list, the objective, the KKT residual over all p²
//! entries (gradient S − Σ̂) and the duality gap. By the screening argument the dual
//! separates too: with U_ij = −S_ij between blocks (feasible, |S_ij| ≤ λ_ij), S + U is
//! block diagonal, so the gap of the whole problem is the sum of the blocks' gaps
//! (zero for closed-form blocks).
//!
//! # Standardisation
//!
//! With [`PrecisionOptions::standardise`] the problem is solved for the correlation matrix
//! R = D^{-1/2} S D^{-1/2} (D = diag S), and the estimates are mapped back to the original
//! scale: Θ = D^{-1/2} Θ_R D^{-1/2}, Σ̂ = D^{1/2} Σ̂_R D^{1/2}. The objective, KKT residual
//! and duality gap are those of the problem actually solved (on R).
//!
//! # Unboundedness
//!
//! When every off-diagonal λ_ij of a block is 0 (e.g. λ = 0), the dual variable U is 0 off
//! the diagonal and the problem is bounded exactly when S_CC + diag(λ_ii) is positive
//! definite; otherwise [`Error::Unbounded`] is returned before solving (λ = 0 with a singular
//! S, as with p > n data, is the typical case). With λ_ij > 0 for every pair and S positive
//! semidefinite with a positive diagonal the problem always has a solution: U = −t·offdiag(S)
//! with t = min(1, min λ_ij/|S_ij|) > 0 is dual feasible and S + U = (1 − t)S + t·diag(S) ≻ 0.
//! A block mixing zero and positive weights is checked after its solve instead (deciding
//! boundedness beforehand is a semidefinite feasibility problem): it is unbounded exactly
//! when some D ⪰ 0, D ≠ 0, with SD = 0 has its off-diagonal entries only where the weight
//! is 0; along Θ + t·D the gradient vanishes like 1/t, so the KKT residual alone would
//! report convergence far out on the ray. There the dual candidate of the duality gap is
//! not positive definite, and a fit in such a block that stops as converged or with a failed
//! line search, without a duality gap, is returned as [`Error::Unbounded`].

use crate::error::{check_lambda, check_lambda_named, Error, Result};
use crate::linalg;
use crate::loss::precision::{validate_covariance, LogDet};
use crate::loss::Loss;
use crate::penalty::{coordinate_residual, Penalty};
use crate::solver::{NewtonCd, Solver, SolverOptions, Status};
use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use std::time::Instant;

/// What the precision matrix is estimated from.
#[derive(Debug, Clone, Copy)]
pub enum PrecisionInput<'a> {
    /// A sample covariance S (p × p, symmetric, non-negative diagonal).
    Covariance(ArrayView2<'a, f64>),
    /// Data X (n × p, one row per sample): S = X̃ᵀX̃/n with X̃ the (optionally centred) data.
    Data(ArrayView2<'a, f64>),
}

/// Options of [`estimate_precision`].
#[derive(Debug, Clone, PartialEq)]
pub struct PrecisionOptions {
    /// Penalise the diagonal too: adds λ Σ_i w_ii Θ_ii. Default false.
    pub penalize_diagonal: bool,
    /// A symmetric p × p matrix of weights w_ij ≥ 0 (penalty λ·w_ij; 0 leaves an entry
    /// unpenalised). Default: all ones.
    pub weights: Option<Array2<f64>>,
    /// A positive-definite p × p starting point Θ₀ (on the original scale). Default: the
    /// diagonal start diag(1/S_ii) of each block.
    pub warm_start: Option<Array2<f64>>,
    /// Split the problem by the connected components of {|S_ij| > λ w_ij}. Default true.
    /// Turning it off gives the same solution (the screening is exact) at a higher cost.
    pub screening: bool,
    /// Data input only: subtract the column means before forming S. Default true. Turn it
    /// off only for data that are zero-mean by construction (residuals, known centred
    /// processes); otherwise S mixes the means into the covariance.
    pub centre: bool,
    /// Solve on the correlation scale and report Θ and Σ̂ on the original scale. Default
    /// false. Use it when the variables have different units: the penalty λ|Θ_ij| is not
    /// scale-invariant, and on the correlation scale one λ means the same for every pair.
    /// Leave it off when the variances themselves carry meaning. A zero-variance variable
    /// cannot be standardised ([`Error::InvalidArgument`]).
    pub standardise: bool,
    /// Tolerances and limits of the Newton coordinate-descent driver (per block).
    pub solver: SolverOptions,
}

impl Default for PrecisionOptions {
    fn default() -> Self {
        Self {
            penalize_diagonal: false,
            weights: None,
            warm_start: None,
            screening: true,
            centre: true,
            standardise: false,
            solver: SolverOptions::default(),
        }
    }
}

/// One edge of the estimated conditional-independence graph: Θ_ij ≠ 0, i < j.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Edge {
    /// First variable (zero-based), i < j.
    pub i: usize,
    /// Second variable.
    pub j: usize,
    /// Θ_ij (original scale).
    pub precision: f64,
    /// ρ_ij = −Θ_ij/√(Θ_iiΘ_jj).
    pub partial_correlation: f64,
}

/// The estimate and its certificates.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PrecisionFit {
    /// The regularisation strength λ.
    pub lambda: f64,
    /// Θ, the estimated precision matrix (dense, exactly symmetric).
    pub precision: Array2<f64>,
    /// Σ̂ = Θ⁻¹, the covariance estimate.
    pub covariance: Array2<f64>,
    /// ρ_ij = −Θ_ij/√(Θ_iiΘ_jj), with ρ_ii = 1.
    pub partial_correlations: Array2<f64>,
    /// Non-zero off-diagonal entries of Θ, i < j, in row order.
    pub edges: Vec<Edge>,
    /// F(Θ) of the problem solved (on the correlation scale when standardised).
    pub objective: f64,
    /// ‖min-norm subgradient‖∞ over all p² entries, gradient S − Σ̂.
    pub kkt_residual: f64,
    /// Primal minus dual objective (the sum over blocks), when every block has one.
    pub duality_gap: Option<f64>,
    /// Converged, or the first other status met by a block.
    pub status: Status,
    /// Newton (outer) iterations, summed over blocks.
    pub newton_iterations: usize,
    /// Inner coordinate sweeps, summed over blocks.
    pub inner_sweeps: usize,
    /// The sizes of the blocks solved iteratively (screening components of size > 1).
    pub block_sizes: Vec<usize>,
    /// Number of variables solved in closed form (components of size 1).
    pub closed_form_variables: usize,
    /// Whether the problem was solved on the correlation scale.
    pub standardised: bool,
    /// Wall-clock seconds.
    pub seconds: f64,
}

/// S = X̃ᵀX̃/n, X̃ = X minus its column means when `centre`, else X itself.
///
/// # Errors
/// [`Error::Empty`] for no rows or columns, [`Error::NonFinite`] for NaN/Inf in the data or
/// in S (values beyond about 10¹⁵⁴ overflow when squared: rescale such data),
/// [`Error::InvalidArgument`] when the p × p result cannot be allocated.
pub fn sample_covariance(x: ArrayView2<f64>, centre: bool) -> Result<Array2<f64>> {
    let (n, p) = x.dim();
    if n == 0 || p == 0 {
        return Err(Error::Empty("data matrix".into()));
    }
    for ((i, j), v) in x.indexed_iter() {
        if !v.is_finite() {
            return Err(Error::NonFinite {
                what: "data".into(),
                location: format!("row {i}, column {j}"),
            });
        }
    }
    crate::error::check_allocation(p, p, "the sample covariance")?;
    let mut xc = x.to_owned();
    if centre {
        for mut col in xc.columns_mut() {
            let mean = col.sum() / n as f64;
            col.mapv_inplace(|v| v - mean);
        }
    }
    let mut s = linalg::gemm(xc.t(), xc.view());
    s.mapv_inplace(|v| v / n as f64);
    for i in 0..p {
        for j in 0..i {
            let v = 0.5 * (s[[i, j]] + s[[j, i]]);
            s[[i, j]] = v;
            s[[j, i]] = v;
        }
    }
    crate::error::check_finite("sample covariance (rescale the data)", s.iter(), |k| {
        format!("row {}, column {}", k / p, k % p)
    })?;
    Ok(s)
}

/// Relative shift δ/max_i S_ii of the semidefiniteness test in [`check_semidefinite`]: far
/// above the rounding error of a sample covariance (about p·ε·max S_ii), far below any
/// eigenvalue that matters statistically.
const SEMIDEFINITE_SHIFT: f64 = 1e-8;

/// Checks that a covariance matrix is positive semidefinite, as every covariance is: the
/// Cholesky factorisation of S + δI must exist, δ = 1e-8·max_i S_ii. A matrix with an
/// eigenvalue below −δ fails it. (With an indefinite S the log-det problem can be
/// unbounded below: along an eigenvector v of a negative eigenvalue μ, tr(SΘ) falls like
/// t·μ while −log det Θ grows only like −log t.) One Cholesky factorisation, O(p³/3).
///
/// # Errors
/// As [`validate_covariance`]; [`Error::NotPositiveDefinite`] when the test fails.
pub fn check_semidefinite(s: ArrayView2<f64>) -> Result<()> {
    semidefinite(&validate_covariance(s, "covariance")?)
}

/// [`check_semidefinite`] on a covariance that [`validate_covariance`] has already checked.
pub(crate) fn semidefinite(s: &Array2<f64>) -> Result<()> {
    let p = s.nrows();
    let top = (0..p).map(|i| s[[i, i]]).fold(0.0f64, f64::max);
    let shift = SEMIDEFINITE_SHIFT * top.max(f64::MIN_POSITIVE);
    let mut m = s.clone();
    for i in 0..p {
        m[[i, i]] += shift;
    }
    if linalg::cholesky(m.view()).is_none() {
        return Err(Error::NotPositiveDefinite(format!(
            "the covariance S (not positive semidefinite: S + δI with δ = {shift:.3e} has no \
             Cholesky factor, as it would for any sample covariance)"
        )));
    }
    Ok(())
}

/// λ_max = max_{i≠j, w_ij>0} |S_ij|/w_ij: for λ ≥ λ_max (and an unpenalised diagonal) the
/// solution is diag(1/S_ii). 0 for p = 1.
///
/// # Errors
/// As [`validate_covariance`]; weight errors as [`estimate_precision`].
pub fn lambda_max(s: ArrayView2<f64>, weights: Option<ArrayView2<f64>>) -> Result<f64> {
    let s = validate_covariance(s, "covariance")?;
    let w = match weights {
        Some(w) => Some(validate_weights(w, s.nrows())?),
        None => None,
    };
    let p = s.nrows();
    let mut m = 0.0f64;
    for i in 0..p {
        for j in 0..i {
            let wij = w.as_ref().map_or(1.0, |w| w[[i, j]]);
            if wij > 0.0 {
                m = m.max(s[[i, j]].abs() / wij);
            }
        }
    }
    Ok(m)
}

/// The connected components of the graph {(i, j): |S_ij| > λ·w_ij, i ≠ j}, each sorted,
/// ordered by their smallest variable.
///
/// # Errors
/// As [`lambda_max`]; [`Error::InvalidLambda`] for a negative or non-finite λ.
pub fn screening_blocks(
    s: ArrayView2<f64>,
    lambda: f64,
    weights: Option<ArrayView2<f64>>,
) -> Result<Vec<Vec<usize>>> {
    check_lambda("lambda", lambda)?;
    let s = validate_covariance(s, "covariance")?;
    let w = match weights {
        Some(w) => Some(validate_weights(w, s.nrows())?),
        None => None,
    };
    Ok(components(&s, lambda, w.as_ref()))
}

fn components(s: &Array2<f64>, lambda: f64, w: Option<&Array2<f64>>) -> Vec<Vec<usize>> {
    let p = s.nrows();
    let mut parent: Vec<usize> = (0..p).collect();
    fn find(parent: &mut [usize], mut a: usize) -> usize {
        while parent[a] != a {
            parent[a] = parent[parent[a]];
            a = parent[a];
        }
        a
    }
    for i in 0..p {
        let row = s.row(i);
        for j in 0..i {
            let lam = lambda * w.map_or(1.0, |w| w[[i, j]]);
            if row[j].abs() > lam {
                let (a, b) = (find(&mut parent, i), find(&mut parent, j));
                if a != b {
                    parent[a.max(b)] = a.min(b);
                }
            }
        }
    }
    let mut index = vec![usize::MAX; p];
    let mut blocks: Vec<Vec<usize>> = Vec::new();
    for i in 0..p {
        let r = find(&mut parent, i);
        if index[r] == usize::MAX {
            index[r] = blocks.len();
            blocks.push(Vec::new());
        }
        blocks[index[r]].push(i);
    }
    blocks
}

fn validate_weights(w: ArrayView2<f64>, p: usize) -> Result<Array2<f64>> {
    if w.dim() != (p, p) {
        return Err(Error::ShapeMismatch {
            what: "weight matrix vs covariance".into(),
            expected: format!("{p} x {p}"),
            found: format!("{} x {}", w.nrows(), w.ncols()),
        });
    }
    for ((i, j), &v) in w.indexed_iter() {
        check_lambda_named(|| format!("weight[{i}, {j}]"), v)?;
    }
    for i in 0..p {
        for j in 0..i {
            if w[[i, j]] != w[[j, i]] {
                return Err(Error::NotSymmetric {
                    what: "weight matrix".into(),
                    row: i,
                    col: j,
                    diff: (w[[i, j]] - w[[j, i]]).abs(),
                });
            }
        }
    }
    Ok(w.as_standard_layout().into_owned())
}

/// A warm start must be finite and symmetric (to 1e-10 relative to its largest entry);
/// positive definiteness is checked block by block by the solver.
fn check_warm_start(t: &Array2<f64>) -> Result<()> {
    let mut scale = 0.0f64;
    for ((i, j), v) in t.indexed_iter() {
        if !v.is_finite() {
            return Err(Error::NonFinite {
                what: "warm start".into(),
                location: format!("row {i}, column {j}"),
            });
        }
        scale = scale.max(v.abs());
    }
    let p = t.nrows();
    for i in 0..p {
        for j in 0..i {
            let diff = (t[[i, j]] - t[[j, i]]).abs();
            if diff > 1e-10 * scale {
                return Err(Error::NotSymmetric {
                    what: "warm start".into(),
                    row: i,
                    col: j,
                    diff,
                });
            }
        }
    }
    Ok(())
}

/// The solved problem, common to every block.
struct Problem<'a> {
    s: &'a Array2<f64>,
    lambda: f64,
    weights: Option<&'a Array2<f64>>,
    warm: Option<&'a Array2<f64>>,
    penalize_diagonal: bool,
    solver: &'a NewtonCd,
}

impl Problem<'_> {
    fn weight(&self, i: usize, j: usize) -> f64 {
        self.weights.map_or(1.0, |w| w[[i, j]])
    }

    /// λ_ij for the matrix entry (i, j) (λ_ii = 0 unless the diagonal is penalised).
    fn level(&self, i: usize, j: usize) -> f64 {
        if i == j && !self.penalize_diagonal {
            0.0
        } else {
            self.lambda * self.weight(i, j)
        }
    }
}

struct BlockFit {
    idx: Vec<usize>,
    theta: Array2<f64>,
    w: Array2<f64>,
    objective: f64,
    gap: Option<f64>,
    status: Status,
    iterations: usize,
    inner: usize,
}

fn solve_singleton(pr: &Problem<'_>, i: usize) -> Result<BlockFit> {
    let v = pr.s[[i, i]] + pr.level(i, i);
    if v.is_nan() || v <= 0.0 {
        return Err(Error::Unbounded(format!(
            "variable {i} has zero variance and an unpenalised diagonal: Θ_{i}{i} → ∞"
        )));
    }
    Ok(BlockFit {
        idx: vec![i],
        theta: Array2::from_elem((1, 1), 1.0 / v),
        w: Array2::from_elem((1, 1), v),
        objective: v.ln() + 1.0,
        gap: Some(0.0),
        status: Status::Converged,
        iterations: 0,
        inner: 0,
    })
}

fn solve_block(pr: &Problem<'_>, idx: &[usize]) -> Result<BlockFit> {
    let b = idx.len();
    let sb = Array2::from_shape_fn((b, b), |(a, c)| pr.s[[idx[a], idx[c]]]);
    // Boundedness when no off-diagonal entry of the block is penalised (see module docs).
    let all_unpenalised = (0..b).all(|a| (0..a).all(|c| pr.level(idx[a], idx[c]) == 0.0));
    if all_unpenalised {
        let mut m = sb.clone();
        for (a, &i) in idx.iter().enumerate() {
            m[[a, a]] += pr.level(i, i);
        }
        if linalg::cholesky(m.view()).is_none() {
            return Err(Error::Unbounded(format!(
                "no off-diagonal entry is penalised and the covariance of variables {}..{} \
                 (a block of {b}) is singular or indefinite",
                idx[0],
                idx[b - 1]
            )));
        }
    }
    let loss = LogDet::new(sb.view(), pr.penalize_diagonal)?;
    let mut penalty = Penalty::l1(pr.lambda)?;
    if pr.weights.is_some() {
        let mut cw = Vec::with_capacity(loss.dim());
        for k in 0..loss.dim() {
            let (a, c) = loss.entry(k)?;
            cw.push(pr.weight(idx[a], idx[c]));
        }
        penalty = penalty.with_weights(cw)?;
    }
    let start = match pr.warm {
        Some(t) => {
            let tb = Array2::from_shape_fn((b, b), |(a, c)| t[[idx[a], idx[c]]]);
            Some(loss.from_matrix(tb.view())?)
        }
        None => None,
    };
    let sol = pr
        .solver
        .solve_observed(&loss, &penalty, start.as_deref(), None)
        .map_err(|e| match e {
            Error::InvalidArgument(m) if start.is_some() => Error::InvalidArgument(format!(
                "warm start (block of {b} variables starting at {}): {m}",
                idx[0]
            )),
            e => e,
        })?;
    // A fit that stops as converged, or because no step decreases F any more, without a
    // duality gap is not certified: near a minimiser the dual candidate S + clip(Θ⁻¹ − S)
    // differs from Θ⁻¹ only by the KKT residual and is positive definite, so the gap exists.
    // Two causes, told apart by the weights:
    // * zero and positive off-diagonal weights mixed (not pre-checked): on a singular S the
    //   problem can be unbounded below along a ray Θ + t·D (D ⪰ 0, SD = 0, seen only by
    //   zero-weight entries and the unpenalised diagonal), where ∇f → 0 like 1/t and Θ⁻¹
    //   tends to a singular matrix;
    // * every pair penalised (or none, pre-checked): bounded, but with a singular S and a
    //   tiny λ the minimiser lies at |Θ| ~ 1/λ along S's null space, where f is so flat that
    //   the KKT test passes far from it (λ = 10⁻⁸ on a 5-sample, 8-variable S: "converged"
    //   at |Θ| ≈ 10⁷ with a gap of 30 % of |F|).
    let stalled = matches!(sol.status, Status::Converged | Status::LineSearchFailed);
    if stalled && sol.duality_gap.is_none() {
        let largest = sol.x.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let mixed =
            !all_unpenalised && (0..b).any(|a| (0..a).any(|c| pr.level(idx[a], idx[c]) == 0.0));
        return Err(if mixed {
            Error::Unbounded(format!(
                "the block of {b} variables starting at {} mixes zero and positive weights and \
                 its fit diverges (|Θ| reached {largest:.3e}; no dual certificate exists there): \
                 S is singular along a direction that only zero-weight entries and the \
                 unpenalised diagonal see",
                idx[0]
            ))
        } else {
            Error::Numerical(format!(
                "the fit of the block of {b} variables starting at {} cannot be certified: no \
                 duality gap exists at the returned point (|Θ| reached {largest:.3e}); with a \
                 singular S and λ = {:e} the minimiser is numerically out of reach, raise λ",
                idx[0], pr.lambda
            ))
        });
    }
    let theta = loss.to_matrix(&sol.x)?;
    let w = loss.inverse_at(&sol.x)?;
    Ok(BlockFit {
        idx: idx.to_vec(),
        theta,
        w,
        objective: sol.objective,
        gap: sol.duality_gap,
        status: sol.status,
        iterations: sol.iterations,
        inner: sol.inner,
    })
}

/// Estimates a sparse precision matrix: minimises −log det Θ + tr(SΘ) + λ Σ_{i≠j} w_ij|Θ_ij|
/// (see the module docs for screening, standardisation and the results).
///
/// ```
/// use ellone::precision::{estimate_precision, PrecisionInput, PrecisionOptions};
/// use ndarray::array;
/// let s = array![[1.0, 0.5, 0.0], [0.5, 1.0, 0.1], [0.0, 0.1, 1.0]];
/// let fit = estimate_precision(PrecisionInput::Covariance(s.view()), 0.2, &Default::default())
///     .unwrap();
/// // |S_13|, |S_23| ≤ λ: variable 3 is its own block, Θ_33 = 1/S_33.
/// assert_eq!(fit.precision[[2, 2]], 1.0);
/// assert_eq!(fit.edges.len(), 1);
/// assert!(fit.kkt_residual < 1e-6);
/// ```
///
/// # Errors
/// Bad input as typed errors: [`Error::Empty`], [`Error::ShapeMismatch`] (non-square S,
/// weights or warm start of the wrong shape), [`Error::NonFinite`], [`Error::NotSymmetric`],
/// [`Error::NotPositiveDefinite`] (a covariance that is not positive semidefinite, see
/// [`check_semidefinite`]), [`Error::InvalidLambda`] (λ or a
/// weight negative or not finite), [`Error::InvalidArgument`] (a warm start that is not
/// positive definite, bad solver options, a zero-variance variable with `standardise`);
/// [`Error::Unbounded`] when the problem has no minimiser (λ = 0 with a singular S, a
/// zero-variance variable with an unpenalised diagonal, or zero weights that leave a null
/// direction of a singular S unpenalised; see the module docs); [`Error::Numerical`] when a
/// block's fit stops without a duality gap to certify it (a singular S with a λ so small
/// that the minimiser is numerically out of reach).
pub fn estimate_precision(
    input: PrecisionInput<'_>,
    lambda: f64,
    options: &PrecisionOptions,
) -> Result<PrecisionFit> {
    let clock = Instant::now();
    check_lambda("lambda", lambda)?;
    options.solver.validate()?;
    let s_raw = match input {
        PrecisionInput::Covariance(s) => {
            let s = validate_covariance(s, "covariance")?;
            semidefinite(&s)?;
            s
        }
        PrecisionInput::Data(x) => {
            validate_covariance(sample_covariance(x, options.centre)?.view(), "covariance")?
        }
    };
    let p = s_raw.nrows();
    let weights = match &options.weights {
        Some(w) => Some(validate_weights(w.view(), p)?),
        None => None,
    };
    // Scale factors d_i = √S_ii when standardising.
    let scale: Option<Vec<f64>> = if options.standardise {
        let d: Vec<f64> = (0..p).map(|i| s_raw[[i, i]].sqrt()).collect();
        if let Some(i) = d.iter().position(|v| v.is_nan() || *v <= 0.0) {
            return Err(Error::InvalidArgument(format!(
                "variable {i} has zero variance and cannot be standardised"
            )));
        }
        Some(d)
    } else {
        None
    };
    let s = match &scale {
        Some(d) => Array2::from_shape_fn((p, p), |(i, j)| {
            if i == j {
                1.0
            } else {
                s_raw[[i, j]] / (d[i] * d[j])
            }
        }),
        None => s_raw,
    };
    let warm = match &options.warm_start {
        Some(t) => {
            if t.dim() != (p, p) {
                return Err(Error::ShapeMismatch {
                    what: "warm start vs covariance".into(),
                    expected: format!("{p} x {p}"),
                    found: format!("{} x {}", t.nrows(), t.ncols()),
                });
            }
            let mut t = t.as_standard_layout().into_owned();
            if let Some(d) = &scale {
                for ((i, j), v) in t.indexed_iter_mut() {
                    *v *= d[i] * d[j];
                }
            }
            Some(t)
        }
        None => None,
    };
    let solver = NewtonCd::new(options.solver.clone());
    let problem = Problem {
        s: &s,
        lambda,
        weights: weights.as_ref(),
        warm: warm.as_ref(),
        penalize_diagonal: options.penalize_diagonal,
        solver: &solver,
    };
    let blocks = if options.screening {
        components(&s, lambda, weights.as_ref())
    } else {
        vec![(0..p).collect()]
    };
    if let Some(t) = &warm {
        check_warm_start(t)?;
    }
    let (singles, multi): (Vec<&Vec<usize>>, Vec<&Vec<usize>>) = blocks
        .iter()
        .partition(|b| b.len() == 1 && options.screening);
    let mut fits: Vec<BlockFit> = singles
        .iter()
        .map(|b| solve_singleton(&problem, b[0]))
        .collect::<Result<_>>()?;
    let closed_form_variables = fits.len();
    let solved: Vec<BlockFit> = multi
        .par_iter()
        .map(|b| solve_block(&problem, b))
        .collect::<Result<_>>()?;
    let block_sizes = solved.iter().map(|f| f.idx.len()).collect();
    fits.extend(solved);

    // Assemble.
    let mut theta = Array2::<f64>::zeros((p, p));
    let mut cov = Array2::<f64>::zeros((p, p));
    let mut objective = 0.0;
    let mut gap = Some(0.0);
    let mut status = Status::Converged;
    let (mut iterations, mut inner) = (0, 0);
    for f in &mut fits {
        if f.idx.len() == p {
            // One block holding every variable in order: no copy.
            std::mem::swap(&mut theta, &mut f.theta);
            std::mem::swap(&mut cov, &mut f.w);
        } else {
            for (a, &i) in f.idx.iter().enumerate() {
                let (mut trow, mut crow) = (theta.row_mut(i), cov.row_mut(i));
                for (c, &j) in f.idx.iter().enumerate() {
                    trow[j] = f.theta[[a, c]];
                    crow[j] = f.w[[a, c]];
                }
            }
        }
        objective += f.objective;
        gap = match (gap, f.gap) {
            (Some(a), Some(b)) => Some(a + b),
            _ => None,
        };
        if status == Status::Converged && f.status != Status::Converged {
            status = f.status;
        }
        iterations += f.iterations;
        inner += f.inner;
    }
    // KKT residual over every entry, on the solved scale.
    let mut kkt = 0.0f64;
    for (i, (trow, (srow, crow))) in theta
        .rows()
        .into_iter()
        .zip(s.rows().into_iter().zip(cov.rows()))
        .enumerate()
    {
        for (j, (t, (sv, c))) in trow.iter().zip(srow.iter().zip(crow.iter())).enumerate() {
            let r = coordinate_residual(*t, sv - c, problem.level(i, j));
            if r > kkt || r.is_nan() {
                kkt = r;
            }
        }
    }
    // Back to the original scale.
    if let Some(d) = &scale {
        for ((i, j), v) in theta.indexed_iter_mut() {
            *v /= d[i] * d[j];
        }
        for ((i, j), v) in cov.indexed_iter_mut() {
            *v *= d[i] * d[j];
        }
    }
    // A variance at the edge of the floating-point range (subnormal, or ~1e300 after
    // squaring) can make Θ = 1/S_ii or Σ̂ overflow: report it instead of returning ±Inf.
    if !(objective.is_finite()
        && theta.iter().all(|v| v.is_finite())
        && cov.iter().all(|v| v.is_finite()))
    {
        return Err(Error::Numerical(
            "the estimate overflows double precision (a variance is outside the representable \
             range); rescale the data"
                .into(),
        ));
    }
    let diag: Vec<f64> = (0..p).map(|i| theta[[i, i]]).collect();
    let partial = Array2::from_shape_fn((p, p), |(i, j)| {
        if i == j {
            1.0
        } else {
            -theta[[i, j]] / (diag[i] * diag[j]).sqrt()
        }
    });
    let mut edges = Vec::new();
    for i in 0..p {
        for j in i + 1..p {
            if theta[[i, j]] != 0.0 {
                edges.push(Edge {
                    i,
                    j,
                    precision: theta[[i, j]],
                    partial_correlation: partial[[i, j]],
                });
            }
        }
    }
    Ok(PrecisionFit {
        lambda,
        precision: theta,
        covariance: cov,
        partial_correlations: partial,
        edges,
        objective,
        kkt_residual: kkt,
        duality_gap: gap,
        status,
        newton_iterations: iterations,
        inner_sweeps: inner,
        block_sizes,
        closed_form_variables,
        standardised: scale.is_some(),
        seconds: clock.elapsed().as_secs_f64(),
    })
}
