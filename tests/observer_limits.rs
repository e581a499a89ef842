//! Observer, iteration and time limits, and the trace: non-convergence is an honest status
//! with a valid iterate (finite objective, consistent with the loss), never an error.
//!
//! Checks are against the definitions in DESIGN.md (the objective F = f + P and its
//! monotone decrease under Armijo steps, "A coordinate gradient descent method for nonsmooth
//! separable minimization", Mathematical Programming, 2009), recomputed here from the loss.

use ellone::solver::{Control, NewtonCd, Solver, SolverOptions, Status, TraceRecord};
use ellone::{LeastSquares, Logistic, Loss, Penalty, Solution};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::StandardNormal;
use std::time::Duration;

/// A logistic problem that needs several Newton iterations (n = 200, p = 40, small λ).
fn logistic() -> (Logistic, Penalty) {
    let (n, p) = (200, 40);
    let mut rng = StdRng::seed_from_u64(5);
    let x = Array2::from_shape_fn((n, p), |_| rng.sample::<f64, _>(StandardNormal));
    let y: Vec<f64> = (0..n)
        .map(|i| {
            let eta = 0.5 + 2.0 * x[[i, 0]] - 1.5 * x[[i, 1]] + x[[i, 2]];
            f64::from(rng.random::<f64>() < 1.0 / (1.0 + (-eta).exp()))
        })
        .collect();
    let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
    (loss, Penalty::l1(0.005).unwrap())
}

fn least_squares() -> (LeastSquares, Penalty) {
    let (n, p) = (100, 30);
    let mut rng = StdRng::seed_from_u64(6);
    let x = Array2::from_shape_fn((n, p), |(i, j)| {
        // Correlated columns so coordinate descent needs more than one pass.
        let common = ((i * 7 + 3) % 11) as f64 / 11.0;
        common + 0.3 * rng.sample::<f64, _>(StandardNormal) + 0.01 * j as f64
    });
    let y: Vec<f64> = (0..n)
        .map(|i| x[[i, 0]] - 2.0 * x[[i, 4]] + rng.sample::<f64, _>(StandardNormal))
        .collect();
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    (loss, Penalty::l1(0.01).unwrap())
}

/// F(x) = f(x) + λΣ|b_j| recomputed from the loss (intercept, the last coordinate, free).
fn objective(loss: &dyn Loss, pen: &Penalty, x: &[f64], intercept: bool) -> f64 {
    let p = x.len() - usize::from(intercept);
    loss.value(x).unwrap() + pen.lambda() * x[..p].iter().map(|v| v.abs()).sum::<f64>()
}

/// The returned iterate is usable: finite, in the domain, and its reported objective is F(x).
fn assert_valid(loss: &dyn Loss, pen: &Penalty, sol: &Solution) {
    assert_eq!(sol.x.len(), loss.dim());
    assert!(sol.x.iter().all(|v| v.is_finite()));
    assert!(sol.objective.is_finite() && sol.kkt_residual.is_finite());
    let f = objective(loss, pen, &sol.x, true);
    assert!(
        (f - sol.objective).abs() <= 1e-12 * f.abs().max(1.0),
        "reported {} vs recomputed {f}",
        sol.objective
    );
}

fn tight() -> NewtonCd {
    NewtonCd::new(SolverOptions {
        tol: 1e-10,
        ..Default::default()
    })
}

#[test]
fn observer_stop_at_iteration_two() {
    let (loss, pen) = logistic();
    let mut seen: Vec<usize> = Vec::new();
    let mut observer = |r: &TraceRecord| {
        seen.push(r.iteration);
        if r.iteration == 2 {
            Control::Stop
        } else {
            Control::Continue
        }
    };
    let sol = tight()
        .solve_observed(&loss, &pen, None, Some(&mut observer))
        .unwrap();
    assert_eq!(sol.status, Status::StoppedByObserver);
    assert_eq!(sol.iterations, 2);
    assert_eq!(seen, vec![0, 1, 2]);
    assert_valid(&loss, &pen, &sol);
    let start = objective(&loss, &pen, &loss.start(), true);
    assert!(
        sol.objective < start,
        "no progress: {} vs {start}",
        sol.objective
    );
    // The run was genuinely stopped early: a full solve goes further.
    let full = tight().solve(&loss, &pen).unwrap();
    assert_eq!(full.status, Status::Converged);
    assert!(full.iterations > 2 && full.objective < sol.objective);
}

