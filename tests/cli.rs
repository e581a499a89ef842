//! The `ellone` command-line tool, driven as a user would: the built binary, files written
//! to the temporary directory, JSON read back from stdout or `--out`.
//!
//! Reference values come from outside the project (see tests/data/README.md): the NIST StRD
//! certified Longley values (quoted from memory), the published logit fit of the spector.csv
//! data, and the macrodata lasso and precision solutions of a general-purpose conic solver;
//! plus textbook identities (elastic net as an augmented lasso, the one-output CRF as linear
//! regression, the CRF with Θ = 0 as the precision problem).

#[path = "common/cli_files.rs"]
mod cli_files;
mod common;

use cli_files::{csv_text, ellone, stderr, TempFile};
use common::{read_numeric_table, read_table, significant_digits};
use ndarray::{s, Array2};
use serde_json::Value;

/// One value per line.
fn vector_text(v: &[f64]) -> String {
    v.iter().map(|x| format!("{x}\n")).collect()
}

/// Matrix Market coordinate text (one-based indices) of the non-zero entries of `a`.
fn matrix_market_text(a: &Array2<f64>) -> String {
    let entries: Vec<String> = a
        .indexed_iter()
        .filter(|(_, v)| **v != 0.0)
        .map(|((i, j), v)| format!("{} {} {v}", i + 1, j + 1))
        .collect();
    format!(
        "%%MatrixMarket matrix coordinate real general\n% written by tests/cli.rs\n{} {} {}\n{}\n",
        a.nrows(),
        a.ncols(),
        entries.len(),
        entries.join("\n")
    )
}

/// Runs `ellone ARGS`, requires success and parses stdout as JSON.
fn solve_json(args: &[&str]) -> Value {
    let out = ellone(args);
    assert!(
        out.status.success(),
        "ellone {args:?} failed: {}",
        stderr(&out)
    );
    serde_json::from_slice(&out.stdout).expect("stdout is JSON")
}

fn number(v: &Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("{key} is not a number in {v}"))
}

fn coefficients(v: &Value) -> Vec<f64> {
    v["coefficients"]
        .as_array()
        .expect("coefficients is an array")
        .iter()
        .map(|c| c.as_f64().expect("coefficient is a number"))
        .collect()
}

/// The Longley data (tests/data/longley.csv, whose first line is a header) as headerless
/// temporary files: X (16 × 6) and y.
fn longley_files() -> (TempFile, TempFile) {
    let (_, data) = read_numeric_table("longley.csv");
    let x = data.slice(s![.., 1..]).to_owned();
    let y = data.column(0).to_vec();
    (
        TempFile::with_text("longley-x.csv", &csv_text(&x)),
        TempFile::with_text("longley-y.csv", &vector_text(&y)),
    )
}

/// The macrodata lasso problem (tests/data/macrodata-lasso-{X,y}.csv, headers dropped).
fn macrodata_files(x_suffix: &str) -> (Array2<f64>, TempFile, TempFile) {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let x_text = if x_suffix.ends_with(".mtx") {
        matrix_market_text(&x)
    } else {
        csv_text(&x)
    };
    let xf = TempFile::with_text(x_suffix, &x_text);
    let yf = TempFile::with_text("macro-y.csv", &vector_text(&y.column(0).to_vec()));
    (x, xf, yf)
}

/// The reference row for λ = 0.1673 of tests/data/macrodata-lasso-solutions.csv:
/// (objective, intercept, 11 coefficients).
fn macrodata_reference() -> (f64, f64, Vec<f64>) {
    let (_, sols) = read_numeric_table("macrodata-lasso-solutions.csv");
    let row = sols
        .rows()
        .into_iter()
        .find(|r| r[1] == 0.1673)
        .expect("λ = 0.1673 row");
    (row[2], row[7], row.slice(s![8..]).to_vec())
}

