//! Random small problems cross-checked against a general-purpose conic interior-point solver
//! (the `clarabel` crate, "Clarabel: An interior-point solver for conic programs with
//! quadratic objectives", arXiv preprint, 2024; identifier 2405.12762 from memory): the
//! optimal objective must agree to 1e-6 relative, and the conic solver's point must not beat
//! ours.
//!
//! Formulations (standard conic modelling, e.g. the textbook "Convex Optimization", 2004,
//! §4.4 and §4.6):
//!
//! * lasso as a QP: variables (b, b₀, r, t), minimise (1/(2n))‖r‖² + (λ₂/2)‖b‖² + λΣ w_j t_j
//!   subject to r = y − Xb − b₀ and −t ≤ b ≤ t;
//! * the same as an SOCP: ‖r‖² ≤ s written as the second-order cone ‖(2r, s − 1)‖ ≤ s + 1,
//!   minimise s/(2n) + …;
//! * ℓ1-logistic regression with exponential cones: softplus(η) ≤ t ⇔ e^{−t} + e^{η−t} ≤ 1,
//!   i.e. (−t, 1, u) ∈ K_exp, (η − t, 1, v) ∈ K_exp, u + v ≤ 1 (two cones per sample), with
//!   K_exp = closure{(a, b, c) : b > 0, b·e^{a/b} ≤ c}; minimise (1/n)Σ(t_i − y_iη_i) + ….

#![allow(clippy::needless_range_loop)] // index loops mirror the formulas

use clarabel::algebra::CscMatrix;
use clarabel::solver::{
    DefaultSettings, DefaultSolver, IPSolver, SolverStatus, SupportedConeT,
    SupportedConeT::{ExponentialConeT, NonnegativeConeT, SecondOrderConeT, ZeroConeT},
};
use ellone::solver::{NewtonCd, Solver, Status};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::StandardNormal;

/// A conic program min ½xᵀPx + qᵀx s.t. Ax + s = b, s ∈ K, assembled row block by row block.
struct Conic {
    nvar: usize,
    p_diag: Vec<f64>,
    q: Vec<f64>,
    rows: Vec<(usize, usize, f64)>,
    b: Vec<f64>,
    cones: Vec<SupportedConeT<f64>>,
}

impl Conic {
    fn new(nvar: usize) -> Self {
        Self {
            nvar,
            p_diag: vec![0.0; nvar],
            q: vec![0.0; nvar],
            rows: Vec::new(),
            b: Vec::new(),
            cones: Vec::new(),
        }
    }

    /// Adds one cone whose rows are `rows`: each is (entries of A's row, b's entry).
    fn cone(&mut self, cone: SupportedConeT<f64>, rows: Vec<(Vec<(usize, f64)>, f64)>) {
        for (entries, rhs) in rows {
            let r = self.b.len();
            for (j, v) in entries {
                self.rows.push((r, j, v));
            }
            self.b.push(rhs);
        }
        self.cones.push(cone);
    }

    /// Solves and returns (optimal objective, primal point).
    fn solve(self) -> (f64, Vec<f64>) {
        let m = self.b.len();
        let (ri, (ci, vi)): (Vec<usize>, (Vec<usize>, Vec<f64>)) =
            self.rows.iter().map(|&(r, c, v)| (r, (c, v))).unzip();
        let a = CscMatrix::new_from_triplets(m, self.nvar, ri, ci, vi);
        let (pi, pv): (Vec<usize>, Vec<f64>) = self
            .p_diag
            .iter()
            .enumerate()
            .filter(|(_, v)| **v != 0.0)
            .map(|(i, &v)| (i, v))
            .unzip();
        let p = CscMatrix::new_from_triplets(self.nvar, self.nvar, pi.clone(), pi, pv);
        let settings = DefaultSettings {
            verbose: false,
            tol_gap_abs: 1e-9,
            tol_gap_rel: 1e-9,
            tol_feas: 1e-9,
            tol_ktratio: 1e-8,
            ..DefaultSettings::default()
        };
        let mut solver = DefaultSolver::new(&p, &self.q, &a, &self.b, &self.cones, settings)
            .expect("valid conic program");
        solver.solve();
        // "AlmostSolved" means the tight tolerances above were missed by a little; the
        // comparison in `compare` still has to hold at 1e-6, so accept it.
        let status = solver.solution.status;
        assert!(
            matches!(status, SolverStatus::Solved | SolverStatus::AlmostSolved),
            "conic solver status {status:?}"
        );
        (solver.solution.obj_val, solver.solution.x.clone())
    }
}

