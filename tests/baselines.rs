//! The baseline solvers (FISTA, proximal gradient, ADMM, OWL-QN) against outside references
//! and against each other: every solver must reach the same objective to 1e-6 relative.

mod common;

use common::*;
use ellone::solver::{Admm, Fista, NewtonCd, Owlqn, Solution, Solver, SolverOptions};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use rand::{rngs::StdRng, RngExt, SeedableRng};

/// Options for the baselines: a tight KKT tolerance and iteration limits large enough for
/// the first-order methods on the ill-conditioned fixtures (FISTA needs ~10⁵ iterations at
/// the smallest λ of both macrodata problems).
fn opts(max_iter: usize) -> SolverOptions {
    SolverOptions {
        tol: 1e-8,
        max_iter,
        ..Default::default()
    }
}

fn baselines() -> Vec<Box<dyn Solver>> {
    vec![
        Box::new(NewtonCd::new(opts(1000))),
        Box::new(Fista::new(opts(200_000))),
        Box::new(Admm::new(opts(50_000))),
        Box::new(Owlqn::new(opts(50_000))),
    ]
}

fn rel(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs().max(1.0)
}

fn report(tag: &str, sol: &Solution, reference: f64) {
    println!(
        "{tag}: {:>10} objective {:.15} rel {:.2e} kkt {:.2e} gap {:?} iters {} passes {} status {:?} {:.3}s",
        sol.solver,
        sol.objective,
        rel(sol.objective, reference),
        sol.kkt_residual,
        sol.duality_gap,
        sol.iterations,
        sol.inner,
        sol.status,
        sol.seconds
    );
}

/// The macrodata lasso fixtures (general-purpose conic solver, polished; tests/data/README.md):
/// every solver within 1e-6 relative of the reference objective.
#[test]
fn macrodata_lasso_all_solvers() {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let y: Vec<f64> = y.column(0).to_vec();
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    let (_, sols) = read_numeric_table("macrodata-lasso-solutions.csv");
    for row in sols.rows() {
        let (lambda, reference) = (row[1], row[2]);
        for solver in baselines() {
            let sol = solver.solve(&loss, &Penalty::l1(lambda).unwrap()).unwrap();
            report(&format!("λ={lambda}"), &sol, reference);
            assert!(rel(sol.objective, reference) <= 1e-6, "{}", sol.solver);
        }
    }
    let _ = loss.dim();
}

fn random_design(rng: &mut StdRng, n: usize, p: usize) -> ndarray::Array2<f64> {
    ndarray::Array2::from_shape_fn((n, p), |_| rng.random::<f64>() * 2.0 - 1.0)
}

/// Random logistic instances: all solvers agree with one another to 1e-6 relative, and each
/// is certified by the Fenchel duality gap (textbook duality: F(x) − F* ≤ gap).
#[test]
fn random_logistic_all_solvers() {
    let mut rng = StdRng::seed_from_u64(7);
    for &(n, p) in &[(80usize, 30usize), (60, 120)] {
        let x = random_design(&mut rng, n, p);
        let y: Vec<f64> = (0..n)
            .map(|i| {
                f64::from(x[[i, 0]] + 0.5 * x[[i, 1]] + 0.3 * (rng.random::<f64>() - 0.5) > 0.0)
            })
            .collect();
        let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
        let lambda = 0.05;
        let sols: Vec<Solution> = baselines()
            .iter()
            .map(|s| s.solve(&loss, &Penalty::l1(lambda).unwrap()).unwrap())
            .collect();
        let best = sols
            .iter()
            .map(|s| s.objective)
            .fold(f64::INFINITY, f64::min);
        for sol in &sols {
            report(&format!("logistic {n}x{p}"), sol, best);
            assert!(rel(sol.objective, best) <= 1e-6, "{}", sol.solver);
        }
    }
}

/// The macrodata precision fixtures (−log det Θ + tr(SΘ) + λΣ_{i≠j}|Θ_ij| on the 12 × 12
/// correlation matrix, solved by a general-purpose conic solver and polished; see
/// tests/data/README.md): every solver within 1e-6 relative of the reference objective.
#[test]
fn macrodata_precision_all_solvers() {
    let s = read_matrix("macrodata-corr.csv");
    let loss = ellone::loss::precision::LogDet::new(s.view(), false).unwrap();
    let (_, refs) = read_table("macrodata-precision-objectives.csv");
    for row in refs {
        let (lambda, reference): (f64, f64) = (row[0].parse().unwrap(), row[1].parse().unwrap());
        for solver in baselines() {
            let sol = solver.solve(&loss, &Penalty::l1(lambda).unwrap()).unwrap();
            report(&format!("precision λ={lambda}"), &sol, reference);
            assert!(rel(sol.objective, reference) <= 1e-6, "{}", sol.solver);
        }
    }
}