/// NIST StRD "Longley" (certified values quoted from memory, confirmed by exact rational
/// arithmetic; tests/data/README.md): ordinary least squares with intercept (λ = 0) through
/// the CLI reproduces all seven certified coefficients to at least 7 significant digits.
#[test]
fn longley_certified_coefficients() {
    let (x, y) = longley_files();
    let v = solve_json(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0",
        "--intercept",
        "--tol",
        "1e-13",
    ]);
    let (_, cert) = read_table("longley-certified.csv");
    let certified = |name: &str| -> f64 {
        cert.iter().find(|r| r[0] == name).expect("certified row")[1]
            .parse()
            .expect("number")
    };
    let b = coefficients(&v);
    assert_eq!(b.len(), 6);
    let mut worst = significant_digits(number(&v, "intercept"), certified("b0"));
    for (j, bj) in b.iter().enumerate() {
        worst = worst.min(significant_digits(*bj, certified(&format!("b{}", j + 1))));
    }
    println!("Longley via CLI: worst agreement {worst:.2} digits");
    assert!(worst >= 7.0, "only {worst:.2} significant digits");
}

/// Lasso on macrodata at λ = 0.1673 (reference: general-purpose conic solver, polished;
/// tests/data/README.md): objective within 1e-8 relative, the same exact zeros, converged.
#[test]
fn macrodata_lasso_objective() {
    let (_, x, y) = macrodata_files("macro-x.csv");
    let v = solve_json(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0.1673",
        "--intercept",
    ]);
    let (objective, intercept, reference) = macrodata_reference();
    let rel = (number(&v, "objective") - objective).abs() / objective.abs();
    assert!(rel <= 1e-8, "relative objective error {rel:e}");
    assert_eq!(v["status"], "converged");
    assert_eq!(v["loss"], "least-squares");
    assert_eq!(v["solver"], "newton-cd");
    let b = coefficients(&v);
    for (j, (c, r)) in b.iter().zip(&reference).enumerate() {
        // Exact zeros in the reference are exact zeros in the output.
        assert_eq!(*c == 0.0, *r == 0.0, "support differs at column {j}");
    }
    assert!((number(&v, "intercept") - intercept).abs() <= 1e-6 * intercept.abs());
    // The default stopping rule (src/solver/mod.rs): KKT residual ≤ 1e-7·max(1, ‖∇f(0)‖∞),
    // where ∇f(0) = (−Xᵀy/n, −ȳ) with the intercept last.
    let (_, xm) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, ym) = read_numeric_table("macrodata-lasso-y.csv");
    let n = xm.nrows() as f64;
    let grad0 = xm
        .t()
        .dot(&ym.column(0))
        .iter()
        .fold(ym.column(0).sum().abs() / n, |a, g| a.max(g.abs() / n));
    let kkt = number(&v, "kkt_residual");
    assert!(
        kkt <= 1e-7 * grad0.max(1.0),
        "KKT residual {kkt:e} above the default rule"
    );
    let gap = number(&v, "duality_gap");
    assert!((-1e-12..=1e-7).contains(&gap), "duality gap {gap}");
}

/// The same penalty written as weights: λ = 2·0.1673 with every weight ½ is the λ = 0.1673
/// problem, so it must reach the same reference objective (macrodata fixture).
#[test]
fn weights_rescale_the_penalty() {
    let (_, x, y) = macrodata_files("macro-x.csv");
    let w = TempFile::with_text("weights.csv", &vector_text(&[0.5; 11]));
    let v = solve_json(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0.3346",
        "--weights",
        w.arg(),
        "--intercept",
    ]);
    let (objective, _, _) = macrodata_reference();
    let rel = (number(&v, "objective") - objective).abs() / objective.abs();
    assert!(rel <= 1e-8, "relative objective error {rel:e}");

    // A weight file of the wrong length is rejected with a message naming it.
    let short = TempFile::with_text("short-weights.csv", "1\n1\n");
    let out = ellone(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0.1",
        "--weights",
        short.arg(),
    ]);
    assert!(!out.status.success());
    assert!(stderr(&out).contains(short.arg()), "{}", stderr(&out));
}

