//! `ellone path` and `ellone cv`, driven as a user would: the built binary on the files of
//! tests/data (written headerless to the temporary directory), JSON/CSV/SVG read back.
//!
//! Outside references (tests/data/README.md): λ_max of the macrodata lasso problem and its
//! optimal objectives at four λ (a conic interior-point solve, polished), and the optimal
//! objectives of the precision problem of the macrodata correlation matrix at four λ.
#![cfg(feature = "cli")]

#[path = "common/cli_files.rs"]
mod cli_files;
mod common;

use cli_files::{csv_text, ellone, TempFile};
use common::{read_numeric_table, read_table};
use serde_json::Value;

fn run_json(args: &[&str]) -> Value {
    let out = ellone(args);
    assert!(
        out.status.success(),
        "ellone {args:?} failed: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).expect("stdout is JSON")
}

fn num(v: &Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key} is not a number in {v}"))
}

fn nums(v: &Value, key: &str) -> Vec<f64> {
    v[key]
        .as_array()
        .unwrap_or_else(|| panic!("{key} is not an array"))
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect()
}

/// The macrodata lasso problem (X 203 × 11, y = unemp) as headerless files.
fn macrodata_lasso() -> (TempFile, TempFile) {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    (
        TempFile::with_text("X.csv", &csv_text(&x)),
        TempFile::with_text("y.csv", &csv_text(&y)),
    )
}

/// Checks the shape every path document must have: λ decreasing, the first point zero in
/// every coefficient, every point within the KKT tolerance (over all coordinates) and
/// converged.
fn check_path_document(doc: &Value) {
    let points = doc["points"].as_array().expect("points");
    assert!(!points.is_empty());
    let tol = num(doc, "kkt_tolerance");
    let lambdas: Vec<f64> = points.iter().map(|p| num(p, "lambda")).collect();
    assert!(lambdas.windows(2).all(|w| w[0] > w[1]), "{lambdas:?}");
    let first = &points[0]["coefficients"];
    assert!(first["indices"].as_array().unwrap().is_empty(), "{first}");
    for p in points {
        assert!(num(p, "kkt_residual") <= tol, "{p}");
        assert_eq!(p["status"], "converged");
        let c = &p["coefficients"];
        assert_eq!(
            c["indices"].as_array().unwrap().len(),
            c["values"].as_array().unwrap().len()
        );
    }
}

#[test]
fn lasso_path_json_csv_and_plot() {
    let (x, y) = macrodata_lasso();
    let csv = TempFile::new("path.csv");
    let svg = TempFile::new("path.svg");
    let json = TempFile::new("path.json");
    let out = ellone(&[
        "path",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--intercept",
        "--n-lambdas",
        "30",
        "--json",
        json.arg(),
        "--csv",
        csv.arg(),
        "--plot",
        svg.arg(),
    ]);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    // With --json the document goes to the file, not stdout.
    assert!(out.stdout.is_empty());
    let doc: Value = serde_json::from_str(&std::fs::read_to_string(json.path()).unwrap()).unwrap();
    check_path_document(&doc);
    // λ_max = max_j |x_jᵀ(y − ȳ)|/n = 0.33459966836940674 (tests/data/README.md).
    assert!((num(&doc, "lambda_max") - 0.33459966836940674).abs() < 1e-12);
    let points = doc["points"].as_array().unwrap();
    assert_eq!(points.len(), 30);
    // The intercept at λ_max is ȳ (the fixture's intercept column, the same at every λ
    // because X is centred).
    assert!((num(&points[0], "intercept") - 5.8847290640394085).abs() < 1e-12);
    // CSV: header + one row per λ, the same λ as the JSON.
    let text = std::fs::read_to_string(csv.path()).unwrap();
    let rows: Vec<&str> = text.lines().collect();
    assert!(rows[0].starts_with("lambda,objective,kkt_residual,nnz"));
    assert_eq!(rows.len(), 31);
    for (row, p) in rows[1..].iter().zip(points) {
        let lam: f64 = row.split(',').next().unwrap().parse().unwrap();
        assert_eq!(lam, num(p, "lambda"));
    }
    let plot = std::fs::read_to_string(svg.path()).unwrap();
    assert!(plot.contains("log10 λ") && plot.contains("coefficient"));
}

