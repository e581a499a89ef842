//! Robustness of the public API: random shapes and hostile values either give a typed error
//! or a result whose objective is finite and whose KKT residual is consistent with its
//! status; nothing panics and nothing hangs (iteration and time limits always apply).

use ellone::solver::{NewtonCd, Solver, SolverOptions, Status};
use ellone::{Error, LeastSquares, Logistic, Penalty, Solution};
use ndarray::Array2;
use proptest::prelude::*;
use std::time::Duration;

/// Values a service might receive: ordinary, zero, subnormal, tiny, huge, non-finite.
fn hostile_value() -> impl Strategy<Value = f64> {
    prop_oneof![
        6 => -10.0f64..10.0,
        1 => Just(0.0),
        1 => Just(f64::MIN_POSITIVE / 8.0),
        1 => Just(1e-300),
        1 => Just(1e150),
        1 => Just(-1e150),
        1 => Just(f64::NAN),
        1 => Just(f64::INFINITY),
    ]
}

fn lambda_value() -> impl Strategy<Value = f64> {
    prop_oneof![
        Just(0.0),
        Just(1e-12),
        0.0f64..2.0,
        Just(1e12),
        Just(-1.0),
        Just(f64::NAN),
    ]
}

fn solver() -> NewtonCd {
    NewtonCd::new(SolverOptions {
        max_iter: 200,
        time_limit: Some(Duration::from_secs(5)),
        ..Default::default()
    })
}

/// The contract every Ok result must meet.
fn check_solution(sol: &Solution) {
    assert!(sol.objective.is_finite(), "objective {}", sol.objective);
    assert!(sol.x.iter().all(|v| v.is_finite()), "non-finite iterate");
    if sol.status == Status::Converged {
        assert!(sol.kkt_residual.is_finite());
    }
}

/// The contract every Err must meet: one of the input-validation variants (a column whose
/// squares underflow, e.g. of 1e-300, is an `InvalidArgument`).
fn check_error(e: &Error) {
    assert!(
        matches!(
            e,
            Error::NonFinite { .. }
                | Error::ShapeMismatch { .. }
                | Error::Empty(_)
                | Error::InvalidLambda { .. }
                | Error::InvalidLabel { .. }
                | Error::ZeroColumn(_)
                | Error::InvalidArgument(_)
        ),
        "unexpected error kind: {e}"
    );
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 200, .. ProptestConfig::default() })]

    #[test]
    fn least_squares_never_panics(
        n in 0usize..8, p in 0usize..6,
        vals in proptest::collection::vec(hostile_value(), 64),
        lambda in lambda_value(), intercept in any::<bool>(), dup in any::<bool>(),
    ) {
        let mut x = Array2::from_shape_fn((n, p), |(i, j)| vals[(i * 7 + j) % 64]);
        if dup && p >= 2 {
            // duplicate and constant columns
            let c0 = x.column(0).to_owned();
            x.column_mut(1).assign(&c0);
        }
        let y: Vec<f64> = (0..n).map(|i| vals[(i * 3 + 5) % 64]).collect();
        let result = LeastSquares::from_dense(x.view(), &y, intercept)
            .and_then(|loss| Penalty::l1(lambda).map(|pen| (loss, pen)))
            .and_then(|(loss, pen)| solver().solve(&loss, &pen));
        match result {
            Ok(sol) => check_solution(&sol),
            Err(e) => check_error(&e),
        }
    }

    #[test]
    fn logistic_never_panics(
        n in 0usize..8, p in 0usize..6,
        vals in proptest::collection::vec(hostile_value(), 64),
        labels in proptest::collection::vec(prop_oneof![8 => Just(0.0), 8 => Just(1.0), 1 => Just(0.5), 1 => Just(f64::NAN)], 8),
        lambda in lambda_value(), intercept in any::<bool>(),
    ) {
        let x = Array2::from_shape_fn((n, p), |(i, j)| vals[(i * 7 + j) % 64]);
        let y: Vec<f64> = labels[..n].to_vec();
        let result = Logistic::from_dense(x.view(), &y, intercept)
            .and_then(|loss| Penalty::l1(lambda).map(|pen| (loss, pen)))
            .and_then(|(loss, pen)| solver().solve(&loss, &pen));
        match result {
            Ok(sol) => check_solution(&sol),
            Err(e) => check_error(&e),
        }
    }
}

