//! Time to 1e-6 relative suboptimality: each baseline (FISTA, ADMM, OWL-QN) against Newton
//! coordinate descent, per loss, on problems of the size the loss benchmarks use.
//!
//! Every problem is raced with [`ellone::race::race`]: a reference solve by Newton-CD at
//! KKT tolerance 1e-12 fixes F*, then each solver runs from the loss's default start until
//! (F − F*)/|F*| ≤ 1e-6 or the budget runs out. Reported per loss: seconds to the target
//! for each solver and the ratio baseline/Newton-CD (">" when the baseline did not reach
//! the target within the budget: the ratio is then a lower bound).
//!
//! Problems (synthetic, seeded; the parameter counts are per block), each in an easy
//! (well-conditioned, very sparse) and a harder (correlated or denser) version:
//! * logistic: n = 2000, p = 1000 independent N(0,1) features, 20 true non-zero
//!   coefficients, labels drawn from the logistic model, intercept, λ = 0.05·λ_max;
//!   logistic-correlated: n = 1000, p = 2000, AR(1) correlation 0.9 between neighbouring
//!   columns, λ = 0.02·λ_max; logistic-illcond: correlation 0.99, λ = 0.005·λ_max;
//! * least-squares(-correlated): the same designs, Gaussian noise, same λ ratios;
//! * logistic-sparse, least-squares-sparse: the sparse n = 20 000, p = 50 000 (0.1 %)
//!   problems of benches/glm.rs (benches/common/glm_data.rs), intercept, λ = 0.1·λ_max;
//! * precision: p = 1000 (500 500 coordinates), the sparse-graph data of benches/precision.rs
//!   (each variable linked to 2 others, n = p/2 + 200 samples), λ at the 99% quantile of
//!   the off-diagonal |S_ij|; precision-dense: λ at the 95% quantile; all solvers on the
//!   same log-det loss (no block screening); precision-ar1: p = 1000 variables of an AR(1)
//!   process with coefficient 0.9, n = 1200, λ = 0.1 (ill-conditioned, denser estimate);
//! * Gaussian CRF: p = 40 inputs, q = 45 outputs (Λ: 1035 coordinates, Θ: 1800), n = 400,
//!   sparse true Λ (chain, off-diagonal −0.5 against a diagonal of 1.5) and Θ (each output
//!   driven by 2 inputs), λ_Λ = λ_Θ = 0.05; crf-correlated: p = 150 inputs with AR(1)
//!   correlation 0.8 between neighbours (like hourly weather), q = 80 outputs (Λ: 3240
//!   coordinates, Θ: 12 000), n = 1000, chain off-diagonal −0.7 (strongly correlated
//!   errors, as in multi-site forecasts); crf-wide: p = 3000 independent inputs, q = 100
//!   outputs, n = 1000 (Θ: 300 000 coordinates, more inputs than samples), chain
//!   off-diagonal −0.5, same λ (a denser solution: about 43 000 non-zeros); crf-large: the
//!   p = 3000, q = 100, n = 1000 problem of the `crf` size scan (benches/common/crf_sizes.rs:
//!   sparse B on 2% of the inputs, AR(1) output noise, λ at 0.3 of the start point's
//!   optimality bound; about 740 non-zeros).
//!
//! Environment: `ELLONE_BENCH_LOSSES` (comma-separated subset of
//! "logistic,logistic-correlated,logistic-illcond,logistic-sparse,least-squares,
//! least-squares-correlated,least-squares-sparse,precision,precision-dense,precision-ar1,crf,
//! crf-correlated,crf-wide,crf-large"; default all),
//! `ELLONE_BENCH_BUDGET` (seconds per solver, default 60), `ELLONE_BENCH_OUT` (folder for the race CSV and SVG files, default
//! target/bench-baselines), `ELLONE_BENCH_SOLVERS` (baselines to run besides Newton-CD,
//! default "fista,admm,owl-qn").

#[path = "common/sparse_graph.rs"]
mod sparse_graph;

#[path = "common/crf_sizes.rs"]
mod crf_sizes;

#[path = "common/glm_data.rs"]
mod glm_data;

use ellone::crf::{CrfData, CrfLoss, InputMode};
use ellone::linalg;
use ellone::loss::precision::LogDet;
use ellone::precision::sample_covariance;
use ellone::race::{race, RaceOptions, RaceResult};
use ellone::solver::{Admm, Fista, NewtonCd, Owlqn, Solver, SolverOptions};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::{Distribution, StandardNormal};
use sparse_graph::{quantile_lambda, sparse_graph_covariance};
use std::path::PathBuf;
use std::time::Duration;

