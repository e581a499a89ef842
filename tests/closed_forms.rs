//! Least squares and logistic regression against textbook closed forms.
//!
//! * Orthonormal design (XᵀX = n·I): the lasso solution is the soft-thresholded
//!   least-squares coefficient, b_j = S(x_jᵀy/n, λ) ("Regression shrinkage and selection via
//!   the lasso", JRSS-B, 1996; our objective carries 1/(2n), hence the /n). With weights the
//!   threshold is λ·w_j ("The adaptive lasso and its oracle properties", JASA, 2006); with the
//!   ℓ2 term the soft-thresholded value is divided by 1 + λ₂ ("Regularization and variable
//!   selection via the elastic net", JRSS-B, 2005).
//! * The smallest λ with an all-zero solution (λ_max): from the optimality conditions at
//!   b = 0, λ_max = max_j |x_jᵀ(y − ȳ)|/n with an intercept (which then equals ȳ for least
//!   squares and logit(ȳ) for logistic regression), max_j |x_jᵀy|/n (least squares) and
//!   max_j |x_jᵀ(y − ½)|/n (logistic) without (the subgradient condition |∇_j f(0)| ≤ λ of
//!   the 1996 paper above, with the intercept fitted first). Checked just above
//!   (all zero) and just below (exactly the arg-max coordinate enters, with the sign of its
//!   correlation; for least squares with the one-variable closed form).

#![allow(clippy::needless_range_loop)] // index loops mirror the formulas

use ellone::solver::{NewtonCd, Solver, SolverOptions, Status};
use ellone::{LeastSquares, Logistic, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::StandardNormal;

fn tight() -> NewtonCd {
    NewtonCd::new(SolverOptions {
        tol: 1e-12,
        max_iter: 500,
        ..Default::default()
    })
}

fn soft(z: f64, t: f64) -> f64 {
    // Written out here rather than calling the crate's own soft_threshold, so the
    // expectation does not share code with the solver.
    z.signum() * (z.abs() - t).max(0.0)
}

/// The Sylvester–Hadamard matrix of order n (a power of two): H_ij = (−1)^{popcount(i & j)}.
/// Its columns are orthogonal with squared norm n, and every column but the first is
/// orthogonal to the all-ones first column (so it is centred).
fn hadamard(n: usize) -> Array2<f64> {
    Array2::from_shape_fn((n, n), |(i, j)| {
        if (i & j).count_ones() % 2 == 0 {
            1.0
        } else {
            -1.0
        }
    })
}

/// A random n×p design with XᵀX = n·I (modified Gram–Schmidt on Gaussian columns); if
/// `centred`, the columns are also orthogonal to the all-ones vector.
fn random_orthonormal(n: usize, p: usize, centred: bool, seed: u64) -> Array2<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    let mut basis: Vec<Vec<f64>> = Vec::new();
    if centred {
        basis.push(vec![1.0 / (n as f64).sqrt(); n]);
    }
    let mut cols = Vec::new();
    while cols.len() < p {
        let mut v: Vec<f64> = (0..n).map(|_| rng.sample(StandardNormal)).collect();
        for _ in 0..2 {
            for q in &basis {
                let c: f64 = q.iter().zip(&v).map(|(a, b)| a * b).sum();
                v.iter_mut().zip(q).for_each(|(a, b)| *a -= c * b);
            }
        }
        let norm = v.iter().map(|a| a * a).sum::<f64>().sqrt();
        v.iter_mut().for_each(|a| *a /= norm);
        basis.push(v.clone());
        cols.push(v);
    }
    let scale = (n as f64).sqrt();
    Array2::from_shape_fn((n, p), |(i, j)| scale * cols[j][i])
}

fn gaussian(n: usize, p: usize, rng: &mut StdRng) -> Array2<f64> {
    Array2::from_shape_fn((n, p), |_| rng.sample(StandardNormal))
}

fn correlations(x: &Array2<f64>, r: &[f64]) -> Vec<f64> {
    let n = x.nrows() as f64;
    x.columns()
        .into_iter()
        .map(|c| c.iter().zip(r).map(|(a, b)| a * b).sum::<f64>() / n)
        .collect()
}

fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

fn arg_max_abs(v: &[f64]) -> usize {
    (0..v.len())
        .max_by(|&a, &b| v[a].abs().total_cmp(&v[b].abs()))
        .unwrap()
}

fn assert_close(got: f64, want: f64, tol: f64, what: &str) {
    assert!(
        (got - want).abs() <= tol * want.abs().max(1.0),
        "{what}: got {got}, closed form {want}"
    );
}

