//! The extension seam: a loss written in a test with only `dim`, `value`, `gradient` and
//! `hess_vec` works with Newton coordinate descent through the default Hessian-vector local
//! model, and the finite-difference checker accepts correct derivatives and flags wrong ones.
//!
//! The custom loss is ℓ1-penalised Poisson regression with the log link,
//! f(b) = (1/n) Σ_i [e^{η_i} − y_i η_i], η = Xb ("Generalized linear models", Chapman &
//! Hall, 2nd ed., 1989, ch. 6), with ∇f = Xᵀ(e^η − y)/n and ∇²f = Xᵀ diag(e^η) X / n.
//! References: the general conic solver `clarabel` with one exponential cone per sample
//! (e^{η_i} ≤ t_i ⇔ (η_i, 1, t_i) ∈ K_exp), and the closed form λ_max = max_j |x_jᵀ(1 − y)|/n
//! (the gradient at b = 0), above which b = 0.

#![allow(clippy::needless_range_loop)] // index loops mirror the formulas

use clarabel::algebra::CscMatrix;
use clarabel::solver::{
    DefaultSettings, DefaultSolver, IPSolver, SolverStatus,
    SupportedConeT::{ExponentialConeT, NonnegativeConeT},
};
use ellone::loss::check_derivatives;
use ellone::solver::{NewtonCd, Solver, Status};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::{Poisson as PoissonDist, StandardNormal};

/// Which deliberate mistake the loss makes (for the checker tests).
#[derive(Clone, Copy, PartialEq)]
enum Defect {
    None,
    /// Gradient forgets the −y term.
    Gradient,
    /// Hessian-vector product forgets the e^η weights.
    Hessian,
}

/// Poisson regression without an intercept, implementing only the four required methods.
struct Poisson {
    x: Array2<f64>,
    y: Vec<f64>,
    defect: Defect,
}

impl Poisson {
    fn eta(&self, b: &[f64]) -> Vec<f64> {
        let (n, p) = self.x.dim();
        (0..n)
            .map(|i| (0..p).map(|j| self.x[[i, j]] * b[j]).sum())
            .collect()
    }
}

impl Loss for Poisson {
    fn dim(&self) -> usize {
        self.x.ncols()
    }

    fn value(&self, b: &[f64]) -> Option<f64> {
        let eta = self.eta(b);
        let n = eta.len() as f64;
        let v = eta
            .iter()
            .zip(&self.y)
            .map(|(&e, &y)| e.exp() - y * e)
            .sum::<f64>()
            / n;
        v.is_finite().then_some(v)
    }

    fn gradient(&self, b: &[f64], g: &mut [f64]) {
        let eta = self.eta(b);
        let (n, p) = self.x.dim();
        let yw = if self.defect == Defect::Gradient {
            0.0
        } else {
            1.0
        };
        for j in 0..p {
            g[j] = (0..n)
                .map(|i| self.x[[i, j]] * (eta[i].exp() - yw * self.y[i]))
                .sum::<f64>()
                / n as f64;
        }
    }

    fn hess_vec(&self, b: &[f64], v: &[f64], out: &mut [f64]) {
        let eta = self.eta(b);
        let u = self.eta(v);
        let (n, p) = self.x.dim();
        for j in 0..p {
            out[j] = (0..n)
                .map(|i| {
                    let w = if self.defect == Defect::Hessian {
                        1.0
                    } else {
                        eta[i].exp()
                    };
                    self.x[[i, j]] * w * u[i]
                })
                .sum::<f64>()
                / n as f64;
        }
    }
}

fn poisson_data(seed: u64, n: usize, p: usize) -> (Array2<f64>, Vec<f64>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, p), |_| 0.5 * rng.sample::<f64, _>(StandardNormal));
    let y = (0..n)
        .map(|i| {
            let eta = 0.8 * x[[i, 0]] - 0.6 * x[[i, 2]] + 0.3;
            rng.sample(PoissonDist::new(eta.exp()).unwrap())
        })
        .collect();
    (x, y)
}

fn poisson(seed: u64, defect: Defect) -> Poisson {
    let (x, y) = poisson_data(seed, 40, 6);
    Poisson { x, y, defect }
}

fn random_point(m: usize, seed: u64) -> Vec<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    (0..m).map(|_| rng.random_range(-0.5..0.5)).collect()
}

#[test]
fn checker_accepts_the_shipped_losses() {
    let mut rng = StdRng::seed_from_u64(1);
    let x = Array2::from_shape_fn((25, 4), |_| rng.sample::<f64, _>(StandardNormal));
    let y: Vec<f64> = (0..25).map(|i| f64::from(x[[i, 0]] > 0.2)).collect();
    for intercept in [false, true] {
        let ls = LeastSquares::from_dense(x.view(), &y, intercept).unwrap();
        let lg = Logistic::from_dense(x.view(), &y, intercept).unwrap();
        for (name, loss) in [("least squares", &ls as &dyn Loss), ("logistic", &lg)] {
            let at = random_point(loss.dim(), 2);
            let r = check_derivatives(loss, &at, 20, 3).unwrap();
            println!("{name} intercept {intercept}: {r:?}");
            assert!(r.passes(1e-6), "{name}: {r:?}");
        }
    }
}

#[test]
fn checker_accepts_the_custom_loss() {
    let loss = poisson(4, Defect::None);
    let r = check_derivatives(&loss, &random_point(6, 5), 20, 6).unwrap();
    assert!(r.passes(1e-6), "{r:?}");
}

