//! Sparse precision estimation against outside references: the macrodata fixtures of
//! tests/data (conic-solver solutions polished to KKT ≤ 2e-15, see tests/data/README.md),
//! textbook closed forms, the block-screening theorem of "New insights and faster
//! computations for the graphical lasso" (J. Comput. Graph. Stat., 2011) and convex
//! duality (a zero duality gap certifies optimality).
//!
//! Run with the default (faer) backend and with `--features openblas`; every solution is
//! compared with the same fixtures to 5e-10, so the two backends agree to 1e-9.

mod common;

use common::*;
use ellone::precision::{
    estimate_precision, lambda_max, sample_covariance, screening_blocks, PrecisionFit,
    PrecisionInput, PrecisionOptions,
};
use ellone::solver::{SolverOptions, Status};
use ellone::Error;
use ndarray::{s, Array2};
use rand::{rngs::StdRng, RngExt, SeedableRng};

const LAMBDAS: [f64; 4] = [0.05, 0.1, 0.2, 0.4];

fn tight() -> PrecisionOptions {
    PrecisionOptions {
        solver: SolverOptions {
            tol: 1e-12,
            max_iter: 500,
            ..Default::default()
        },
        ..Default::default()
    }
}

fn corr() -> Array2<f64> {
    read_matrix("macrodata-corr.csv")
}

fn fixture(lambda: f64) -> Array2<f64> {
    read_matrix(&format!("macrodata-precision-lambda{lambda}.csv"))
}

fn fixture_objective(lambda: f64) -> f64 {
    let (_, rows) = read_table("macrodata-precision-objectives.csv");
    let row = rows
        .iter()
        .find(|r| r[0].parse::<f64>().unwrap() == lambda)
        .expect("lambda row");
    row[1].parse().unwrap()
}

fn max_abs(a: &Array2<f64>) -> f64 {
    a.iter().fold(0.0f64, |m, v| m.max(v.abs()))
}

/// max |a − b| / max |b|.
fn rel_diff(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    assert_eq!(a.dim(), b.dim());
    let d = a
        .iter()
        .zip(b.iter())
        .fold(0.0f64, |m, (x, y)| m.max((x - y).abs()));
    d / max_abs(b).max(f64::MIN_POSITIVE)
}

fn solve_cov(s: &Array2<f64>, lambda: f64, opts: &PrecisionOptions) -> PrecisionFit {
    estimate_precision(PrecisionInput::Covariance(s.view()), lambda, opts).unwrap()
}

/// Reference: tests/data macrodata-precision-lambda*.csv and -objectives.csv (Clarabel,
/// polished). Objective within 1e-8 relative (the requirement; achieved ~1e-14),
/// every entry of Θ within 5e-10 of max|Θ|, the same sparsity pattern; with and without
/// screening.
#[test]
fn macrodata_fixtures_reproduced() {
    let s = corr();
    for &lambda in &LAMBDAS {
        let reference = fixture(lambda);
        let f_ref = fixture_objective(lambda);
        let mut fits = Vec::new();
        for screening in [true, false] {
            let opts = PrecisionOptions {
                screening,
                ..tight()
            };
            let fit = solve_cov(&s, lambda, &opts);
            let rel_obj = (fit.objective - f_ref).abs() / f_ref.abs();
            let err = rel_diff(&fit.precision, &reference);
            println!(
                "λ = {lambda}, screening {screening}: {:?}, objective rel. error {rel_obj:.1e}, \
                 Θ error {err:.1e}, KKT {:.1e}, gap {:?}, {} Newton its, {} sweeps, blocks {:?}",
                fit.status,
                fit.kkt_residual,
                fit.duality_gap,
                fit.newton_iterations,
                fit.inner_sweeps,
                fit.block_sizes
            );
            assert_eq!(fit.status, Status::Converged);
            assert!(rel_obj <= 1e-8, "objective off by {rel_obj:e}");
            assert!(err <= 5e-10, "Θ off by {err:e}");
            for (a, b) in fit.precision.iter().zip(reference.iter()) {
                assert_eq!(*a == 0.0, *b == 0.0, "sparsity pattern differs");
            }
            assert!(fit.kkt_residual <= 1e-9, "KKT {}", fit.kkt_residual);
            let gap = fit.duality_gap.expect("gap");
            assert!(gap.abs() <= 1e-9, "gap {gap}");
            // Σ̂ is the inverse of Θ: Θ Σ̂ = I.
            let prod = fit.precision.dot(&fit.covariance);
            assert!(rel_diff(&prod, &Array2::eye(12)) < 1e-8);
            fits.push(fit);
        }
        assert!(rel_diff(&fits[0].precision, &fits[1].precision) <= 1e-9);
    }
}

