//! Regularisation paths: λ_max, log-spaced grids, warm starts and strong-rule screening.
//!
//! **λ_max.** For any loss, the smallest λ at which every penalised coordinate is zero is
//! `λ_max = max_k |g_k| / (w_k c_k)` over penalised k, where g = ∇f at the point that has
//! the penalised coordinates at zero and the unpenalised ones (intercept, diagonal)
//! optimal. [`lambda_max`] finds that point with a Newton-CD solve at an overwhelming λ.
//!
//! **Screening.** Along a decreasing grid λ₀ > λ₁ > …, the sequential strong rule
//! ("Strong rules for discarding predictors in lasso-type problems", JRSS-B, 2012)
//! discards coordinate k at λ_i when `|g_k(x̂(λ_{i−1}))| < (2λ_i − λ_{i−1})·w_k c_k`.
//! The rule is a heuristic, so exactness is restored by a KKT check: after solving on the
//! kept coordinates, the full gradient is computed once and any discarded coordinate with
//! `|g_k| > λ_k` (beyond the solve tolerance) is added back and the problem re-solved. The
//! returned path is therefore exact: every point satisfies the KKT tolerance over all
//! coordinates.
//!
//! **Exact rules.** A loss may also prove coordinates zero at λ
//! ([`Loss::provably_zero`], e.g. the block-diagonal rule of a precision matrix in
//! [`crate::cv_precision`]); with screening on, those (when currently zero) are left out of
//! the working set too, and the same KKT check covers them.

use crate::error::{Error, Result};
use crate::loss::Loss;
use crate::penalty::{coordinate_residual, Penalty, ResolvedPenalty};
use crate::solver::{gradient_scale, NewtonCd, Solution, Status, WorkingSet};
use std::time::Instant;

/// A sparse vector: sorted indices and their non-zero values, plus the full length.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct SparseVec {
    /// Full length.
    pub len: usize,
    /// Indices of non-zeros, increasing.
    pub indices: Vec<usize>,
    /// Values at those indices.
    pub values: Vec<f64>,
}

impl SparseVec {
    /// Keeps the non-zero entries of a dense vector.
    pub fn from_dense(x: &[f64]) -> Self {
        let (indices, values) = x
            .iter()
            .enumerate()
            .filter(|(_, v)| **v != 0.0)
            .map(|(i, v)| (i, *v))
            .unzip();
        Self {
            len: x.len(),
            indices,
            values,
        }
    }

    /// The dense vector.
    ///
    /// # Errors
    /// For fields that disagree (as a hand-built or deserialised value may):
    /// [`Error::ShapeMismatch`] when `indices` and `values` differ in length,
    /// [`Error::InvalidArgument`] for an index ≥ `len` or a `len` that cannot be allocated.
    pub fn to_dense(&self) -> Result<Vec<f64>> {
        if self.indices.len() != self.values.len() {
            return Err(Error::ShapeMismatch {
                what: "values of a sparse vector vs its indices".into(),
                expected: self.indices.len().to_string(),
                found: self.values.len().to_string(),
            });
        }
        if let Some(&i) = self.indices.iter().find(|&&i| i >= self.len) {
            return Err(Error::InvalidArgument(format!(
                "sparse-vector index {i} is out of range 0..{}",
                self.len
            )));
        }
        let mut x = crate::error::filled(self.len, "a dense vector")?;
        for (&i, &v) in self.indices.iter().zip(&self.values) {
            x[i] = v;
        }
        Ok(x)
    }
}

/// Options of a path computation.
#[derive(Debug, Clone, PartialEq)]
pub struct PathOptions {
    /// Number of λ values when the grid is generated. Default 100.
    pub n_lambdas: usize,
    /// λ_min / λ_max; `None` picks by shape: 1e-4 when n > p, 1e-2 otherwise (common
    /// practice: below that the lasso with p > n interpolates and the path slows down
    /// without statistical benefit).
    pub ratio: Option<f64>,
    /// A user grid (any order; sorted decreasing internally). Overrides the generated one.
    pub lambdas: Option<Vec<f64>>,
    /// Use strong-rule screening with the KKT check. Default true.
    pub screening: bool,
    /// The Newton-CD solver used at every λ.
    pub solver: NewtonCd,
    /// Compute the duality gap at every point (about one pass over the data each).
    /// Default false.
    pub duality_gaps: bool,
}