/// Matrix Market input (sparse storage inside) gives the same solution as the dense CSV of
/// the same matrix, and both match the macrodata reference objective.
#[test]
fn matrix_market_matches_csv() {
    let (_, x_csv, y) = macrodata_files("macro-x.csv");
    let (_, x_mtx, _) = macrodata_files("macro-x.mtx");
    let run = |x: &TempFile| {
        solve_json(&[
            "solve",
            "--loss",
            "least-squares",
            "--x",
            x.arg(),
            "--y",
            y.arg(),
            "--lambda",
            "0.1673",
            "--intercept",
        ])
    };
    let (dense, sparse) = (run(&x_csv), run(&x_mtx));
    let (objective, _, _) = macrodata_reference();
    for v in [&dense, &sparse] {
        let rel = (number(v, "objective") - objective).abs() / objective.abs();
        assert!(rel <= 1e-8, "relative objective error {rel:e}");
    }
    let (bd, bs) = (coefficients(&dense), coefficients(&sparse));
    for (d, s) in bd.iter().zip(&bs) {
        assert_eq!(*d == 0.0, *s == 0.0);
        assert!((d - s).abs() <= 1e-9, "{d} vs {s}");
    }
    assert!((number(&dense, "intercept") - number(&sparse, "intercept")).abs() <= 1e-9);
}

/// The tests/data/spector.csv data ("Probit analysis and economic education", J. Economic
/// Education, 1980; MLE in tests/data/spector-logit-mle.csv): unpenalised logistic regression with
/// intercept through the CLI gives the maximum-likelihood estimates to 6 digits and the
/// objective −loglik/n.
#[test]
fn spector_logistic_mle() {
    let (_, data) = read_numeric_table("spector.csv");
    let x = TempFile::with_text(
        "spector-x.csv",
        &csv_text(&data.slice(s![.., 0..3]).to_owned()),
    );
    let y = TempFile::with_text("spector-y.csv", &vector_text(&data.column(3).to_vec()));
    let v = solve_json(&[
        "solve",
        "--loss",
        "logistic",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0",
        "--intercept",
        "--tol",
        "1e-12",
    ]);
    let (_, mle) = read_table("spector-logit-mle.csv");
    let value = |name: &str| -> f64 {
        mle.iter().find(|r| r[0] == name).expect("row")[1]
            .parse()
            .expect("number")
    };
    let b = coefficients(&v);
    let pairs = [
        (number(&v, "intercept"), value("const")),
        (b[0], value("gpa")),
        (b[1], value("tuce")),
        (b[2], value("psi")),
    ];
    for (c, r) in pairs {
        assert!(significant_digits(c, r) >= 6.0, "{c} vs {r}");
    }
    // Log-likelihood −12.8896342221314 (same source), 32 rows.
    assert!((number(&v, "objective") - 12.8896342221314 / 32.0).abs() <= 1e-10);
    assert_eq!(v["loss"], "logistic");
}

/// Elastic net through data augmentation (a textbook identity): without an intercept,
/// (1/(2n))‖y − Xb‖² + λ‖b‖₁ + (λ₂/2)‖b‖² equals (n+p)/n times the lasso objective of
/// X̃ = [X; √(nλ₂)·I], ỹ = [y; 0] (n + p rows) at λ·n/(n+p). Both runs must agree.
#[test]
fn l2_matches_augmented_lasso() {
    let (x, xf, yf) = macrodata_files("macro-x.csv");
    let (n, p) = x.dim();
    let (lambda, l2) = (0.05, 0.3);
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let mut xa = Array2::zeros((n + p, p));
    xa.slice_mut(s![..n, ..]).assign(&x);
    for j in 0..p {
        xa[[n + j, j]] = (n as f64 * l2).sqrt();
    }
    let mut ya = y.column(0).to_vec();
    ya.resize(n + p, 0.0);
    let xaf = TempFile::with_text("aug-x.csv", &csv_text(&xa));
    let yaf = TempFile::with_text("aug-y.csv", &vector_text(&ya));
    let lambda_s = lambda.to_string();
    let l2_s = l2.to_string();
    let enet = solve_json(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        xf.arg(),
        "--y",
        yf.arg(),
        "--lambda",
        &lambda_s,
        "--l2",
        &l2_s,
        "--tol",
        "1e-12",
    ]);
    let lambda_aug = (lambda * n as f64 / (n + p) as f64).to_string();
    let aug = solve_json(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        xaf.arg(),
        "--y",
        yaf.arg(),
        "--lambda",
        &lambda_aug,
        "--tol",
        "1e-12",
    ]);
    let scale = (n + p) as f64 / n as f64;
    let (fe, fa) = (
        number(&enet, "objective"),
        number(&aug, "objective") * scale,
    );
    assert!((fe - fa).abs() <= 1e-10 * fe.abs(), "{fe} vs {fa}");
    for (e, a) in coefficients(&enet).iter().zip(&coefficients(&aug)) {
        assert!((e - a).abs() <= 1e-7, "{e} vs {a}");
    }
    assert_eq!(enet["intercept"], 0.0);
}