/// Closed form: for λ ≥ max_{i≠j}|S_ij| the solution is diag(1/S_ii) (zero subgradient on
/// the diagonal, |S_ij| ≤ λ off it); with the diagonal penalised, diag(1/(S_ii + λ)).
/// README: λ_max = 0.999229 for macrodata-corr.csv.
#[test]
fn large_lambda_gives_the_diagonal() {
    let s = corr();
    let lmax = lambda_max(s.view(), None).unwrap();
    assert!((lmax - 0.999229).abs() < 5e-7, "λ_max = {lmax}");
    for screening in [true, false] {
        let opts = PrecisionOptions {
            screening,
            ..tight()
        };
        let fit = solve_cov(&s, lmax, &opts);
        assert!(fit.edges.is_empty());
        for i in 0..12 {
            assert!((fit.precision[[i, i]] - 1.0 / s[[i, i]]).abs() < 1e-14);
        }
        let opts = PrecisionOptions {
            penalize_diagonal: true,
            ..opts
        };
        let fit = solve_cov(&s, 1.5, &opts);
        assert!(fit.edges.is_empty());
        for i in 0..12 {
            assert!((fit.precision[[i, i]] - 1.0 / (s[[i, i]] + 1.5)).abs() < 1e-12);
        }
        assert!(fit.kkt_residual < 1e-12);
    }
    // Just below λ_max (between the two largest |S_ij|, 0.999229 and 0.999091) only the
    // strongest pair (realgdp, realcons) enters.
    let fit = solve_cov(&s, 0.9992, &tight());
    assert_eq!(fit.edges.len(), 1);
    assert_eq!((fit.edges[0].i, fit.edges[0].j), (0, 1));
}

/// Closed form: with λ = 0 and S positive definite the minimiser of −log det Θ + tr(SΘ) is
/// Θ = S⁻¹ (the gradient S − Θ⁻¹ vanishes). Checked as Θ S = I on the 8 × 8 leading block
/// of macrodata-corr.csv and on the full matrix (smallest eigenvalue 8.1e-5).
///
/// On the full matrix (condition number about 10⁵) the KKT residual of the computed
/// inverse bottoms out near 1e-12 from rounding alone, depending on the summation order of
/// the kernels; there the solver may stop with `LineSearchFailed` just above the 1e-12
/// tolerance (it then reported 1.3e-12, with |ΘS − I| = 2.6e-12), which is accepted
/// below 1e-11.
#[test]
fn zero_lambda_gives_the_inverse() {
    let full = corr();
    for p in [8usize, 12] {
        let s = full.slice(s![..p, ..p]).to_owned();
        let fit = solve_cov(&s, 0.0, &tight());
        assert!(
            fit.status == Status::Converged
                || (fit.status == Status::LineSearchFailed && fit.kkt_residual < 1e-11),
            "{:?} at KKT {:e}",
            fit.status,
            fit.kkt_residual
        );
        let err = rel_diff(&fit.precision.dot(&s), &Array2::eye(p));
        println!(
            "p = {p}: |ΘS − I| = {err:.1e}, {} Newton its",
            fit.newton_iterations
        );
        assert!(err < 1e-9, "ΘS − I = {err:e}");
        assert!(rel_diff(&fit.covariance, &s) < 1e-9);
    }
}