/// At the λ of the reference solutions the path's objectives equal the conic solver's
/// (polished) optima to 1e-8 relative, with and without screening.
#[test]
fn lasso_path_on_a_user_grid_matches_reference_objectives() {
    let (x, y) = macrodata_lasso();
    let (_, rows) = read_table("macrodata-lasso-solutions.csv");
    let lambdas: Vec<String> = rows.iter().map(|r| r[1].clone()).collect();
    let grid = lambdas.join(",");
    for screening in [true, false] {
        let mut args = vec![
            "path",
            "--loss",
            "least-squares",
            "--x",
            x.arg(),
            "--y",
            y.arg(),
            "--intercept",
            "--lambdas",
            &grid,
        ];
        if !screening {
            args.push("--no-screening");
        }
        let doc = run_json(&args);
        let points = doc["points"].as_array().unwrap();
        assert_eq!(points.len(), 4);
        for (p, r) in points.iter().zip(&rows) {
            let lam: f64 = r[1].parse().unwrap();
            let reference: f64 = r[2].parse().unwrap();
            assert_eq!(num(p, "lambda"), lam);
            let obj = num(p, "objective");
            assert!(
                (obj - reference).abs() <= 1e-8 * reference,
                "λ={lam}: {obj} vs {reference}"
            );
            assert!(num(p, "kkt_residual") <= num(&doc, "kkt_tolerance"));
        }
        if !screening {
            assert_eq!(num(&doc, "screened_fraction"), 0.0);
        }
    }
}

#[test]
fn cv_json_csv_plot_and_determinism() {
    let (x, y) = macrodata_lasso();
    let svg = TempFile::new("cv.svg");
    let csv = TempFile::new("cv.csv");
    let args = [
        "cv",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--intercept",
        "--n-lambdas",
        "25",
        "--folds",
        "5",
        "--seed",
        "11",
    ];
    let doc = run_json(&args);
    let lambdas = nums(&doc, "lambdas");
    let mean = nums(&doc, "mean");
    let se = nums(&doc, "std_error");
    assert_eq!(lambdas.len(), 25);
    assert_eq!(mean.len(), 25);
    assert_eq!(se.len(), 25);
    assert!(lambdas.windows(2).all(|w| w[0] > w[1]));
    assert!((lambdas[0] - 0.33459966836940674).abs() < 1e-12);
    let best = doc["best_index"].as_u64().unwrap() as usize;
    let one_se = doc["one_se_index"].as_u64().unwrap() as usize;
    assert_eq!(num(&doc, "lambda_best"), lambdas[best]);
    assert_eq!(num(&doc, "lambda_one_se"), lambdas[one_se]);
    // The two rules as defined: the minimum mean, and the largest λ within one s.e. of it.
    assert!(mean.iter().all(|&m| m >= mean[best]));
    assert!(one_se <= best && mean[one_se] <= mean[best] + se[best]);
    assert!((0..one_se).all(|l| mean[l] > mean[best] + se[best]));
    assert_eq!(doc["score"], "mean_squared_error");
    assert_eq!(doc["unconverged_fits"], 0);
    // Fits cut short by an iteration limit are counted and warned about.
    let mut capped: Vec<&str> = args.to_vec();
    capped.extend(["--max-iter", "1"]);
    let out = ellone(&capped);
    assert!(out.status.success());
    let short: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(short["unconverged_fits"].as_u64().unwrap() > 0);
    assert!(String::from_utf8_lossy(&out.stderr).contains("fold fits stopped before convergence"));
    // The same seed gives the same folds and the same numbers.
    let again = run_json(&args);
    assert_eq!(doc["mean"], again["mean"]);
    assert_eq!(doc["lambda_one_se"], again["lambda_one_se"]);
    // CSV and plot.
    let mut with_files: Vec<&str> = args.to_vec();
    with_files.extend(["--csv", csv.arg(), "--plot", svg.arg()]);
    let out = ellone(&with_files);
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = std::fs::read_to_string(csv.path()).unwrap();
    assert_eq!(text.lines().next(), Some("lambda,mean,std_error"));
    assert_eq!(text.lines().count(), 26);
    let plot = std::fs::read_to_string(svg.path()).unwrap();
    assert!(plot.contains("λ_min") && plot.contains("λ_1se") && plot.contains("log10 λ"));
}

