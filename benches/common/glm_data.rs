//! The synthetic regression problems of issue-size benchmarks (demo data), shared by
//! benches/glm.rs and the races of benches/baselines.rs: a dense n = 2000, p = 1000 design
//! of N(0, 1) entries and a sparse n = 20 000, p = 50 000 design at 0.1 % density (20
//! uniform(−1, 1) entries per column), each with a sparse true coefficient vector, a
//! Gaussian response (noise sd 0.5) and Bernoulli labels from the same linear predictor.

use ellone::Design;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::StandardNormal;
use sprs::TriMat;

/// A design with its Gaussian response and its labels.
pub struct GlmData {
    pub design: Design,
    pub y: Vec<f64>,
    pub labels: Vec<f64>,
}

/// A sparse true coefficient vector: `k` non-zeros of size 0.5–1.5 (times `scale`) with
/// alternating signs, spread over the p coordinates.
fn sparse_beta(p: usize, k: usize, scale: f64, rng: &mut StdRng) -> Vec<f64> {
    let mut b = vec![0.0; p];
    for i in 0..k {
        let size = scale * (0.5 + rng.random::<f64>());
        b[(i * 7919) % p] = if i % 2 == 0 { size } else { -size };
    }
    b
}

/// The Gaussian response and the labels from η = X β.
fn responses(design: Design, beta: &[f64], rng: &mut StdRng) -> GlmData {
    let n = design.nrows();
    let mut eta = vec![0.0; n];
    design.matvec(beta, &mut eta);
    let y = eta
        .iter()
        .map(|e| e + 0.5 * rng.sample::<f64, _>(StandardNormal))
        .collect();
    let labels = eta
        .iter()
        .map(|e| f64::from(rng.random::<f64>() < 1.0 / (1.0 + (-e).exp())))
        .collect();
    GlmData { design, y, labels }
}

/// Dense n = 2000, p = 1000, 20 true non-zeros.
#[allow(dead_code)] // benches/baselines.rs races its own dense problems
pub fn dense() -> GlmData {
    let (n, p) = (2000, 1000);
    let mut rng = StdRng::seed_from_u64(1);
    let x = ndarray::Array2::from_shape_fn((n, p), |_| rng.sample::<f64, _>(StandardNormal));
    let design = Design::dense(x.view()).unwrap();
    let beta = sparse_beta(p, 20, 0.5, &mut rng);
    responses(design, &beta, &mut rng)
}

/// Sparse n = 20 000, p = 50 000 at 0.1 % density, 500 true non-zeros.
pub fn sparse() -> GlmData {
    let (n, p, per_col) = (20_000, 50_000, 20);
    let mut rng = StdRng::seed_from_u64(2);
    let mut tri = TriMat::with_capacity((n, p), p * per_col);
    for j in 0..p {
        for _ in 0..per_col {
            tri.add_triplet(rng.random_range(0..n), j, 2.0 * rng.random::<f64>() - 1.0);
        }
    }
    let design = Design::sparse(tri.to_csc()).unwrap();
    let beta = sparse_beta(p, 500, 2.0, &mut rng);
    responses(design, &beta, &mut rng)
}

/// λ_max = max_j |x_jᵀ(y − ȳ)|/n (with an intercept; the same formula for both losses).
pub fn lambda_max(design: &Design, y: &[f64]) -> f64 {
    let n = y.len() as f64;
    let ybar = y.iter().sum::<f64>() / n;
    let c: Vec<f64> = y.iter().map(|v| v - ybar).collect();
    let mut out = vec![0.0; design.ncols()];
    design.tmatvec(&c, &mut out);
    out.iter().fold(0.0f64, |a, v| a.max(v.abs())) / n
}
