//! The observer can stop every solver at any outer iteration, and time limits are honoured
//! within one outer iteration. For every solver (Newton-CD and the baselines FISTA, ADMM,
//! OWL-QN), every loss with a reference solution in tests/data, and every k in 0..5, an
//! observer stops the run at iteration k; the returned iterate must be
//!
//! * reported honestly: status `StoppedByObserver` (or `Converged` if the run converged at
//!   or before iteration k, since convergence is checked first), with `iterations == k`;
//! * valid: finite, inside the loss's domain, with the objective and KKT residual that
//!   `certify` computes at that very point;
//! * no better than the optimum: F(x) ≥ F* − 1e-9·max(1, |F*|), where F* is the reference
//!   optimal objective in tests/data (cvxpy + Clarabel, polished; see tests/data/README.md),
//!   and no worse than the best objective the observer was shown (the best iterate is
//!   returned).

mod common;

use common::*;
use ellone::crf::{Alternating, CrfData, CrfLoss, InputMode};
use ellone::loss::precision::LogDet;
use ellone::penalty::ResolvedPenalty;
use ellone::solver::{
    certify, Admm, Control, Fista, NewtonCd, Observer, Owlqn, Solution, Solver, SolverOptions,
    Status, TraceRecord,
};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use std::time::Duration;

fn options() -> SolverOptions {
    SolverOptions {
        tol: 1e-12,
        max_iter: 500,
        time_limit: Some(Duration::from_secs(30)),
        ..Default::default()
    }
}

fn solvers(opts: SolverOptions) -> Vec<Box<dyn Solver>> {
    vec![
        Box::new(NewtonCd::new(opts.clone())),
        Box::new(Fista::new(opts.clone())),
        Box::new(Admm::new(opts.clone())),
        Box::new(Owlqn::new(opts)),
    ]
}

/// Least squares on the standardised macrodata design at the reference λ = 0.06692
/// (tests/data/macrodata-lasso-solutions.csv, row 2), with its optimal objective.
fn macrodata_lasso() -> (LeastSquares, Penalty, f64) {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let y: Vec<f64> = y.column(0).to_vec();
    let (header, sols) = read_numeric_table("macrodata-lasso-solutions.csv");
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let row = 1;
    let lambda = sols[[row, col("lambda")]];
    let f_star = sols[[row, col("optimal_objective")]];
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    (loss, Penalty::l1(lambda).unwrap(), f_star)
}

/// Logistic regression on the Spector data (tests/data/spector.csv) with λ = 0: the
/// unpenalised MLE, whose log-likelihood −12.8896342221314 is in spector-logit-mle.csv.
/// The objective is −loglik / n with n = 32.
fn spector_logit() -> (Logistic, Penalty, f64) {
    let (header, data) = read_numeric_table("spector.csv");
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let x = ndarray::Array2::from_shape_fn((data.nrows(), 3), |(i, j)| {
        data[[i, col(["gpa", "tuce", "psi"][j])]]
    });
    let y: Vec<f64> = data.column(col("grade")).to_vec();
    let (mh, mle) = read_table("spector-logit-mle.csv");
    let value = mh.iter().position(|h| h == "value").unwrap();
    let loglik: f64 = mle.iter().find(|r| r[0] == "loglik").unwrap()[value]
        .parse()
        .unwrap();
    let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
    (
        loss,
        Penalty::l1(0.0).unwrap(),
        -loglik / data.nrows() as f64,
    )
}

/// Sparse precision for the macrodata correlation matrix at λ = 0.2
/// (tests/data/macrodata-precision-objectives.csv).
fn macrodata_precision() -> (LogDet, Penalty, f64) {
    let s = read_matrix("macrodata-corr.csv");
    let (header, rows) = read_table("macrodata-precision-objectives.csv");
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let row = rows
        .iter()
        .find(|r| r[col("lambda")].parse::<f64>().unwrap() == 0.2)
        .unwrap();
    let f_star: f64 = row[col("optimal_objective")].parse().unwrap();
    let loss = LogDet::new(s.view(), false).unwrap();
    (loss, Penalty::l1(0.2).unwrap(), f_star)
}