impl Default for PathOptions {
    fn default() -> Self {
        Self {
            n_lambdas: 100,
            ratio: None,
            lambdas: None,
            screening: true,
            solver: NewtonCd::default(),
            duality_gaps: false,
        }
    }
}

/// One point of a path.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct PathPoint {
    /// λ at this point.
    pub lambda: f64,
    /// The solution, stored sparsely.
    pub x: SparseVec,
    /// F(x) at this λ.
    pub objective: f64,
    /// KKT residual over all coordinates.
    pub kkt_residual: f64,
    /// Duality gap where defined.
    pub duality_gap: Option<f64>,
    /// Number of non-zeros (penalised and unpenalised).
    pub nnz: usize,
    /// Newton iterations summed over the (re-)solves at this λ.
    pub iterations: usize,
    /// Wall-clock seconds for this λ.
    pub seconds: f64,
    /// Solver status of the last solve at this λ.
    pub status: Status,
    /// Coordinates discarded by screening (the strong rule and any exact rule of the loss),
    /// before the KKT check.
    pub screened: usize,
    /// Discarded coordinates that the KKT check had to add back.
    pub violations: usize,
}

/// A regularisation path.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct RegPath {
    /// λ_max of the problem.
    pub lambda_max: f64,
    /// The points, λ decreasing.
    pub points: Vec<PathPoint>,
    /// Total wall-clock seconds.
    pub seconds: f64,
    /// Number of coordinates of the problem.
    pub dim: usize,
}

impl RegPath {
    /// The λ values, decreasing.
    pub fn lambdas(&self) -> Vec<f64> {
        self.points.iter().map(|p| p.lambda).collect()
    }

    /// Average fraction of coordinates discarded by screening per λ.
    pub fn screened_fraction(&self) -> f64 {
        if self.points.is_empty() || self.dim == 0 {
            return 0.0;
        }
        self.points.iter().map(|p| p.screened as f64).sum::<f64>()
            / (self.points.len() * self.dim) as f64
    }
}

/// The smallest λ with an all-zero penalised solution, together with that solution and its
/// gradient (the start of a path).
///
/// # Errors
/// Penalty weight length errors; [`Error::InvalidArgument`] if no coordinate is penalised.
pub fn lambda_max(loss: &dyn Loss, penalty: &Penalty) -> Result<f64> {
    Ok(null_solution(loss, penalty)?.0)
}

/// (λ_max, the all-zero-penalised solution, its gradient).
fn null_solution(loss: &dyn Loss, penalty: &Penalty) -> Result<(f64, Vec<f64>, Vec<f64>)> {
    let m = loss.dim();
    let unit = ResolvedPenalty::new(&penalty.with_lambda(1.0)?, m, |k| loss.structural_factor(k))?;
    let mut x = loss.start();
    for (k, xk) in x.iter_mut().enumerate() {
        if unit.l1[k] > 0.0 {
            *xk = 0.0;
        }
    }
    let free: Vec<usize> = (0..m).filter(|&k| unit.l1[k] == 0.0).collect();
    if free.len() == m {
        return Err(Error::InvalidArgument(
            "no coordinate is penalised, so λ_max is undefined".into(),
        ));
    }
    if !free.is_empty() && loss.value(&x).is_some() {
        let solver = NewtonCd::new(crate::solver::SolverOptions {
            tol: 1e-12,
            ..Default::default()
        });
        let sol = solver.solve_restricted(
            loss,
            penalty,
            Some(&x),
            WorkingSet {
                coordinates: &free,
                gradient_scale: gradient_scale(loss),
            },
        )?;
        x = sol.x;
    }
    let mut g = vec![0.0; m];
    loss.gradient(&x, &mut g);
    let lmax = (0..m)
        .filter(|&k| unit.l1[k] > 0.0)
        .map(|k| g[k].abs() / unit.l1[k])
        .fold(0.0f64, f64::max);
    Ok((lmax, x, g))
}

