//! Synthetic sparse-graph covariance data shared by the precision benchmarks (demo data).
//!
//! A random sparse graph (each variable linked to 2 others chosen at random), true precision
//! Θ* with off-diagonal entries ±U(0.2, 0.4) and a diagonal making it strictly diagonally
//! dominant (hence positive definite); n = p/2 + 200 samples of N(0, Θ*⁻¹); S is their
//! centred sample covariance.

use ellone::linalg;
use ellone::precision::sample_covariance;
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

/// The sample covariance S of the sparse-graph data above, p variables, seeded.
pub fn sparse_graph_covariance(p: usize, seed: u64) -> Array2<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    let mut theta = Array2::<f64>::zeros((p, p));
    for i in 0..p {
        for _ in 0..2 {
            let j = rng.random_range(0..p);
            if j != i {
                let v =
                    rng.random_range(0.2..0.4) * if rng.random::<f64>() < 0.5 { -1.0 } else { 1.0 };
                theta[[i, j]] = v;
                theta[[j, i]] = v;
            }
        }
    }
    for i in 0..p {
        let r: f64 = theta.row(i).iter().map(|v| v.abs()).sum();
        theta[[i, i]] = r + 0.5;
    }
    let sigma = linalg::cholesky(theta.view())
        .expect("diagonally dominant")
        .inverse();
    let l = linalg::cholesky(sigma.view()).expect("SPD").lower();
    let n = p / 2 + 200;
    let z = Array2::from_shape_fn((n, p), |_| StandardNormal.sample(&mut rng));
    let x = linalg::matmul(z.view(), l.t()).unwrap();
    sample_covariance(x.view(), true).expect("finite data")
}

/// The λ that keeps the fraction `density` of the off-diagonal pairs above it: the
/// (1 − density) quantile of the off-diagonal |S_ij|.
pub fn quantile_lambda(s: &Array2<f64>, density: f64) -> f64 {
    let p = s.nrows();
    let mut v: Vec<f64> = Vec::with_capacity(p * (p - 1) / 2);
    for i in 0..p {
        for j in 0..i {
            v.push(s[[i, j]].abs());
        }
    }
    v.sort_by(|a, b| b.total_cmp(a));
    v[((density * v.len() as f64) as usize).min(v.len() - 1)]
}