/// The JSON document has exactly the documented keys, `duality_gap` is a number for least
/// squares, and `--out` writes the document to the file instead of stdout.
#[test]
fn json_keys_and_out_file() {
    let (_, x, y) = macrodata_files("macro-x.csv");
    let out_file = TempFile::new("result.json");
    let out = ellone(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0.1673",
        "--out",
        out_file.arg(),
    ]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(out.stdout.is_empty(), "nothing on stdout with --out");
    let text = std::fs::read_to_string(out_file.path()).expect("--out wrote the file");
    assert!(!text.contains("NaN") && !text.contains("inf"));
    let v: Value = serde_json::from_str(&text).expect("the file is JSON");
    let mut keys: Vec<&str> = v
        .as_object()
        .expect("an object")
        .keys()
        .map(String::as_str)
        .collect();
    keys.sort_unstable();
    let mut expected = vec![
        "loss",
        "solver",
        "status",
        "objective",
        "kkt_residual",
        "duality_gap",
        "iterations",
        "seconds",
        "intercept",
        "coefficients",
    ];
    expected.sort_unstable();
    assert_eq!(keys, expected);
    // No intercept asked for: reported as 0.
    assert_eq!(number(&v, "intercept"), 0.0);
    assert!(v["duality_gap"].is_f64());
    assert!(v["iterations"].is_u64());
    assert_eq!(coefficients(&v).len(), 11);
}

/// A malformed CSV fails with a non-zero exit code and a message naming file:line:column.
#[test]
fn malformed_csv_names_file_line_column() {
    let x = TempFile::with_text("bad-x.csv", "1,2\n3,4\n5,oops\n");
    let y = TempFile::with_text("bad-y.csv", "1\n2\n3\n");
    let out = ellone(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0.1",
    ]);
    assert!(!out.status.success());
    let msg = stderr(&out);
    assert!(msg.contains(&format!("{}:3:2", x.arg())), "stderr: {msg}");
    assert!(!msg.contains("panicked"), "stderr: {msg}");

    // A ragged row is reported at its own line, too; and a bad response file likewise.
    let ragged = TempFile::with_text("ragged-x.csv", "1,2\n3\n5,6\n");
    let out = ellone(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        ragged.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0.1",
    ]);
    assert!(!out.status.success());
    assert!(
        stderr(&out).contains(&format!("{}:2:", ragged.arg())),
        "{}",
        stderr(&out)
    );
    let bad_y = TempFile::with_text("bad-y2.csv", "1\nx\n3\n");
    let good_x = TempFile::with_text("good-x.csv", "1,2\n3,4\n5,7\n");
    let out = ellone(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        good_x.arg(),
        "--y",
        bad_y.arg(),
        "--lambda",
        "0.1",
    ]);
    assert!(!out.status.success());
    assert!(
        stderr(&out).contains(&format!("{}:2:1", bad_y.arg())),
        "{}",
        stderr(&out)
    );
}

/// A missing input file fails with a non-zero exit code and names the file.
#[test]
fn missing_file_fails() {
    let missing = TempFile::new("does-not-exist.csv");
    let y = TempFile::with_text("y.csv", "1\n2\n");
    let out = ellone(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        missing.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0.1",
    ]);
    assert!(!out.status.success());
    assert!(stderr(&out).contains(missing.arg()), "{}", stderr(&out));
}

