//! Gaussian CRF: derivatives, the local model, closed forms, reference solutions, solver
//! agreement, the fitted model, sampling and bad input.

mod common;

use ellone::crf::{CrfData, CrfLoss, InputMode};
use ellone::loss::{check_derivatives, Loss};
use ellone::solver::{NewtonCd, Solver, SolverOptions, Status};
use ellone::Penalty;
use ndarray::Array2;
use rand::{rngs::StdRng, SeedableRng};
use rand_distr::{Distribution, StandardNormal};

fn gaussian(n: usize, m: usize, seed: u64) -> Array2<f64> {
    let mut rng = StdRng::seed_from_u64(seed);
    Array2::from_shape_fn((n, m), |_| StandardNormal.sample(&mut rng))
}

/// Outputs with a linear dependence on X plus correlated noise (a demo generator).
fn crf_data(n: usize, p: usize, q: usize, seed: u64) -> (Array2<f64>, Array2<f64>) {
    let x = gaussian(n, p, seed);
    let b = gaussian(p, q, seed + 1).mapv(|v| if v.abs() > 1.0 { v } else { 0.0 });
    let e = gaussian(n, q, seed + 2);
    let mut y = x.dot(&b) + &e;
    // Correlate neighbouring outputs.
    for i in 0..n {
        for j in 1..q {
            y[[i, j]] += 0.5 * e[[i, j - 1]];
        }
    }
    (x, y)
}

fn loss_for(x: &Array2<f64>, y: &Array2<f64>, mode: InputMode, ll: f64, lt: f64) -> CrfLoss {
    let data = CrfData::new(x.view(), y.view(), false, false, mode).unwrap();
    CrfLoss::new(data, ll, lt).unwrap()
}

/// A point with a dense positive-definite Λ and a partly non-zero Θ.
fn interior_point(loss: &CrfLoss, seed: u64) -> Vec<f64> {
    let mut x = loss.start();
    let nl = loss.precision_coordinates();
    let q = (((8 * nl + 1) as f64).sqrt() as usize - 1) / 2;
    let mut rng = StdRng::seed_from_u64(seed);
    let mut k = 0;
    for a in 0..q {
        for b in a..q {
            let z: f64 = StandardNormal.sample(&mut rng);
            if a == b {
                x[k] = 2.0 * x[k] + 1.0;
            } else {
                x[k] = 0.1 * z;
            }
            k += 1;
        }
    }
    for v in x[nl..].iter_mut() {
        let z: f64 = StandardNormal.sample(&mut rng);
        *v = if z > 0.3 { 0.2 * z } else { 0.0 };
    }
    assert!(loss.value(&x).is_some());
    x
}

// Outside reference: central finite differences (the crate's checker; the truncation error
// O(h²) of central differences is textbook numerical analysis).
#[test]
fn derivatives_match_finite_differences() {
    for mode in [InputMode::Gram, InputMode::Data] {
        let (x, y) = crf_data(30, 5, 4, 1);
        let loss = loss_for(&x, &y, mode, 0.1, 0.1);
        let pt = interior_point(&loss, 7);
        let rep = check_derivatives(&loss, &pt, 12, 3).unwrap();
        assert!(rep.passes(1e-6), "{mode:?}: {rep:?}");
    }
}

/// The fast local model against the exact Hessian-vector product and the loss itself.
#[test]
fn local_model_matches_exact_products() {
    for mode in [InputMode::Gram, InputMode::Data] {
        let (x, y) = crf_data(25, 6, 3, 11);
        let loss = loss_for(&x, &y, mode, 0.05, 0.3);
        let pt = interior_point(&loss, 5);
        let m = loss.dim();
        let mut model = loss.local_model(&pt).unwrap();
        // Gradient and value.
        let mut g = vec![0.0; m];
        loss.gradient(&pt, &mut g);
        for (a, b) in model.gradient().iter().zip(&g) {
            assert!((a - b).abs() < 1e-10 * (1.0 + b.abs()));
        }
        assert!((model.value() - loss.value(&pt).unwrap()).abs() < 1e-10);
        // Curvatures: e_kᵀ H e_k.
        let mut hv = vec![0.0; m];
        for k in 0..m {
            let mut e = vec![0.0; m];
            e[k] = 1.0;
            loss.hess_vec(&pt, &e, &mut hv);
            let c = model.curvature(k);
            assert!(
                (c - hv[k]).abs() < 1e-9 * (1.0 + hv[k].abs()),
                "k={k} {c} {}",
                hv[k]
            );
        }
        // Build a random direction coordinate by coordinate, in a scrambled order.
        let mut rng = StdRng::seed_from_u64(9);
        let mut d = vec![0.0; m];
        let mut order: Vec<usize> = (0..m).collect();
        order.reverse();
        for &k in order.iter().step_by(2) {
            let z: f64 = StandardNormal.sample(&mut rng);
            model.step(k, 0.05 * z);
            d[k] += 0.05 * z;
        }
        loss.hess_vec(&pt, &d, &mut hv);
        for (k, hk) in hv.iter().enumerate() {
            let h = model.hd(k);
            assert!(
                (h - hk).abs() < 1e-9 * (1.0 + hk.abs()),
                "{mode:?} k={k} {h} {}",
                hk
            );
        }
        for alpha in [1.0, 0.5, 0.125] {
            let trial: Vec<f64> = pt.iter().zip(&d).map(|(a, b)| a + alpha * b).collect();
            let exact = loss.value(&trial);
            let along = model.value_along(alpha);
            match (exact, along) {
                (Some(a), Some(b)) => assert!((a - b).abs() < 1e-9 * (1.0 + a.abs())),
                (None, None) => {}
                other => panic!("domain disagreement {other:?}"),
            }
        }
        model.clear();
        for k in 0..m {
            assert_eq!(model.hd(k), 0.0);
        }
    }
}

