//! Dense and sparse (CSC) storage of the same data must give the same solution.
//!
//! The problems are strongly convex on their support (n > p, Gaussian non-zeros), so the
//! minimiser is unique; both runs are solved to a KKT tolerance of 1e-12 and must agree to
//! 1e-10 (each is within ~1e-12/μ of the minimiser, μ the smallest curvature). The sparse
//! matrix is assembled from triplets, independently of the dense array.

use ellone::solver::{NewtonCd, Solver, SolverOptions, Status};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::StandardNormal;
use sprs::{CsMat, TriMat};

/// A random design with about 30% non-zeros (every column has at least one) as both a
/// dense array and a CSC matrix, plus a response (Gaussian or Bernoulli).
fn data(seed: u64, logistic: bool) -> (Array2<f64>, CsMat<f64>, Vec<f64>) {
    let (n, p) = (80, 20);
    let mut rng = StdRng::seed_from_u64(seed);
    let mut dense = Array2::zeros((n, p));
    let mut tri = TriMat::new((n, p));
    for j in 0..p {
        for i in 0..n {
            if i % p == j || rng.random::<f64>() < 0.3 {
                let v: f64 = rng.sample(StandardNormal);
                dense[[i, j]] = v;
                tri.add_triplet(i, j, v);
            }
        }
    }
    let y = (0..n)
        .map(|i| {
            let eta = 0.4 + 1.5 * dense[[i, 0]] - dense[[i, 3]] + 0.7 * dense[[i, 7]];
            if logistic {
                f64::from(rng.random::<f64>() < 1.0 / (1.0 + (-eta).exp()))
            } else {
                eta + 0.5 * rng.sample::<f64, _>(StandardNormal)
            }
        })
        .collect();
    (dense, tri.to_csc(), y)
}

fn solver() -> NewtonCd {
    NewtonCd::new(SolverOptions {
        tol: 1e-12,
        max_iter: 500,
        ..Default::default()
    })
}

/// λ_max with an intercept: max_j |x_jᵀ(y − ȳ)|/n.
fn lambda_max(x: &Array2<f64>, y: &[f64]) -> f64 {
    let n = y.len() as f64;
    let ybar = y.iter().sum::<f64>() / n;
    x.columns()
        .into_iter()
        .map(|c| (c.iter().zip(y).map(|(a, b)| a * (b - ybar)).sum::<f64>() / n).abs())
        .fold(0.0, f64::max)
}

fn assert_same(dense: &dyn Loss, sparse: &dyn Loss, pen: &Penalty, label: &str) {
    let a = solver().solve(dense, pen).unwrap();
    let b = solver().solve(sparse, pen).unwrap();
    assert_eq!(a.status, Status::Converged, "{label}: dense");
    assert_eq!(b.status, Status::Converged, "{label}: sparse");
    let mut worst = 0.0f64;
    for (k, (u, v)) in a.x.iter().zip(&b.x).enumerate() {
        let diff = (u - v).abs() / u.abs().max(1.0);
        worst = worst.max(diff);
        assert!(
            diff <= 1e-10,
            "{label}: coordinate {k}: dense {u} vs sparse {v}"
        );
    }
    // Both losses evaluate the same function.
    let fa = dense.value(&a.x).unwrap();
    let fb = sparse.value(&a.x).unwrap();
    assert!(
        (fa - fb).abs() <= 1e-13 * fa.abs().max(1.0),
        "{label}: {fa} vs {fb}"
    );
    assert!(a.nnz() > 1, "{label}: trivial solution");
    println!("{label}: nnz {}, max difference {worst:.1e}", a.nnz());
}

#[test]
fn least_squares_dense_equals_sparse() {
    for seed in 0..3u64 {
        let (d, s, y) = data(seed, false);
        let dense = LeastSquares::from_dense(d.view(), &y, true).unwrap();
        let sparse = LeastSquares::from_sparse(s, &y, true).unwrap();
        assert!(sparse.design().is_sparse() && !dense.design().is_sparse());
        let lmax = lambda_max(&d, &y);
        for frac in [0.02, 0.1, 0.5] {
            let pen = Penalty::l1(frac * lmax).unwrap();
            assert_same(
                &dense,
                &sparse,
                &pen,
                &format!("LS seed {seed} λ/λmax {frac}"),
            );
        }
        let pen = Penalty::l1(0.05 * lmax).unwrap().with_l2(0.3).unwrap();
        assert_same(
            &dense,
            &sparse,
            &pen,
            &format!("LS elastic net seed {seed}"),
        );
    }
}

#[test]
fn logistic_dense_equals_sparse() {
    for seed in 10..13u64 {
        let (d, s, y) = data(seed, true);
        let dense = Logistic::from_dense(d.view(), &y, true).unwrap();
        let sparse = Logistic::from_sparse(s, &y, true).unwrap();
        assert!(sparse.design().is_sparse() && !dense.design().is_sparse());
        let lmax = lambda_max(&d, &y);
        for frac in [0.05, 0.1, 0.5] {
            let pen = Penalty::l1(frac * lmax).unwrap();
            assert_same(
                &dense,
                &sparse,
                &pen,
                &format!("logistic seed {seed} λ/λmax {frac}"),
            );
        }
    }
}

/// A CSR input is accepted and converted (never densified): same answer again.
#[test]
fn csr_input_equals_csc_input() {
    let (d, s, y) = data(20, false);
    let csr = s.to_csr();
    assert!(csr.is_csr());
    let a = LeastSquares::from_sparse(s, &y, true).unwrap();
    let b = LeastSquares::from_sparse(csr, &y, true).unwrap();
    let pen = Penalty::l1(0.1 * lambda_max(&d, &y)).unwrap();
    assert_same(&a, &b, &pen, "CSC vs CSR");
}