/// A random problem: Gaussian X (n×p), a sparse true coefficient vector, y = Xβ + noise
/// (or Bernoulli labels with probability σ(Xβ)).
fn problem(n: usize, p: usize, seed: u64, logistic: bool) -> (Array2<f64>, Vec<f64>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, p), |_| rng.sample::<f64, _>(StandardNormal));
    let beta: Vec<f64> = (0..p)
        .map(|j| {
            if j % 3 == 0 {
                1.5 - 0.4 * j as f64
            } else {
                0.0
            }
        })
        .collect();
    let y = (0..n)
        .map(|i| {
            let eta: f64 = 0.5 + (0..p).map(|j| x[[i, j]] * beta[j]).sum::<f64>();
            if logistic {
                f64::from(rng.random::<f64>() < 1.0 / (1.0 + (-eta).exp()))
            } else {
                eta + rng.sample::<f64, _>(StandardNormal)
            }
        })
        .collect();
    (x, y)
}

/// λ_max for the given loss: max_j |∇_j f(0 with fitted intercept)| (unit weights).
fn lambda_max(x: &Array2<f64>, y: &[f64], intercept: bool, logistic: bool) -> f64 {
    let n = y.len() as f64;
    let ybar = y.iter().sum::<f64>() / n;
    let shift = match (intercept, logistic) {
        (true, _) => ybar,
        (false, true) => 0.5,
        (false, false) => 0.0,
    };
    x.columns()
        .into_iter()
        .map(|c| (c.iter().zip(y).map(|(a, b)| a * (b - shift)).sum::<f64>() / n).abs())
        .fold(0.0, f64::max)
}

#[derive(Clone, Copy, PartialEq)]
enum Form {
    Qp,
    Soc,
}

/// The lasso (weights w, ℓ2 coefficient l2) solved by the conic solver.
fn conic_lasso(
    x: &Array2<f64>,
    y: &[f64],
    intercept: bool,
    lambda: f64,
    w: &[f64],
    l2: f64,
    form: Form,
) -> (f64, Vec<f64>) {
    let (n, p) = x.dim();
    let nf = n as f64;
    let ib = p; // intercept index (if any)
    let r0 = p + usize::from(intercept);
    let t0 = r0 + n;
    let s_idx = t0 + p; // SOC epigraph variable
    let nvar = t0 + p + usize::from(form == Form::Soc);
    let mut c = Conic::new(nvar);
    for j in 0..p {
        c.p_diag[j] = l2;
        c.q[t0 + j] = lambda * w[j];
    }
    match form {
        Form::Qp => (0..n).for_each(|i| c.p_diag[r0 + i] = 1.0 / nf),
        Form::Soc => c.q[s_idx] = 0.5 / nf,
    }
    // r_i + x_iᵀb + b₀ = y_i.
    let eq = (0..n)
        .map(|i| {
            let mut e: Vec<(usize, f64)> = (0..p).map(|j| (j, x[[i, j]])).collect();
            if intercept {
                e.push((ib, 1.0));
            }
            e.push((r0 + i, 1.0));
            (e, y[i])
        })
        .collect();
    c.cone(ZeroConeT(n), eq);
    // t_j − b_j ≥ 0 and t_j + b_j ≥ 0.
    let mut abs_rows = Vec::new();
    for j in 0..p {
        abs_rows.push((vec![(j, 1.0), (t0 + j, -1.0)], 0.0));
        abs_rows.push((vec![(j, -1.0), (t0 + j, -1.0)], 0.0));
    }
    c.cone(NonnegativeConeT(2 * p), abs_rows);
    if form == Form::Soc {
        // (s + 1, s − 1, 2r) ∈ SOC ⇔ ‖r‖² ≤ s.
        let mut rows = vec![(vec![(s_idx, -1.0)], 1.0), (vec![(s_idx, -1.0)], -1.0)];
        rows.extend((0..n).map(|i| (vec![(r0 + i, -2.0)], 0.0)));
        c.cone(SecondOrderConeT(n + 2), rows);
    }
    c.solve()
}