/// The Gaussian CRF with one output on NIST Longley (tests/data/longley.csv): inputs the
/// six regressors and a constant column, λ = 0. Minimising over Θ and then Λ in closed form
/// gives the optimum log(RSS/n) + 1, with RSS the certified residual sum of squares
/// (tests/data/longley-certified.csv).
fn longley_crf() -> (CrfLoss, Penalty, f64) {
    let (header, data) = read_numeric_table("longley.csv");
    let n = data.nrows();
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    let x = ndarray::Array2::from_shape_fn((n, 7), |(i, j)| {
        if j == 6 {
            1.0
        } else {
            data[[i, col(&format!("x{}", j + 1))]]
        }
    });
    let y = ndarray::Array2::from_shape_fn((n, 1), |(i, _)| data[[i, col("y")]]);
    let (ch, cert) = read_table("longley-certified.csv");
    let value = ch.iter().position(|h| h == "value").unwrap();
    let rss: f64 = cert.iter().find(|r| r[0] == "residual_ss").unwrap()[value]
        .parse()
        .unwrap();
    let data = CrfData::new(x.view(), y.view(), false, false, InputMode::Auto).unwrap();
    let loss = CrfLoss::new(data, 0.0, 0.0).unwrap();
    (loss, Penalty::l1(1.0).unwrap(), (rss / n as f64).ln() + 1.0)
}

/// Runs `solver` with an observer that stops at iteration `k`; returns the solution and the
/// records the observer saw.
fn stop_at(
    solver: &dyn Solver,
    loss: &dyn Loss,
    pen: &Penalty,
    k: usize,
) -> (Solution, Vec<TraceRecord>) {
    let mut seen = Vec::new();
    let mut observer = |r: &TraceRecord| {
        seen.push(r.clone());
        if r.iteration >= k {
            Control::Stop
        } else {
            Control::Continue
        }
    };
    let sol = solver
        .solve_observed(loss, pen, None, Some(&mut observer))
        .unwrap();
    (sol, seen)
}

/// The checks listed in the module docs.
fn check_stopped(
    tag: &str,
    loss: &dyn Loss,
    pen: &Penalty,
    f_star: f64,
    k: usize,
    sol: &Solution,
    seen: &[TraceRecord],
) {
    match sol.status {
        Status::StoppedByObserver => {
            assert_eq!(sol.iterations, k, "{tag}: stopped at the wrong iteration");
            assert_eq!(seen.last().unwrap().iteration, k, "{tag}");
        }
        Status::Converged => assert!(sol.iterations <= k, "{tag}: {:?}", sol.status),
        other => panic!("{tag}: status {other:?} after a stop request at {k}"),
    }
    // The observer saw iterations 0, 1, …, in order, and nothing after the stop.
    for (i, r) in seen.iter().enumerate() {
        assert_eq!(r.iteration, i, "{tag}: observer records out of order");
    }
    assert!(sol.x.iter().all(|v| v.is_finite()), "{tag}: non-finite x");
    let resolved = ResolvedPenalty::new(pen, loss.dim(), |j| loss.structural_factor(j)).unwrap();
    let (f, kkt, _) = certify(loss, &resolved, &sol.x).expect("iterate inside the domain");
    let tol = 1e-9 * f.abs().max(1.0);
    assert!(
        (f - sol.objective).abs() <= tol,
        "{tag}: reported objective {} but F(x) = {f}",
        sol.objective
    );
    assert!(
        (kkt - sol.kkt_residual).abs() <= 1e-9 * kkt.max(1.0),
        "{tag}: reported KKT residual {} but {kkt} at x",
        sol.kkt_residual
    );
    assert!(
        sol.objective >= f_star - 1e-9 * f_star.abs().max(1.0),
        "{tag}: objective {} below the reference optimum {f_star}",
        sol.objective
    );
    let best_seen = seen
        .iter()
        .map(|r| r.objective)
        .fold(f64::INFINITY, f64::min);
    assert!(
        sol.objective <= best_seen + 1e-12 * best_seen.abs().max(1.0),
        "{tag}: returned objective {} worse than the best seen {best_seen}",
        sol.objective
    );
}

fn stop_every_solver_at_every_k(name: &str, loss: &dyn Loss, pen: &Penalty, f_star: f64) {
    for solver in solvers(options()) {
        for k in 0..5 {
            let (sol, seen) = stop_at(solver.as_ref(), loss, pen, k);
            let tag = format!("{name} / {} / stop at {k}", solver.name());
            check_stopped(&tag, loss, pen, f_star, k, &sol, &seen);
        }
    }
}

