//! Sparse precision estimation on synthetic sparse-graph data, p ∈ {500, 1000, 2000}.
//!
//! Data: the sparse-graph covariance of `benches/common/sparse_graph.rs` (each variable
//! linked to 2 others, n = p/2 + 200 samples). λ is set to the quantile of the off-diagonal |S_ij|
//! that keeps about 1% of the pairs above it (a rule of thumb for "about 1% non-zeros";
//! the achieved density of the estimate is printed).
//!
//! Reported, per p, in the same run: time to solve to the default tolerance (one full
//! `estimate_precision` call, results included) divided by the time of one p × p Cholesky
//! factorisation plus inverse; Newton iterations; inner sweeps. Medians of a few repeats.
//!
//! Environment: `ELLONE_BENCH_P` (comma-separated sizes, default "500,1000,2000"),
//! `ELLONE_BENCH_REPEATS` (default 3).

#[path = "common/sparse_graph.rs"]
mod sparse_graph;

use criterion::{criterion_group, criterion_main, Criterion};
use ellone::linalg;
use ellone::precision::{estimate_precision, PrecisionFit, PrecisionInput, PrecisionOptions};
use ndarray::Array2;
use sparse_graph::{quantile_lambda, sparse_graph_covariance};
use std::hint::black_box;
use std::time::{Duration, Instant};

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn cholesky_plus_inverse(a: &Array2<f64>) -> Array2<f64> {
    linalg::cholesky(a.view()).expect("SPD").inverse()
}

fn solve(s: &Array2<f64>, lambda: f64) -> PrecisionFit {
    estimate_precision(
        PrecisionInput::Covariance(s.view()),
        lambda,
        &PrecisionOptions::default(),
    )
    .expect("solve")
}

fn sizes() -> Vec<usize> {
    std::env::var("ELLONE_BENCH_P")
        .ok()
        .map(|v| v.split(',').filter_map(|t| t.trim().parse().ok()).collect())
        .unwrap_or_else(|| vec![500, 1000, 2000])
}

fn bench(c: &mut Criterion) {
    let repeats: usize = std::env::var("ELLONE_BENCH_REPEATS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(3)
        .max(1);
    println!("backend: {}", linalg::backend_name());
    let mut group = c.benchmark_group("precision");
    group.sample_size(10);
    group.warm_up_time(Duration::from_millis(100));
    for p in sizes() {
        let s = sparse_graph_covariance(p, 7 + p as u64);
        let lambda = quantile_lambda(&s, 0.01);
        // Reference: one Cholesky + inverse of an SPD p × p matrix (S + I).
        let mut spd = s.clone();
        for i in 0..p {
            spd[[i, i]] += 1.0;
        }
        let mut t_ref = Vec::new();
        let mut t_solve = Vec::new();
        let mut fit = None;
        for _ in 0..repeats {
            let t = Instant::now();
            black_box(cholesky_plus_inverse(&spd));
            t_ref.push(t.elapsed().as_secs_f64());
            let t = Instant::now();
            let f = solve(&s, lambda);
            t_solve.push(t.elapsed().as_secs_f64());
            fit = Some(f);
        }
        let fit = fit.expect("at least one repeat");
        let (tr, ts) = (median(t_ref), median(t_solve));
        let nnz = fit.edges.len() as f64 * 2.0 / (p * (p - 1)) as f64;
        println!(
            "p = {p}: λ = {lambda:.4}, status {:?}, off-diagonal density {:.2}%, blocks {:?} \
             (+{} closed form), Newton iterations {}, inner sweeps {}, KKT {:.1e}, gap {:?}; \
             solve {ts:.3} s, Cholesky+inverse {tr:.3} s, ratio {:.1}",
            fit.status,
            100.0 * nnz,
            fit.block_sizes,
            fit.closed_form_variables,
            fit.newton_iterations,
            fit.inner_sweeps,
            fit.kkt_residual,
            fit.duality_gap,
            ts / tr,
        );
        group.bench_function(format!("cholesky_inverse_p{p}"), |b| {
            b.iter(|| black_box(cholesky_plus_inverse(&spd)))
        });
        group.bench_function(format!("solve_p{p}"), |b| {
            b.iter(|| black_box(solve(&s, lambda)))
        });
    }
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
