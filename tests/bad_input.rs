//! Bad input is reported as a typed error, never a panic: one test per kind of input error,
//! for least squares and logistic regression and the Newton-CD driver. (Malformed files are
//! the I/O module's tests.)

use ellone::solver::{NewtonCd, Solver, SolverOptions};
use ellone::{Design, Error, LeastSquares, Logistic, Loss, Penalty};
use ndarray::{array, Array2};
use sprs::{CsMat, TriMat};

fn x() -> Array2<f64> {
    array![[1.0, 2.0], [0.5, -1.0], [3.0, 0.0], [-1.0, 1.5]]
}

fn y_real() -> Vec<f64> {
    vec![1.0, -0.5, 2.0, 0.3]
}

fn y_labels() -> Vec<f64> {
    vec![1.0, 0.0, 1.0, 0.0]
}

fn ls() -> LeastSquares {
    LeastSquares::from_dense(x().view(), &y_real(), true).unwrap()
}

fn pen() -> Penalty {
    Penalty::l1(0.1).unwrap()
}

fn sparse(a: &Array2<f64>) -> CsMat<f64> {
    let mut t = TriMat::new(a.dim());
    for ((i, j), &v) in a.indexed_iter() {
        if v != 0.0 {
            t.add_triplet(i, j, v);
        }
    }
    t.to_csc()
}

#[test]
fn nan_in_dense_design() {
    let mut a = x();
    a[[2, 1]] = f64::NAN;
    let e = LeastSquares::from_dense(a.view(), &y_real(), true).unwrap_err();
    assert!(
        matches!(&e, Error::NonFinite { location, .. } if location.contains("row 2")),
        "{e:?}"
    );
    let e = Logistic::from_dense(a.view(), &y_labels(), true).unwrap_err();
    assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
}

#[test]
fn inf_in_dense_design() {
    let mut a = x();
    a[[0, 0]] = f64::NEG_INFINITY;
    let e = LeastSquares::from_dense(a.view(), &y_real(), false).unwrap_err();
    assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
    a[[0, 0]] = f64::INFINITY;
    let e = Logistic::from_dense(a.view(), &y_labels(), false).unwrap_err();
    assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
}

#[test]
fn nan_in_sparse_design() {
    let mut a = x();
    a[[1, 0]] = f64::NAN;
    let e = LeastSquares::from_sparse(sparse(&a), &y_real(), true).unwrap_err();
    assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
    a[[1, 0]] = f64::INFINITY;
    let e = Logistic::from_sparse(sparse(&a), &y_labels(), true).unwrap_err();
    assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
}

#[test]
fn nan_in_response() {
    let mut y = y_real();
    y[3] = f64::NAN;
    let e = LeastSquares::from_dense(x().view(), &y, true).unwrap_err();
    assert!(
        matches!(&e, Error::NonFinite { what, .. } if what == "y"),
        "{e:?}"
    );
    // A NaN label is non-finite before it is an invalid label.
    let mut labels = y_labels();
    labels[0] = f64::NAN;
    let e = Logistic::from_dense(x().view(), &labels, true).unwrap_err();
    assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
}

#[test]
fn inf_in_response() {
    let mut y = y_real();
    y[0] = f64::INFINITY;
    let e = LeastSquares::from_dense(x().view(), &y, false).unwrap_err();
    assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
}

#[test]
fn response_length_mismatch() {
    let e = LeastSquares::from_dense(x().view(), &[1.0, 2.0, 3.0], true).unwrap_err();
    assert!(matches!(e, Error::ShapeMismatch { .. }), "{e:?}");
    let e = LeastSquares::from_sparse(sparse(&x()), &[1.0; 5], true).unwrap_err();
    assert!(matches!(e, Error::ShapeMismatch { .. }), "{e:?}");
    let e = Logistic::from_dense(x().view(), &[1.0, 0.0, 1.0, 0.0, 1.0], true).unwrap_err();
    assert!(matches!(e, Error::ShapeMismatch { .. }), "{e:?}");
}

#[test]
fn empty_matrix() {
    let no_rows = Array2::<f64>::zeros((0, 3));
    let e = LeastSquares::from_dense(no_rows.view(), &[], true).unwrap_err();
    assert!(matches!(e, Error::Empty(_)), "{e:?}");
    let no_cols = Array2::<f64>::zeros((4, 0));
    let e = Logistic::from_dense(no_cols.view(), &y_labels(), true).unwrap_err();
    assert!(matches!(e, Error::Empty(_)), "{e:?}");
    let e = Design::sparse(CsMat::zero((0, 0))).unwrap_err();
    assert!(matches!(e, Error::Empty(_)), "{e:?}");
}

#[test]
fn negative_lambda() {
    let e = Penalty::l1(-0.1).unwrap_err();
    assert!(
        matches!(e, Error::InvalidLambda { value, .. } if value == -0.1),
        "{e:?}"
    );
    let e = pen().with_lambda(-1e-300).unwrap_err();
    assert!(matches!(e, Error::InvalidLambda { .. }), "{e:?}");
    let e = pen().with_l2(-1.0).unwrap_err();
    assert!(matches!(e, Error::InvalidLambda { .. }), "{e:?}");
}