fn solve(loss: &CrfLoss, tol: f64) -> ellone::Solution {
    let opts = SolverOptions {
        tol,
        max_iter: 500,
        ..Default::default()
    };
    NewtonCd::new(opts)
        .solve(loss, &Penalty::l1(1.0).unwrap())
        .unwrap()
}

/// Gauss–Jordan inverse with partial pivoting, written here so the closed-form checks do not
/// depend on the crate's own linear algebra (textbook algorithm).
fn gj_inverse(a: &Array2<f64>) -> Array2<f64> {
    let n = a.nrows();
    let mut m = a.clone();
    let mut inv = Array2::<f64>::eye(n);
    for c in 0..n {
        let piv = (c..n)
            .max_by(|&i, &j| m[[i, c]].abs().partial_cmp(&m[[j, c]].abs()).unwrap())
            .unwrap();
        for k in 0..n {
            m.swap([c, k], [piv, k]);
            inv.swap([c, k], [piv, k]);
        }
        let d = m[[c, c]];
        for k in 0..n {
            m[[c, k]] /= d;
            inv[[c, k]] /= d;
        }
        for r in 0..n {
            if r != c {
                let f = m[[r, c]];
                if f != 0.0 {
                    for k in 0..n {
                        m[[r, k]] -= f * m[[c, k]];
                        inv[[r, k]] -= f * inv[[c, k]];
                    }
                }
            }
        }
    }
    inv
}

fn max_abs_diff(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
    a.iter()
        .zip(b.iter())
        .fold(0.0f64, |m, (x, y)| m.max((x - y).abs()))
}

fn assert_converged(loss: &CrfLoss, sol: &ellone::Solution, tol: f64) {
    assert!(sol.converged(), "status {:?}", sol.status);
    let mut g = vec![0.0; loss.dim()];
    loss.gradient(&loss.start(), &mut g);
    let scale = g.iter().fold(1.0f64, |a, v| a.max(v.abs()));
    assert!(sol.kkt_residual <= tol * scale, "kkt {}", sol.kkt_residual);
}

// Outside reference: the multivariate least-squares normal equations
// B = (XᵀX)⁻¹XᵀY and the residual covariance (Y − XB)ᵀ(Y − XB)/n (maximum likelihood of a
// Gaussian linear model; any regression textbook). With λ_Λ = λ_Θ = 0 the CRF is that model
// re-parameterised: mean −XΘΣ = XB and Σ = Λ⁻¹ the residual covariance.
#[test]
fn unpenalised_fit_is_multivariate_least_squares() {
    for mode in [InputMode::Gram, InputMode::Data] {
        let (x, y) = crf_data(400, 5, 3, 21);
        let loss = loss_for(&x, &y, mode, 0.0, 0.0);
        let sol = solve(&loss, 1e-10);
        assert_converged(&loss, &sol, 1e-10);
        let lam = loss.precision_of(&sol.x).unwrap();
        let theta = loss.interaction_of(&sol.x).unwrap();
        let sigma = gj_inverse(&lam);
        let b = gj_inverse(&x.t().dot(&x)).dot(&x.t().dot(&y));
        let resid = &y - &x.dot(&b);
        let cov = resid.t().dot(&resid) / 400.0;
        let mean = -x.dot(&theta).dot(&sigma);
        let fit = x.dot(&b);
        assert!(
            max_abs_diff(&mean, &fit) < 1e-7,
            "{}",
            max_abs_diff(&mean, &fit)
        );
        assert!(
            max_abs_diff(&sigma, &cov) < 1e-8,
            "{}",
            max_abs_diff(&sigma, &cov)
        );
    }
}

