//! Benchmark: Newton coordinate descent on the lasso and ℓ1-logistic regression at
//! λ = 0.1·λ_max, dense (n = 2000, p = 1000) and sparse (n = 20 000, p = 50 000, 0.1 %
//! density), each measured against one Xᵀv product on the same data.
//!
//! Reported per problem (printed before criterion's own timings):
//! ratio = (time to the default tolerance) / (time of one Xᵀv), with targets ≤ 30 passes
//! for least squares and ≤ 60 for logistic regression. Each of 7 rounds times Xᵀv next to
//! one solve and the median ratio is printed, three ways: the library's solve against its
//! parallel Xᵀv ("ratio"), against a one-thread column-by-column Xᵀv ("vs serial Xᵀv"),
//! and both run inside a one-thread pool ("one thread": work against work, the pass count
//! independent of the core count). Then the Newton iterations and inner
//! sweeps; and a pass count estimated from the trace (one full gradient pass per outer
//! iteration plus two column operations per free coordinate per sweep, the free set
//! approximated from below by the non-zeros).
//!
//! `ELLONE_GLM_ONLY=<text>` prints the report only for the problems whose "kind name"
//! contains the text (e.g. "logistic sparse") and skips criterion's timings;
//! `ELLONE_GLM_PROFILE=1` prints the per-iteration profile of the sparse logistic problem.
//! For experiments with the inner loop, `ELLONE_OMEGA=<ω>` fixes the relaxation factor
//! (`CdOptions::relaxation`; default adaptive) and `ELLONE_FORCING=<η>` the forcing factor.
//!
//! The data are synthetic (demo data, benches/common/glm_data.rs): Gaussian (dense) or
//! uniform (sparse) entries, a sparse true coefficient vector, Gaussian noise or Bernoulli
//! labels.

#[path = "common/glm_data.rs"]
mod glm_data;

use criterion::{criterion_group, Criterion};
use ellone::solver::{NewtonCd, Solver, SolverOptions};
use ellone::{Design, LeastSquares, Logistic, Loss, Penalty, Solution};
use std::hint::black_box;
use std::sync::OnceLock;
use std::time::Instant;

/// One benchmark problem: the design, the Gaussian response and the labels from the same
/// linear predictor.
struct Data {
    name: &'static str,
    design: Design,
    y: Vec<f64>,
    labels: Vec<f64>,
}

fn data(name: &'static str, d: glm_data::GlmData) -> Data {
    Data {
        name,
        design: d.design,
        y: d.y,
        labels: d.labels,
    }
}

fn problems() -> &'static [Data; 2] {
    static DATA: OnceLock<[Data; 2]> = OnceLock::new();
    DATA.get_or_init(|| {
        [
            data("dense 2000x1000", glm_data::dense()),
            data("sparse 20000x50000 (0.1%)", glm_data::sparse()),
        ]
    })
}