/// Hadamard design, no intercept: b_j = S(x_jᵀy/n, λ) exactly.
#[test]
fn hadamard_design_gives_soft_thresholded_least_squares() {
    let n = 16;
    let h = hadamard(n);
    let x = h.slice(ndarray::s![.., 1..11]).to_owned();
    let mut rng = StdRng::seed_from_u64(11);
    let y: Vec<f64> = (0..n)
        .map(|_| rng.sample::<f64, _>(StandardNormal) * 2.0)
        .collect();
    let z = correlations(&x, &y);
    let loss = LeastSquares::from_dense(x.view(), &y, false).unwrap();
    let zmax = z.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    for frac in [0.0, 0.1, 0.4, 0.8] {
        let lambda = frac * zmax;
        let sol = tight().solve(&loss, &Penalty::l1(lambda).unwrap()).unwrap();
        assert_eq!(sol.status, Status::Converged);
        for j in 0..x.ncols() {
            assert_close(sol.x[j], soft(z[j], lambda), 1e-10, &format!("b[{j}]"));
            if soft(z[j], lambda) == 0.0 {
                assert_eq!(sol.x[j], 0.0, "b[{j}] must be exactly zero");
            }
        }
    }
}

/// Random orthonormal design with an intercept: b₀ = ȳ and b_j = S(x_jᵀy/n, λ).
#[test]
fn orthonormal_design_with_intercept() {
    let (n, p) = (50, 12);
    for seed in 0..3u64 {
        let x = random_orthonormal(n, p, true, seed);
        let mut rng = StdRng::seed_from_u64(100 + seed);
        let y: Vec<f64> = (0..n)
            .map(|i| 3.0 + x[[i, 0]] - 0.5 * x[[i, 1]] + rng.sample::<f64, _>(StandardNormal))
            .collect();
        let z = correlations(&x, &y);
        let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
        for lambda in [0.05, 0.2, 0.5] {
            let sol = tight().solve(&loss, &Penalty::l1(lambda).unwrap()).unwrap();
            assert_eq!(sol.status, Status::Converged);
            let (b, b0) = loss.split(&sol.x);
            assert_close(b0, mean(&y), 1e-9, "intercept");
            for j in 0..p {
                assert_close(b[j], soft(z[j], lambda), 1e-9, &format!("b[{j}]"));
            }
        }
    }
}

/// Orthonormal design with penalty weights (w_j = 0 leaves b_j at the least-squares value):
/// b_j = S(x_jᵀy/n, λ·w_j).
#[test]
fn orthonormal_design_with_weights() {
    let (n, p) = (40, 8);
    let x = random_orthonormal(n, p, false, 7);
    let mut rng = StdRng::seed_from_u64(8);
    let y: Vec<f64> = (0..n).map(|_| rng.sample(StandardNormal)).collect();
    let z = correlations(&x, &y);
    let w = vec![1.0, 0.0, 2.0, 0.5, 1.0, 3.0, 0.0, 1.5];
    let lambda = 0.1;
    let loss = LeastSquares::from_dense(x.view(), &y, false).unwrap();
    let pen = Penalty::l1(lambda)
        .unwrap()
        .with_weights(w.clone())
        .unwrap();
    let sol = tight().solve(&loss, &pen).unwrap();
    assert_eq!(sol.status, Status::Converged);
    for j in 0..p {
        assert_close(
            sol.x[j],
            soft(z[j], lambda * w[j]),
            1e-9,
            &format!("b[{j}]"),
        );
    }
}

/// Orthonormal design with the elastic-net term: b_j = S(x_jᵀy/n, λ)/(1 + λ₂).
#[test]
fn orthonormal_design_elastic_net() {
    let (n, p) = (40, 10);
    let x = random_orthonormal(n, p, true, 21);
    let mut rng = StdRng::seed_from_u64(22);
    let y: Vec<f64> = (0..n)
        .map(|i| 1.0 + 2.0 * x[[i, 3]] + rng.sample::<f64, _>(StandardNormal))
        .collect();
    let z = correlations(&x, &y);
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    for (lambda, l2) in [(0.1, 0.5), (0.3, 2.0), (0.0, 1.0)] {
        let pen = Penalty::l1(lambda).unwrap().with_l2(l2).unwrap();
        let sol = tight().solve(&loss, &pen).unwrap();
        assert_eq!(sol.status, Status::Converged);
        let (b, b0) = loss.split(&sol.x);
        assert_close(b0, mean(&y), 1e-9, "intercept");
        for j in 0..p {
            let want = soft(z[j], lambda) / (1.0 + l2);
            assert_close(b[j], want, 1e-9, &format!("b[{j}] (λ={lambda}, λ₂={l2})"));
        }
    }
}

/// Data for the λ_max tests: a Gaussian design whose largest two correlations are well
/// separated (so "just below λ_max" has exactly one active coordinate).
fn lambda_max_data(seed: u64, logistic: bool) -> (Array2<f64>, Vec<f64>) {
    let (n, p) = (40, 12);
    let mut rng = StdRng::seed_from_u64(seed);
    let x = gaussian(n, p, &mut rng);
    let y: Vec<f64> = (0..n)
        .map(|i| {
            let eta = 0.3 + 1.2 * x[[i, 2]] - 0.8 * x[[i, 5]];
            if logistic {
                let pr = 1.0 / (1.0 + (-eta).exp());
                f64::from(rng.random::<f64>() < pr)
            } else {
                eta + rng.sample::<f64, _>(StandardNormal)
            }
        })
        .collect();
    (x, y)
}