/// Precision from samples: the macrodata columns standardised (sd dividing by n) have
/// S = the correlation matrix of tests/data/macrodata-corr.csv, so the path at the fixture's
/// λ must reproduce its optimal objectives (macrodata-precision-objectives.csv).
#[test]
fn precision_path_matches_reference_objectives() {
    let (_, data) = read_numeric_table("macrodata.csv");
    let (n, p) = data.dim();
    let mut z = data.clone();
    for j in 0..p {
        let mean = data.column(j).sum() / n as f64;
        let sd = (data
            .column(j)
            .iter()
            .map(|v| (v - mean).powi(2))
            .sum::<f64>()
            / n as f64)
            .sqrt();
        z.column_mut(j).mapv_inplace(|v| (v - mean) / sd);
    }
    let x = TempFile::with_text("z.csv", &csv_text(&z));
    let (_, rows) = read_table("macrodata-precision-objectives.csv");
    let grid: Vec<String> = rows.iter().map(|r| r[0].clone()).collect();
    let doc = run_json(&[
        "path",
        "--loss",
        "precision",
        "--x",
        x.arg(),
        "--lambdas",
        &grid.join(","),
    ]);
    let points = doc["points"].as_array().unwrap();
    // Points come out λ-decreasing: 0.4, 0.2, 0.1, 0.05 (the fixture lists them increasing).
    for p in points {
        let lam = num(p, "lambda");
        let r = rows
            .iter()
            .find(|r| r[0].parse::<f64>().unwrap() == lam)
            .unwrap();
        let reference: f64 = r[1].parse().unwrap();
        // The correlation computed here differs from the fixture's in the last bits (and the
        // fixture sets the diagonal to exactly 1), so 1e-8 relative to max(1, |F|).
        assert!(
            (num(p, "objective") - reference).abs() <= 1e-8 * reference.abs().max(1.0),
            "λ={lam}: {} vs {reference}",
            num(p, "objective")
        );
        assert!(num(p, "kkt_residual") <= num(&doc, "kkt_tolerance"));
        // Precision coordinates carry their matrix entry (upper triangle).
        let c = &p["coefficients"];
        let (ri, ci) = (c["rows"].as_array().unwrap(), c["cols"].as_array().unwrap());
        assert!(ri.iter().zip(ci).all(|(i, j)| i.as_u64() <= j.as_u64()));
        let offdiag = ri.iter().zip(ci).filter(|(i, j)| i != j).count();
        assert_eq!(2 * offdiag, r[4].parse::<usize>().unwrap(), "λ={lam}");
    }
}

#[test]
fn bad_options_are_errors() {
    let (x, y) = macrodata_lasso();
    let base = ["--x", x.arg(), "--y", y.arg()];
    let cases: Vec<Vec<&str>> = vec![
        // unemp is not a 0/1 label.
        vec!["path", "--loss", "logistic"],
        vec!["path", "--loss", "least-squares", "--ratio", "2"],
        vec!["path", "--loss", "least-squares", "--lambdas", "0.1,-1"],
        vec!["path", "--loss", "least-squares", "--n-lambdas", "0"],
        vec!["cv", "--loss", "least-squares", "--folds", "1"],
        vec!["cv", "--loss", "least-squares", "--folds", "204"],
        vec!["path", "--loss", "precision"],
    ];
    for case in cases {
        let mut args = case.clone();
        args.extend(base);
        let out = ellone(&args);
        assert_eq!(out.status.code(), Some(1), "{args:?}");
        let msg = String::from_utf8_lossy(&out.stderr);
        assert!(msg.starts_with("ellone: error:"), "{msg}");
        assert!(out.stdout.is_empty());
    }
}