/// The screening theorem (J. Comput. Graph. Stat., 2011): if |S_ij| ≤ λ between two groups
/// of variables, the solution is block diagonal and each block solves the restricted
/// problem. S here: macrodata-corr.csv with the coupling between variables 0..6 and 6..12
/// scaled down to at most λ/2 (positive definite: each block is a principal submatrix of a
/// positive-definite matrix and the coupling is small). Checked on the un-screened solve.
#[test]
fn block_structured_covariance_gives_block_solution() {
    let lambda = 0.1;
    let mut s = corr();
    let cross = s.slice(s![..6, 6..]).to_owned();
    let c = 0.5 * lambda / max_abs(&cross);
    for i in 0..6 {
        for j in 6..12 {
            s[[i, j]] *= c;
            s[[j, i]] *= c;
        }
    }
    let blocks = screening_blocks(s.view(), lambda, None).unwrap();
    println!("components: {blocks:?}");
    assert!(blocks
        .iter()
        .all(|b| b.iter().all(|&i| i < 6) || b.iter().all(|&i| i >= 6)));
    let no_screen = PrecisionOptions {
        screening: false,
        ..tight()
    };
    let whole = solve_cov(&s, lambda, &no_screen);
    let screened = solve_cov(&s, lambda, &tight());
    assert!(rel_diff(&whole.precision, &screened.precision) <= 1e-9);
    for i in 0..6 {
        for j in 6..12 {
            assert_eq!(whole.precision[[i, j]], 0.0, "cross-block entry ({i}, {j})");
        }
    }
    for r in [0..6, 6..12] {
        let sb = s.slice(s![r.clone(), r.clone()]).to_owned();
        let fb = solve_cov(&sb, lambda, &no_screen);
        let tb = whole.precision.slice(s![r.clone(), r.clone()]).to_owned();
        assert!(rel_diff(&tb, &fb.precision) <= 1e-9);
    }
    assert!((whole.objective - screened.objective).abs() <= 1e-9 * whole.objective.abs());
}

/// p > n (p = 200, n = 50, seeded Gaussian data): S is singular. For λ > 0 the problem has a
/// unique solution, certified here by the KKT conditions and a duality gap ≈ 0 (weak
/// duality bounds the suboptimality by the gap). For λ = 0 it is unbounded: a typed error,
/// immediately.
#[test]
fn more_variables_than_samples() {
    let (n, p) = (50, 200);
    let mut rng = StdRng::seed_from_u64(2024);
    let x = Array2::from_shape_fn((n, p), |_| rng.random::<f64>() - 0.5);
    let opts = PrecisionOptions {
        solver: SolverOptions {
            tol: 1e-9,
            ..Default::default()
        },
        ..Default::default()
    };
    let s = sample_covariance(x.view(), true).unwrap();
    let lmax = lambda_max(s.view(), None).unwrap();
    let fit = estimate_precision(PrecisionInput::Data(x.view()), 0.5 * lmax, &opts).unwrap();
    println!(
        "p > n: {:?}, {} edges, KKT {:.1e}, gap {:?}, {} Newton its, blocks {:?}",
        fit.status,
        fit.edges.len(),
        fit.kkt_residual,
        fit.duality_gap,
        fit.newton_iterations,
        fit.block_sizes
    );
    assert_eq!(fit.status, Status::Converged);
    assert!(!fit.edges.is_empty());
    assert!(fit.kkt_residual <= 1e-7);
    let gap = fit.duality_gap.expect("gap");
    assert!(
        gap.abs() <= 1e-6 * fit.objective.abs().max(1.0),
        "gap {gap}"
    );
    // λ = 0 with p > n: refused before any solve (no timing assertion: a hang would
    // show as a test that never finishes).
    let err = estimate_precision(PrecisionInput::Data(x.view()), 0.0, &opts).unwrap_err();
    assert!(matches!(err, Error::Unbounded(_)), "{err:?}");
}