/// The longest λ grid [`log_grid`] builds (far beyond any useful path; a guard against a
/// count that would exhaust memory).
pub const MAX_GRID: usize = 100_000;

/// A log-spaced grid of `n` values from `lambda_max` down to `ratio·lambda_max`.
///
/// # Errors
/// [`Error::InvalidArgument`] for n = 0 or n > [`MAX_GRID`], a ratio outside (0, 1], or a
/// λ_max that is not finite and positive (λ_max = 0 means the zero vector already solves
/// the problem for every λ, e.g. a response that is identically zero), or one so small
/// that ratio·λ_max underflows to 0.
pub fn log_grid(lambda_max: f64, ratio: f64, n: usize) -> Result<Vec<f64>> {
    if n == 0 || n > MAX_GRID || !(ratio > 0.0 && ratio <= 1.0) {
        return Err(Error::InvalidArgument(format!(
            "grid needs 1 ≤ n ≤ {MAX_GRID} and 0 < ratio ≤ 1 (got n={n}, ratio={ratio})"
        )));
    }
    if !(lambda_max.is_finite() && ratio * lambda_max > 0.0) {
        return Err(Error::InvalidArgument(format!(
            "grid needs a finite λ_max > 0 with ratio·λ_max > 0 (got λ_max={lambda_max}, \
             ratio={ratio}); λ_max = 0 means the zero vector is optimal for every λ"
        )));
    }
    if n == 1 {
        return Ok(vec![lambda_max]);
    }
    let (a, b) = (lambda_max.ln(), (ratio * lambda_max).ln());
    Ok((0..n)
        .map(|i| (a + (b - a) * i as f64 / (n - 1) as f64).exp())
        .collect())
}

/// The default λ_min/λ_max ratio for a problem with `n` samples and `p` features.
pub fn default_ratio(n: usize, p: usize) -> f64 {
    if n > p {
        1e-4
    } else {
        1e-2
    }
}

