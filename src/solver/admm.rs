//! The alternating direction method of multipliers (ADMM) for min f(x) + P(x).
//!
//! Reference: "Distributed optimization and statistical learning via the alternating
//! direction method of multipliers", Foundations and Trends in Machine Learning, 2011.
//!
//! Split x = z, with f on x and the penalty P on z, and iterate in scaled form (u is the
//! scaled dual variable, D a diagonal metric):
//!
//! ```text
//! x ← argmin_x f(x) + (ρ/2)‖x − z + u‖²_D
//! z ← argmin_z P(z) + (ρ/2)‖x + u − z‖²_D,   i.e. z_k = S(x_k + u_k, λ_k/(ρD_k)) / (1 + λ₂/(ρD_k))
//! u ← u + x − z
//! ```
//!
//! D = I, except for a symmetric matrix stored as its upper triangle, where D_k = 2 off the
//! diagonal, so ‖·‖_D is the Frobenius norm of the matrix and the x-update is the matrix
//! problem it should be.
//!
//! **x-updates.**
//! * Least squares ([`LossStructure::LeastSquares`], A = [X 1]): the normal equations
//!   (AᵀA/n + ρI)x = Aᵀy/n + ρv. One symmetric eigen-decomposition is computed once and
//!   serves every ρ: of AᵀA/n (m × m) when m ≤ n, else of AAᵀ/n (n × n) with
//!   (ρI + AᵀA/n)⁻¹ = (1/ρ)(I − Aᵀ(nρI + AAᵀ)⁻¹A). It needs a dense copy of A, so it is
//!   used up to n·m = 5·10⁷ entries and min(n, m) = 4000; beyond that (large sparse
//!   designs) the inner Newton solve below takes over.
//! * Precision ([`LossStructure::Precision`]): −log det Θ + tr(SΘ) + (ρ/2)‖Θ − V‖²_F is
//!   minimised where ρΘ − Θ⁻¹ = ρV − S; with ρV − S = Q diag(e) Qᵀ the solution is
//!   Θ = Q diag(θ) Qᵀ, θ_i = (e_i + √(e_i² + 4ρ))/(2ρ) (always positive definite).
//! * Any other loss: an inner Newton solve of φ(x) = f(x) + (ρ/2)‖x − v‖²_D, warm-started
//!   at the previous x, with conjugate-gradient directions from Hessian-vector products and
//!   a backtracking line search that rejects points outside the domain. It stops when
//!   ‖∇φ‖∞ is below a fraction of the current ADMM residuals (inexact ADMM).
//!
//! **Penalty parameter.** Residual balancing: with the primal residual r = ‖x − z‖_D and
//! the dual residual s = ρ‖z − z_prev‖_D, ρ is doubled when r > 10 s and halved when
//! s > 10 r (u rescaled accordingly), as in the reference above (§3.4.1).
//!
//! **Reported iterate.** z (sparse), or x when z lies outside the domain of f (a log-det
//! loss at a matrix that is not positive definite). Its objective and KKT residual are
//! computed exactly as for every other solver, which costs one gradient per iteration.
//! [`Solution::inner`] counts gradient evaluations and Hessian-vector products (data passes).

use super::baseline::{curvature_along_gradient, prox, record, start_value_grad, value_grad};
use super::{Observer, Run, Solution, Solver, SolverOptions, Status};
use crate::error::{Error, Result};
use crate::loss::{Loss, LossStructure};
use crate::penalty::Penalty;
use ndarray::{Array1, Array2, ArrayView1, Axis};

/// Tuning of [`Admm`].
#[derive(Debug, Clone, PartialEq)]
pub struct AdmmOptions {
    /// Initial penalty parameter ρ; `None` picks the curvature of f along its gradient at
    /// the start. Default `None`.
    pub rho: Option<f64>,
    /// Adapt ρ by residual balancing. Default true.
    pub balance: bool,
    /// Imbalance factor μ that triggers an update of ρ. Default 10.
    pub balance_ratio: f64,
    /// Factor τ by which ρ is multiplied or divided. Default 2.
    pub balance_factor: f64,
    /// Use the closed-form x-updates where the loss exposes its structure. Default true.
    pub closed_form: bool,
    /// Maximum Newton iterations per inner solve. Default 50.
    pub max_newton: usize,
    /// Maximum conjugate-gradient iterations per Newton direction. Default 100.
    pub max_cg: usize,
}

impl Default for AdmmOptions {
    fn default() -> Self {
        Self {
            rho: None,
            balance: true,
            balance_ratio: 10.0,
            balance_factor: 2.0,
            closed_form: true,
            max_newton: 50,
            max_cg: 100,
        }
    }
}