// Outside reference: least squares with at least as many inputs as samples (X of full row
// rank) interpolates, Y = XB exactly (textbook linear algebra), so with λ_Θ = 0 the residual
// covariance is 0 and −log det Λ + tr(S_res Λ) has no minimiser. `fit` used to report such a
// fit as converged (Λ_kk ≈ 10⁶ on a 6 × 10 example); it is now `Unbounded`, for both input
// modes and on both sides of the Gram computation (p ≤ n and n < p). The same holds with
// λ_Λ = 0 and fewer samples than outputs (a singular S_yy). With more samples than inputs
// the problem is bounded and `fit` gives the least-squares closed form.
#[test]
fn unbounded_crf_problems_are_refused() {
    for (n, p) in [(6, 10), (10, 10), (6, 200)] {
        let (x, y) = crf_data(n, p, 3, 5);
        for mode in [InputMode::Gram, InputMode::Data] {
            for lambda_precision in [0.1, 0.0] {
                let mut opts = CrfOptions::new(lambda_precision, 0.0);
                opts.input_mode = mode;
                match fit(x.view(), y.view(), &opts) {
                    Err(Error::Unbounded(_)) => {}
                    other => panic!("n {n} p {p} {mode:?}: {:?}", other.map(|f| f.solution)),
                }
            }
            // A penalised Θ keeps the problem bounded.
            let mut opts = CrfOptions::new(0.1, 0.1);
            opts.input_mode = mode;
            assert!(fit(x.view(), y.view(), &opts).unwrap().solution.converged());
        }
    }
    // Fewer samples than outputs: S_yy is singular, and with λ_Λ = 0 the fit diverges
    // along its null space even with a penalised Θ (Θ = 0 is free).
    let (x, y) = crf_data(4, 2, 6, 8);
    assert!(matches!(
        fit(x.view(), y.view(), &CrfOptions::new(0.0, 0.1)),
        Err(Error::Unbounded(_))
    ));
    assert!(fit(x.view(), y.view(), &CrfOptions::new(0.1, 0.1))
        .unwrap()
        .solution
        .converged());
    let (n, p) = (40, 10);
    let (x, y) = crf_data(n, p, 3, 6);
    for mode in [InputMode::Gram, InputMode::Data] {
        let mut opts = CrfOptions::new(0.0, 0.0);
        opts.input_mode = mode;
        opts.solver.tol = 1e-10;
        let fitted = fit(x.view(), y.view(), &opts).unwrap();
        let b = gj_inverse(&x.t().dot(&x)).dot(&x.t().dot(&y));
        let resid = &y - &x.dot(&b);
        let cov = resid.t().dot(&resid) / n as f64;
        let d = max_abs_diff(&fitted.model.covariance().to_owned(), &cov);
        assert!(d < 1e-8, "{mode:?}: {d}");
    }
}

/// Standardised macrodata (sd divides by n), whose S_yy is tests/data/macrodata-corr.csv.
fn macro_outputs() -> Array2<f64> {
    let (_, mut a) = common::read_numeric_table("macrodata.csv");
    let n = a.nrows() as f64;
    for mut col in a.columns_mut() {
        let mean = col.sum() / n;
        let sd = (col.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n).sqrt();
        col.mapv_inplace(|v| (v - mean) / sd);
    }
    a
}

// Outside reference: with X = 0 the CRF objective is exactly the precision (log-det)
// objective on S_yy; the reference solutions were computed with a general-purpose conic
// solver and polished (tests/data/README.md).
#[test]
fn zero_inputs_reduce_to_the_precision_problem() {
    let y = macro_outputs();
    let x = Array2::zeros((y.nrows(), 2));
    let (_, objectives) = common::read_table("macrodata-precision-objectives.csv");
    for (row, lambda) in [0.05, 0.1, 0.2, 0.4].into_iter().enumerate() {
        let reference = common::read_matrix(&format!("macrodata-precision-lambda{lambda}.csv"));
        for lt in [0.0, 10.0] {
            let loss = loss_for(&x, &y, InputMode::Auto, lambda, lt);
            let sol = solve(&loss, 1e-9);
            assert_converged(&loss, &sol, 1e-9);
            let lam = loss.precision_of(&sol.x).unwrap();
            let err = max_abs_diff(&lam, &reference);
            assert!(err < 1e-6, "lambda {lambda}: max |Λ − ref| = {err}");
            let fref: f64 = objectives[row][1].parse().unwrap();
            assert!((sol.objective - fref).abs() < 1e-9 * fref.abs().max(1.0));
            assert!(loss
                .interaction_of(&sol.x)
                .unwrap()
                .iter()
                .all(|v| *v == 0.0));
        }
    }
}