/// ℓ1-logistic regression (weights w, ℓ2 coefficient l2) solved with exponential cones.
fn conic_logistic(
    x: &Array2<f64>,
    y: &[f64],
    intercept: bool,
    lambda: f64,
    w: &[f64],
    l2: f64,
) -> (f64, Vec<f64>) {
    let (n, p) = x.dim();
    let nf = n as f64;
    let ib = p;
    let t0 = p + usize::from(intercept);
    let (u0, v0, s0) = (t0 + n, t0 + 2 * n, t0 + 3 * n);
    let mut c = Conic::new(s0 + p);
    for j in 0..p {
        c.p_diag[j] = l2;
        c.q[s0 + j] = lambda * w[j];
        c.q[j] = -(0..n).map(|i| y[i] * x[[i, j]]).sum::<f64>() / nf;
    }
    if intercept {
        c.q[ib] = -y.iter().sum::<f64>() / nf;
    }
    for i in 0..n {
        c.q[t0 + i] = 1.0 / nf;
        // s = b − Ax: (−t_i, 1, u_i) ∈ K_exp.
        c.cone(
            ExponentialConeT(),
            vec![
                (vec![(t0 + i, 1.0)], 0.0),
                (vec![], 1.0),
                (vec![(u0 + i, -1.0)], 0.0),
            ],
        );
        // (η_i − t_i, 1, v_i) ∈ K_exp, η_i = x_iᵀb + b₀.
        let mut first: Vec<(usize, f64)> = (0..p).map(|j| (j, -x[[i, j]])).collect();
        if intercept {
            first.push((ib, -1.0));
        }
        first.push((t0 + i, 1.0));
        c.cone(
            ExponentialConeT(),
            vec![(first, 0.0), (vec![], 1.0), (vec![(v0 + i, -1.0)], 0.0)],
        );
    }
    // u_i + v_i ≤ 1, and |b_j| ≤ s_j.
    let mut rows: Vec<(Vec<(usize, f64)>, f64)> = (0..n)
        .map(|i| (vec![(u0 + i, 1.0), (v0 + i, 1.0)], 1.0))
        .collect();
    for j in 0..p {
        rows.push((vec![(j, 1.0), (s0 + j, -1.0)], 0.0));
        rows.push((vec![(j, -1.0), (s0 + j, -1.0)], 0.0));
    }
    c.cone(NonnegativeConeT(n + 2 * p), rows);
    c.solve()
}

/// Compares our solution with the conic one: objectives within 1e-6 relative, and the
/// conic point (evaluated with our objective) no better than ours beyond rounding. Checked
/// for the default inner loop (adaptive over-relaxation) and for fixed relaxation factors
/// 1 (plain coordinate descent) and 1.7.
fn compare(loss: &dyn Loss, pen: &Penalty, p: usize, conic: (f64, Vec<f64>), label: &str) -> f64 {
    let mut worst = 0.0f64;
    for relaxation in [None, Some(1.0), Some(1.7)] {
        let mut solver = NewtonCd::default();
        solver.cd.relaxation = relaxation;
        let label = format!("{label} (relaxation {relaxation:?})");
        worst = worst.max(compare_one(&solver, loss, pen, p, &conic, &label));
    }
    worst
}

fn compare_one(
    solver: &NewtonCd,
    loss: &dyn Loss,
    pen: &Penalty,
    p: usize,
    conic: &(f64, Vec<f64>),
    label: &str,
) -> f64 {
    let dim = loss.dim();
    let sol = solver.solve(loss, pen).unwrap();
    assert_eq!(sol.status, Status::Converged, "{label}");
    let (obj, point) = conic;
    let obj = *obj;
    let rel = (sol.objective - obj).abs() / obj.abs();
    assert!(
        rel <= 1e-6,
        "{label}: ours {} vs conic {obj} (rel {rel:e})",
        sol.objective
    );
    // Our objective at the conic solver's (feasible, slightly inexact) point.
    let b = &point[..dim];
    // Only the p feature coefficients are penalised (the intercept, last, is not).
    let l1: f64 = (0..p)
        .map(|k| pen.lambda() * pen.weight(k) * b[k].abs() + 0.5 * pen.l2() * b[k] * b[k])
        .sum();
    let f_conic = loss.value(b).unwrap() + l1;
    assert!(
        f_conic >= sol.objective - 1e-9 * sol.objective.abs(),
        "{label}: conic point {f_conic} beats ours {}",
        sol.objective
    );
    rel
}

fn weights(p: usize, seed: u64) -> Vec<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    (0..p)
        .map(|j| {
            if j == 1 {
                0.0
            } else {
                rng.random_range(0.3..2.0)
            }
        })
        .collect()
}