/// Seconds for one Xᵀv with the library kernel (best of `reps`, to filter out noise from
/// other processes on the machine).
fn xtv_seconds(design: &Design, v: &[f64], reps: usize) -> f64 {
    let mut out = vec![0.0; design.ncols()];
    (0..reps)
        .map(|_| {
            let t = Instant::now();
            design.tmatvec(black_box(v), &mut out);
            black_box(&out);
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

/// Seconds for one Xᵀv computed column by column on one thread (the inner loop's kernel).
fn xtv_serial_seconds(design: &Design, v: &[f64], reps: usize) -> f64 {
    (0..reps)
        .map(|_| {
            let t = Instant::now();
            let s: f64 = (0..design.ncols()).map(|j| design.col_dot(j, v)).sum();
            black_box(s);
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

fn solver(trace: bool) -> NewtonCd {
    let mut s = NewtonCd::new(SolverOptions {
        trace,
        ..Default::default()
    });
    if let Some(w) = std::env::var("ELLONE_OMEGA")
        .ok()
        .and_then(|v| v.parse().ok())
    {
        s.cd.relaxation = Some(w);
    }
    if let Some(f) = std::env::var("ELLONE_FORCING")
        .ok()
        .and_then(|v| v.parse().ok())
    {
        s.cd.forcing = f;
    }
    s
}

/// Estimated passes over the data from the trace: per outer iteration one gradient pass
/// plus 2·(sweeps)·nnz/p for the inner loop (nnz ≤ free-set size, so a lower bound).
fn estimated_passes(sol: &Solution, p: usize) -> f64 {
    let mut passes = 0.0;
    for w in sol.trace.windows(2) {
        let sweeps = (w[1].inner - w[0].inner) as f64;
        passes += 1.0 + 2.0 * sweeps * w[0].nnz.max(w[1].nnz) as f64 / p as f64;
    }
    passes + 1.0
}

fn report_one(data: &Data, loss: &dyn Loss, kind: &str, target: f64, lambda: f64) {
    let pen = Penalty::l1(lambda).unwrap();
    let v: Vec<f64> = (0..data.design.nrows())
        .map(|i| ((i * 37) % 101) as f64 / 101.0 - 0.5)
        .collect();
    // Rounds that each time Xᵀv (best of several) right next to one solve, so a slow phase
    // of a shared machine slows both sides of a ratio; the median over rounds is reported.
    // "one thread" runs the solve and Xᵀv inside a one-thread pool: work against work.
    let one = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    let (mut r_par, mut r_serial, mut r_one) = (Vec::new(), Vec::new(), Vec::new());
    let (mut best, mut pass, mut serial) = (f64::INFINITY, f64::INFINITY, f64::INFINITY);
    let mut best_one = f64::INFINITY;
    let mut sol = None;
    for _ in 0..7 {
        let p_round = xtv_seconds(&data.design, &v, 10);
        let s_round = xtv_serial_seconds(&data.design, &v, 5);
        let t = Instant::now();
        let s = solver(false).solve(loss, &pen).unwrap();
        let t_par = t.elapsed().as_secs_f64();
        let (t_one, p_one) = one.install(|| {
            let t = Instant::now();
            let s = solver(false).solve(loss, &pen).unwrap();
            let t_one = t.elapsed().as_secs_f64();
            black_box(s);
            (t_one, xtv_seconds(&data.design, &v, 10))
        });
        r_par.push(t_par / p_round);
        r_serial.push(t_par / s_round);
        r_one.push(t_one / p_one);
        best = best.min(t_par);
        best_one = best_one.min(t_one);
        pass = pass.min(p_round);
        serial = serial.min(s_round);
        sol = Some(s);
    }
    let sol = sol.unwrap();
    let median = |v: &mut Vec<f64>| {
        v.sort_by(f64::total_cmp);
        v[v.len() / 2]
    };
    let (ratio, ratio_serial, ratio_one) = (
        median(&mut r_par),
        median(&mut r_serial),
        median(&mut r_one),
    );
    let traced = solver(true).solve(loss, &pen).unwrap();
    let p = data.design.ncols();
    println!(
        "{kind:>13} | {:<26} | solve {:>8.2} ms (one thread {:>8.2} ms) | Xᵀv {:>7.3} ms (serial {:>7.3} ms) | \
         ratio {:>6.1} (target ≤ {target}) {} | vs serial Xᵀv {:>6.1} | one thread {:>6.1} {} | \
         status {:?}, {} Newton iterations, {} inner sweeps, nnz {}, est. passes {:.1}",
        data.name,
        best * 1e3,
        best_one * 1e3,
        pass * 1e3,
        serial * 1e3,
        ratio,
        if ratio <= target { "MET" } else { "MISSED" },
        ratio_serial,
        ratio_one,
        if ratio_one <= target { "MET" } else { "MISSED" },
        sol.status,
        sol.iterations,
        sol.inner,
        sol.nnz(),
        estimated_passes(&traced, p),
    );
    for r in &traced.trace {
        println!(
            "{:>15} iteration {:>2}: t {:>8.2} ms, F {:.10}, KKT {:.2e}, nnz {:>5}, sweeps so far {}",
            "",
            r.iteration,
            r.seconds * 1e3,
            r.objective,
            r.kkt_residual,
            r.nnz,
            r.inner
        );
    }
}

/// The ratio report (printed once, before criterion's timings).
fn report() {
    println!("\nNewton-CD at λ = 0.1·λ_max, default tolerance; ratio = solve time / one Xᵀv");
    for data in problems() {
        let ls = LeastSquares::new(data.design.clone(), data.y.clone(), true).unwrap();
        let lg = Logistic::new(data.design.clone(), data.labels.clone(), true).unwrap();
        let lam_ls = 0.1 * glm_data::lambda_max(&data.design, &data.y);
        let lam_lg = 0.1 * glm_data::lambda_max(&data.design, &data.labels);
        // ELLONE_GLM_ONLY=<substring>: report only the problems whose "kind name" matches.
        let only = std::env::var("ELLONE_GLM_ONLY").unwrap_or_default();
        for (loss, kind, target, lambda) in [
            (&ls as &dyn Loss, "least squares", 30.0, lam_ls),
            (&lg, "logistic", 60.0, lam_lg),
        ] {
            if format!("{kind} {}", data.name).contains(&only) {
                report_one(data, loss, kind, target, lambda);
            }
        }
    }
    println!();
}

fn bench(c: &mut Criterion) {
    for data in problems() {
        let ls = LeastSquares::new(data.design.clone(), data.y.clone(), true).unwrap();
        let lg = Logistic::new(data.design.clone(), data.labels.clone(), true).unwrap();
        let pen_ls = Penalty::l1(0.1 * glm_data::lambda_max(&data.design, &data.y)).unwrap();
        let pen_lg = Penalty::l1(0.1 * glm_data::lambda_max(&data.design, &data.labels)).unwrap();
        let mut group = c.benchmark_group(format!("glm {}", data.name));
        group.sample_size(10);
        let v = data.y.clone();
        let mut out = vec![0.0; data.design.ncols()];
        group.bench_function("one Xᵀv", |b| {
            b.iter(|| data.design.tmatvec(black_box(&v), &mut out))
        });
        group.bench_function("lasso 0.1·λmax", |b| {
            b.iter(|| solver(false).solve(&ls, &pen_ls).unwrap())
        });
        group.bench_function("logistic 0.1·λmax", |b| {
            b.iter(|| solver(false).solve(&lg, &pen_lg).unwrap())
        });
        group.finish();
    }
}

criterion_group!(benches, bench);

fn main() {
    if std::env::var_os("ELLONE_GLM_PROFILE").is_some() {
        profile();
        return;
    }
    report();
    if std::env::var_os("ELLONE_GLM_ONLY").is_some() {
        return; // a quick ratio report without criterion's timings
    }
    benches();
    Criterion::default().configure_from_args().final_summary();
}

/// ELLONE_GLM_PROFILE=1: free-set sizes and sweeps per outer iteration of the sparse
/// logistic problem (rerunning with max_iter = 0, 1, 2, ...), and the cost of one inner
/// sweep (curvature, (Hd)_k, step) over the non-zeros at the solution of each problem.
fn profile() {
    for data in problems() {
        let ls = LeastSquares::new(data.design.clone(), data.y.clone(), true).unwrap();
        let lg = Logistic::new(data.design.clone(), data.labels.clone(), true).unwrap();
        let pen_ls = Penalty::l1(0.1 * glm_data::lambda_max(&data.design, &data.y)).unwrap();
        let pen_lg = Penalty::l1(0.1 * glm_data::lambda_max(&data.design, &data.labels)).unwrap();
        for (name, loss, pen) in [
            ("ls", &ls as &dyn Loss, &pen_ls),
            ("logistic", &lg, &pen_lg),
        ] {
            let sol = solver(false).solve(loss, pen).unwrap();
            let active: Vec<usize> = (0..sol.x.len()).filter(|&k| sol.x[k] != 0.0).collect();
            let mut model = loss.local_model(&sol.x).unwrap();
            let mut acc = 0.0;
            let mut best = f64::INFINITY;
            for _ in 0..7 {
                let t = Instant::now();
                for &k in &active {
                    acc += model.curvature(k) + model.hd(k);
                    model.step(k, 1e-12);
                }
                best = best.min(t.elapsed().as_secs_f64());
            }
            black_box(acc);
            let v = data.y.clone();
            let pass = xtv_serial_seconds(&data.design, &v, 10);
            println!(
                "{} {name}: {} active; one sweep {:.3} ms = {:.0} ns per column; \
                 serial Xᵀv {:.3} ms = {:.0} ns per column",
                data.name,
                active.len(),
                best * 1e3,
                best * 1e9 / active.len() as f64,
                pass * 1e3,
                pass * 1e9 / data.design.ncols() as f64
            );
        }
    }
    let data = &problems()[1];
    let lg = Logistic::new(data.design.clone(), data.labels.clone(), true).unwrap();
    let pen = Penalty::l1(0.1 * glm_data::lambda_max(&data.design, &data.labels)).unwrap();
    let lam = pen.lambda();
    let m = lg.dim();
    let mut prev_inner = 0;
    for it in 0..7 {
        let mut s = solver(false);
        s.options.max_iter = it;
        let sol = s.solve(&lg, &pen).unwrap();
        let mut g = vec![0.0; m];
        lg.gradient(&sol.x, &mut g);
        let free = (0..m)
            .filter(|&k| sol.x[k] != 0.0 || k == m - 1 || g[k].abs() >= lam)
            .count();
        println!(
            "sparse logistic after {it} iterations ({:?}): nnz {}, free set {free}, \
             sweeps in the previous iteration {}, KKT {:.2e}",
            sol.status,
            sol.nnz(),
            sol.inner - prev_inner,
            sol.kkt_residual,
        );
        prev_inner = sol.inner;
        if sol.converged() {
            break;
        }
    }
}