/// Invalid values of λ (negative, not a number, NaN, infinite) fail with a non-zero exit.
#[test]
fn bad_lambda_fails() {
    let (_, x, y) = macrodata_files("macro-x.csv");
    for bad in ["-1", "abc", "NaN", "inf", ""] {
        let out = ellone(&[
            "solve",
            "--loss",
            "least-squares",
            "--x",
            x.arg(),
            "--y",
            y.arg(),
            "--lambda",
            bad,
        ]);
        assert!(!out.status.success(), "--lambda {bad:?} was accepted");
        assert!(!stderr(&out).contains("panicked"), "{}", stderr(&out));
    }
}

/// Inconsistent inputs fail cleanly: a response of the wrong length, labels that are not
/// 0/1, a design column of zeros, an option that does not apply to the loss.
#[test]
fn inconsistent_inputs_fail() {
    let x = TempFile::with_text("x.csv", "1,2\n3,4\n5,7\n");
    let zero_col = TempFile::with_text("zx.csv", "1,0\n3,0\n5,0\n");
    let y2 = TempFile::with_text("y2.csv", "1\n0\n");
    let y3 = TempFile::with_text("y3.csv", "1\n0\n2\n");
    // Eigenvalues 3 and −1 (closed form): not a covariance matrix.
    let indefinite = TempFile::with_text("cov.csv", "1,2\n2,1\n");
    let cases: Vec<(Vec<&str>, String)> = vec![
        (
            vec!["--loss", "precision", "--cov", indefinite.arg()],
            "not positive semidefinite".to_string(),
        ),
        (
            vec![
                "--loss",
                "precision",
                "--cov",
                indefinite.arg(),
                "--solver",
                "fista",
            ],
            indefinite.arg().to_string(),
        ),
        (
            vec!["--loss", "least-squares", "--x", x.arg(), "--y", y2.arg()],
            y2.arg().to_string(),
        ),
        (
            vec!["--loss", "logistic", "--x", x.arg(), "--y", y3.arg()],
            "line 3".to_string(),
        ),
        (
            vec![
                "--loss",
                "least-squares",
                "--x",
                zero_col.arg(),
                "--y",
                y3.arg(),
            ],
            "column 2".to_string(),
        ),
        (
            vec![
                "--loss",
                "least-squares",
                "--x",
                x.arg(),
                "--y",
                y3.arg(),
                "--cov",
                x.arg(),
            ],
            "--cov".to_string(),
        ),
    ];
    for (args, needle) in cases {
        let mut full = vec!["solve", "--lambda", "0.1"];
        full.extend(args);
        let out = ellone(&full);
        assert!(!out.status.success(), "{full:?} was accepted");
        assert!(stderr(&out).contains(&needle), "{full:?}: {}", stderr(&out));
    }
}

/// Every `--solver` reaches the macrodata lasso reference objective at λ = 0.1673 (general-
/// purpose conic solver, polished; tests/data/README.md) and reports its own name.
#[test]
fn every_solver_reaches_the_reference() {
    let (_, x, y) = macrodata_files("macro-x.csv");
    let (objective, _, reference) = macrodata_reference();
    for (flag, name) in [
        ("newton-cd", "newton-cd"),
        ("fista", "fista"),
        ("admm", "admm"),
        ("owl-qn", "owl-qn"),
    ] {
        let v = solve_json(&[
            "solve",
            "--loss",
            "least-squares",
            "--x",
            x.arg(),
            "--y",
            y.arg(),
            "--lambda",
            "0.1673",
            "--intercept",
            "--solver",
            flag,
        ]);
        assert_eq!(v["solver"], name);
        assert_eq!(v["status"], "converged", "{flag}");
        let rel = (number(&v, "objective") - objective).abs() / objective.abs();
        assert!(rel <= 1e-8, "{flag}: relative objective error {rel:e}");
        for (j, (c, r)) in coefficients(&v).iter().zip(&reference).enumerate() {
            assert!((c - r).abs() <= 1e-5, "{flag}: coefficient {j}: {c} vs {r}");
        }
    }
}