#[test]
fn lasso_matches_conic_solver() {
    let (n, p) = (30, 10);
    let mut worst = 0.0f64;
    for seed in 0..4u64 {
        let (x, y) = problem(n, p, seed, false);
        let form = if seed % 2 == 0 { Form::Qp } else { Form::Soc };
        for intercept in [false, true] {
            let loss = LeastSquares::from_dense(x.view(), &y, intercept).unwrap();
            let lmax = lambda_max(&x, &y, intercept, false);
            for frac in [0.05, 0.3, 0.8] {
                let lambda = frac * lmax;
                let conic = conic_lasso(&x, &y, intercept, lambda, &vec![1.0; p], 0.0, form);
                let pen = Penalty::l1(lambda)
                    .unwrap()
                    .with_weights(vec![1.0; p])
                    .unwrap();
                let pen = with_intercept_weight(pen, p, intercept);
                let label = format!("lasso seed {seed} intercept {intercept} λ/λmax {frac}");
                worst = worst.max(compare(&loss, &pen, p, conic, &label));
            }
        }
    }
    println!("lasso: worst relative objective difference {worst:.2e}");
}

/// Weights are given per coordinate of the loss; with an intercept the last weight is
/// irrelevant (its structural factor is 0), set it to 1.
fn with_intercept_weight(pen: Penalty, p: usize, intercept: bool) -> Penalty {
    let mut w = pen.weights().unwrap().to_vec();
    w.truncate(p);
    if intercept {
        w.push(1.0);
    }
    pen.with_weights(w).unwrap()
}

#[test]
fn weighted_elastic_net_matches_conic_solver() {
    let (n, p) = (30, 10);
    let mut worst = 0.0f64;
    for seed in 10..14u64 {
        let (x, y) = problem(n, p, seed, false);
        let w = weights(p, seed);
        let form = if seed % 2 == 0 { Form::Soc } else { Form::Qp };
        for (intercept, l2) in [(true, 0.0), (true, 0.7), (false, 0.3)] {
            let loss = LeastSquares::from_dense(x.view(), &y, intercept).unwrap();
            let lambda = 0.2 * lambda_max(&x, &y, intercept, false);
            let conic = conic_lasso(&x, &y, intercept, lambda, &w, l2, form);
            let pen = Penalty::l1(lambda)
                .unwrap()
                .with_weights(w.clone())
                .unwrap()
                .with_l2(l2)
                .unwrap();
            let pen = with_intercept_weight(pen, p, intercept);
            let label = format!("weighted seed {seed} intercept {intercept} l2 {l2}");
            worst = worst.max(compare(&loss, &pen, p, conic, &label));
        }
    }
    println!("weighted/elastic net: worst relative objective difference {worst:.2e}");
}

#[test]
fn l1_logistic_matches_conic_solver() {
    let (n, p) = (30, 10);
    let mut worst = 0.0f64;
    for seed in 20..24u64 {
        let (x, y) = problem(n, p, seed, true);
        for intercept in [true, false] {
            let loss = Logistic::from_dense(x.view(), &y, intercept).unwrap();
            let lmax = lambda_max(&x, &y, intercept, true);
            for frac in [0.1, 0.5] {
                let lambda = frac * lmax;
                let conic = conic_logistic(&x, &y, intercept, lambda, &vec![1.0; p], 0.0);
                let pen = Penalty::l1(lambda)
                    .unwrap()
                    .with_weights(vec![1.0; p])
                    .unwrap();
                let pen = with_intercept_weight(pen, p, intercept);
                let label = format!("logistic seed {seed} intercept {intercept} λ/λmax {frac}");
                worst = worst.max(compare(&loss, &pen, p, conic, &label));
            }
        }
    }
    println!("logistic: worst relative objective difference {worst:.2e}");
}

#[test]
fn weighted_elastic_net_logistic_matches_conic_solver() {
    let (n, p) = (30, 10);
    let mut worst = 0.0f64;
    for seed in 30..33u64 {
        let (x, y) = problem(n, p, seed, true);
        let w = weights(p, seed);
        for l2 in [0.0, 0.2] {
            let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
            let lambda = 0.3 * lambda_max(&x, &y, true, true);
            let conic = conic_logistic(&x, &y, true, lambda, &w, l2);
            let pen = Penalty::l1(lambda)
                .unwrap()
                .with_weights(w.clone())
                .unwrap()
                .with_l2(l2)
                .unwrap();
            let pen = with_intercept_weight(pen, p, true);
            let label = format!("weighted logistic seed {seed} l2 {l2}");
            worst = worst.max(compare(&loss, &pen, p, conic, &label));
        }
    }
    println!("weighted logistic: worst relative objective difference {worst:.2e}");
}