#[test]
fn observer_stops_least_squares() {
    let (loss, pen, f_star) = macrodata_lasso();
    stop_every_solver_at_every_k("macrodata lasso", &loss, &pen, f_star);
}

#[test]
fn observer_stops_logistic() {
    let (loss, pen, f_star) = spector_logit();
    stop_every_solver_at_every_k("spector logit", &loss, &pen, f_star);
}

#[test]
fn observer_stops_precision() {
    let (loss, pen, f_star) = macrodata_precision();
    stop_every_solver_at_every_k("macrodata precision", &loss, &pen, f_star);
}

/// A time limit already used up when the first record is checked stops every solver after
/// iteration 0 (within one outer iteration) with `TimeLimit` and a valid iterate. The
/// assertion is on iteration counts, never on elapsed time.
#[test]
fn time_limit_honoured_within_one_outer_iteration() {
    let opts = SolverOptions {
        time_limit: Some(Duration::from_nanos(1)),
        ..options()
    };
    let (ls, ls_pen, ls_star) = macrodata_lasso();
    let (lg, lg_pen, lg_star) = spector_logit();
    let (pr, pr_pen, pr_star) = macrodata_precision();
    let (cr, cr_pen, cr_star) = longley_crf();
    let problems: [(&str, &dyn Loss, &Penalty, f64); 4] = [
        ("macrodata lasso", &ls, &ls_pen, ls_star),
        ("spector logit", &lg, &lg_pen, lg_star),
        ("macrodata precision", &pr, &pr_pen, pr_star),
        ("longley crf", &cr, &cr_pen, cr_star),
    ];
    for (name, loss, pen, f_star) in problems {
        for solver in solvers(opts.clone()) {
            let mut seen = Vec::new();
            let mut observer = |r: &TraceRecord| {
                seen.push(r.clone());
                Control::Continue
            };
            let sol = solver
                .solve_observed(loss, pen, None, Some(&mut observer))
                .unwrap();
            let tag = format!("{name} / {} / time limit", solver.name());
            assert_eq!(sol.status, Status::TimeLimit, "{tag}");
            assert!(sol.iterations <= 1, "{tag}: {} iterations", sol.iterations);
            assert!(seen.len() <= 2, "{tag}");
            let resolved =
                ResolvedPenalty::new(pen, loss.dim(), |j| loss.structural_factor(j)).unwrap();
            let (f, _, _) = certify(loss, &resolved, &sol.x).expect("valid iterate");
            assert!(
                (f - sol.objective).abs() <= 1e-9 * f.abs().max(1.0),
                "{tag}"
            );
            assert!(
                sol.objective >= f_star - 1e-9 * f_star.abs().max(1.0),
                "{tag}"
            );
        }
    }
}

/// An iteration limit of k stops at iteration k with `IterationLimit` (or earlier with
/// `Converged`), for every solver.
#[test]
fn iteration_limit_is_exact() {
    let (loss, pen, f_star) = macrodata_lasso();
    for k in 0..5 {
        let opts = SolverOptions {
            max_iter: k,
            ..options()
        };
        for solver in solvers(opts) {
            let sol = solver.solve(&loss, &pen).unwrap();
            let tag = format!("{} / max_iter {k}", solver.name());
            match sol.status {
                Status::IterationLimit => assert_eq!(sol.iterations, k, "{tag}"),
                Status::Converged => assert!(sol.iterations <= k, "{tag}"),
                other => panic!("{tag}: {other:?}"),
            }
            assert!(
                sol.objective >= f_star - 1e-9 * f_star.abs().max(1.0),
                "{tag}"
            );
        }
    }
}

#[test]
fn observer_stops_crf() {
    let (loss, pen, f_star) = longley_crf();
    stop_every_solver_at_every_k("longley crf", &loss, &pen, f_star);
    // The CRF's own alternating solver.
    let alternating = Alternating::new(options());
    for k in 0..5 {
        let mut seen = Vec::new();
        let mut observer = |r: &TraceRecord| {
            seen.push(r.clone());
            if r.iteration >= k {
                Control::Stop
            } else {
                Control::Continue
            }
        };
        let sol = alternating
            .solve(&loss, &pen, None, Some(&mut observer as &mut dyn Observer))
            .unwrap();
        let tag = format!("longley crf / alternating / stop at {k}");
        check_stopped(&tag, &loss, &pen, f_star, k, &sol, &seen);
    }
}