/// Bad input gives typed errors, never a panic.
#[test]
fn bad_input_is_rejected_with_typed_errors() {
    let est = |s: &Array2<f64>, lambda: f64, o: &PrecisionOptions| {
        estimate_precision(PrecisionInput::Covariance(s.view()), lambda, o)
    };
    let d = PrecisionOptions::default();
    let s = corr();
    let mut ns = s.clone();
    ns[[0, 3]] += 0.01;
    assert!(matches!(est(&ns, 0.1, &d), Err(Error::NotSymmetric { .. })));
    let mut nan = s.clone();
    nan[[2, 5]] = f64::NAN;
    nan[[5, 2]] = f64::NAN;
    assert!(matches!(est(&nan, 0.1, &d), Err(Error::NonFinite { .. })));
    let mut neg = s.clone();
    neg[[4, 4]] = -1.0;
    assert!(matches!(
        est(&neg, 0.1, &d),
        Err(Error::NotPositiveDefinite(_))
    ));
    // Indefinite "covariance": [[1, 2], [2, 1]] has eigenvalues 3 and −1 (closed form), and
    // no covariance matrix has a negative eigenvalue (textbook: vᵀSv is a variance).
    let indefinite = ndarray::array![[1.0, 2.0], [2.0, 1.0]];
    for lambda in [0.0, 0.1, 1.0] {
        assert!(matches!(
            est(&indefinite, lambda, &d),
            Err(Error::NotPositiveDefinite(_))
        ));
    }
    // A singular but semidefinite covariance (rank 1: S = vvᵀ) passes the check; with its
    // variables split by λ > |S_12| it is solved in closed form, Θ = diag(1/S_ii).
    let singular = ndarray::array![[1.0, 0.5], [0.5, 0.25]];
    ellone::precision::check_semidefinite(singular.view()).expect("semidefinite");
    let fit = est(&singular, 0.6, &d).expect("solvable");
    assert!((fit.precision[[0, 0]] - 1.0).abs() < 1e-12 && fit.precision[[0, 1]] == 0.0);
    let rect = s.slice(s![.., ..11]).to_owned();
    assert!(matches!(
        est(&rect, 0.1, &d),
        Err(Error::ShapeMismatch { .. })
    ));
    assert!(matches!(
        est(&Array2::zeros((0, 0)), 0.1, &d),
        Err(Error::Empty(_))
    ));
    assert!(matches!(
        est(&s, -0.1, &d),
        Err(Error::InvalidLambda { .. })
    ));
    assert!(matches!(
        est(&s, f64::NAN, &d),
        Err(Error::InvalidLambda { .. })
    ));
    // A negative weight is named by its entry.
    let mut w = Array2::from_elem(s.dim(), 1.0);
    w[[3, 1]] = -0.5;
    w[[1, 3]] = -0.5;
    let weighted = PrecisionOptions {
        weights: Some(w),
        ..PrecisionOptions::default()
    };
    assert!(matches!(
        est(&s, 0.1, &weighted),
        Err(Error::InvalidLambda { name, .. }) if name == "weight[1, 3]"
    ));
    // Data with NaN, and an empty data matrix.
    let mut x = read_numeric_table("macrodata.csv").1;
    x[[7, 3]] = f64::NAN;
    assert!(matches!(
        estimate_precision(PrecisionInput::Data(x.view()), 0.1, &d),
        Err(Error::NonFinite { .. })
    ));
    assert!(matches!(
        estimate_precision(PrecisionInput::Data(Array2::zeros((0, 3)).view()), 0.1, &d),
        Err(Error::Empty(_))
    ));
    // Finite data whose squares overflow: the sample covariance would hold ∞.
    let huge = read_numeric_table("macrodata.csv").1 * 1e200;
    assert!(matches!(
        estimate_precision(PrecisionInput::Data(huge.view()), 0.1, &d),
        Err(Error::NonFinite { .. })
    ));
    // Weights: wrong shape, negative, not symmetric.
    let bad_w = |w: Array2<f64>| PrecisionOptions {
        weights: Some(w),
        ..Default::default()
    };
    assert!(matches!(
        est(&s, 0.1, &bad_w(Array2::ones((3, 3)))),
        Err(Error::ShapeMismatch { .. })
    ));
    let mut w = Array2::ones((12, 12));
    w[[1, 1]] = -1.0;
    assert!(matches!(
        est(&s, 0.1, &bad_w(w)),
        Err(Error::InvalidLambda { .. })
    ));
    let mut w = Array2::ones((12, 12));
    w[[1, 2]] = 2.0;
    assert!(matches!(
        est(&s, 0.1, &bad_w(w)),
        Err(Error::NotSymmetric { .. })
    ));
    // Warm start: wrong shape, not positive definite.
    let warm = |t: Array2<f64>| PrecisionOptions {
        warm_start: Some(t),
        ..Default::default()
    };
    assert!(matches!(
        est(&s, 0.1, &warm(Array2::eye(3))),
        Err(Error::ShapeMismatch { .. })
    ));
    let mut t = Array2::eye(12);
    t[[0, 1]] = 2.0;
    t[[1, 0]] = 2.0;
    assert!(matches!(
        est(&s, 0.01, &warm(t)),
        Err(Error::InvalidArgument(_))
    ));
    // A zero-variance variable: unbounded with an unpenalised diagonal, fine when
    // penalised.
    let mut z = s.clone();
    for k in 0..12 {
        z[[3, k]] = 0.0;
        z[[k, 3]] = 0.0;
    }
    assert!(matches!(est(&z, 0.1, &d), Err(Error::Unbounded(_))));
    let pen = PrecisionOptions {
        penalize_diagonal: true,
        ..tight()
    };
    let fit = est(&z, 0.1, &pen).unwrap();
    assert!((fit.precision[[3, 3]] - 10.0).abs() < 1e-12);
}