// Outside reference: textbook closed forms of the precision problem. For
// λ ≥ max_{i≠j}|S_ij| the diagonal Λ = diag(1/S_ii) satisfies the KKT conditions; for λ = 0
// the minimiser of −log det Λ + tr(SΛ) is S⁻¹.
#[test]
fn zero_inputs_closed_forms() {
    let y = crf_data(60, 3, 4, 31).1;
    let x = Array2::zeros((60, 3));
    let s = y.t().dot(&y) / 60.0;
    let off = (0..4)
        .flat_map(|i| (0..4).filter(move |&j| j != i).map(move |j| (i, j)))
        .fold(0.0f64, |m, (i, j)| m.max(s[[i, j]].abs()));
    let loss = loss_for(&x, &y, InputMode::Auto, off * 1.0001, 0.5);
    let sol = solve(&loss, 1e-10);
    assert_converged(&loss, &sol, 1e-10);
    let lam = loss.precision_of(&sol.x).unwrap();
    for i in 0..4 {
        for j in 0..4 {
            let expect = if i == j { 1.0 / s[[i, i]] } else { 0.0 };
            assert!((lam[[i, j]] - expect).abs() < 1e-10);
        }
    }
    let loss = loss_for(&x, &y, InputMode::Auto, 0.0, 0.0);
    let sol = solve(&loss, 1e-11);
    assert_converged(&loss, &sol, 1e-11);
    let lam = loss.precision_of(&sol.x).unwrap();
    assert!(max_abs_diff(&lam, &gj_inverse(&s)) < 1e-8);
}

use ellone::crf::{fit, scores, Alternating, CrfMethod, CrfModel, CrfOptions};
use ellone::Error;

fn certified(name: &str) -> f64 {
    let (_, rows) = common::read_table("longley-certified.csv");
    rows.iter().find(|r| r[0] == name).unwrap()[1]
        .parse()
        .unwrap()
}

// Outside reference: NIST StRD certified values for the Longley regression (quoted from
// memory, confirmed by exact rational arithmetic; tests/data/README.md). With q = 1,
// λ = 0 and centring (an unpenalised intercept) the CRF's predictive mean is the OLS fit
// and Σ = RSS/n. Standardisation is on, so this also checks the map back to the original
// scale. The design is ill-conditioned (condition number ~1e8 unscaled), hence ~6 digits.
#[test]
fn longley_certified_regression() {
    let (_, data) = common::read_numeric_table("longley.csv");
    let y = data.slice(ndarray::s![.., 0..1]).to_owned();
    let x = data.slice(ndarray::s![.., 1..]).to_owned();
    let mut opts = CrfOptions::new(0.0, 0.0);
    opts.center = true;
    opts.standardize = true;
    opts.solver.tol = 1e-12;
    let fitted = fit(x.view(), y.view(), &opts).unwrap();
    assert!(fitted.solution.converged(), "{:?}", fitted.solution.status);
    let model = &fitted.model;
    let s = model.covariance()[[0, 0]];
    for j in 0..6 {
        let b = -model.interaction()[[j, 0]] * s;
        let c = certified(&format!("b{}", j + 1));
        assert!((b - c).abs() < 1e-6 * c.abs(), "b{}: {b} vs {c}", j + 1);
    }
    let b0 = model.offset()[0];
    assert!((b0 - certified("b0")).abs() < 1e-6 * certified("b0").abs());
    let rss = certified("residual_ss");
    assert!(
        (s - rss / 16.0).abs() < 1e-7 * rss / 16.0,
        "{s} vs {}",
        rss / 16.0
    );
}

// Outside reference: the maximum-likelihood closed form of a Gaussian linear model: at the
// MLE the mean per-row negative log-likelihood on the training data is
// ½(q·log 2π + log det Σ̂ + q), because the mean Mahalanobis term is tr(Σ̂⁻¹Σ̂) = q.
#[test]
fn training_nll_at_the_mle() {
    let (x, y) = crf_data(300, 4, 3, 41);
    let mut opts = CrfOptions::new(0.0, 0.0);
    opts.solver.tol = 1e-11;
    let fitted = fit(x.view(), y.view(), &opts).unwrap();
    let nll = fitted
        .model
        .negative_log_likelihood(x.view(), y.view())
        .unwrap();
    let sigma = fitted.model.covariance().to_owned();
    // det Σ̂ of the 3×3 matrix by cofactor expansion (independent of the crate).
    let det3 = |a: &Array2<f64>| {
        a[[0, 0]] * (a[[1, 1]] * a[[2, 2]] - a[[1, 2]] * a[[2, 1]])
            - a[[0, 1]] * (a[[1, 0]] * a[[2, 2]] - a[[1, 2]] * a[[2, 0]])
            + a[[0, 2]] * (a[[1, 0]] * a[[2, 1]] - a[[1, 1]] * a[[2, 0]])
    };
    let expect = 0.5 * (3.0 * (2.0 * std::f64::consts::PI).ln() + det3(&sigma).ln() + 3.0);
    assert!((nll - expect).abs() < 1e-8, "{nll} vs {expect}");
    // Objective identity (DESIGN.md): the unpenalised objective is 2·NLL − q·log 2π.
    let f = fitted.solution.objective;
    assert!((f - (2.0 * nll - 3.0 * (2.0 * std::f64::consts::PI).ln())).abs() < 1e-8);
}