/// A matrix from a JSON array of rows.
fn matrix(v: &Value, key: &str) -> Array2<f64> {
    let rows = v[key]
        .as_array()
        .unwrap_or_else(|| panic!("{key} is not an array"));
    let data: Vec<Vec<f64>> = rows
        .iter()
        .map(|r| {
            r.as_array()
                .expect("a row")
                .iter()
                .map(|c| c.as_f64().expect("a number"))
                .collect()
        })
        .collect();
    let (n, m) = (data.len(), data.first().map_or(0, Vec::len));
    Array2::from_shape_fn((n, m), |(i, j)| data[i][j])
}

/// The optimal objective of the macrodata precision fixture at `lambda`
/// (tests/data/macrodata-precision-objectives.csv).
fn precision_reference_objective(lambda: f64) -> f64 {
    let (header, rows) = read_table("macrodata-precision-objectives.csv");
    let col = header
        .iter()
        .position(|h| h == "optimal_objective")
        .expect("objective column");
    let row = rows
        .iter()
        .find(|r| r[0].parse::<f64>().expect("λ") == lambda)
        .expect("λ row");
    row[col].parse().expect("number")
}

/// The macrodata columns standardised as in tests/data/README.md (mean 0, sd dividing by
/// n), so that ZᵀZ/n is the correlation matrix of macrodata-corr.csv.
fn standardised_macrodata() -> Array2<f64> {
    let (_, raw) = read_numeric_table("macrodata.csv");
    let n = raw.nrows() as f64;
    let mut z = raw.clone();
    for mut col in z.columns_mut() {
        let mean = col.sum() / n;
        let sd = (col.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n).sqrt();
        col.mapv_inplace(|v| (v - mean) / sd);
    }
    z
}

fn sorted_keys(v: &Value) -> Vec<String> {
    let mut keys: Vec<String> = v.as_object().expect("an object").keys().cloned().collect();
    keys.sort_unstable();
    keys
}

/// Sparse precision matrices of the macrodata correlation matrix (reference: general-purpose
/// conic solver, polished; tests/data/README.md): at every fixture λ the objective is within
/// 1e-8 relative, the zero pattern is exactly the reference's, Θ is symmetric, and the JSON
/// carries `precision` and an empty `coefficients`.
#[test]
fn precision_macrodata_fixtures() {
    let cov = common::data_path("macrodata-corr.csv");
    let cov = cov.to_str().expect("UTF-8 path");
    for (lambda, file) in [
        ("0.05", "macrodata-precision-lambda0.05.csv"),
        ("0.1", "macrodata-precision-lambda0.1.csv"),
        ("0.2", "macrodata-precision-lambda0.2.csv"),
        ("0.4", "macrodata-precision-lambda0.4.csv"),
    ] {
        let v = solve_json(&[
            "solve",
            "--loss",
            "precision",
            "--cov",
            cov,
            "--lambda",
            lambda,
        ]);
        let objective = precision_reference_objective(lambda.parse().expect("λ"));
        let rel = (number(&v, "objective") - objective).abs() / objective.abs();
        assert!(rel <= 1e-8, "λ={lambda}: relative objective error {rel:e}");
        assert_eq!(v["status"], "converged");
        let theta = matrix(&v, "precision");
        let reference = common::read_matrix(file);
        assert_eq!(theta.dim(), (12, 12));
        for ((i, j), t) in theta.indexed_iter() {
            assert_eq!(
                *t == 0.0,
                reference[[i, j]] == 0.0,
                "λ={lambda}: zero at ({i},{j})"
            );
            assert_eq!(*t, theta[[j, i]], "symmetry at ({i},{j})");
        }
        assert!(coefficients(&v).is_empty());
        assert_eq!(number(&v, "intercept"), 0.0);
        let mut expected: Vec<String> = [
            "loss",
            "solver",
            "status",
            "objective",
            "kkt_residual",
            "duality_gap",
            "iterations",
            "seconds",
            "intercept",
            "coefficients",
            "precision",
        ]
        .map(String::from)
        .to_vec();
        expected.sort_unstable();
        assert_eq!(sorted_keys(&v), expected);
        let gap = number(&v, "duality_gap");
        assert!(gap.abs() <= 1e-6, "λ={lambda}: duality gap {gap}");
    }
}