fn normal_matrix(rng: &mut StdRng, n: usize, p: usize) -> Array2<f64> {
    Array2::from_shape_fn((n, p), |_| StandardNormal.sample(rng))
}

/// λ_max of an ℓ1 problem with an intercept: ‖Xᵀ(r₀)‖∞/n with r₀ the centred response
/// (least squares) or y − ȳ (logistic at the intercept-only optimum).
fn lambda_max(x: &Array2<f64>, y: &[f64]) -> f64 {
    let n = y.len() as f64;
    let mean = y.iter().sum::<f64>() / n;
    let r: Vec<f64> = y.iter().map(|v| v - mean).collect();
    x.columns()
        .into_iter()
        .map(|c| (c.iter().zip(&r).map(|(a, b)| a * b).sum::<f64>() / n).abs())
        .fold(0.0, f64::max)
}

/// A linear-predictor problem: n × p N(0,1) features, made AR(1)-correlated across columns
/// with coefficient `rho` (x_j ← ρ x_{j−1} + √(1−ρ²) x_j), and λ = `ratio`·λ_max.
fn linear_problem(
    logistic: bool,
    n: usize,
    p: usize,
    rho: f64,
    ratio: f64,
) -> (Box<dyn Loss>, Penalty) {
    let mut rng = StdRng::seed_from_u64(11);
    let mut x = normal_matrix(&mut rng, n, p);
    if rho != 0.0 {
        let c = (1.0 - rho * rho).sqrt();
        for i in 0..n {
            for j in 1..p {
                x[[i, j]] = rho * x[[i, j - 1]] + c * x[[i, j]];
            }
        }
    }
    let mut beta = vec![0.0; p];
    for b in beta.iter_mut().take(20) {
        *b = if rng.random::<f64>() < 0.5 { -1.0 } else { 1.0 } * rng.random_range(0.5..1.5);
    }
    let eta: Vec<f64> = x
        .rows()
        .into_iter()
        .map(|r| r.iter().zip(&beta).map(|(a, b)| a * b).sum())
        .collect();
    let y: Vec<f64> = eta
        .iter()
        .map(|&e| {
            if logistic {
                f64::from(rng.random::<f64>() < 1.0 / (1.0 + (-e).exp()))
            } else {
                e + Distribution::<f64>::sample(&StandardNormal, &mut rng)
            }
        })
        .collect();
    let lambda = ratio * lambda_max(&x, &y);
    let pen = Penalty::l1(lambda).expect("valid λ");
    if logistic {
        (
            Box::new(Logistic::from_dense(x.view(), &y, true).expect("valid data")),
            pen,
        )
    } else {
        (
            Box::new(LeastSquares::from_dense(x.view(), &y, true).expect("valid data")),
            pen,
        )
    }
}

/// The sparse 20 000 × 50 000 problem of benches/glm.rs (logistic or least squares with an
/// intercept), λ = 0.1·λ_max.
fn sparse_glm_problem(logistic: bool) -> (Box<dyn Loss>, Penalty) {
    let d = glm_data::sparse();
    if logistic {
        let pen = Penalty::l1(0.1 * glm_data::lambda_max(&d.design, &d.labels)).expect("valid λ");
        let loss = Logistic::new(d.design, d.labels, true).expect("valid data");
        (Box::new(loss), pen)
    } else {
        let pen = Penalty::l1(0.1 * glm_data::lambda_max(&d.design, &d.y)).expect("valid λ");
        let loss = LeastSquares::new(d.design, d.y, true).expect("valid data");
        (Box::new(loss), pen)
    }
}

/// The sparse-graph covariance of benches/precision.rs, λ at the `quantile` of the
/// off-diagonal |S_ij|.
fn precision_problem(quantile: f64) -> (Box<dyn Loss>, Penalty) {
    let s = sparse_graph_covariance(1000, 1000);
    let lambda = quantile_lambda(&s, 1.0 - quantile);
    let loss = LogDet::new(s.view(), false).expect("valid covariance");
    (Box::new(loss), Penalty::l1(lambda).expect("valid λ"))
}