fn objective_of(loss: &CrfLoss, x: &[f64]) -> f64 {
    loss.objective(x).unwrap().unwrap()
}

// Outside reference for optimality: the KKT conditions of DESIGN.md, checked for both
// solvers, and agreement of two different algorithms on the same convex problem.
#[test]
fn joint_and_alternating_agree() {
    for (seed, (n, p, q), (ll, lt)) in [
        (51u64, (80, 10, 5), (0.05, 0.1)),
        (52, (40, 30, 6), (0.1, 0.15)),
        (53, (60, 8, 8), (0.02, 0.05)),
    ] {
        for mode in [InputMode::Gram, InputMode::Data] {
            let (x, y) = crf_data(n, p, q, seed);
            let loss = loss_for(&x, &y, mode, ll, lt);
            let opts = SolverOptions {
                tol: 1e-10,
                max_iter: 5000,
                ..Default::default()
            };
            let pen = Penalty::l1(1.0).unwrap();
            let joint = NewtonCd::new(opts.clone()).solve(&loss, &pen).unwrap();
            // The alternating scheme converges linearly (block coordinate descent on coupled
            // blocks), so it is asked for a looser KKT tolerance; the objectives must still
            // agree to 1e-8.
            let alt_opts = SolverOptions { tol: 1e-7, ..opts };
            let alt = Alternating::new(alt_opts)
                .solve(&loss, &pen, None, None)
                .unwrap();
            assert_converged(&loss, &joint, 1e-10);
            assert_converged(&loss, &alt, 1e-7);
            let (fj, fa) = (joint.objective, alt.objective);
            assert!((fj - fa).abs() < 1e-8 * fj.abs().max(1.0), "{fj} vs {fa}");
            assert!((objective_of(&loss, &joint.x) - fj).abs() < 1e-12 * fj.abs().max(1.0));
            assert!(joint.nnz() > loss.precision_coordinates() / 4);
        }
    }
}

mod properties {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig { cases: 12, ..ProptestConfig::default() })]
        // KKT residual below tolerance, and no random feasible perturbation (Λ stays positive
        // definite) lowers the objective: the definition of a minimiser of a convex function.
        #[test]
        fn minimiser_is_not_improved(seed in 0u64..1000, ll in 0.01f64..0.3, lt in 0.01f64..0.3,
                                     p in 2usize..8, q in 2usize..5) {
            let (x, y) = crf_data(50, p, q, seed);
            let loss = loss_for(&x, &y, InputMode::Auto, ll, lt);
            let sol = solve(&loss, 1e-9);
            assert_converged(&loss, &sol, 1e-9);
            let f0 = sol.objective;
            let mut rng = StdRng::seed_from_u64(seed + 7);
            for t in 0..20 {
                let scale = 10f64.powi(-(t % 5) - 1);
                let trial: Vec<f64> = sol.x.iter().map(|v| {
                    let z: f64 = StandardNormal.sample(&mut rng);
                    v + scale * z
                }).collect();
                if let Some(f) = loss.objective(&trial).unwrap() {
                    prop_assert!(f >= f0 - 1e-10 * f0.abs().max(1.0), "{} < {}", f, f0);
                }
            }
        }
    }
}

