//! Least squares and logistic regression against published reference values.

mod common;

use common::*;
use ellone::solver::{NewtonCd, Solver, SolverOptions, Status};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::s;

fn tight() -> NewtonCd {
    NewtonCd::new(SolverOptions {
        tol: 1e-13,
        max_iter: 200,
        ..Default::default()
    })
}

/// Longley data, NIST Statistical Reference Datasets ("Longley", certified values quoted
/// from memory and confirmed by exact rational arithmetic, see tests/data/README.md):
/// λ = 0 least squares with intercept must give all seven coefficients to ≥ 7 digits.
#[test]
fn longley_certified_coefficients() {
    let (_, data) = read_numeric_table("longley.csv");
    let y: Vec<f64> = data.column(0).to_vec();
    let x = data.slice(s![.., 1..]).to_owned();
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    let sol = tight().solve(&loss, &Penalty::l1(0.0).unwrap()).unwrap();
    let (b, b0) = loss.split(&sol.x);
    let (_, cert) = read_table("longley-certified.csv");
    let value = |name: &str| -> f64 {
        cert.iter().find(|r| r[0] == name).unwrap()[1]
            .parse()
            .unwrap()
    };
    let mut worst = 16.0f64;
    worst = worst.min(significant_digits(b0, value("b0")));
    for (j, &bj) in b.iter().enumerate() {
        worst = worst.min(significant_digits(bj, value(&format!("b{}", j + 1))));
    }
    println!(
        "Longley: status {:?}, worst agreement {worst:.2} digits",
        sol.status
    );
    assert!(worst >= 7.0, "only {worst:.2} significant digits");
}

/// Spector–Mazzeo data ("Probit analysis and economic education", J. Economic Education,
/// 1980): unpenalised logistic MLE with intercept to ≥ 6 significant digits.
#[test]
fn spector_logit_mle() {
    let (_, data) = read_numeric_table("spector.csv");
    let x = data.slice(s![.., 0..3]).to_owned();
    let y: Vec<f64> = data.column(3).to_vec();
    let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
    let sol = tight().solve(&loss, &Penalty::l1(0.0).unwrap()).unwrap();
    let (b, b0) = loss.split(&sol.x);
    let (_, mle) = read_table("spector-logit-mle.csv");
    let value = |name: &str| -> f64 {
        mle.iter().find(|r| r[0] == name).unwrap()[1]
            .parse()
            .unwrap()
    };
    let pairs = [
        (b0, value("const")),
        (b[0], value("gpa")),
        (b[1], value("tuce")),
        (b[2], value("psi")),
    ];
    for (c, r) in pairs {
        assert!(significant_digits(c, r) >= 6.0, "{c} vs {r}");
    }
    // Log-likelihood −12.8896342221314 (same source) ⇒ objective = −loglik / n.
    let f = loss.value(&sol.x).unwrap();
    assert!((f - 12.8896342221314 / 32.0).abs() < 1e-12);
    assert_eq!(sol.status, Status::Converged);
}

/// The macrodata lasso problem (least squares with intercept) and its fixture rows
/// (see tests/data/README.md).
fn macrodata_lasso() -> (LeastSquares, ndarray::Array2<f64>) {
    let (_, x) = read_numeric_table("macrodata-lasso-X.csv");
    let (_, y) = read_numeric_table("macrodata-lasso-y.csv");
    let y: Vec<f64> = y.column(0).to_vec();
    let loss = LeastSquares::from_dense(x.view(), &y, true).unwrap();
    let (_, sols) = read_numeric_table("macrodata-lasso-solutions.csv");
    (loss, sols)
}

/// The lasso fixtures (macrodata, solved by a general conic solver and polished; see
/// tests/data/README.md): objective within 1e-8 relative, same support.
#[test]
fn macrodata_lasso_fixtures() {
    let (loss, sols) = macrodata_lasso();
    for row in sols.rows() {
        let lambda = row[1];
        let reference = row[2];
        let sol = NewtonCd::default()
            .solve(&loss, &Penalty::l1(lambda).unwrap())
            .unwrap();
        let rel = (sol.objective - reference).abs() / reference.abs();
        println!(
            "λ={lambda}: objective {} ref {reference} rel {rel:.2e} iters {} status {:?} kkt {:?} gap {:?}",
            sol.objective, sol.iterations, sol.status, sol.kkt_residual, sol.duality_gap
        );
        assert_eq!(sol.status, Status::Converged);
        assert!(rel <= 1e-8, "relative objective error {rel:e}");
        let (b, _) = loss.split(&sol.x);
        for j in 0..11 {
            assert_eq!(b[j] == 0.0, row[8 + j] == 0.0, "support differs at {j}");
        }
        let gap = sol.duality_gap.unwrap();
        assert!((-1e-12..=1e-7).contains(&gap), "gap {gap}");
        // Solved tightly, the duality gap certifies the objective to near rounding.
        let tight_sol = tight().solve(&loss, &Penalty::l1(lambda).unwrap()).unwrap();
        let gap = tight_sol.duality_gap.unwrap();
        println!("tight: gap {gap:e} kkt {:e}", tight_sol.kkt_residual);
        assert!((-1e-12..=1e-11).contains(&gap), "tight gap {gap}");
    }
}

/// The macrodata lasso fixtures with the subspace Newton step switched off, so that only
/// the coordinate sweeps solve the ill-conditioned (unscaled) model: with and without the
/// Anderson extrapolation of the sweeps ("Anderson acceleration of coordinate descent",
/// AISTATS, 2021) the objective matches the general conic solver's to 1e-8 relative, and
/// the extrapolated sweeps need far fewer sweeps (a deterministic count, not a timing).
#[test]
fn macrodata_lasso_sweeps_only_with_and_without_extrapolation() {
    use ellone::solver::newton_cd::CdOptions;
    let (loss, sols) = macrodata_lasso();
    let solver = |extrapolation: usize| NewtonCd {
        options: SolverOptions {
            tol: 1e-10,
            max_iter: 5000,
            ..Default::default()
        },
        cd: CdOptions {
            newton_block_max: 0,
            extrapolation,
            ..Default::default()
        },
    };
    let (mut total_plain, mut total_fast) = (0, 0);
    for row in sols.rows() {
        let (lambda, reference) = (row[1], row[2]);
        let pen = Penalty::l1(lambda).unwrap();
        let plain = solver(0).solve(&loss, &pen).unwrap();
        let fast = solver(5).solve(&loss, &pen).unwrap();
        println!(
            "λ={lambda}: sweeps {} plain, {} extrapolated",
            plain.inner, fast.inner
        );
        for sol in [&plain, &fast] {
            assert_eq!(sol.status, Status::Converged);
            let rel = (sol.objective - reference).abs() / reference.abs();
            assert!(rel <= 1e-8, "relative objective error {rel:e}");
        }
        assert!(
            fast.inner <= plain.inner,
            "{} > {}",
            fast.inner,
            plain.inner
        );
        total_plain += plain.inner;
        total_fast += fast.inner;
    }
    assert!(
        5 * total_fast < total_plain,
        "{total_fast} vs {total_plain}"
    );
}