/// An ill-conditioned precision problem: p = 1000 variables of a stationary AR(1) process
/// with coefficient 0.9 (true precision tridiagonal, condition number ≈ 360), n = 1200
/// centred samples, λ = 0.1.
fn precision_ar1_problem() -> (Box<dyn Loss>, Penalty) {
    let (n, p, rho) = (1200, 1000, 0.9);
    let mut rng = StdRng::seed_from_u64(99);
    let mut x = normal_matrix(&mut rng, n, p);
    let c = (1.0f64 - rho * rho).sqrt();
    for i in 0..n {
        for j in 1..p {
            x[[i, j]] = rho * x[[i, j - 1]] + c * x[[i, j]];
        }
    }
    let s = sample_covariance(x.view(), true).expect("finite data");
    let loss = LogDet::new(s.view(), false).expect("valid covariance");
    (Box::new(loss), Penalty::l1(0.1).expect("valid λ"))
}

/// A Gaussian CRF with n samples, p inputs (AR(1) correlation `input_corr` between
/// neighbouring inputs) and q outputs: y = −Λ⁻¹Θᵀx + noise with covariance Λ⁻¹, Λ a chain
/// with diagonal 1.5 and off-diagonal −`coupling` (strongly correlated errors as `coupling`
/// approaches 0.75), Θ two inputs per output; λ_Λ = λ_Θ = 0.05.
fn crf_problem(
    seed: u64,
    (n, p, q): (usize, usize, usize),
    input_corr: f64,
    coupling: f64,
) -> (Box<dyn Loss>, Penalty) {
    let mut rng = StdRng::seed_from_u64(seed);
    let mut x = normal_matrix(&mut rng, n, p);
    let keep = (1.0 - input_corr * input_corr).sqrt();
    for j in 1..p {
        for i in 0..n {
            x[[i, j]] = input_corr * x[[i, j - 1]] + keep * x[[i, j]];
        }
    }
    let mut lam = Array2::<f64>::eye(q) * 1.5;
    for i in 0..q - 1 {
        lam[[i, i + 1]] = -coupling;
        lam[[i + 1, i]] = -coupling;
    }
    let mut th = Array2::<f64>::zeros((p, q));
    for k in 0..q {
        for _ in 0..2 {
            th[[rng.random_range(0..p), k]] = rng.random_range(-1.0..1.0);
        }
    }
    let sigma = linalg::cholesky(lam.view()).expect("SPD chain").inverse();
    let l = linalg::cholesky(sigma.view()).expect("SPD").lower();
    let mean = linalg::matmul(
        linalg::matmul(x.view(), th.view()).unwrap().view(),
        sigma.view(),
    )
    .unwrap()
        * -1.0;
    let noise = linalg::matmul(normal_matrix(&mut rng, n, q).view(), l.t()).unwrap();
    let y = mean + noise;
    let data = CrfData::new(x.view(), y.view(), true, false, InputMode::Auto).expect("data");
    let loss = CrfLoss::new(data, 0.05, 0.05).expect("valid λ");
    (Box::new(loss), Penalty::l1(1.0).expect("valid λ"))
}

/// Newton-CD first (the base of the ratios), then the baselines named in
/// `ELLONE_BENCH_SOLVERS` (default "fista,admm,owl-qn").
fn solvers() -> Vec<Box<dyn Solver>> {
    let o = SolverOptions {
        tol: 1e-14,
        max_iter: usize::MAX / 2,
        ..Default::default()
    };
    let chosen =
        std::env::var("ELLONE_BENCH_SOLVERS").unwrap_or_else(|_| "fista,admm,owl-qn".into());
    let mut out: Vec<Box<dyn Solver>> = vec![Box::new(NewtonCd::new(o.clone()))];
    for name in chosen.split(',').map(str::trim) {
        match name {
            "fista" => out.push(Box::new(Fista::new(o.clone()))),
            "admm" => out.push(Box::new(Admm::new(o.clone()))),
            "owl-qn" => out.push(Box::new(Owlqn::new(o.clone()))),
            "newton-cd" | "" => {}
            other => eprintln!("unknown solver '{other}' in ELLONE_BENCH_SOLVERS; skipped"),
        }
    }
    out
}