/// Zero weights on a singular S. Variables 0 and 1 are identical (S v = 0 for
/// v = (1, −1, 0)), so along Θ + t·vvᵀ the trace term is constant and −log det falls like
/// −log t: with w_01 = 0 nothing penalises that ray and the problem is unbounded below
/// (the recession-direction argument of "Convex Optimization", textbook,
/// 2004, §3.1 and §5.2). The fit used to stop there as `Converged` (its gradient vanishes
/// like 1/t) with Θ ≈ 6·10⁶; it is now `Unbounded`. With w_01 > 0 and another weight 0 the
/// ray is penalised, the problem is bounded, and the fit carries a duality gap.
#[test]
fn zero_weights_on_a_singular_covariance() {
    let s = ndarray::array![[1.0, 1.0, 0.3], [1.0, 1.0, 0.3], [0.3, 0.3, 1.0]];
    let with = |w: Array2<f64>| PrecisionOptions {
        weights: Some(w),
        ..tight()
    };
    let unbounded = ndarray::array![[1.0, 0.0, 1.0], [0.0, 1.0, 1.0], [1.0, 1.0, 1.0]];
    assert!(matches!(
        estimate_precision(PrecisionInput::Covariance(s.view()), 0.1, &with(unbounded)),
        Err(Error::Unbounded(_))
    ));
    let bounded = ndarray::array![[1.0, 1.0, 0.0], [1.0, 1.0, 1.0], [0.0, 1.0, 1.0]];
    let fit = solve_cov(&s, 0.1, &with(bounded));
    assert_eq!(fit.status, Status::Converged);
    let gap = fit
        .duality_gap
        .expect("a bounded problem has a dual certificate");
    assert!((0.0..1e-6).contains(&gap), "gap {gap}");
    assert!(max_abs(&fit.precision) < 1e3);
}

/// A singular S (5 centred samples of 8 variables, rank 4) at small λ, where the minimiser
/// has large entries along S's null space and the Hessian W⊗W is badly conditioned: the
/// inner sweeps stall at their cap, and Newton-CD used to need more than 3 000 iterations
/// at λ = 0.01 (its reduced Newton step was dropped whenever it changed a sign; it is now
/// truncated at the orthant boundary, in rounds). Certified by the duality gap (weak
/// duality, "Convex Optimization", textbook, 2004, §5.2.2). At λ = 10⁻⁸
/// the minimiser (|Θ| ~ 1/λ) is numerically out of reach: the fit used to report
/// `Converged` with a gap of 30 % of |F|, and is now a `Numerical` error.
#[test]
fn singular_covariance_at_small_lambda() {
    let (n, p) = (5, 8);
    let mut rng = StdRng::seed_from_u64(9);
    let x = Array2::from_shape_fn((n, p), |_| rng.random::<f64>() - 0.5);
    let s = sample_covariance(x.view(), true).unwrap();
    let lmax = lambda_max(s.view(), None).unwrap();
    for ratio in [0.2, 0.05, 0.01] {
        let fit = solve_cov(&s, ratio * lmax, &PrecisionOptions::default());
        assert_eq!(fit.status, Status::Converged, "λ = {ratio}·λ_max");
        let gap = fit.duality_gap.expect("gap");
        assert!(gap <= 1e-6 * fit.objective.abs().max(1.0), "gap {gap}");
    }
    let err = estimate_precision(
        PrecisionInput::Covariance(s.view()),
        1e-8 * lmax,
        &PrecisionOptions::default(),
    )
    .unwrap_err();
    assert!(matches!(err, Error::Numerical(_)), "{err:?}");
}