#[test]
fn nan_or_infinite_lambda() {
    for bad in [f64::NAN, f64::INFINITY] {
        let e = Penalty::l1(bad).unwrap_err();
        assert!(matches!(e, Error::InvalidLambda { .. }), "{e:?}");
        let e = pen().with_lambda(bad).unwrap_err();
        assert!(matches!(e, Error::InvalidLambda { .. }), "{e:?}");
        let e = pen().with_l2(bad).unwrap_err();
        assert!(matches!(e, Error::InvalidLambda { .. }), "{e:?}");
    }
}

#[test]
fn invalid_penalty_weight() {
    for bad in [-1.0, f64::NAN, f64::INFINITY] {
        let e = pen().with_weights(vec![1.0, bad, 1.0]).unwrap_err();
        assert!(matches!(e, Error::InvalidLambda { .. }), "{bad}: {e:?}");
    }
}

#[test]
fn labels_outside_zero_one() {
    for (row, bad) in [(1usize, 2.0), (2, -1.0), (3, 0.5)] {
        let mut labels = y_labels();
        labels[row] = bad;
        let e = Logistic::from_dense(x().view(), &labels, true).unwrap_err();
        assert_eq!(e, Error::InvalidLabel { row, value: bad });
        let e = Logistic::from_sparse(sparse(&x()), &labels, false).unwrap_err();
        assert_eq!(e, Error::InvalidLabel { row, value: bad });
    }
}

#[test]
fn all_zero_column() {
    let mut a = x();
    a.column_mut(1).fill(0.0);
    let e = LeastSquares::from_dense(a.view(), &y_real(), true).unwrap_err();
    assert_eq!(e, Error::ZeroColumn(1));
    let e = Logistic::from_dense(a.view(), &y_labels(), true).unwrap_err();
    assert_eq!(e, Error::ZeroColumn(1));
    // Sparse: a column with no stored entry, and one whose stored entries are all zero.
    let e = LeastSquares::from_sparse(sparse(&a), &y_real(), true).unwrap_err();
    assert_eq!(e, Error::ZeroColumn(1));
    let mut t = TriMat::new((4, 2));
    t.add_triplet(0, 0, 1.0);
    t.add_triplet(2, 1, 0.0);
    let e = Logistic::from_sparse(t.to_csc(), &y_labels(), true).unwrap_err();
    assert_eq!(e, Error::ZeroColumn(1));
}

#[test]
fn wrong_length_penalty_weights() {
    let loss = ls(); // 2 features + intercept = 3 coordinates
    for len in [2usize, 4] {
        let p = pen().with_weights(vec![1.0; len]).unwrap();
        let e = NewtonCd::default().solve(&loss, &p).unwrap_err();
        assert!(matches!(e, Error::ShapeMismatch { .. }), "{len}: {e:?}");
    }
    let logistic = Logistic::from_dense(x().view(), &y_labels(), false).unwrap();
    let p = pen().with_weights(vec![1.0; 3]).unwrap();
    let e = NewtonCd::default().solve(&logistic, &p).unwrap_err();
    assert!(matches!(e, Error::ShapeMismatch { .. }), "{e:?}");
}

#[test]
fn wrong_length_start() {
    let loss = ls();
    let start = vec![0.0; loss.dim() - 1];
    let e = NewtonCd::default()
        .solve_observed(&loss, &pen(), Some(&start), None)
        .unwrap_err();
    assert!(matches!(e, Error::ShapeMismatch { .. }), "{e:?}");
}

#[test]
fn non_finite_start() {
    let loss = Logistic::from_dense(x().view(), &y_labels(), true).unwrap();
    for bad in [f64::NAN, f64::INFINITY] {
        let start = vec![0.0, bad, 0.0];
        let e = NewtonCd::default()
            .solve_observed(&loss, &pen(), Some(&start), None)
            .unwrap_err();
        assert!(matches!(e, Error::NonFinite { .. }), "{e:?}");
    }
}

#[test]
fn start_where_the_loss_overflows() {
    // Finite coordinates whose squared residuals overflow: f = ∞ there, for every solver.
    let loss = ls();
    let start = vec![1e200; loss.dim()];
    let solvers: Vec<Box<dyn Solver>> = vec![
        Box::new(NewtonCd::default()),
        Box::new(ellone::solver::Fista::default()),
        Box::new(ellone::solver::Owlqn::default()),
    ];
    for solver in &solvers {
        let e = solver
            .solve_observed(&loss, &pen(), Some(&start), None)
            .unwrap_err();
        assert!(matches!(e, Error::InvalidArgument(_)), "{e:?}");
    }
}

#[test]
fn invalid_tolerance() {
    let loss = ls();
    for tol in [0.0, -1e-7, f64::NAN, f64::INFINITY] {
        let solver = NewtonCd::new(SolverOptions {
            tol,
            ..Default::default()
        });
        let e = solver.solve(&loss, &pen()).unwrap_err();
        assert!(matches!(e, Error::InvalidArgument(_)), "{tol}: {e:?}");
    }
    for gap_tol in [0.0, -1.0, f64::NAN] {
        let solver = NewtonCd::new(SolverOptions {
            gap_tol: Some(gap_tol),
            ..Default::default()
        });
        let e = solver.solve(&loss, &pen()).unwrap_err();
        assert!(matches!(e, Error::InvalidArgument(_)), "{gap_tol}: {e:?}");
    }
}

/// The inputs above are the only thing wrong: the same data with valid options solves.
#[test]
fn valid_input_solves() {
    let sol = NewtonCd::default().solve(&ls(), &pen()).unwrap();
    assert!(sol.converged() && sol.objective.is_finite());
}
