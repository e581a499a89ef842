//! Gaussian CRF benchmarks: joint Newton-CD vs the alternating scheme vs FISTA, at growing
//! size up to about 4 million parameters (p = 10 000, q = 400, n = 2 000).
//!
//! Two parts:
//!
//! 1. criterion measurements of the time to the default tolerance (KKT ≤ 1e-7 relative) for
//!    the joint and alternating solvers at the small sizes;
//! 2. a one-shot report (printed) for every size: time to the default tolerance of each
//!    method, the objective reached, and the ratio to FISTA to the same accuracy (FISTA is
//!    stopped by an observer once its objective is at or below the joint solver's, or at
//!    its time cap). The largest sizes run only with `ELLONE_CRF_FULL=1` (the 4M problem
//!    takes tens of seconds per method); `ELLONE_CRF_FISTA_CAP` (seconds, default 600) caps
//!    each FISTA run.
//!
//! Data (a demo generator, not a reference): X ~ N(0, 1); Y = X B + E with B non-zero on 2%
//! of the rows and E an AR(1)-correlated noise across outputs (coefficient 0.6);
//! λ_Θ = 0.3·max|2 S_xy| and λ_Λ = 0.3·max_{k≠l}|S_yy,kl| (fractions of the values at which
//! the start point is optimal).

#[path = "common/crf_sizes.rs"]
mod crf_sizes;

use criterion::{criterion_group, Criterion};
use ellone::crf::Alternating;
use ellone::solver::{
    Control, Fista, NewtonCd, Observer, Owlqn, Solver, SolverOptions, TraceRecord,
};
use ellone::{Loss, Penalty};
use std::time::{Duration, Instant};

const SMALL: [(usize, usize, usize); 2] = [(200, 200, 20), (500, 1000, 50)];
const ALL: [(usize, usize, usize); 4] = [
    (200, 200, 20),
    (500, 1000, 50),
    (1000, 3000, 100),
    (2000, 10000, 400),
];

fn bench(c: &mut Criterion) {
    let pen = Penalty::l1(1.0).unwrap();
    let mut group = c.benchmark_group("crf");
    group.sample_size(10);
    group.measurement_time(Duration::from_secs(5));
    for (n, p, q) in SMALL {
        let loss = crf_sizes::problem(n, p, q, 1);
        let id = format!("n{n}_p{p}_q{q}");
        group.bench_function(format!("joint/{id}"), |b| {
            b.iter(|| NewtonCd::default().solve(&loss, &pen).unwrap())
        });
        group.bench_function(format!("alternating/{id}"), |b| {
            b.iter(|| {
                Alternating::default()
                    .solve(&loss, &pen, None, None)
                    .unwrap()
            })
        });
    }
    group.finish();
}

struct StopAt {
    target: f64,
}

impl Observer for StopAt {
    fn observe(&mut self, r: &TraceRecord) -> Control {
        if r.objective <= self.target {
            Control::Stop
        } else {
            Control::Continue
        }
    }
}

fn report() {
    let full = std::env::var("ELLONE_CRF_FULL").is_ok_and(|v| v == "1");
    let cap: f64 = std::env::var("ELLONE_CRF_FISTA_CAP")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(600.0);
    let only: Option<usize> = std::env::var("ELLONE_CRF_ONLY")
        .ok()
        .and_then(|v| v.parse().ok());
    let methods = std::env::var("ELLONE_CRF_METHODS").unwrap_or("joint,alt,fista".into());
    let pen = Penalty::l1(1.0).unwrap();
    println!("\nsize (n, p, q), parameters: method seconds (outer iterations, status)");
    for (idx, (n, p, q)) in ALL.into_iter().enumerate() {
        if only.is_some_and(|o| o != idx) || (!full && idx >= 2 && only.is_none()) {
            continue;
        }
        let t = Instant::now();
        let loss = crf_sizes::problem(n, p, q, 1);
        println!(
            "({n}, {p}, {q}), {} parameters, setup {:.2} s",
            loss.dim(),
            t.elapsed().as_secs_f64()
        );
        let joint = NewtonCd::default().solve(&loss, &pen).unwrap();
        println!(
            "  joint       {:8.3} s ({} iters, {}), F = {:.12}, KKT {:.2e}, nnz {}",
            joint.seconds,
            joint.iterations,
            joint.status.as_str(),
            joint.objective,
            joint.kkt_residual,
            joint.nnz()
        );
        if methods.contains("alt") {
            let alt = Alternating::default()
                .solve(&loss, &pen, None, None)
                .unwrap();
            println!(
                "  alternating {:8.3} s ({} iters, {}), F = {:.12}, KKT {:.2e}, ratio to joint {:.1}",
                alt.seconds,
                alt.iterations,
                alt.status.as_str(),
                alt.objective,
                alt.kkt_residual,
                alt.seconds / joint.seconds
            );
        }
        if methods.contains("fista") || methods.contains("owlqn") {
            // Accuracy of the joint solution: F_joint − F*, with F* from a tight joint solve.
            let tight = NewtonCd::new(SolverOptions {
                tol: 1e-11,
                ..Default::default()
            })
            .solve(&loss, &pen)
            .unwrap();
            let gap = (joint.objective - tight.objective).max(1e-12 * tight.objective.abs());
            let capped = SolverOptions {
                max_iter: 1_000_000,
                time_limit: Some(Duration::from_secs_f64(cap)),
                ..Default::default()
            };
            let mut baselines: Vec<(&str, Box<dyn Solver>)> = Vec::new();
            if methods.contains("fista") {
                baselines.push(("fista", Box::new(Fista::new(capped.clone()))));
            }
            if methods.contains("owlqn") {
                baselines.push(("owl-qn", Box::new(Owlqn::new(capped.clone()))));
            }
            for (name, solver) in baselines {
                let mut stop = StopAt {
                    target: tight.objective + gap,
                };
                let f = solver
                    .solve_observed(&loss, &pen, None, Some(&mut stop))
                    .unwrap();
                let reached = f.objective <= tight.objective + gap;
                println!(
                    "  {name:<11} {:8.3} s ({} iters, {}), F = {:.12}, target F* + {:.1e}; {name}/joint = {:.1}{}",
                    f.seconds,
                    f.iterations,
                    f.status.as_str(),
                    f.objective,
                    gap,
                    f.seconds / joint.seconds,
                    if reached { "" } else { " (lower bound: the target was not reached)" }
                );
            }
        }
    }
}

criterion_group!(benches, bench);

fn main() {
    if std::env::var("ELLONE_CRF_REPORT_ONLY").is_err() {
        benches();
        Criterion::default().configure_from_args().final_summary();
    }
    report();
}