// Outside reference: the sampling distribution of Gaussian moments. For N draws from
// N(μ, Σ) the sample mean of output j has standard error sqrt(Σ_jj / N), and the sample
// covariance entry (i, j) has variance (Σ_ij² + Σ_ii Σ_jj) / N (Wishart second moments);
// every entry must be within 5 standard errors (a 5σ band, common practice).
#[test]
fn scenario_moments_match_the_model() {
    let (x, y) = crf_data(200, 4, 3, 61);
    let fitted = fit(x.view(), y.view(), &CrfOptions::new(0.02, 0.02)).unwrap();
    let model = &fitted.model;
    let x0 = x.row(3);
    let n = 100_000;
    let s = model.sample(x0, n, 2024).unwrap();
    assert_eq!(
        s,
        model.sample(x0, n, 2024).unwrap(),
        "seeded draws reproduce"
    );
    let mu = model.predict(x0.insert_axis(ndarray::Axis(0))).unwrap();
    let sigma = model.covariance();
    let mean = s.mean_axis(ndarray::Axis(0)).unwrap();
    for j in 0..3 {
        let se = (sigma[[j, j]] / n as f64).sqrt();
        assert!((mean[j] - mu[[0, j]]).abs() < 5.0 * se, "mean {j}");
    }
    let c = &s - &mean;
    let cov = c.t().dot(&c) / n as f64;
    for i in 0..3 {
        for j in 0..3 {
            let se = ((sigma[[i, j]].powi(2) + sigma[[i, i]] * sigma[[j, j]]) / n as f64).sqrt();
            assert!(
                (cov[[i, j]] - sigma[[i, j]]).abs() < 5.0 * se,
                "cov {i},{j}"
            );
        }
    }
}

// Outside reference: the closed-form CRPS of a normal forecast ("Strictly proper scoring
// rules, prediction, and estimation", JASA, 2007). Monte Carlo error of the sample CRPS
// A − B/2 (A = mean|X_i − y|, B = mean over pairs |X_i − X_j|) from m draws:
// sd(A) ≤ sqrt((σ² + d²)/m) with d = y − μ (Var|X − y| ≤ E(X − y)²), and B is a V-statistic
// with kernel projection h(x) = E|x − X'|, which is 1-Lipschitz, so sd(B/2) ≈ sqrt(4σ²/m)/2
// = σ/√m; its O(σ/m) bias is negligible. The check allows 5 of these standard errors.
#[test]
fn sample_scores_match_the_gaussian_closed_form() {
    let (x, y) = crf_data(200, 4, 3, 71);
    let fitted = fit(x.view(), y.view(), &CrfOptions::new(0.02, 0.02)).unwrap();
    let model = &fitted.model;
    let m = 100_000;
    let s = model.sample(x.row(5), m, 9).unwrap();
    let mu = model.predict(x.slice(ndarray::s![5..6, ..])).unwrap();
    let got = scores::crps(s.view(), y.row(5)).unwrap();
    for j in 0..3 {
        let sd = model.covariance()[[j, j]].sqrt();
        let d = y[[5, j]] - mu[[0, j]];
        let exact = scores::gaussian_crps(mu[[0, j]], sd, y[[5, j]]).unwrap();
        let se = ((sd * sd + d * d) / m as f64).sqrt() + sd / (m as f64).sqrt();
        assert!(
            (got[j] - exact).abs() < 5.0 * se,
            "{j}: {} vs {exact}",
            got[j]
        );
    }
    // With q = 1 the energy score is the CRPS (same definition, Euclidean norm in 1-D).
    let col = s.slice(ndarray::s![..2000, 1..2]);
    let es = scores::energy_score(col, y.slice(ndarray::s![5, 1..2])).unwrap();
    let c1 = scores::crps(col, y.slice(ndarray::s![5, 1..2])).unwrap()[0];
    assert!((es - c1).abs() < 1e-9 * c1.abs().max(1.0));
    let sc = model
        .scenario_scores(
            x.slice(ndarray::s![0..4, ..]),
            y.slice(ndarray::s![0..4, ..]),
            500,
            1,
        )
        .unwrap();
    assert!(sc.energy > 0.0 && sc.crps.iter().all(|v| *v > 0.0));
}

#[test]
fn model_json_round_trip() {
    let (x, y) = crf_data(100, 5, 3, 81);
    let mut opts = CrfOptions::new(0.05, 0.05);
    opts.center = true;
    let fitted = fit(x.view(), y.view(), &opts).unwrap();
    let text = fitted.model.to_json().unwrap();
    let back = CrfModel::from_json(&text).unwrap();
    assert_eq!(back.precision(), fitted.model.precision());
    assert_eq!(back.interaction(), fitted.model.interaction());
    assert_eq!(back.offset(), fitted.model.offset());
    assert_eq!(
        back.predict(x.view()).unwrap(),
        fitted.model.predict(x.view()).unwrap()
    );
    assert!(matches!(
        CrfModel::from_json("{\"precision\": 3"),
        Err(Error::Parse { .. })
    ));
    // A non-positive-definite precision is refused on load.
    let bad = text.replacen("\"data\":[", "\"data\":[-", 1);
    assert!(CrfModel::from_json(&bad).is_err());
    // A negative penalty level is refused on load.
    let value: serde_json::Value = serde_json::from_str(&text).unwrap();
    let mut negative = value.clone();
    negative["lambda_precision"] = serde_json::json!(-1.0);
    assert!(matches!(
        CrfModel::from_json(&negative.to_string()),
        Err(Error::InvalidLambda { .. })
    ));
    // A numerically singular Λ (its inverse overflows) is refused.
    let tiny = Array2::<f64>::eye(2) * 1e-320;
    assert!(matches!(
        CrfModel::from_parts(tiny, Array2::zeros((1, 2)), vec![0.0; 2]),
        Err(Error::NonFinite { .. })
    ));
}

