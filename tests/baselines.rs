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