fn report(name: &str, result: &RaceResult, budget: f64) {
    let times: Vec<Option<f64>> = (0..result.entries.len())
        .map(|i| result.time_to(i, 1e-6))
        .collect();
    let newton = times[0];
    println!("\n== {name}: F* = {:.12e}", result.best_objective);
    println!(
        "{:>10} {:>14} {:>12} {:>12} {:>18}",
        "solver", "to 1e-6 (s)", "iterations", "passes", "ratio vs newton-cd"
    );
    let mut best_baseline: Option<(String, f64, bool)> = None;
    for (i, e) in result.entries.iter().enumerate() {
        let last = e.records.last();
        let (t, reached) = match times[i] {
            Some(t) => (t, true),
            None => (e.seconds.max(budget), false),
        };
        let ratio = newton.map(|tn| t / tn);
        let ratio_s = match (ratio, reached) {
            (Some(r), true) => format!("{r:.1}"),
            (Some(r), false) => format!("> {r:.1}"),
            (None, _) => "n/a".into(),
        };
        println!(
            "{:>10} {:>14} {:>12} {:>12} {:>18}",
            e.solver,
            if reached {
                format!("{t:.4}")
            } else {
                format!("> {t:.1}")
            },
            last.map_or(0, |r| r.iteration),
            last.map_or(0, |r| r.inner),
            if i == 0 { "1".into() } else { ratio_s }
        );
        if i > 0 && best_baseline.as_ref().is_none_or(|b| t < b.1) {
            best_baseline = Some((e.solver.clone(), t, reached));
        }
    }
    if let (Some(tn), Some((b, t, reached))) = (newton, best_baseline) {
        println!(
            "RESULT {name}: best baseline {b}, ratio {}{:.1} (target ≥ 10)",
            if reached { "" } else { "> " },
            t / tn
        );
    }
}

fn main() {
    // `cargo bench` passes `--bench`; nothing else to parse.
    let losses = std::env::var("ELLONE_BENCH_LOSSES").unwrap_or_else(|_| {
        "logistic,logistic-correlated,logistic-illcond,logistic-sparse,least-squares,\
             least-squares-correlated,least-squares-sparse,precision,precision-dense,\
             precision-ar1,crf,crf-correlated,crf-wide,crf-large"
            .into()
    });
    let budget: f64 = std::env::var("ELLONE_BENCH_BUDGET")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(60.0);
    let out = std::env::var("ELLONE_BENCH_OUT")
        .map(PathBuf::from)
        .unwrap_or_else(|_| {
            PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/bench-baselines")
        });
    let _ = std::fs::create_dir_all(&out);
    println!(
        "backend {}, budget {budget} s per solver",
        linalg::backend_name()
    );
    for name in losses.split(',').map(str::trim) {
        let (loss, pen) = match name {
            "logistic" => linear_problem(true, 2000, 1000, 0.0, 0.05),
            "logistic-correlated" => linear_problem(true, 1000, 2000, 0.9, 0.02),
            "least-squares" => linear_problem(false, 2000, 1000, 0.0, 0.05),
            "least-squares-correlated" => linear_problem(false, 1000, 2000, 0.9, 0.02),
            "logistic-sparse" => sparse_glm_problem(true),
            "least-squares-sparse" => sparse_glm_problem(false),
            "precision" => precision_problem(0.99),
            "precision-dense" => precision_problem(0.95),
            "precision-ar1" => precision_ar1_problem(),
            "logistic-illcond" => linear_problem(true, 1000, 2000, 0.99, 0.005),
            "crf" => crf_problem(45, (400, 40, 45), 0.0, 0.5),
            "crf-correlated" => crf_problem(46, (1000, 150, 80), 0.8, 0.7),
            "crf-wide" => crf_problem(47, (1000, 3000, 100), 0.0, 0.5),
            "crf-large" => (
                Box::new(crf_sizes::problem(1000, 3000, 100, 1)) as Box<dyn Loss>,
                Penalty::l1(1.0).expect("valid λ"),
            ),
            other => {
                eprintln!("unknown loss '{other}' in ELLONE_BENCH_LOSSES; skipped");
                continue;
            }
        };
        println!("\n{name}: {} coordinates", loss.dim());
        let built = solvers();
        let racers: Vec<&dyn Solver> = built.iter().map(|b| b.as_ref()).collect();
        let options = RaceOptions {
            budget: Duration::from_secs_f64(budget),
            target: 1e-6,
            reference: true,
        };
        match race(loss.as_ref(), &pen, &racers, &options) {
            Ok(result) => {
                report(name, &result, budget);
                let _ = result.write_csv_file(&out.join(format!("{name}.csv")));
                #[cfg(feature = "cli")]
                let _ = ellone::race_plot::plot_race(
                    &result,
                    &out.join(format!("{name}.svg")),
                    900,
                    560,
                );
            }
            Err(e) => println!("{name}: race failed: {e}"),
        }
    }
}
