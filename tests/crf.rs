//! Gaussian CRF: derivatives, the local model, closed forms, reference solutions, solver
//! agreement, the fitted model, sampling and bad input.

mod common;

use ellone::crf::{CrfData, CrfLoss, InputMode};
use ellone::loss::{check_derivatives, Loss};
use ellone::solver::{NewtonCd, Solver, SolverOptions};
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