/// One-row data: the lasso with intercept fits the single response exactly.
#[test]
fn one_row() {
    let x = Array2::from_shape_vec((1, 2), vec![1.0, 2.0]).unwrap();
    let loss = LeastSquares::from_dense(x.view(), &[3.0], true).unwrap();
    let sol = solver().solve(&loss, &Penalty::l1(0.1).unwrap()).unwrap();
    assert_eq!(sol.status, Status::Converged);
    // λ ≥ λ_max = 0 (centred response is 0), so b = 0 and b0 = y.
    let (b, b0) = loss.split(&sol.x);
    assert!(b.iter().all(|v| *v == 0.0));
    assert!((b0 - 3.0).abs() < 1e-12);
}

/// Nearly collinear columns (correlation 1 − 1e-10): the lasso solution is still certified
/// (KKT) or honestly reported as not converged, with a finite best iterate.
#[test]
fn nearly_collinear_columns() {
    let n = 50;
    let mut x = Array2::zeros((n, 3));
    for i in 0..n {
        let t = (i as f64 * 0.37).sin();
        let e = (i as f64 * 1.91).cos();
        x[[i, 0]] = t;
        x[[i, 1]] = t + 1e-5 * e; // corr ≈ 1 − 1e-10
        x[[i, 2]] = e;
    }
    let y: Vec<f64> = (0..n).map(|i| 2.0 * x[[i, 0]] - x[[i, 2]]).collect();
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    for lambda in [0.0, 1e-6, 1e-3, 0.1] {
        let sol = solver()
            .solve(&loss, &Penalty::l1(lambda).unwrap())
            .unwrap();
        check_solution(&sol);
        if sol.status == Status::Converged {
            assert!(sol.kkt_residual <= 1e-7 * 3.0f64.max(1.0) * 10.0);
        }
        println!(
            "collinear λ={lambda}: {:?} kkt {:.2e}",
            sol.status, sol.kkt_residual
        );
    }
}

/// Features on scales from 1e-8 to 1e8: coordinate descent is invariant to column scaling,
/// so the fit (in prediction space) matches the one on unit-scale columns.
#[test]
fn wildly_scaled_features() {
    let n = 40;
    let scales = [1e-8, 1.0, 1e8];
    let base = Array2::from_shape_fn((n, 3), |(i, j)| ((i * (j + 2)) as f64 * 0.7).sin());
    let mut scaled = base.clone();
    for (j, &s) in scales.iter().enumerate() {
        scaled.column_mut(j).mapv_inplace(|v| v * s);
    }
    let y: Vec<f64> = (0..n)
        .map(|i| base[[i, 0]] - 2.0 * base[[i, 1]] + 0.5 * base[[i, 2]])
        .collect();
    let tight = NewtonCd::new(SolverOptions {
        tol: 1e-12,
        ..Default::default()
    });
    let a = LeastSquares::from_dense(base.view(), &y, true).unwrap();
    let b = LeastSquares::from_dense(scaled.view(), &y, true).unwrap();
    let sa = tight.solve(&a, &Penalty::l1(0.0).unwrap()).unwrap();
    let sb = tight.solve(&b, &Penalty::l1(0.0).unwrap()).unwrap();
    check_solution(&sb);
    for (j, &s) in scales.iter().enumerate() {
        let rel = (sb.x[j] * s - sa.x[j]).abs() / sa.x[j].abs();
        assert!(rel < 1e-6, "column {j}: {} vs {}", sb.x[j] * s, sa.x[j]);
    }
}

/// Losses and solutions can be shared across threads.
#[test]
fn thread_safety_markers() {
    fn send_sync<T: Send + Sync>() {}
    send_sync::<LeastSquares>();
    send_sync::<Logistic>();
    send_sync::<NewtonCd>();
    send_sync::<Solution>();
    send_sync::<Penalty>();
}