#[test]
fn checker_flags_a_wrong_gradient() {
    let loss = poisson(4, Defect::Gradient);
    let r = check_derivatives(&loss, &random_point(6, 5), 20, 6).unwrap();
    assert!(!r.passes(1e-6), "{r:?}");
    assert!(r.gradient_error > 1e-2, "{r:?}");
}

#[test]
fn checker_flags_a_wrong_hessian() {
    let loss = poisson(4, Defect::Hessian);
    let r = check_derivatives(&loss, &random_point(6, 5), 20, 6).unwrap();
    assert!(r.gradient_error <= 1e-6, "{r:?}");
    assert!(r.hessian_error > 1e-2, "{r:?}");
    assert!(!r.passes(1e-6));
}

#[test]
fn checker_rejects_a_point_of_the_wrong_length() {
    let loss = poisson(4, Defect::None);
    assert!(check_derivatives(&loss, &[0.0; 5], 3, 0).is_err());
}

/// ℓ1-Poisson regression solved by the conic solver: variables (b, t, s), minimise
/// (1/n)Σ(t_i − y_iη_i) + λΣ s_j subject to (η_i, 1, t_i) ∈ K_exp and −s ≤ b ≤ s.
fn conic_poisson(x: &Array2<f64>, y: &[f64], lambda: f64) -> f64 {
    let (n, p) = x.dim();
    let nf = n as f64;
    let (t0, s0) = (p, p + n);
    let nvar = s0 + p;
    let mut q = vec![0.0; nvar];
    for j in 0..p {
        q[j] = -(0..n).map(|i| y[i] * x[[i, j]]).sum::<f64>() / nf;
        q[s0 + j] = lambda;
    }
    for i in 0..n {
        q[t0 + i] = 1.0 / nf;
    }
    let (mut ri, mut ci, mut vi, mut b) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
    let mut cones = Vec::new();
    let mut row = 0;
    for i in 0..n {
        // s = b − Ax = (η_i, 1, t_i).
        for j in 0..p {
            ri.push(row);
            ci.push(j);
            vi.push(-x[[i, j]]);
        }
        b.extend([0.0, 1.0, 0.0]);
        ri.push(row + 2);
        ci.push(t0 + i);
        vi.push(-1.0);
        row += 3;
        cones.push(ExponentialConeT());
    }
    for j in 0..p {
        // s_j − b_j ≥ 0, s_j + b_j ≥ 0.
        ri.extend([row, row, row + 1, row + 1]);
        ci.extend([j, s0 + j, j, s0 + j]);
        vi.extend([1.0, -1.0, -1.0, -1.0]);
        b.extend([0.0, 0.0]);
        row += 2;
    }
    cones.push(NonnegativeConeT(2 * p));
    let a = CscMatrix::new_from_triplets(row, nvar, ri, ci, vi);
    let pm = CscMatrix::zeros((nvar, nvar));
    let settings = DefaultSettings {
        verbose: false,
        tol_gap_abs: 1e-9,
        tol_gap_rel: 1e-9,
        tol_feas: 1e-9,
        ..DefaultSettings::default()
    };
    let mut solver = DefaultSolver::new(&pm, &q, &a, &b, &cones, settings).unwrap();
    solver.solve();
    let status = solver.solution.status;
    assert!(
        matches!(status, SolverStatus::Solved | SolverStatus::AlmostSolved),
        "{status:?}"
    );
    solver.solution.obj_val
}

#[test]
fn custom_poisson_loss_matches_conic_solver() {
    for seed in 0..3u64 {
        let loss = poisson(seed, Defect::None);
        let lmax = lambda_max(&loss);
        for frac in [0.05, 0.3] {
            let lambda = frac * lmax;
            let sol = NewtonCd::default()
                .solve(&loss, &Penalty::l1(lambda).unwrap())
                .unwrap();
            assert_eq!(sol.status, Status::Converged);
            let reference = conic_poisson(&loss.x, &loss.y, lambda);
            let rel = (sol.objective - reference).abs() / reference.abs();
            println!(
                "Poisson seed {seed} λ/λmax {frac}: {} vs {reference} (rel {rel:.1e}), {} iterations, nnz {}",
                sol.objective,
                sol.iterations,
                sol.nnz()
            );
            assert!(rel <= 1e-6, "ours {} vs conic {reference}", sol.objective);
            assert!(sol.nnz() > 0);
        }
    }
}

/// λ_max = max_j |x_jᵀ(1 − y)|/n, the gradient at b = 0 (where e^η = 1).
fn lambda_max(loss: &Poisson) -> f64 {
    let n = loss.y.len() as f64;
    loss.x
        .columns()
        .into_iter()
        .map(|c| {
            (c.iter()
                .zip(&loss.y)
                .map(|(a, y)| a * (1.0 - y))
                .sum::<f64>()
                / n)
                .abs()
        })
        .fold(0.0, f64::max)
}

#[test]
fn custom_poisson_loss_is_zero_above_lambda_max() {
    let loss = poisson(7, Defect::None);
    let lmax = lambda_max(&loss);
    let above = NewtonCd::default()
        .solve(&loss, &Penalty::l1(lmax * (1.0 + 1e-6)).unwrap())
        .unwrap();
    assert_eq!(above.status, Status::Converged);
    assert!(above.x.iter().all(|&v| v == 0.0), "{:?}", above.x);
    let below = NewtonCd::default()
        .solve(&loss, &Penalty::l1(lmax * 0.9).unwrap())
        .unwrap();
    assert_eq!(below.status, Status::Converged);
    assert!(below.nnz() > 0);
}
