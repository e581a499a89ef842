//! Solver races: CSV layout and consistency, the SVG convergence plot (rendered to PNG by an
//! outside SVG renderer when one is installed) and the order of its lines. Needs the `cli`
//! feature (the plot and the command-line tool).
#![cfg(feature = "cli")]

mod common;

use common::*;
use ellone::race::{race, RaceOptions, RaceResult};
use ellone::solver::{Admm, Fista, NewtonCd, Owlqn, Solver, SolverOptions};
use ellone::{LeastSquares, Penalty};
use std::path::PathBuf;
use std::time::Duration;

const HEADER: &str =
    "solver,iteration,seconds,objective,suboptimality,relative_suboptimality,kkt_residual,nnz,passes";

fn tmp(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(format!("race-{}-{name}", std::process::id()))
}

/// The macrodata lasso at λ = 0.01673 (tests/data/README.md) raced by all four solvers.
fn lasso_race() -> (RaceResult, f64) {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let y: Vec<f64> = y.column(0).to_vec();
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    let (_, sols) = read_numeric_table("macrodata-lasso-solutions.csv");
    let row = sols.row(2);
    let (lambda, reference) = (row[1], row[2]);
    let o = |max_iter| SolverOptions {
        tol: 1e-13,
        max_iter,
        ..Default::default()
    };
    let (a, b, c, d) = (
        NewtonCd::new(o(1000)),
        Fista::new(o(100_000)),
        Admm::new(o(100_000)),
        Owlqn::new(o(100_000)),
    );
    let solvers: Vec<&dyn Solver> = vec![&b, &c, &a, &d];
    let options = RaceOptions {
        budget: Duration::from_secs(20),
        target: 1e-8,
        reference: true,
    };
    let result = race(&loss, &Penalty::l1(lambda).unwrap(), &solvers, &options).unwrap();
    (result, reference)
}

struct Row {
    solver: String,
    iteration: usize,
    seconds: f64,
    objective: f64,
    relative: f64,
}

fn parse_csv(text: &str) -> Vec<Row> {
    let mut lines = text.lines();
    assert_eq!(lines.next().unwrap(), HEADER);
    lines
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            assert_eq!(f.len(), 9, "{l}");
            Row {
                solver: f[0].to_string(),
                iteration: f[1].parse().unwrap(),
                seconds: f[2].parse().unwrap(),
                objective: f[3].parse().unwrap(),
                relative: f[5].parse().unwrap(),
            }
        })
        .collect()
}

/// Fastest-first order computed from the CSV rows alone: time of the first row at or below
/// the target; solvers that never reach it follow by their last relative suboptimality.
fn order_from_csv(rows: &[Row], target: f64) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    for r in rows {
        if !names.contains(&r.solver) {
            names.push(r.solver.clone());
        }
    }
    let key = |n: &String| -> (u8, f64) {
        let mine: Vec<&Row> = rows.iter().filter(|r| &r.solver == n).collect();
        match mine.iter().find(|r| r.relative <= target) {
            Some(r) => (0, r.seconds),
            None => (1, mine.last().unwrap().relative),
        }
    };
    names.sort_by(|a, b| {
        let (ka, kb) = (key(a), key(b));
        ka.0.cmp(&kb.0).then(ka.1.total_cmp(&kb.1))
    });
    names
}

#[test]
fn race_csv_is_consistent() {
    let (result, reference) = lasso_race();
    // The reference solve agrees with the conic-solver fixture (tests/data/README.md).
    let r = result.reference.unwrap();
    assert!(
        (r - reference).abs() <= 1e-12 * reference.abs(),
        "{r} vs {reference}"
    );
    assert!(result.best_objective <= r);
    let path = tmp("lasso.csv");
    result.write_csv_file(&path).unwrap();
    let rows = parse_csv(&std::fs::read_to_string(&path).unwrap());
    assert_eq!(result.entries.len(), 4);
    for e in &result.entries {
        let mine: Vec<&Row> = rows.iter().filter(|r| r.solver == e.solver).collect();
        assert_eq!(mine.len(), e.records.len());
        assert!(mine.len() >= 2, "{}", e.solver);
        for (k, w) in mine.windows(2).enumerate() {
            assert_eq!(w[0].iteration, k);
            assert_eq!(w[1].iteration, k + 1);
            assert!(
                w[1].seconds >= w[0].seconds,
                "time goes backwards for {}",
                e.solver
            );
        }
        for r in &mine {
            assert!(r.relative >= 0.0, "below the best objective");
            let expect = (r.objective - result.best_objective) / result.best_objective.abs();
            assert!((r.relative - expect).abs() <= 1e-12 * expect.abs().max(1e-300) + 1e-300);
        }
        // Every racer reaches the common accuracy (the budget is generous for this size).
        let last = mine.last().unwrap();
        println!(
            "{:>10}: {} iterations, {:.4} s, final relative suboptimality {:.2e}",
            e.solver, last.iteration, last.seconds, last.relative
        );
        assert!(
            last.relative <= 1e-8,
            "{} stopped at {:e}",
            e.solver,
            last.relative
        );
    }
    // The ranking the library reports is the one the CSV timings give.
    let lib: Vec<String> = result
        .ranking()
        .into_iter()
        .map(|i| result.entries[i].solver.clone())
        .collect();
    assert_eq!(lib, order_from_csv(&rows, result.target));
}

