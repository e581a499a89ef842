//! The CRF size-scan problem shared by the `crf` and `baselines` benchmarks (demo data, not
//! a reference): X ~ N(0, 1); Y = X B + E with B non-zero on 2% of the rows (30% of each
//! such row) and E an AR(1)-correlated noise across outputs (coefficient 0.6);
//! λ_Θ = 0.3·max|∇_Θ f(start)| and λ_Λ = 0.3·max_{k≠l}|S_yy,kl| (fractions of the values
//! at which the start point is optimal).

use ellone::crf::{CrfData, CrfLoss, InputMode};
use ellone::Loss;
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

/// The problem with n samples, p inputs and q outputs from `seed`.
pub fn problem(n: usize, p: usize, q: usize, seed: u64) -> CrfLoss {
    let mut rng = StdRng::seed_from_u64(seed);
    let x = Array2::from_shape_fn((n, p), |_| StandardNormal.sample(&mut rng));
    let mut b = Array2::<f64>::zeros((p, q));
    for i in 0..p {
        if rng.random::<f64>() < 0.02 {
            for j in 0..q {
                if rng.random::<f64>() < 0.3 {
                    let v: f64 = StandardNormal.sample(&mut rng);
                    b[[i, j]] = v;
                }
            }
        }
    }
    let mut y = ellone::linalg::matmul(x.view(), b.view()).unwrap();
    for i in 0..n {
        let mut prev = 0.0;
        for j in 0..q {
            let z: f64 = StandardNormal.sample(&mut rng);
            prev = 0.6 * prev + z;
            y[[i, j]] += prev;
        }
    }
    let data = CrfData::new(x.view(), y.view(), false, false, InputMode::Auto).unwrap();
    let probe = CrfLoss::new(data.clone(), 0.0, 0.0).unwrap();
    let nl = probe.precision_coordinates();
    let mut g = vec![0.0; probe.dim()];
    probe.gradient(&probe.start(), &mut g);
    let lt = 0.3 * g[nl..].iter().fold(0.0f64, |a, v| a.max(v.abs()));
    let syy = data.syy();
    let mut off = 0.0f64;
    for k in 0..q {
        for l in 0..q {
            if k != l {
                off = off.max(syy[[k, l]].abs());
            }
        }
    }
    CrfLoss::new(data, 0.3 * off, lt).unwrap()
}
