//! Cross-validation: determinism, parallel = serial, and support recovery.

use ellone::cv::{assign_folds, cross_validate, CvOptions};
use ellone::path::PathOptions;
use ellone::{LeastSquares, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, SeedableRng};
use rand_distr::{Distribution, Normal};

/// Synthetic regression with a known sparse truth (demo data generated in the test).
fn sparse_truth(n: usize, p: usize, seed: u64) -> (Array2<f64>, Vec<f64>, Vec<usize>) {
    let mut rng = StdRng::seed_from_u64(seed);
    let normal = Normal::new(0.0, 1.0).unwrap();
    let x = Array2::from_shape_fn((n, p), |_| normal.sample(&mut rng));
    let support = vec![0, 3, 7, 12, 20];
    let mut b = vec![0.0; p];
    for (k, &j) in support.iter().enumerate() {
        b[j] = if k % 2 == 0 { 1.5 } else { -1.0 };
    }
    let y = (0..n)
        .map(|i| (0..p).map(|j| x[[i, j]] * b[j]).sum::<f64>() + 0.5 * normal.sample(&mut rng))
        .collect();
    (x, y, support)
}

#[test]
fn folds_are_balanced_and_reproducible() {
    let a = assign_folds(103, 5, 42);
    assert_eq!(a, assign_folds(103, 5, 42));
    for f in 0..5 {
        let c = a.iter().filter(|&&v| v == f).count();
        assert!(c == 20 || c == 21);
    }
}

/// With a strong signal (|b_j| ≥ 1 against noise sd 0.5, n = 200, p = 40) the support at
/// the one-standard-error λ contains the truth and few extras. The margin is the lasso's
/// known tendency to admit some false positives at the CV-chosen λ ("Regression shrinkage and
/// selection via the lasso", JRSS-B, 1996); the 1-SE choice limits them.
#[test]
fn cv_recovers_sparse_support() {
    let (x, y, support) = sparse_truth(200, 40, 7);
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    let opts = CvOptions {
        folds: 5,
        seed: 1,
        path: PathOptions {
            n_lambdas: 40,
            ..Default::default()
        },
        parallel: true,
    };
    let cv = cross_validate(&loss, &Penalty::l1(1.0).unwrap(), &opts).unwrap();
    assert!(cv.one_se <= cv.best);
    assert!(cv.lambda_one_se() >= cv.lambda_best());
    // Refit on all data at the 1-SE λ.
    let sol = ellone::Solver::solve(
        &ellone::NewtonCd::default(),
        &loss,
        &Penalty::l1(cv.lambda_one_se()).unwrap(),
    )
    .unwrap();
    let (b, _) = loss.split(&sol.x);
    let found: Vec<usize> = (0..40).filter(|&j| b[j] != 0.0).collect();
    for j in &support {
        assert!(
            found.contains(j),
            "true feature {j} missed; found {found:?}"
        );
    }
    let false_pos = found.iter().filter(|j| !support.contains(j)).count();
    assert!(false_pos <= 5, "{false_pos} false positives: {found:?}");
}

/// Folds in parallel give bit-identical results to folds run serially.
#[test]
fn parallel_equals_serial() {
    let (x, y, _) = sparse_truth(120, 30, 3);
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    let mut opts = CvOptions {
        folds: 4,
        seed: 9,
        path: PathOptions {
            n_lambdas: 20,
            ..Default::default()
        },
        parallel: true,
    };
    let a = cross_validate(&loss, &Penalty::l1(1.0).unwrap(), &opts).unwrap();
    opts.parallel = false;
    let b = cross_validate(&loss, &Penalty::l1(1.0).unwrap(), &opts).unwrap();
    assert_eq!(a, b);
}

#[test]
fn bad_fold_counts_are_errors() {
    let (x, y, _) = sparse_truth(10, 25, 1);
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    for folds in [0, 1, 11] {
        let opts = CvOptions {
            folds,
            ..Default::default()
        };
        assert!(cross_validate(&loss, &Penalty::l1(1.0).unwrap(), &opts).is_err());
    }
}