/// Computes the path of `loss + penalty` (the penalty's λ is ignored; its weights and ℓ2
/// term are kept) with warm starts and, if enabled, strong-rule screening with a KKT check.
/// `shape` = (n, p) picks the default ratio.
///
/// # Errors
/// Typed errors for invalid options or penalties.
pub fn fit_path(
    loss: &dyn Loss,
    penalty: &Penalty,
    shape: (usize, usize),
    opts: &PathOptions,
) -> Result<RegPath> {
    let started = Instant::now();
    let m = loss.dim();
    let (lmax, x0, g0) = null_solution(loss, penalty)?;
    let lambdas = match &opts.lambdas {
        Some(l) => {
            if l.is_empty() {
                return Err(Error::Empty("λ grid".into()));
            }
            for &v in l {
                crate::error::check_lambda("lambda", v)?;
            }
            let mut l = l.clone();
            l.sort_by(|a, b| b.total_cmp(a));
            l
        }
        None => {
            let ratio = opts
                .ratio
                .unwrap_or_else(|| default_ratio(shape.0, shape.1));
            log_grid(lmax, ratio, opts.n_lambdas)?
        }
    };
    let scale = gradient_scale(loss);
    let tol_abs = opts.solver.options.tol * scale;
    let unit = ResolvedPenalty::new(&penalty.with_lambda(1.0)?, m, |k| loss.structural_factor(k))?;
    let mut x = x0;
    let mut g = g0;
    let mut prev_lambda = lmax.max(lambdas[0]);
    let mut points = Vec::with_capacity(lambdas.len());
    let mut working = vec![false; m];
    for &lambda in &lambdas {
        let t = Instant::now();
        let pen_l = penalty.with_lambda(lambda)?;
        let resolved = ResolvedPenalty::new(&pen_l, m, |k| loss.structural_factor(k))?;
        // Strong set: non-zeros, unpenalised, and coordinates passing the sequential rule,
        // less the coordinates the loss proves zero (an exact rule; see Loss::provably_zero).
        let cut = 2.0 * lambda - prev_lambda;
        let proven = if opts.screening {
            loss.provably_zero(&resolved).filter(|z| z.len() == m)
        } else {
            None
        };
        let mut screened = 0;
        for k in 0..m {
            let keep = !opts.screening
                || x[k] != 0.0
                || unit.l1[k] == 0.0
                || (g[k] + resolved.l2[k] * x[k]).abs() >= cut * unit.l1[k];
            let keep = keep && !(x[k] == 0.0 && proven.as_ref().is_some_and(|z| z[k]));
            working[k] = keep;
            if !keep {
                screened += 1;
            }
        }
        let mut iterations = 0;
        let mut violations = 0;
        let sol: Solution = loop {
            let coords: Vec<usize> = (0..m).filter(|&k| working[k]).collect();
            let sol = opts.solver.solve_restricted(
                loss,
                &pen_l,
                Some(&x),
                WorkingSet {
                    coordinates: &coords,
                    gradient_scale: scale,
                },
            )?;
            iterations += sol.iterations;
            loss.gradient(&sol.x, &mut g);
            let mut added = 0;
            for k in 0..m {
                if !working[k] {
                    let r = coordinate_residual(0.0, g[k], resolved.l1[k]) * loss.residual_scale(k);
                    if r > tol_abs {
                        working[k] = true;
                        added += 1;
                    }
                }
            }
            x.clone_from(&sol.x);
            if added == 0 {
                break sol;
            }
            violations += added;
        };
        let kkt = crate::solver::kkt_residual(loss, &resolved, &x, &g);
        points.push(PathPoint {
            lambda,
            x: SparseVec::from_dense(&x),
            objective: sol.objective,
            kkt_residual: kkt,
            duality_gap: if opts.duality_gaps {
                loss.duality_gap(&x, &resolved)
            } else {
                None
            },
            nnz: x.iter().filter(|v| **v != 0.0).count(),
            iterations,
            seconds: t.elapsed().as_secs_f64(),
            status: sol.status,
            screened,
            violations,
        });
        prev_lambda = lambda;
    }
    Ok(RegPath {
        lambda_max: lmax,
        points,
        seconds: started.elapsed().as_secs_f64(),
        dim: m,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A geometric sequence from λ_max to ratio·λ_max (constant ratio between neighbours),
    /// and typed errors for grids that cannot be built.
    #[test]
    fn log_grid_is_geometric_and_checks_its_inputs() {
        let g = log_grid(2.0, 1e-3, 4).unwrap();
        assert_eq!(g.len(), 4);
        assert!((g[0] - 2.0).abs() < 1e-15 && (g[3] - 2e-3).abs() < 1e-15);
        for w in g.windows(2) {
            assert!((w[1] / w[0] - 0.1).abs() < 1e-12);
        }
        assert_eq!(log_grid(0.7, 0.5, 1).unwrap(), vec![0.7]);
        for (lmax, ratio, n) in [
            (1.0, 0.5, 0),
            (1.0, 0.5, MAX_GRID + 1),
            (1.0, 0.5, usize::MAX),
            (1.0, 0.0, 3),
            (1.0, 1.5, 3),
            (0.0, 0.5, 3),
            (-1.0, 0.5, 3),
            (f64::NAN, 0.5, 3),
            (f64::INFINITY, 0.5, 3),
            (1e-320, 1e-10, 3),
        ] {
            assert!(
                matches!(log_grid(lmax, ratio, n), Err(Error::InvalidArgument(_))),
                "{lmax} {ratio} {n}"
            );
        }
    }
}