/// The ADMM baseline.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Admm {
    /// Options shared with every solver.
    pub options: SolverOptions,
    /// Method-specific tuning.
    pub admm: AdmmOptions,
}

impl Admm {
    /// ADMM with the given common options and default tuning.
    pub fn new(options: SolverOptions) -> Self {
        Self {
            options,
            admm: AdmmOptions::default(),
        }
    }

    fn check_tuning(&self) -> Result<()> {
        let o = &self.admm;
        if let Some(r) = o.rho {
            if !(r > 0.0 && r.is_finite()) {
                return Err(Error::InvalidArgument(format!(
                    "ADMM rho must be finite and > 0, got {r}"
                )));
            }
        }
        let bad = |v: f64| v <= 1.0 || !v.is_finite();
        if bad(o.balance_ratio) || bad(o.balance_factor) {
            return Err(Error::InvalidArgument(
                "ADMM residual-balancing ratio and factor must be finite and > 1".into(),
            ));
        }
        Ok(())
    }
}

/// Largest dense copy of the design the closed-form least-squares x-update makes.
const MAX_DENSE_ENTRIES: usize = 50_000_000;
/// Largest Gram matrix it eigen-decomposes.
const MAX_GRAM_DIM: usize = 4_000;

/// Closed-form least-squares x-update through one cached eigen-decomposition.
struct GramSolver {
    /// A = [X 1] (n × m), dense.
    a: Array2<f64>,
    /// Aᵀy/n.
    aty: Array1<f64>,
    /// Eigenvalues (clamped at 0) and eigenvectors of AᵀA/n (m ≤ n) or AAᵀ/n (m > n).
    vals: Vec<f64>,
    vecs: Array2<f64>,
    /// True when the decomposition is of AᵀA/n.
    primal: bool,
}

impl GramSolver {
    /// Whether the dense copy of A (n·m entries) and the eigen-decomposition of the smaller
    /// Gram matrix (min(n, m)² entries, O(min(n, m)³) work) stay within about 400 MB and a
    /// few seconds; larger problems use the inner Newton solve instead.
    fn fits(design: &crate::Design) -> bool {
        let (n, m) = (design.nrows(), design.ncols() + 1);
        n.saturating_mul(m) <= MAX_DENSE_ENTRIES && n.min(m) <= MAX_GRAM_DIM
    }

    fn new(design: &crate::Design, y: &[f64], intercept: bool) -> Result<Self> {
        let (n, p) = (design.nrows(), design.ncols());
        let m = p + usize::from(intercept);
        let x = design.to_dense()?;
        let mut a = Array2::<f64>::ones((n, m));
        a.slice_mut(ndarray::s![.., ..p]).assign(&x);
        let nf = n as f64;
        let aty = a.t().dot(&ArrayView1::from(y)) / nf;
        let primal = m <= n;
        let gram = if primal {
            crate::linalg::gemm(a.t(), a.view()) / nf
        } else {
            crate::linalg::gemm(a.view(), a.t()) / nf
        };
        let (vals, vecs) = crate::linalg::sym_eigen(gram.view())?;
        let vals = vals.into_iter().map(|v| v.max(0.0)).collect();
        Ok(Self {
            a,
            aty,
            vals,
            vecs,
            primal,
        })
    }

    /// x = (AᵀA/n + ρI)⁻¹(Aᵀy/n + ρv).
    fn solve(&self, v: &[f64], rho: f64, x: &mut [f64]) {
        let w = &self.aty + &(ArrayView1::from(v).to_owned() * rho);
        let out = if self.primal {
            let mut c = self.vecs.t().dot(&w);
            c.iter_mut()
                .zip(&self.vals)
                .for_each(|(ci, &e)| *ci /= e + rho);
            self.vecs.dot(&c)
        } else {
            let n = self.a.nrows() as f64;
            let aw = self.a.dot(&w);
            let mut c = self.vecs.t().dot(&aw);
            c.iter_mut()
                .zip(&self.vals)
                .for_each(|(ci, &e)| *ci /= e + rho);
            let back = self.a.t().dot(&self.vecs.dot(&c)) / n;
            (w - back) / rho
        };
        x.iter_mut().zip(out.iter()).for_each(|(a, b)| *a = *b);
    }
}

/// Closed-form precision x-update through one eigen-decomposition per call.
struct PrecisionSolver {
    s: Array2<f64>,
    pairs: Vec<(usize, usize)>,
}