/// `--x` for precision forms S = XᵀX/n from the data as given (centring only with
/// `--center`): the standardised macrodata give the fixture's correlation matrix, hence the
/// fixture's optimum; with `--center` too (the columns already have mean 0). Baseline
/// solvers reach the same optimum.
#[test]
fn precision_from_data_and_baselines() {
    let z = TempFile::with_text("macro-z.csv", &csv_text(&standardised_macrodata()));
    let objective = precision_reference_objective(0.2);
    let runs: [&[&str]; 4] = [
        &[],
        &["--center"],
        &["--solver", "admm", "--max-iter", "5000"],
        &["--solver", "owl-qn", "--max-iter", "20000"],
    ];
    for extra in runs {
        let mut args = vec![
            "solve",
            "--loss",
            "precision",
            "--x",
            z.arg(),
            "--lambda",
            "0.2",
        ];
        args.extend_from_slice(extra);
        let v = solve_json(&args);
        assert_eq!(v["status"], "converged", "{extra:?}");
        let rel = (number(&v, "objective") - objective).abs() / objective.abs();
        assert!(rel <= 1e-8, "{extra:?}: relative objective error {rel:e}");
    }
    // Without centring, S is the raw second-moment matrix: a different problem.
    let (_, raw) = read_numeric_table("macrodata.csv");
    let rawf = TempFile::with_text("macro-raw.csv", &csv_text(&raw));
    let plain = solve_json(&[
        "solve",
        "--loss",
        "precision",
        "--x",
        rawf.arg(),
        "--lambda",
        "0.2",
    ]);
    let centred = solve_json(&[
        "solve",
        "--loss",
        "precision",
        "--x",
        rawf.arg(),
        "--lambda",
        "0.2",
        "--center",
    ]);
    assert_ne!(number(&plain, "objective"), number(&centred, "objective"));
}

/// Gaussian CRF with one output and no penalty is linear regression (a textbook identity):
/// y | x ~ N(−Λ⁻¹Θᵀx, Λ⁻¹), so the slopes are −Θ/Λ and the residual variance is 1/Λ. On the
/// centred Longley data this must reproduce the NIST StRD certified slopes b1…b6 and the
/// residual sum of squares n/Λ (certified values quoted from memory; tests/data/README.md).
#[test]
fn crf_one_output_is_longley_regression() {
    let (x, y) = longley_files();
    let v = solve_json(&[
        "solve",
        "--loss",
        "gaussian-crf",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "0",
        "--lambda-theta",
        "0",
        "--center",
        "--tol",
        "1e-12",
    ]);
    let lambda = matrix(&v, "precision");
    let theta = matrix(&v, "interaction");
    assert_eq!(lambda.dim(), (1, 1));
    assert_eq!(theta.dim(), (6, 1), "interaction is p rows × q columns");
    assert!(coefficients(&v).is_empty());
    let (_, cert) = read_table("longley-certified.csv");
    let certified = |name: &str| -> f64 {
        cert.iter().find(|r| r[0] == name).expect("certified row")[1]
            .parse()
            .expect("number")
    };
    for j in 0..6 {
        let slope = -theta[[j, 0]] / lambda[[0, 0]];
        let digits = significant_digits(slope, certified(&format!("b{}", j + 1)));
        assert!(digits >= 7.0, "b{}: {slope}, {digits:.1} digits", j + 1);
    }
    let rss = 16.0 / lambda[[0, 0]];
    assert!(
        significant_digits(rss, certified("residual_ss")) >= 7.0,
        "RSS {rss}"
    );
    let mut keys = sorted_keys(&v);
    keys.retain(|k| k == "precision" || k == "interaction");
    assert_eq!(keys, ["interaction", "precision"]);
}

