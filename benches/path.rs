//! Benchmark: a 100-point lasso path on sparse data (n = 20 000, p = 50 000, 0.1 % density),
//! with and without strong-rule screening, against one Xᵀv pass over the same data.
//!
//! Reported: total path time / time of one Xᵀv pass (target ≤ 300), the fraction of
//! coordinates screened, and the speed-up from screening.

use criterion::{criterion_group, criterion_main, Criterion};
use ellone::path::{fit_path, PathOptions};
use ellone::{Design, LeastSquares, Penalty};
use rand::{rngs::StdRng, RngExt, SeedableRng};
use sprs::TriMat;
use std::time::Instant;

/// Synthetic sparse regression (demo data): 0.1 % density, 500 true non-zeros of size 1–3,
/// noise with sd 0.1 (a signal-to-noise ratio at which a sparse model is worth fitting).
fn problem(n: usize, p: usize, density: f64, seed: u64) -> LeastSquares {
    let mut rng = StdRng::seed_from_u64(seed);
    let per_col = ((n as f64 * density).round() as usize).max(1);
    let mut tri = TriMat::new((n, p));
    for j in 0..p {
        for _ in 0..per_col {
            tri.add_triplet(rng.random_range(0..n), j, rng.random::<f64>() * 2.0 - 1.0);
        }
    }
    let x: sprs::CsMat<f64> = tri.to_csc();
    let mut b = vec![0.0; p];
    for k in 0..500 {
        let size = 1.0 + 2.0 * rng.random::<f64>();
        b[(k * 7919) % p] = if k % 2 == 0 { size } else { -size };
    }
    let mut y = vec![0.0; n];
    let design = Design::sparse_unchecked_zero(x).unwrap();
    design.matvec(&b, &mut y);
    for v in y.iter_mut() {
        *v += 0.1 * (rng.random::<f64>() - 0.5) * 12f64.sqrt();
    }
    LeastSquares::new(design, y, true).unwrap()
}

fn one_pass(loss: &LeastSquares) -> f64 {
    let v: Vec<f64> = loss.response().to_vec();
    let mut out = vec![0.0; loss.design().ncols()];
    let reps = 20;
    let t = Instant::now();
    for _ in 0..reps {
        loss.design().tmatvec(&v, &mut out);
        std::hint::black_box(&out);
    }
    t.elapsed().as_secs_f64() / reps as f64
}

fn bench(c: &mut Criterion) {
    let loss = problem(20_000, 50_000, 0.001, 1);
    let pen = Penalty::l1(1.0).unwrap();
    let shape = (20_000, 50_000);
    let mut group = c.benchmark_group("lasso_path_sparse_20000x50000");
    group.sample_size(10);
    for screening in [true, false] {
        let opts = PathOptions {
            screening,
            ..Default::default()
        };
        // One reported run with the ratio, then criterion's timing.
        let pass = one_pass(&loss);
        let t = Instant::now();
        let path = fit_path(&loss, &pen, shape, &opts).unwrap();
        let total = t.elapsed().as_secs_f64();
        let iters: usize = path.points.iter().map(|p| p.iterations).sum();
        for p in path.points.iter().step_by(10) {
            println!(
                "  λ={:.4e} nnz={} it={} t={:.3}s screened={}",
                p.lambda, p.nnz, p.iterations, p.seconds, p.screened
            );
        }
        let viol: usize = path.points.iter().map(|p| p.violations).sum();
        println!(
            "screening={screening}: path {total:.3} s, one Xᵀv {:.3} ms, ratio {:.0} passes; \
             {} points, Newton iterations {iters}, screened fraction {:.3}, KKT re-adds {viol}, \
             final nnz {}",
            pass * 1e3,
            total / pass,
            path.points.len(),
            path.screened_fraction(),
            path.points.last().map_or(0, |p| p.nnz)
        );
        group.bench_function(
            if screening {
                "screening"
            } else {
                "no_screening"
            },
            |b| b.iter(|| fit_path(&loss, &pen, shape, &opts).unwrap()),
        );
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