/// Weights: λ·w_ij with every w_ij = 2 at λ = 0.05 is the problem at λ = 0.1 (diagonal
/// unpenalised), so it must reproduce the λ = 0.1 fixture. A warm start from the λ = 0.1
/// fixture solution reproduces the λ = 0.05 fixture.
#[test]
fn weights_and_warm_start() {
    let s = corr();
    let opts = PrecisionOptions {
        weights: Some(Array2::from_elem((12, 12), 2.0)),
        ..tight()
    };
    let fit = solve_cov(&s, 0.05, &opts);
    assert!(rel_diff(&fit.precision, &fixture(0.1)) <= 5e-10);
    assert!((fit.objective - fixture_objective(0.1)).abs() <= 1e-8 * fixture_objective(0.1).abs());

    let cold = solve_cov(&s, 0.05, &tight());
    let opts = PrecisionOptions {
        warm_start: Some(fixture(0.1)),
        ..tight()
    };
    let warm = solve_cov(&s, 0.05, &opts);
    println!(
        "λ = 0.05: cold {} Newton its, warm (from λ = 0.1) {}",
        cold.newton_iterations, warm.newton_iterations
    );
    assert!(rel_diff(&warm.precision, &fixture(0.05)) <= 5e-10);
    // Warm start at the solution itself: converged at once.
    let opts = PrecisionOptions {
        warm_start: Some(fixture(0.05)),
        ..tight()
    };
    let at = solve_cov(&s, 0.05, &opts);
    assert!(
        at.newton_iterations <= 2,
        "{} iterations",
        at.newton_iterations
    );
}

/// From data: macrodata.csv centred and standardised (sd dividing by n) gives exactly the
/// correlation matrix of macrodata-corr.csv (README), so the solved problem is the fixture
/// problem; Θ is reported on the original scale, Θ_ij = Θ^R_ij/(sd_i sd_j), and the partial
/// correlations are scale free.
#[test]
fn from_data_with_standardisation() {
    let (_, x) = read_numeric_table("macrodata.csv");
    let lambda = 0.1;
    let reference = fixture(lambda);
    let opts = PrecisionOptions {
        standardise: true,
        ..tight()
    };
    let fit = estimate_precision(PrecisionInput::Data(x.view()), lambda, &opts).unwrap();
    assert!(fit.standardised);
    let n = x.nrows() as f64;
    let sd: Vec<f64> = x
        .columns()
        .into_iter()
        .map(|c| {
            let m = c.sum() / n;
            (c.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / n).sqrt()
        })
        .collect();
    let rescaled = Array2::from_shape_fn((12, 12), |(i, j)| fit.precision[[i, j]] * sd[i] * sd[j]);
    let err = rel_diff(&rescaled, &reference);
    println!(
        "standardised data: Θ error {err:.1e}, KKT {:.1e}",
        fit.kkt_residual
    );
    assert!(err <= 1e-8, "Θ off by {err:e}");
    let f_ref = fixture_objective(lambda);
    assert!((fit.objective - f_ref).abs() <= 1e-8 * f_ref.abs());
    for e in &fit.edges {
        let r = -reference[[e.i, e.j]] / (reference[[e.i, e.i]] * reference[[e.j, e.j]]).sqrt();
        assert!((e.partial_correlation - r).abs() < 1e-8);
    }
    // Σ̂ on the original scale inverts Θ on the original scale.
    let prod = fit.precision.dot(&fit.covariance);
    assert!(rel_diff(&prod, &Array2::eye(12)) < 1e-7);

    // Without centring: S = XᵀX/n, written out by hand here.
    let sub = x.slice(s![.., 7..]).to_owned(); // rates and inflation: comparable scales
    let p = sub.ncols();
    let raw = Array2::from_shape_fn((p, p), |(i, j)| {
        (0..sub.nrows())
            .map(|r| sub[[r, i]] * sub[[r, j]])
            .sum::<f64>()
            / n
    });
    let opts = PrecisionOptions {
        centre: false,
        ..tight()
    };
    let a = estimate_precision(PrecisionInput::Data(sub.view()), 0.5, &opts).unwrap();
    let b = solve_cov(&raw, 0.5, &tight());
    assert!(rel_diff(&a.precision, &b.precision) < 1e-9);
    // The KKT tolerance is relative to the problem's scale (max |S_ij| here is in the tens).
    let scale = raw.iter().fold(1.0f64, |m, v| m.max(v.abs()));
    assert_eq!(a.status, Status::Converged);
    assert!(
        a.kkt_residual < 1e-9 * scale,
        "{:?} {:e}",
        a.status,
        a.kkt_residual
    );
}