/// y coordinates of the legend labels, by solver name, read from the SVG text elements.
fn legend_positions(svg: &str, names: &[String]) -> Vec<(String, f64)> {
    let mut out = Vec::new();
    for chunk in svg.split("<text").skip(1) {
        let Some(close) = chunk.find("</text>") else {
            continue;
        };
        let body = &chunk[..close];
        let Some(gt) = body.find('>') else { continue };
        let (attrs, label) = (&body[..gt], body[gt + 1..].trim());
        if let Some(name) = names.iter().find(|n| n.as_str() == label) {
            let y = attrs
                .split("y=\"")
                .nth(1)
                .and_then(|s| s.split('"').next())
                .and_then(|s| s.parse::<f64>().ok())
                .expect("y attribute");
            out.push((name.clone(), y));
        }
    }
    out
}

#[test]
fn race_plot_renders_and_orders_lines() {
    let (result, _) = lasso_race();
    let svg_path = tmp("lasso.svg");
    ellone::race_plot::plot_race(&result, &svg_path, 800, 500).unwrap();
    let svg = std::fs::read_to_string(&svg_path).unwrap();
    assert!(svg.contains("wall-clock time (seconds)"));
    assert!(svg.contains("relative suboptimality"));
    let csv_path = tmp("lasso-plot.csv");
    result.write_csv_file(&csv_path).unwrap();
    let rows = parse_csv(&std::fs::read_to_string(&csv_path).unwrap());
    let order = order_from_csv(&rows, result.target);
    let mut legend = legend_positions(&svg, &order);
    assert_eq!(
        legend.len(),
        order.len(),
        "every solver has one legend entry"
    );
    legend.sort_by(|a, b| a.1.total_cmp(&b.1));
    let top_to_bottom: Vec<String> = legend.into_iter().map(|(n, _)| n).collect();
    assert_eq!(
        top_to_bottom, order,
        "legend lists the solvers fastest first"
    );

    // Render with an outside SVG renderer (librsvg's rsvg-convert) and check the PNG.
    let png_path = tmp("lasso.png");
    match std::process::Command::new("rsvg-convert")
        .arg("-o")
        .arg(&png_path)
        .arg(&svg_path)
        .output()
    {
        Err(e) => println!("NOTE: rsvg-convert not available ({e}); PNG rendering check skipped"),
        Ok(out) => {
            assert!(
                out.status.success(),
                "{}",
                String::from_utf8_lossy(&out.stderr)
            );
            let png = std::fs::read(&png_path).unwrap();
            // PNG signature, then the IHDR chunk: width and height as big-endian u32.
            assert_eq!(&png[..8], b"\x89PNG\r\n\x1a\n");
            assert_eq!(&png[12..16], b"IHDR");
            let w = u32::from_be_bytes(png[16..20].try_into().unwrap());
            let h = u32::from_be_bytes(png[20..24].try_into().unwrap());
            assert_eq!((w, h), (800, 500));
            assert!(png.len() > 5_000, "PNG only {} bytes", png.len());
            println!("PNG {w}x{h}, {} bytes", png.len());
        }
    }
}

/// Headerless copy of a tests/data CSV (the command-line tool reads plain numeric CSV).
fn headerless(name: &str) -> PathBuf {
    let text = std::fs::read_to_string(data_path(name)).unwrap();
    let body: Vec<&str> = text.lines().skip(1).collect();
    let path = tmp(name);
    std::fs::write(&path, body.join("\n") + "\n").unwrap();
    path
}

/// `ellone race` end to end on the macrodata lasso at λ = 0.06692: exit 0, the CSV and SVG
/// written, a JSON ranking of all four solvers, and the reference objective equal to the
/// conic-solver fixture (tests/data/README.md).
#[test]
fn cli_race_writes_csv_plot_and_ranking() {
    let exe = env!("CARGO_BIN_EXE_ellone");
    let (x, y) = (
        headerless("macrodata-lasso-X.csv"),
        headerless("macrodata-lasso-y.csv"),
    );
    let (csv, svg) = (tmp("cli.csv"), tmp("cli.svg"));
    let out = std::process::Command::new(exe)
        .args([
            "race",
            "--loss",
            "least-squares",
            "--intercept",
            "--lambda",
            "0.06692",
        ])
        .arg("--x")
        .arg(&x)
        .arg("--y")
        .arg(&y)
        .args(["--solvers", "newton-cd,fista,admm,owl-qn", "--budget", "30"])
        .arg("--csv")
        .arg(&csv)
        .arg("--plot")
        .arg(&svg)
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let report: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let ranking = report["ranking"].as_array().unwrap();
    assert_eq!(ranking.len(), 4);
    for r in ranking {
        assert!(r["seconds_to_target"].is_number(), "{r}");
    }
    let reference = report["reference_objective"].as_f64().unwrap();
    let fixture = 0.8939610435815615; // macrodata-lasso-solutions.csv, λ = 0.06692
    assert!((reference - fixture).abs() <= 1e-12 * fixture);
    let rows = parse_csv(&std::fs::read_to_string(&csv).unwrap());
    let order = order_from_csv(&rows, report["target"].as_f64().unwrap());
    let from_json: Vec<String> = ranking
        .iter()
        .map(|r| r["solver"].as_str().unwrap().to_string())
        .collect();
    assert_eq!(order, from_json);
    assert!(std::fs::read_to_string(&svg).unwrap().starts_with("<svg"));

    // An unknown solver is a usage error with a message, not a panic.
    let bad = std::process::Command::new(exe)
        .args([
            "race",
            "--loss",
            "least-squares",
            "--lambda",
            "0.1",
            "--solvers",
            "simplex",
        ])
        .arg("--x")
        .arg(&x)
        .arg("--y")
        .arg(&y)
        .arg("--csv")
        .arg(tmp("bad.csv"))
        .output()
        .unwrap();
    assert_eq!(bad.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&bad.stderr).contains("unknown solver"));
}