#[test]
fn bad_input_is_a_typed_error() {
    let (x, y) = crf_data(20, 3, 2, 91);
    let opts = CrfOptions::new(0.1, 0.1);
    let short = y.slice(ndarray::s![..19, ..]);
    assert!(matches!(
        fit(x.view(), short, &opts),
        Err(Error::ShapeMismatch { .. })
    ));
    let mut xn = x.clone();
    xn[[4, 1]] = f64::NAN;
    assert!(matches!(
        fit(xn.view(), y.view(), &opts),
        Err(Error::NonFinite { .. })
    ));
    let mut yn = y.clone();
    yn[[2, 0]] = f64::INFINITY;
    assert!(matches!(
        fit(x.view(), yn.view(), &opts),
        Err(Error::NonFinite { .. })
    ));
    let empty = Array2::<f64>::zeros((20, 0));
    assert!(matches!(
        fit(x.view(), empty.view(), &opts),
        Err(Error::Empty(_))
    ));
    for (a, b) in [(-0.1, 0.1), (0.1, -1.0), (f64::NAN, 0.1)] {
        assert!(matches!(
            fit(x.view(), y.view(), &CrfOptions::new(a, b)),
            Err(Error::InvalidLambda { .. })
        ));
    }
    let mut yc = y.clone();
    yc.column_mut(1).fill(0.0);
    assert!(matches!(
        fit(x.view(), yc.view(), &opts),
        Err(Error::Unbounded(_))
    ));
    // Finite data at the edges of the double range: squares that underflow to zero are
    // named as such; products that overflow are non-finite moments, not a fit on ∞.
    let tiny = y.mapv(|v| v * 1e-200);
    match fit(x.view(), tiny.view(), &opts) {
        Err(Error::Unbounded(m)) => assert!(m.contains("underflow"), "{m}"),
        other => panic!("expected Unbounded, got {other:?}"),
    }
    let huge = y.mapv(|v| v * 1e200);
    assert!(matches!(
        fit(x.view(), huge.view(), &opts),
        Err(Error::NonFinite { .. })
    ));
    assert!(matches!(
        fit(x.mapv(|v| v * 1e200).view(), y.view(), &opts),
        Err(Error::NonFinite { .. })
    ));
    let fitted = fit(x.view(), y.view(), &opts).unwrap();
    let wrong = Array2::<f64>::zeros((2, 4));
    assert!(matches!(
        fitted.model.predict(wrong.view()),
        Err(Error::ShapeMismatch { .. })
    ));
    assert!(fitted.model.sample(x.row(0), 0, 1).is_err());
    // Counts that could not be allocated are refused, not attempted.
    for huge in [usize::MAX, usize::MAX / 2, 1 << 40] {
        assert!(matches!(
            fitted.model.sample(x.row(0), huge, 1),
            Err(Error::InvalidArgument(_))
        ));
    }
    let mut alt = CrfOptions::new(0.1, 0.1);
    alt.method = CrfMethod::Alternating;
    alt.solver.tol = -1.0;
    assert!(matches!(
        fit(x.view(), y.view(), &alt),
        Err(Error::InvalidArgument(_))
    ));
}

// Cross-check with the crate's separate precision estimator (a different code path: block
// screening and its own log-det local model): with X = 0 the CRF's Λ must match it on
// S_yy. The external reference for both is the conic-solver fixture tested above.
#[test]
fn zero_inputs_match_the_precision_estimator() {
    use ellone::precision::{estimate_precision, PrecisionInput, PrecisionOptions};
    let y = crf_data(80, 3, 6, 101).1;
    let x = Array2::zeros((80, 3));
    let s = y.t().dot(&y) / 80.0;
    let mut popts = PrecisionOptions::default();
    popts.solver.tol = 1e-11;
    for lambda in [0.02, 0.1, 0.3] {
        let reference =
            estimate_precision(PrecisionInput::Covariance(s.view()), lambda, &popts).unwrap();
        let loss = loss_for(&x, &y, InputMode::Auto, lambda, 0.1);
        let sol = solve(&loss, 1e-11);
        assert_converged(&loss, &sol, 1e-11);
        let lam = loss.precision_of(&sol.x).unwrap();
        assert!(max_abs_diff(&lam, &reference.precision) < 1e-7);
        assert!((sol.objective - reference.objective).abs() < 1e-10 * sol.objective.abs().max(1.0));
    }
}

