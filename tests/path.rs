//! Regularisation paths: exactness of screening and warm starts.

mod common;

use common::*;
use ellone::cv_crf::CrfProblem;
use ellone::cv_precision::PrecisionProblem;
use ellone::path::{fit_path, lambda_max, PathOptions};
use ellone::solver::{NewtonCd, Solver, SolverOptions};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::s;

/// λ_max of the macrodata lasso fixture is max_j |x_jᵀ(y − ȳ)|/n = 0.33459966836940674
/// (tests/data/README.md, computed independently by the fixture generator).
#[test]
fn lambda_max_matches_fixture() {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let loss = LeastSquares::from_dense(x.view(), y.column(0).as_slice().unwrap(), true).unwrap();
    let lmax = lambda_max(&loss, &Penalty::l1(1.0).unwrap()).unwrap();
    assert!((lmax - 0.33459966836940674).abs() < 1e-12, "{lmax}");
}

fn check_path(loss: &dyn Loss, shape: (usize, usize), n_lambdas: usize) {
    let pen = Penalty::l1(1.0).unwrap();
    let opts = PathOptions {
        n_lambdas,
        ..Default::default()
    };
    let path = fit_path(loss, &pen, shape, &opts).unwrap();
    let unscreened = fit_path(
        loss,
        &pen,
        shape,
        &PathOptions {
            screening: false,
            ..opts.clone()
        },
    )
    .unwrap();
    let tol_abs = 1e-7 * ellone::solver::gradient_scale(loss);
    let cold = NewtonCd::new(SolverOptions {
        tol: 1e-10,
        ..Default::default()
    });
    for (p, q) in path.points.iter().zip(&unscreened.points) {
        // KKT over all coordinates at every point.
        assert!(
            p.kkt_residual <= tol_abs,
            "kkt {} at λ={}",
            p.kkt_residual,
            p.lambda
        );
        // Screening changes no answer.
        assert!(
            (p.objective - q.objective).abs() <= 1e-10 * p.objective.abs().max(1.0),
            "screened {} vs unscreened {}",
            p.objective,
            q.objective
        );
        // Equals a cold-start solve at that λ.
        let c = cold
            .solve(loss, &pen.with_lambda(p.lambda).unwrap())
            .unwrap();
        assert!(
            (p.objective - c.objective).abs() <= 1e-8 * c.objective.abs().max(1e-300),
            "path {} vs cold {} at λ={}",
            p.objective,
            c.objective,
            p.lambda
        );
    }
    // The first point is all-zero in the penalised coordinates.
    assert!(path.points[0]
        .x
        .indices
        .iter()
        .all(|&k| loss.structural_factor(k) == 0.0));
}

/// Macrodata lasso (tests/data): path points satisfy KKT and match cold starts.
#[test]
fn lasso_path_is_exact() {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let loss = LeastSquares::from_dense(x.view(), y.column(0).as_slice().unwrap(), true).unwrap();
    check_path(&loss, (203, 11), 40);
}

/// Spector data (tests/data), ℓ1-logistic path.
#[test]
fn logistic_path_is_exact() {
    let (_, data) = read_numeric_table("spector.csv");
    let x = data.slice(s![.., 0..3]).to_owned();
    let y: Vec<f64> = data.column(3).to_vec();
    let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
    check_path(&loss, (32, 3), 30);
}

/// Macrodata correlation matrix (tests/data), sparse precision path with the exact block
/// screening: KKT over all 78 coordinates at every point, equal to cold starts.
#[test]
fn precision_path_is_exact() {
    let s = read_matrix("macrodata-corr.csv");
    let loss = PrecisionProblem::from_covariance(s.view(), false).unwrap();
    check_path(&loss, (12, 12), 25);
}

/// The path through the λ of the reference fixtures reproduces their optimal objectives
/// (tests/data/macrodata-precision-objectives.csv: a conic interior-point solve, polished),
/// and the block rule discards entries at the large λ (at λ = 0.4 the reference solution has
/// 58 off-diagonal non-zeros of 132, so at least one pair of variables is split).
#[test]
fn precision_path_matches_reference_objectives() {
    let s = read_matrix("macrodata-corr.csv");
    let loss = PrecisionProblem::from_covariance(s.view(), false).unwrap();
    let (_, rows) = read_table("macrodata-precision-objectives.csv");
    let field = |r: usize, c: usize| -> f64 { rows[r][c].parse().unwrap() };
    let lambdas: Vec<f64> = (0..rows.len()).map(|r| field(r, 0)).collect();
    let path = fit_path(
        &loss,
        &Penalty::l1(1.0).unwrap(),
        (12, 12),
        &PathOptions {
            lambdas: Some(lambdas.clone()),
            ..Default::default()
        },
    )
    .unwrap();
    for point in &path.points {
        let row = lambdas.iter().position(|&l| l == point.lambda).unwrap();
        let reference = field(row, 1);
        assert!(
            (point.objective - reference).abs() <= 1e-8 * reference.abs(),
            "λ={}: {} vs reference {reference}",
            point.lambda,
            point.objective
        );
        let offdiag_nnz = 2 * point
            .x
            .indices
            .iter()
            .filter(|&&k| loss.structural_factor(k) != 0.0)
            .count();
        assert_eq!(offdiag_nnz as f64, field(row, 4), "λ={}", point.lambda);
    }
    // With the exact rule on, the largest λ (0.4) screens at least the entries between
    // blocks; the unscreened path discards nothing.
    let blocks = ellone::precision::screening_blocks(s.view(), 0.4, None).unwrap();
    assert!(blocks.len() > 1, "{blocks:?}");
    assert!(path.points[0].screened > 0);
    // The mask is exactly the pairs split between blocks, and the solution is zero there.
    let resolved = ellone::penalty::ResolvedPenalty::new(&Penalty::l1(0.4).unwrap(), 78, |k| {
        loss.structural_factor(k)
    })
    .unwrap();
    let mask = loss.provably_zero(&resolved).unwrap();
    let block_of = |v: usize| blocks.iter().position(|b| b.contains(&v)).unwrap();
    let theta = loss
        .log_det()
        .to_matrix(&path.points[0].x.to_dense().unwrap())
        .unwrap();
    for (k, &zero) in mask.iter().enumerate() {
        let (i, j) = loss.log_det().entry(k).unwrap();
        assert_eq!(
            zero,
            i != j && block_of(i) != block_of(j),
            "entry ({i}, {j})"
        );
        if zero {
            assert_eq!(theta[[i, j]], 0.0);
        }
    }
    assert!(mask.iter().any(|&z| z));
}

/// Macrodata (tests/data) as a Gaussian CRF: outputs unemp and infl given the other ten
/// series (centred and standardised), λ_Θ = λ_Λ along the path. KKT over all coordinates
/// and equal to cold starts.
#[test]
fn crf_path_is_exact() {
    let (names, data) = read_numeric_table("macrodata.csv");
    let outputs: Vec<usize> = ["unemp", "infl"]
        .iter()
        .map(|o| names.iter().position(|n| n == o).unwrap())
        .collect();
    let inputs: Vec<usize> = (0..names.len()).filter(|j| !outputs.contains(j)).collect();
    let x = data.select(ndarray::Axis(1), &inputs);
    let y = data.select(ndarray::Axis(1), &outputs);
    let loss = CrfProblem::new(x.view(), y.view(), true, true, 1.0).unwrap();
    check_path(&loss, (203, 10), 20);
}