/// Random least-squares instances, including p > n (ADMM's Woodbury branch) and an
/// elastic-net term (the prox of λ|·| + (λ₂/2)(·)²): all solvers agree to 1e-6 relative,
/// and the best point is certified by the Fenchel duality gap of the (augmented) lasso.
#[test]
fn random_least_squares_all_solvers() {
    let mut rng = StdRng::seed_from_u64(3);
    for &(n, p, l2) in &[(100usize, 40usize, 0.0), (50, 150, 0.0), (80, 60, 0.3)] {
        let x = random_design(&mut rng, n, p);
        let y: Vec<f64> = (0..n)
            .map(|i| 2.0 * x[[i, 0]] - x[[i, 2]] + 0.1 * (rng.random::<f64>() - 0.5))
            .collect();
        let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
        let pen = Penalty::l1(0.02).unwrap().with_l2(l2).unwrap();
        // ADMM once more with its inner Newton x-update instead of the closed form (the
        // path large sparse designs take).
        let mut newton_admm = Admm::new(opts(50_000));
        newton_admm.admm.closed_form = false;
        let mut solvers = baselines();
        solvers.push(Box::new(newton_admm));
        let sols: Vec<Solution> = solvers
            .iter()
            .map(|s| s.solve(&loss, &pen).unwrap())
            .collect();
        let best = sols
            .iter()
            .map(|s| s.objective)
            .fold(f64::INFINITY, f64::min);
        for sol in &sols {
            report(&format!("least squares {n}x{p} l2={l2}"), sol, best);
            assert!(rel(sol.objective, best) <= 1e-6, "{}", sol.solver);
        }
        let certified = sols
            .iter()
            .filter_map(|s| s.duality_gap)
            .fold(f64::INFINITY, f64::min);
        assert!(certified <= 1e-8 * best.abs().max(1.0), "gap {certified}");
    }
}

/// A random precision problem (S from 40 draws of 15 correlated variables): all solvers
/// agree to 1e-6 relative and the duality gap of the log-det problem certifies the best.
#[test]
fn random_precision_all_solvers() {
    let mut rng = StdRng::seed_from_u64(5);
    let (n, p) = (40usize, 15usize);
    let mut z = random_design(&mut rng, n, p);
    for i in 0..n {
        for j in 1..p {
            z[[i, j]] += 0.6 * z[[i, j - 1]];
        }
    }
    let s = z.t().dot(&z) / n as f64;
    let loss = ellone::loss::precision::LogDet::new(s.view(), false).unwrap();
    let pen = Penalty::l1(0.1).unwrap();
    let sols: Vec<Solution> = baselines()
        .iter()
        .map(|s| s.solve(&loss, &pen).unwrap())
        .collect();
    let best = sols
        .iter()
        .map(|s| s.objective)
        .fold(f64::INFINITY, f64::min);
    for sol in &sols {
        report("precision 15", sol, best);
        assert!(rel(sol.objective, best) <= 1e-6, "{}", sol.solver);
    }
    let certified = sols
        .iter()
        .filter_map(|s| s.duality_gap)
        .fold(f64::INFINITY, f64::min);
    assert!(certified <= 1e-8 * best.abs().max(1.0), "gap {certified}");
}

/// Bad tuning is a typed error, not a panic.
#[test]
fn invalid_tuning_is_a_typed_error() {
    let x = ndarray::array![[1.0, 0.0], [0.0, 1.0], [1.0, 1.0]];
    let loss = LeastSquares::from_dense(x.view(), &[1.0, 2.0, 3.0], false).unwrap();
    let pen = Penalty::l1(0.1).unwrap();
    let mut f = Fista::default();
    f.fista.backtrack = 1.0;
    assert!(matches!(
        f.solve(&loss, &pen),
        Err(ellone::Error::InvalidArgument(_))
    ));
    let mut a = Admm::default();
    a.admm.rho = Some(-1.0);
    assert!(matches!(
        a.solve(&loss, &pen),
        Err(ellone::Error::InvalidArgument(_))
    ));
    let mut o = Owlqn::default();
    o.owlqn.memory = 0;
    assert!(matches!(
        o.solve(&loss, &pen),
        Err(ellone::Error::InvalidArgument(_))
    ));
    // A start of the wrong length is rejected by every baseline.
    for s in baselines() {
        let r = s.solve_observed(&loss, &pen, Some(&[0.0]), None);
        assert!(
            matches!(r, Err(ellone::Error::ShapeMismatch { .. })),
            "{}",
            s.name()
        );
    }
}

/// A Gaussian CRF on macrodata (inputs: the first 6 standardised columns of the lasso
/// design; outputs: the last 5), where no closed form exists: all solvers agree to 1e-6
/// relative, and the best point's KKT residual is small (first-order optimality of the
/// convex objective, checked through the shared certificate).
#[test]
fn macrodata_crf_all_solvers() {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let inputs = x.slice(ndarray::s![.., 0..6]).to_owned();
    let outputs = x.slice(ndarray::s![.., 6..11]).to_owned();
    let data = ellone::crf::CrfData::new(
        inputs.view(),
        outputs.view(),
        true,
        false,
        ellone::crf::InputMode::Auto,
    )
    .unwrap();
    let loss = ellone::crf::CrfLoss::new(data, 0.1, 0.05).unwrap();
    // The loss carries both penalty levels in its structural factors: λ = 1.
    let pen = Penalty::l1(1.0).unwrap();
    // The default relative KKT tolerance (1e-7) keeps the first-order methods short here.
    let o = |max_iter| SolverOptions {
        max_iter,
        ..Default::default()
    };
    let solvers: Vec<Box<dyn Solver>> = vec![
        Box::new(NewtonCd::new(opts(1000))),
        Box::new(Fista::new(o(200_000))),
        Box::new(Admm::new(o(50_000))),
        Box::new(Owlqn::new(o(50_000))),
    ];
    let sols: Vec<Solution> = solvers
        .iter()
        .map(|s| s.solve(&loss, &pen).unwrap())
        .collect();
    let best = sols
        .iter()
        .map(|s| s.objective)
        .fold(f64::INFINITY, f64::min);
    for sol in &sols {
        report("crf macrodata", sol, best);
        assert!(rel(sol.objective, best) <= 1e-6, "{}", sol.solver);
    }
    let kkt = sols
        .iter()
        .map(|s| s.kkt_residual)
        .fold(f64::INFINITY, f64::min);
    assert!(kkt <= 1e-7, "best KKT residual {kkt}");
}