// An unreachable tolerance: the alternating solver must stop once rounding ends its progress
// (status LineSearchFailed, at the joint solver's optimum to rounding) rather than run to its
// iteration limit. Outside reference: the joint Newton-CD solution of the same problem.
#[test]
fn alternating_stops_when_rounding_ends_progress() {
    let (x, y) = crf_data(80, 10, 5, 51);
    let loss = loss_for(&x, &y, InputMode::Gram, 0.05, 0.1);
    let pen = Penalty::l1(1.0).unwrap();
    let reference = solve(&loss, 1e-11);
    let opts = SolverOptions {
        tol: 1e-17,
        max_iter: 5000,
        ..Default::default()
    };
    let alt = Alternating::new(opts)
        .solve(&loss, &pen, None, None)
        .unwrap();
    println!(
        "{:?} after {} iterations, kkt {:e}",
        alt.status, alt.iterations, alt.kkt_residual
    );
    assert_eq!(alt.status, Status::LineSearchFailed);
    assert!(alt.iterations < 5000);
    // Before the rounding rule it sat at a KKT residual of 7e-8 for all 5000 iterations.
    assert!(alt.kkt_residual < 1e-10, "{}", alt.kkt_residual);
    let f = reference.objective;
    assert!((alt.objective - f).abs() <= 1e-10 * f.abs().max(1.0));
}
/// Two small CRFs (seed, (n, p, q)), the second with more inputs than samples, on which
/// the quasi-Newton baseline used to stop early.
const SMALL_CRFS: [(u64, (usize, usize, usize)); 2] = [(61, (80, 10, 5)), (62, (40, 30, 6))];

// Outside reference: the KKT conditions of DESIGN.md and the joint Newton-CD optimum. The
// quasi-Newton baseline must reach tight tolerances on the CRF too: its line search used to
// stop at a KKT residual of 8e-7 (LineSearchFailed) once decreases fell below the rounding
// noise of F.
#[test]
fn quasi_newton_reaches_tight_tolerances() {
    use ellone::solver::Owlqn;
    for (seed, (n, p, q)) in SMALL_CRFS {
        let (x, y) = crf_data(n, p, q, seed);
        let loss = loss_for(&x, &y, InputMode::Auto, 0.05, 0.1);
        let pen = Penalty::l1(1.0).unwrap();
        let reference = solve(&loss, 1e-11);
        let opts = SolverOptions {
            tol: 1e-10,
            max_iter: 20_000,
            ..Default::default()
        };
        let sol = Owlqn::new(opts).solve(&loss, &pen).unwrap();
        assert_eq!(sol.status, Status::Converged, "seed {seed}");
        assert_converged(&loss, &sol, 1e-10);
        let f = reference.objective;
        assert!(
            (sol.objective - f).abs() <= 1e-12 * f.abs().max(1.0),
            "seed {seed}"
        );
    }
}

// Outside reference: agreement of the quasi-Newton fit with the joint Newton fit of the
// same convex problem (the same model, to tolerance), both certified by the KKT conditions.
#[test]
fn quasi_newton_fit_matches_the_joint_fit() {
    for (seed, (n, p, q)) in SMALL_CRFS {
        let (x, y) = crf_data(n, p, q, seed);
        let mut options = CrfOptions::new(0.05, 0.1);
        options.solver.tol = 1e-10;
        options.solver.max_iter = 20_000;
        let joint = fit(x.view(), y.view(), &options).unwrap();
        options.method = CrfMethod::QuasiNewton;
        let quasi = fit(x.view(), y.view(), &options).unwrap();
        assert_eq!(quasi.solution.solver, "owl-qn");
        assert_eq!(quasi.solution.status, Status::Converged, "seed {seed}");
        let (fj, fq) = (joint.solution.objective, quasi.solution.objective);
        assert!((fj - fq).abs() <= 1e-12 * fj.abs().max(1.0), "{fj} vs {fq}");
        let gap = |a: ndarray::ArrayView2<f64>, b: ndarray::ArrayView2<f64>| {
            max_abs_diff(&a.to_owned(), &b.to_owned())
        };
        let dl = gap(joint.model.precision(), quasi.model.precision());
        let dt = gap(joint.model.interaction(), quasi.model.interaction());
        assert!(dl < 1e-6 && dt < 1e-6, "Λ differs by {dl}, Θ by {dt}");
    }
}