/// Gaussian CRF of macrodata's unemp and infl given the other ten series (centred): every
/// point within the KKT tolerance, the first point zero in Θ and in Λ's off-diagonal (only
/// the diagonal of Λ, unpenalised, is non-zero), and each reported entry names its matrix
/// coordinate consistently with the loss's layout.
#[test]
fn crf_path_and_cv() {
    let (names, data) = read_numeric_table("macrodata.csv");
    let outputs: Vec<usize> = ["unemp", "infl"]
        .iter()
        .map(|o| names.iter().position(|n| n == o).unwrap())
        .collect();
    let inputs: Vec<usize> = (0..names.len()).filter(|j| !outputs.contains(j)).collect();
    // Standardise (sd dividing by n) so the series' very different units do not dominate.
    let mut z = data.clone();
    let n = data.nrows();
    for j in 0..data.ncols() {
        let mean = data.column(j).sum() / n as f64;
        let sd = (data
            .column(j)
            .iter()
            .map(|v| (v - mean).powi(2))
            .sum::<f64>()
            / n as f64)
            .sqrt();
        z.column_mut(j).mapv_inplace(|v| (v - mean) / sd);
    }
    let x = TempFile::with_text("crf-x.csv", &csv_text(&z.select(ndarray::Axis(1), &inputs)));
    let y = TempFile::with_text(
        "crf-y.csv",
        &csv_text(&z.select(ndarray::Axis(1), &outputs)),
    );
    let svg = TempFile::new("crf.svg");
    let doc = run_json(&[
        "path",
        "--loss",
        "gaussian-crf",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--theta-ratio",
        "0.5",
        "--n-lambdas",
        "15",
        "--plot",
        svg.arg(),
    ]);
    let points = doc["points"].as_array().unwrap();
    let tol = num(&doc, "kkt_tolerance");
    let (q, nl) = (2usize, 3usize);
    for (t, p) in points.iter().enumerate() {
        assert!(num(p, "kkt_residual") <= tol, "{p}");
        let c = &p["coefficients"];
        let idx = c["indices"].as_array().unwrap();
        for (e, k) in idx.iter().enumerate() {
            let k = k.as_u64().unwrap() as usize;
            let (i, j) = (
                c["rows"][e].as_u64().unwrap() as usize,
                c["cols"][e].as_u64().unwrap() as usize,
            );
            match c["block"][e].as_str().unwrap() {
                "precision" => {
                    assert_eq!(Some(k), ellone::crf::loss::tri_index(q, i, j));
                    if t == 0 {
                        assert_eq!(i, j, "off-diagonal Λ at λ_max");
                    }
                }
                "interaction" => {
                    assert_eq!(k, nl + i * q + j);
                    assert!(t > 0, "Θ non-zero at λ_max");
                }
                other => panic!("unknown block {other}"),
            }
        }
    }
    let plot = std::fs::read_to_string(svg.path()).unwrap();
    // Axis labels always; legend names only up to 12 lines (this path may have more).
    assert!(plot.contains("coefficient") && plot.contains("log10 λ"));
    let cv = run_json(&[
        "cv",
        "--loss",
        "gaussian-crf",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--n-lambdas",
        "15",
        "--folds",
        "4",
    ]);
    assert_eq!(cv["score"], "negative_log_likelihood");
    assert!(num(&cv, "lambda_one_se") >= num(&cv, "lambda_best"));
}