/// When λ_Θ exceeds max |2(S_xy)_ij| the optimal Θ is 0 (its KKT condition at Θ = 0), and
/// the CRF reduces to the precision problem on S_yy. With Y the standardised macrodata,
/// S_yy is the fixture's correlation matrix, so Λ must match the λ = 0.2 precision fixture
/// (conic solver reference, tests/data/README.md).
#[test]
fn crf_with_zero_interaction_is_the_precision_fixture() {
    let z = standardised_macrodata();
    let yf = TempFile::with_text("crf-y.csv", &csv_text(&z));
    // Inputs: two of the standardised columns, so |S_xy| ≤ 1 and λ_Θ = 2.5 zeroes Θ.
    let xf = TempFile::with_text("crf-x.csv", &csv_text(&z.slice(s![.., 0..2]).to_owned()));
    let v = solve_json(&[
        "solve",
        "--loss",
        "gaussian-crf",
        "--x",
        xf.arg(),
        "--y",
        yf.arg(),
        "--lambda",
        "0.2",
        "--lambda-theta",
        "2.5",
    ]);
    assert_eq!(v["status"], "converged");
    let theta = matrix(&v, "interaction");
    assert_eq!(theta.dim(), (2, 12));
    assert!(theta.iter().all(|t| *t == 0.0), "Θ is exactly zero");
    let objective = precision_reference_objective(0.2);
    let rel = (number(&v, "objective") - objective).abs() / objective.abs();
    assert!(rel <= 1e-8, "relative objective error {rel:e}");
    let lambda = matrix(&v, "precision");
    let reference = common::read_matrix("macrodata-precision-lambda0.2.csv");
    for ((i, j), l) in lambda.indexed_iter() {
        assert_eq!(*l == 0.0, reference[[i, j]] == 0.0, "zero at ({i},{j})");
        assert!((l - reference[[i, j]]).abs() <= 1e-5, "({i},{j}): {l}");
    }
}

/// Precision weights: λ = 0.4 with every w_ij = ½ is the λ = 0.2 problem, so it reaches the
/// λ = 0.2 fixture's optimum (conic solver reference, tests/data/README.md); a weight matrix
/// of the wrong shape is rejected with a message naming the weights file.
#[test]
fn precision_weights_rescale_the_penalty() {
    let cov = common::data_path("macrodata-corr.csv");
    let cov = cov.to_str().expect("UTF-8 path");
    let half = Array2::from_elem((12, 12), 0.5);
    let w = TempFile::with_text("precision-weights.csv", &csv_text(&half));
    let v = solve_json(&[
        "solve",
        "--loss",
        "precision",
        "--cov",
        cov,
        "--lambda",
        "0.4",
        "--weights",
        w.arg(),
    ]);
    let objective = precision_reference_objective(0.2);
    let rel = (number(&v, "objective") - objective).abs() / objective.abs();
    assert!(rel <= 1e-8, "relative objective error {rel:e}");

    let wrong = TempFile::with_text("precision-weights-3.csv", "1,1,1\n1,1,1\n1,1,1\n");
    let out = ellone(&[
        "solve",
        "--loss",
        "precision",
        "--cov",
        cov,
        "--lambda",
        "0.4",
        "--weights",
        wrong.arg(),
    ]);
    assert!(!out.status.success());
    assert!(stderr(&out).contains(wrong.arg()), "{}", stderr(&out));
}

/// A solve stopped by `--max-iter` is not reported as converged: exit code 0, status
/// `iteration_limit`, a warning on stderr, and the best iterate with its (large) KKT
/// residual. Longley without an intercept at λ = 1 needs far more than one iteration: its
/// starting KKT residual is max_j |x_jᵀy|/n − λ (tests/data/longley.csv).
#[test]
fn iteration_limit_is_reported_honestly() {
    let (x, y) = longley_files();
    let out = ellone(&[
        "solve",
        "--loss",
        "least-squares",
        "--x",
        x.arg(),
        "--y",
        y.arg(),
        "--lambda",
        "1",
        "--max-iter",
        "1",
    ]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stderr(&out).contains("iteration_limit"), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).expect("JSON");
    assert_eq!(v["status"], "iteration_limit");
    assert_eq!(v["iterations"], 1);
    let (_, data) = read_numeric_table("longley.csv");
    let n = data.nrows() as f64;
    let y0 = data.column(0);
    let grad0 = (1..7)
        .map(|j| data.column(j).dot(&y0).abs() / n)
        .fold(0.0f64, f64::max);
    assert!(
        number(&v, "kkt_residual") > 1e-7 * grad0,
        "not converged, so above the rule"
    );
}