impl PrecisionSolver {
    /// Θ = argmin −log det Θ + tr(SΘ) + (ρ/2)‖Θ − V‖²_F, written as coordinates into x.
    fn solve(&self, v: &[f64], rho: f64, x: &mut [f64]) -> Result<()> {
        let p = self.s.nrows();
        let mut mat = -&self.s;
        for (&(i, j), &vk) in self.pairs.iter().zip(v) {
            mat[[i, j]] += rho * vk;
            if i != j {
                mat[[j, i]] += rho * vk;
            }
        }
        let (e, q) = crate::linalg::sym_eigen(mat.view())?;
        let theta: Vec<f64> = e
            .iter()
            .map(|&ei| {
                let root = (ei * ei + 4.0 * rho).sqrt();
                // Both forms equal (e + √(e² + 4ρ))/(2ρ); the second avoids cancellation.
                if ei >= 0.0 {
                    (ei + root) / (2.0 * rho)
                } else {
                    2.0 / (root - ei)
                }
            })
            .collect();
        let mut qd = q.clone();
        for (mut col, &t) in qd.axis_iter_mut(Axis(1)).zip(&theta) {
            col *= t;
        }
        let full = crate::linalg::gemm(qd.view(), q.t());
        debug_assert_eq!(full.nrows(), p);
        for (&(i, j), xk) in self.pairs.iter().zip(x.iter_mut()) {
            *xk = 0.5 * (full[[i, j]] + full[[j, i]]);
        }
        Ok(())
    }
}

/// The x-update engine chosen for a loss.
enum XUpdate {
    Gram(GramSolver),
    Precision(PrecisionSolver),
    Newton,
}

/// Inexact Newton solve of φ(x) = f(x) + (ρ/2)Σ D_k(x_k − v_k)² from the warm start x,
/// where `g` holds ∇f(x) on entry and on exit. Returns false if no progress was possible.
#[allow(clippy::too_many_arguments)]
fn newton_prox(
    loss: &dyn Loss,
    opts: &AdmmOptions,
    x: &mut [f64],
    fx: &mut f64,
    g: &mut [f64],
    v: &[f64],
    metric: &[f64],
    rho: f64,
    tol: f64,
    passes: &mut usize,
) -> bool {
    let m = x.len();
    let mut gphi = vec![0.0; m];
    let mut p = vec![0.0; m];
    let mut r = vec![0.0; m];
    let mut dir = vec![0.0; m];
    let mut hd = vec![0.0; m];
    let mut trial = vec![0.0; m];
    let mut gt = vec![0.0; m];
    let phi = |x: &[f64], f: f64| -> f64 {
        let mut q = 0.0;
        for k in 0..x.len() {
            let d = x[k] - v[k];
            q += metric[k] * d * d;
        }
        f + 0.5 * rho * q
    };
    for _ in 0..opts.max_newton.max(1) {
        for k in 0..m {
            gphi[k] = g[k] + rho * metric[k] * (x[k] - v[k]);
        }
        let gnorm = gphi.iter().fold(0.0f64, |a, b| a.max(b.abs()));
        if gnorm <= tol {
            return true;
        }
        // Conjugate gradients on (H + ρD) p = −∇φ, forcing term min(0.5, √‖∇φ‖).
        p.iter_mut().for_each(|e| *e = 0.0);
        r.iter_mut().zip(&gphi).for_each(|(a, b)| *a = -b);
        dir.copy_from_slice(&r);
        let r0 = r.iter().map(|e| e * e).sum::<f64>().sqrt();
        let target = r0 * r0.sqrt().min(0.5);
        let mut rr = r0 * r0;
        for _ in 0..opts.max_cg.max(1) {
            loss.hess_vec(x, &dir, &mut hd);
            *passes += 1;
            for k in 0..m {
                hd[k] += rho * metric[k] * dir[k];
            }
            let dhd: f64 = dir.iter().zip(&hd).map(|(a, b)| a * b).sum();
            if !(dhd > 0.0 && dhd.is_finite()) {
                break;
            }
            let alpha = rr / dhd;
            for k in 0..m {
                p[k] += alpha * dir[k];
                r[k] -= alpha * hd[k];
            }
            let rr_new: f64 = r.iter().map(|e| e * e).sum();
            if rr_new.sqrt() <= target {
                break;
            }
            let beta = rr_new / rr;
            rr = rr_new;
            for k in 0..m {
                dir[k] = r[k] + beta * dir[k];
            }
        }
        if p.iter().all(|e| *e == 0.0) {
            p.iter_mut().zip(&gphi).for_each(|(a, b)| *a = -b / rho);
        }
        // Backtracking on φ, rejecting points outside the domain.
        let phi0 = phi(x, *fx);
        let slope: f64 = gphi.iter().zip(&p).map(|(a, b)| a * b).sum();
        let mut step = 1.0;
        let mut done = false;
        for _ in 0..60 {
            for k in 0..m {
                trial[k] = x[k] + step * p[k];
            }
            if let Some(ft) = loss.value(&trial).filter(|f| f.is_finite()) {
                if phi(&trial, ft) <= phi0 + 1e-4 * step * slope {
                    if value_grad(loss, &trial, &mut gt).is_some() {
                        *passes += 1;
                        x.copy_from_slice(&trial);
                        g.copy_from_slice(&gt);
                        *fx = ft;
                        done = true;
                    }
                    break;
                }
            }
            step *= 0.5;
        }
        if !done {
            return false;
        }
    }
    true
}