/// Checks λ just above λ_max (all coefficients exactly zero, intercept as given) and just
/// below (only the arg-max coordinate non-zero, with the sign of its correlation).
fn check_lambda_max(
    solve: impl Fn(f64) -> ellone::Solution,
    corr: &[f64],
    p: usize,
    intercept_at_zero: Option<f64>,
) -> ellone::Solution {
    let lmax = corr.iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let k = arg_max_abs(corr);
    let mut sorted: Vec<f64> = corr.iter().map(|v| v.abs()).collect();
    sorted.sort_by(|a, b| b.total_cmp(a));
    assert!(
        sorted[1] < lmax * (1.0 - 1e-3),
        "test data: top correlations tie"
    );

    let above = solve(lmax * (1.0 + 1e-6));
    assert_eq!(above.status, Status::Converged);
    assert!(
        above.x[..p].iter().all(|&v| v == 0.0),
        "non-zero coefficient just above λ_max: {:?}",
        &above.x[..p]
    );
    if let Some(b0) = intercept_at_zero {
        assert_close(above.x[p], b0, 1e-9, "intercept at λ ≥ λ_max");
    }
    let below = solve(lmax * (1.0 - 1e-6));
    assert_eq!(below.status, Status::Converged);
    for j in 0..p {
        if j == k {
            assert!(
                below.x[j] != 0.0 && below.x[j].signum() == corr[j].signum(),
                "coordinate {k} should enter with the sign of its correlation: {}",
                below.x[j]
            );
        } else {
            assert_eq!(below.x[j], 0.0, "coordinate {j} entered just below λ_max");
        }
    }
    below
}

#[test]
fn least_squares_lambda_max_with_intercept() {
    let (x, y) = lambda_max_data(3, false);
    let (n, p) = x.dim();
    let ybar = mean(&y);
    let centred: Vec<f64> = y.iter().map(|v| v - ybar).collect();
    let corr = correlations(&x, &centred);
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    let solve = |l: f64| tight().solve(&loss, &Penalty::l1(l).unwrap()).unwrap();
    let below = check_lambda_max(solve, &corr, p, Some(ybar));
    // One active coordinate k: a one-variable lasso on centred data,
    // b_k = (c_k − λ·sign c_k) / (‖x_k − x̄_k‖²/n).
    let k = arg_max_abs(&corr);
    let lmax = corr[k].abs();
    let lambda = lmax * (1.0 - 1e-6);
    let xk = x.column(k);
    let xbar = xk.mean().unwrap();
    let var = xk.iter().map(|v| (v - xbar).powi(2)).sum::<f64>() / n as f64;
    let want = (corr[k] - lambda * corr[k].signum()) / var;
    // b_k is of order 1e-6·λ, so compare relative to it (the KKT tolerance 1e-12 bounds the
    // error far below this).
    assert!(
        (below.x[k] - want).abs() <= 1e-3 * want.abs(),
        "one-variable closed form: got {}, want {want}",
        below.x[k]
    );
    assert_close(below.x[p], ybar - want * xbar, 1e-9, "intercept just below");
}

#[test]
fn least_squares_lambda_max_without_intercept() {
    let (x, y) = lambda_max_data(4, false);
    let p = x.ncols();
    let corr = correlations(&x, &y);
    let loss = LeastSquares::from_dense(x.view(), &y, false).unwrap();
    let solve = |l: f64| tight().solve(&loss, &Penalty::l1(l).unwrap()).unwrap();
    check_lambda_max(solve, &corr, p, None);
}

#[test]
fn logistic_lambda_max_with_intercept() {
    let (x, y) = lambda_max_data(5, true);
    let p = x.ncols();
    let ybar = mean(&y);
    let centred: Vec<f64> = y.iter().map(|v| v - ybar).collect();
    let corr = correlations(&x, &centred);
    let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
    let solve = |l: f64| tight().solve(&loss, &Penalty::l1(l).unwrap()).unwrap();
    // At λ ≥ λ_max only the intercept is fitted: b₀ = logit(ȳ).
    check_lambda_max(solve, &corr, p, Some((ybar / (1.0 - ybar)).ln()));
}

#[test]
fn logistic_lambda_max_without_intercept() {
    let (x, y) = lambda_max_data(6, true);
    let p = x.ncols();
    // At b = 0 every probability is ½, so the gradient is x_jᵀ(½ − y)/n.
    let shifted: Vec<f64> = y.iter().map(|v| v - 0.5).collect();
    let corr = correlations(&x, &shifted);
    let loss = Logistic::from_dense(x.view(), &y, false).unwrap();
    let solve = |l: f64| tight().solve(&loss, &Penalty::l1(l).unwrap()).unwrap();
    check_lambda_max(solve, &corr, p, None);
}