#[test]
fn observer_stop_at_the_start_returns_the_start() {
    let (loss, pen) = least_squares();
    let mut observer = |_: &TraceRecord| Control::Stop;
    let sol = tight()
        .solve_observed(&loss, &pen, None, Some(&mut observer))
        .unwrap();
    assert_eq!(sol.status, Status::StoppedByObserver);
    assert_eq!(sol.iterations, 0);
    assert_eq!(sol.x, loss.start());
    assert_valid(&loss, &pen, &sol);
}

#[test]
fn one_iteration_limit() {
    let (loss, pen) = logistic();
    let solver = NewtonCd::new(SolverOptions {
        max_iter: 1,
        ..Default::default()
    });
    let sol = solver.solve(&loss, &pen).unwrap();
    assert_eq!(sol.status, Status::IterationLimit);
    assert_eq!(sol.iterations, 1);
    assert!(!sol.converged());
    assert_valid(&loss, &pen, &sol);
    assert!(sol.objective < objective(&loss, &pen, &loss.start(), true));
}

#[test]
fn zero_time_limit() {
    let (loss, pen) = logistic();
    let solver = NewtonCd::new(SolverOptions {
        time_limit: Some(Duration::ZERO),
        ..Default::default()
    });
    let sol = solver.solve(&loss, &pen).unwrap();
    assert_eq!(sol.status, Status::TimeLimit);
    assert_eq!(sol.iterations, 0);
    assert_valid(&loss, &pen, &sol);
}

/// Solves with a trace at tolerance `tol`; objectives must not increase by more than
/// `slack`·|F| between records (0 = strictly monotone).
fn check_trace(loss: &dyn Loss, pen: &Penalty, tol: f64, slack: f64, label: &str) {
    let solver = NewtonCd::new(SolverOptions {
        tol,
        trace: true,
        trace_gap: true,
        ..Default::default()
    });
    let sol = solver.solve(loss, pen).unwrap();
    assert_eq!(sol.status, Status::Converged, "{label}");
    let t = &sol.trace;
    assert_eq!(
        t.len(),
        sol.iterations + 1,
        "{label}: one record per iteration"
    );
    for (k, r) in t.iter().enumerate() {
        assert_eq!(r.iteration, k);
        assert!(r.objective.is_finite() && r.kkt_residual >= 0.0);
        // Weak duality: the gap is never negative (beyond rounding).
        let gap = r.duality_gap.expect("gap requested");
        assert!(
            gap >= -1e-12 * r.objective.abs().max(1.0),
            "{label}: gap {gap}"
        );
    }
    for w in t.windows(2) {
        assert!(
            w[1].objective <= w[0].objective + slack * w[0].objective.abs(),
            "{label}: objective rose from {} to {} at iteration {}",
            w[0].objective,
            w[1].objective,
            w[1].iteration
        );
        assert!(w[1].seconds >= w[0].seconds && w[1].inner >= w[0].inner);
    }
    let last = t.last().unwrap();
    assert_eq!(last.objective, sol.objective);
    assert_eq!(last.kkt_residual, sol.kkt_residual);
    println!(
        "{label}: {} iterations, {} inner sweeps, objective {} → {}",
        sol.iterations, sol.inner, t[0].objective, last.objective
    );
}

#[test]
fn trace_is_monotone_logistic() {
    let (loss, pen) = logistic();
    check_trace(&loss, &pen, 1e-7, 0.0, "logistic");
}

#[test]
fn trace_is_monotone_least_squares() {
    let (loss, pen) = least_squares();
    check_trace(&loss, &pen, 1e-7, 0.0, "least squares");
}

/// At tolerances near the limit of floating point the driver takes full steps whose
/// predicted decrease is below the rounding noise of evaluating F (see the Newton-CD module
/// docs), so consecutive objectives may differ by that noise: a few units in the last place.
#[test]
fn trace_is_monotone_up_to_rounding_at_tight_tolerance() {
    let (loss, pen) = logistic();
    check_trace(
        &loss,
        &pen,
        1e-12,
        8.0 * f64::EPSILON,
        "logistic, tol 1e-12",
    );
    let (loss, pen) = least_squares();
    check_trace(
        &loss,
        &pen,
        1e-12,
        8.0 * f64::EPSILON,
        "least squares, tol 1e-12",
    );
}

#[test]
fn no_trace_unless_asked() {
    let (loss, pen) = least_squares();
    let sol = NewtonCd::default().solve(&loss, &pen).unwrap();
    assert!(sol.converged() && sol.trace.is_empty());
}