impl Solver for Admm {
    fn name(&self) -> &'static str {
        "admm"
    }

    fn options(&self) -> &SolverOptions {
        &self.options
    }

    fn solve_observed(
        &self,
        loss: &dyn Loss,
        penalty: &Penalty,
        start: Option<&[f64]>,
        observer: Option<&mut dyn Observer>,
    ) -> Result<Solution> {
        self.check_tuning()?;
        let (mut run, pen, x0) = Run::new(loss, penalty, start, &self.options, observer)?;
        let m = loss.dim();
        let mut metric = vec![1.0; m];
        let engine = match loss.structure().filter(|_| self.admm.closed_form) {
            Some(LossStructure::LeastSquares {
                design,
                y,
                intercept,
            }) if GramSolver::fits(design) => XUpdate::Gram(GramSolver::new(design, y, intercept)?),
            Some(LossStructure::Precision { s, pairs }) if pairs.len() == m => {
                for (k, &(i, j)) in pairs.iter().enumerate() {
                    metric[k] = if i == j { 1.0 } else { 2.0 };
                }
                XUpdate::Precision(PrecisionSolver {
                    s: s.to_owned(),
                    pairs: pairs.into_owned(),
                })
            }
            _ => XUpdate::Newton,
        };

        let mut x = x0;
        let mut gx = vec![0.0; m];
        let mut fx = start_value_grad(loss, &x, &mut gx)?;
        let mut passes = 1usize;
        let mut rho = match self.admm.rho {
            Some(r) => r,
            None => {
                passes += 1;
                curvature_along_gradient(loss, &x, &gx)
            }
        };
        let mut z = x.clone();
        let mut z_old = z.clone();
        let mut u = vec![0.0; m];
        let mut v = vec![0.0; m];
        let mut gz = vec![0.0; m];
        // Inner Newton tolerance: a fraction of the last residuals (starts at the gradient
        // scale).
        let mut inner_tol = 0.1 * gx.iter().fold(1e-12f64, |a, b| a.max(b.abs()));
        let floor_tol = 1e-3 * run.tol_abs;
        let mut iteration = 0usize;
        let (status, known, reported) = loop {
            // Reported iterate: z if inside the domain, else x.
            let z_feasible = value_grad(loss, &z, &mut gz);
            passes += 1;
            let (point, f_point) = match z_feasible {
                Some(fz) => (&z, fz),
                None => {
                    if !matches!(engine, XUpdate::Newton) {
                        // The closed forms do not track ∇f(x); compute it for the report.
                        fx = value_grad(loss, &x, &mut gx).ok_or_else(|| {
                            Error::Numerical(
                                "the closed-form ADMM x-update left the domain of the loss".into(),
                            )
                        })?;
                        passes += 1;
                    }
                    gz.copy_from_slice(&gx);
                    (&x, fx)
                }
            };
            let (rec, known) = record(
                &run,
                &self.options,
                loss,
                &pen,
                iteration,
                point,
                f_point,
                &gz,
                passes,
            );
            let current = point.clone();
            if let Some(s) = run.check(rec) {
                break (s, known, current);
            }

            // x-update.
            for k in 0..m {
                v[k] = z[k] - u[k];
            }
            match &engine {
                XUpdate::Gram(gs) => gs.solve(&v, rho, &mut x),
                XUpdate::Precision(ps) => ps.solve(&v, rho, &mut x)?,
                XUpdate::Newton => {
                    let tol = inner_tol.max(floor_tol);
                    if !newton_prox(
                        loss,
                        &self.admm,
                        &mut x,
                        &mut fx,
                        &mut gx,
                        &v,
                        &metric,
                        rho,
                        tol,
                        &mut passes,
                    ) {
                        break (Status::LineSearchFailed, known, current);
                    }
                }
            }
            // z-update (prox of the penalty in the metric D) and dual update.
            z_old.copy_from_slice(&z);
            let (mut r2, mut s2, mut r_inf, mut s_inf) = (0.0, 0.0, 0.0f64, 0.0f64);
            for k in 0..m {
                let t = 1.0 / (rho * metric[k]);
                z[k] = prox(x[k] + u[k], t, pen.l1[k], pen.l2[k]);
                let rk = x[k] - z[k];
                u[k] += rk;
                let sk = rho * (z[k] - z_old[k]);
                r2 += metric[k] * rk * rk;
                s2 += metric[k] * sk * sk;
                r_inf = r_inf.max(rk.abs());
                s_inf = s_inf.max(sk.abs());
            }
            // Both ρ·r and s are in gradient units.
            inner_tol = 0.1 * (rho * r_inf).max(s_inf);
            if self.admm.balance {
                let (r, s) = (r2.sqrt(), s2.sqrt());
                let (mu, tau) = (self.admm.balance_ratio, self.admm.balance_factor);
                if r > mu * s {
                    rho *= tau;
                    u.iter_mut().for_each(|e| *e /= tau);
                } else if s > mu * r {
                    rho /= tau;
                    u.iter_mut().for_each(|e| *e *= tau);
                }
            }
            iteration += 1;
        };
        run.finish(
            self.name(),
            loss,
            &pen,
            reported,
            Some(known),
            status,
            iteration,
            passes,
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    /// Both branches of the cached least-squares solve satisfy the normal equations
    /// (AᵀA/n + ρI)x = Aᵀy/n + ρv (textbook optimality condition of the ridge-type problem).
    #[test]
    fn gram_solver_satisfies_normal_equations() {
        let tall = array![[1.0, 2.0], [0.5, -1.0], [3.0, 0.0], [-1.0, 1.0]];
        let wide = array![[1.0, 2.0, -1.0, 0.5], [0.5, -1.0, 2.0, 1.0]];
        for x in [tall, wide] {
            let n = x.nrows();
            let y: Vec<f64> = (0..n).map(|i| 1.0 + i as f64).collect();
            let design = crate::Design::dense(x.view()).unwrap();
            let solver = GramSolver::new(&design, &y, true).unwrap();
            let m = x.ncols() + 1;
            let v: Vec<f64> = (0..m).map(|k| 0.3 * k as f64 - 0.2).collect();
            let rho = 0.7;
            let mut sol = vec![0.0; m];
            solver.solve(&v, rho, &mut sol);
            let a = &solver.a;
            let ax = a.dot(&ArrayView1::from(&sol));
            let lhs = a.t().dot(&ax) / n as f64 + &(ArrayView1::from(&sol).to_owned() * rho);
            let rhs = a.t().dot(&ArrayView1::from(&y)) / n as f64
                + &(ArrayView1::from(&v).to_owned() * rho);
            for (l, r) in lhs.iter().zip(rhs.iter()) {
                assert!((l - r).abs() < 1e-12 * (1.0 + r.abs()), "{l} vs {r}");
            }
        }
    }

    /// The precision x-update satisfies its optimality condition ρΘ − Θ⁻¹ = ρV − S and is
    /// positive definite.
    #[test]
    fn precision_update_satisfies_optimality() {
        let s = array![[1.0, 0.5, 0.2], [0.5, 2.0, -0.3], [0.2, -0.3, 1.5]];
        let mut pairs = Vec::new();
        for j in 0..3 {
            for i in 0..=j {
                pairs.push((i, j));
            }
        }
        let solver = PrecisionSolver {
            s: s.clone(),
            pairs: pairs.clone(),
        };
        let v: Vec<f64> = (0..pairs.len()).map(|k| 0.1 * k as f64 - 0.2).collect();
        let rho = 1.3;
        let mut x = vec![0.0; pairs.len()];
        solver.solve(&v, rho, &mut x).unwrap();
        let mut theta = Array2::<f64>::zeros((3, 3));
        let mut vm = Array2::<f64>::zeros((3, 3));
        for (k, &(i, j)) in pairs.iter().enumerate() {
            theta[[i, j]] = x[k];
            theta[[j, i]] = x[k];
            vm[[i, j]] = v[k];
            vm[[j, i]] = v[k];
        }
        let chol = crate::linalg::cholesky(theta.view()).expect("positive definite");
        let inv = chol.inverse();
        let lhs = &theta * rho - &inv;
        let rhs = &vm * rho - &s;
        for (l, r) in lhs.iter().zip(rhs.iter()) {
            assert!((l - r).abs() < 1e-10, "{l} vs {r}");
        }
    }
}
