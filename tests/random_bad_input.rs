//! Randomised bad input through the public API of the linear losses: small designs (dense
//! and sparse, including empty shapes) with NaN, ±Inf, ±1e300, subnormal and negative
//! values, mismatched responses, labels outside {0, 1}, random penalties, weights, ℓ2
//! terms, solver options and starting points, fed to the constructors, all four solvers,
//! `fit_path`, `cross_validate`, `lambda_max` and `check_derivatives`.
//!
//! What is checked: no call panics (each runs inside `catch_unwind`; the project's rule is
//! typed errors, never a panic, for bad data and options), and a solve that reports
//! `Converged` has a finite objective and finite coordinates. Fixed seed, so a failure
//! reproduces. A loop of this kind found the dense `matvec` crash at opt-level 1 fixed in
//! `src/design.rs`. (Invented data: the inputs are adversarial by construction, not a
//! reference; the references are in the other test files.)

use ellone::cv::{cross_validate, CrossValidate, CvOptions};
use ellone::loss::check_derivatives;
use ellone::path::{fit_path, lambda_max, PathOptions};
use ellone::solver::{Admm, Fista, NewtonCd, Owlqn, Solver, SolverOptions, Status};
use ellone::{Design, LeastSquares, Logistic, Loss, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::time::Duration;

/// An adversarial value: mostly ordinary, sometimes non-finite, huge, subnormal or zero.
fn value(rng: &mut StdRng, finite: bool) -> f64 {
    let v = match rng.random_range(0..20) {
        0 => f64::NAN,
        1 => f64::INFINITY,
        2 => f64::NEG_INFINITY,
        3 => 0.0,
        4 => 1e300,
        5 => -1e300,
        6 => 1e-300,
        7 => 1e-320,
        8 => -1.0,
        _ => rng.random_range(-3.0..3.0),
    };
    if finite && !v.is_finite() {
        rng.random_range(-3.0..3.0)
    } else {
        v
    }
}

/// A penalty level: zero, tiny, huge, adversarial or ordinary.
fn level(rng: &mut StdRng) -> f64 {
    match rng.random_range(0..8) {
        0 => 0.0,
        1 => 1e-12,
        2 => 1e300,
        3 => value(rng, false),
        _ => rng.random_range(0.0..1.0),
    }
}

/// Runs `f`, failing the test with `what` if it panics.
fn no_panic<T>(what: &str, f: impl FnOnce() -> T) -> T {
    match catch_unwind(AssertUnwindSafe(f)) {
        Ok(v) => v,
        Err(e) => {
            let msg = e
                .downcast_ref::<String>()
                .cloned()
                .or_else(|| e.downcast_ref::<&str>().map(|s| s.to_string()))
                .unwrap_or_default();
            panic!("{what} panicked: {msg}");
        }
    }
}

#[test]
fn random_bad_input_never_panics() {
    let mut rng = StdRng::seed_from_u64(20_240_611);
    let mut solved = 0;
    for it in 0..20_000 {
        let (n, p) = (rng.random_range(0..5), rng.random_range(0..4));
        let finite = rng.random_range(0..3) > 0;
        let x = Array2::from_shape_fn((n, p), |_| {
            if rng.random_range(0..4) == 0 {
                value(&mut rng, finite)
            } else {
                rng.random_range(-3.0..3.0)
            }
        });
        let ny = if rng.random_range(0..6) == 0 {
            rng.random_range(0..6)
        } else {
            n
        };
        let logistic = rng.random::<bool>();
        let y: Vec<f64> = (0..ny)
            .map(|_| {
                if logistic && rng.random_range(0..15) > 0 {
                    f64::from(rng.random_range(0..2))
                } else {
                    value(&mut rng, finite)
                }
            })
            .collect();
        let intercept = rng.random::<bool>();
        let sparse = rng.random_range(0..3) == 0;
        let case = format!("iteration {it}: x = {x:?}, y = {y:?}, intercept {intercept}");
        let design = no_panic(&format!("Design ({case})"), || {
            if sparse {
                let mut t = sprs::TriMat::new((n, p));
                for ((i, j), &v) in x.indexed_iter() {
                    if v != 0.0 {
                        t.add_triplet(i, j, v);
                    }
                }
                Design::sparse(t.to_csc())
            } else {
                Design::dense(x.view())
            }
        });
        let Ok(design) = design else { continue };
        let built = no_panic(&format!("loss ({case})"), || {
            if logistic {
                Logistic::new(design.clone(), y.clone(), intercept)
                    .map(|l| Box::new(l) as Box<dyn CvLoss>)
            } else {
                LeastSquares::new(design.clone(), y.clone(), intercept)
                    .map(|l| Box::new(l) as Box<dyn CvLoss>)
            }
        });
        let Ok(loss) = built else { continue };
        let lambda = level(&mut rng);
        let weights = (rng.random_range(0..4) == 0).then(|| {
            (0..rng.random_range(0..5))
                .map(|_| level(&mut rng))
                .collect()
        });
        let l2 = if rng.random_range(0..4) == 0 {
            level(&mut rng)
        } else {
            0.0
        };
        let start: Option<Vec<f64>> = (rng.random_range(0..4) == 0).then(|| {
            (0..rng.random_range(0..5))
                .map(|_| value(&mut rng, false))
                .collect()
        });
        let penalty = (|| {
            let mut pen = Penalty::l1(lambda)?;
            if let Some(w) = &weights {
                pen = pen.with_weights(Vec::clone(w))?;
            }
            pen.with_l2(l2)
        })();
        let Ok(penalty) = penalty else { continue };
        let opts = SolverOptions {
            tol: [1e-7, 1e-3, 1e-14, 0.5][rng.random_range(0..4)],
            max_iter: [0, 1, 5, 60][rng.random_range(0..4)],
            time_limit: Some(Duration::from_millis(300)),
            ..Default::default()
        };
        let case = format!("{case}, λ {lambda}, weights {weights:?}, ℓ2 {l2}, start {start:?}");
        match rng.random_range(0..7) {
            which @ 0..=3 => {
                let solver: Box<dyn Solver> = match which {
                    0 => Box::new(NewtonCd::new(opts)),
                    1 => Box::new(Fista::new(opts)),
                    2 => Box::new(Admm::new(opts)),
                    _ => Box::new(Owlqn::new(opts)),
                };
                let what = format!("{} ({case})", solver.name());
                let result = no_panic(&what, || {
                    solver.solve_observed(loss.as_loss(), &penalty, start.as_deref(), None)
                });
                if let Ok(sol) = result {
                    solved += 1;
                    if sol.status == Status::Converged {
                        assert!(
                            sol.objective.is_finite() && sol.x.iter().all(|v| v.is_finite()),
                            "{what}: converged to {:?}, objective {}",
                            sol.x,
                            sol.objective
                        );
                    }
                }
            }
            4 => {
                let path_opts = PathOptions {
                    n_lambdas: rng.random_range(0..4),
                    ratio: rng.random::<bool>().then(|| value(&mut rng, false)),
                    solver: NewtonCd::new(opts),
                    ..Default::default()
                };
                let _ = no_panic(&format!("fit_path ({case})"), || {
                    fit_path(loss.as_loss(), &penalty, (n, p), &path_opts).map(|r| r.points.len())
                });
            }
            5 => {
                let folds = rng.random_range(0..6);
                let cv_opts = CvOptions {
                    folds,
                    path: PathOptions {
                        n_lambdas: rng.random_range(0..4),
                        solver: NewtonCd::new(opts),
                        ..Default::default()
                    },
                    parallel: rng.random::<bool>(),
                    seed: 3,
                };
                let _ = no_panic(&format!("cross_validate ({case}, {folds} folds)"), || {
                    cross_validate(loss.as_cv(), &penalty, &cv_opts).map(|c| c.mean)
                });
            }
            _ => {
                let _ = no_panic(&format!("lambda_max ({case})"), || {
                    lambda_max(loss.as_loss(), &penalty)
                });
                let point = start.clone().unwrap_or_else(|| loss.as_loss().start());
                let _ = no_panic(&format!("check_derivatives ({case})"), || {
                    check_derivatives(loss.as_loss(), &point, 2, 1).map(|_| ())
                });
            }
        }
    }
    // The loop must reach the solvers, not stop at the constructors.
    assert!(solved > 1000, "only {solved} solves returned Ok");
}

/// A linear loss seen both as a [`Loss`] and as a [`CrossValidate`] problem.
trait CvLoss {
    fn as_loss(&self) -> &dyn Loss;
    fn as_cv(&self) -> &dyn CrossValidate;
}

impl<T: Loss + CrossValidate> CvLoss for T {
    fn as_loss(&self) -> &dyn Loss {
        self
    }
    fn as_cv(&self) -> &dyn CrossValidate {
        self
    }
}

/// A q × r matrix of adversarial values (ordinary ones mostly).
fn matrix(rng: &mut StdRng, q: usize, r: usize, finite: bool) -> Array2<f64> {
    Array2::from_shape_fn((q, r), |_| {
        if rng.random_range(0..4) == 0 {
            value(rng, finite)
        } else {
            rng.random_range(-3.0..3.0)
        }
    })
}

/// The same for sparse precision matrices and Gaussian CRFs: `estimate_precision` on
/// samples or covariances (Gram matrices, raw and non-square ones), random weights, warm
/// starts and options; `crf::fit` with every method and input mode, then prediction,
/// scenarios, likelihood and a JSON round trip of the fitted model; `CrfModel::from_parts`.
/// No panic; a converged fit has a finite objective.
#[test]
fn random_bad_precision_and_crf_input_never_panics() {
    use ellone::crf::{fit, CrfMethod, CrfModel, CrfOptions, InputMode};
    use ellone::precision::{estimate_precision, PrecisionInput, PrecisionOptions};
    let mut rng = StdRng::seed_from_u64(777);
    let options = |rng: &mut StdRng| SolverOptions {
        tol: [1e-7, 1e-3, 0.5][rng.random_range(0..3)],
        max_iter: [0, 1, 5, 60][rng.random_range(0..4)],
        time_limit: Some(Duration::from_millis(300)),
        ..Default::default()
    };
    let mut fitted = 0;
    for it in 0..3000 {
        let p = rng.random_range(0..4);
        let finite = rng.random_range(0..4) > 0;
        let rows = rng.random_range(0..5);
        let a = matrix(&mut rng, rows, p, finite);
        let s = if rng.random::<bool>() && rows > 0 {
            a.t().dot(&a)
        } else {
            let cols = if rng.random_range(0..8) == 0 {
                p + 1
            } else {
                p
            };
            matrix(&mut rng, p, cols, finite)
        };
        let lambda = level(&mut rng);
        let opts = PrecisionOptions {
            penalize_diagonal: rng.random::<bool>(),
            weights: (rng.random_range(0..4) == 0).then(|| {
                let w = matrix(&mut rng, p, p, true).mapv(f64::abs);
                &w + &w.t()
            }),
            warm_start: (rng.random_range(0..5) == 0).then(|| matrix(&mut rng, p, p, finite)),
            screening: rng.random::<bool>(),
            centre: rng.random::<bool>(),
            standardise: rng.random::<bool>(),
            solver: options(&mut rng),
        };
        let data = rng.random::<bool>();
        let case = format!("precision, iteration {it}: samples {a:?}, S {s:?}, λ {lambda}");
        let result = no_panic(&case, || {
            let input = if data {
                PrecisionInput::Data(a.view())
            } else {
                PrecisionInput::Covariance(s.view())
            };
            estimate_precision(input, lambda, &opts)
        });
        if let Ok(f) = result {
            fitted += 1;
            if f.status == Status::Converged {
                assert!(f.objective.is_finite(), "{case}: objective {}", f.objective);
            }
        }

        let (n, p, q) = (
            rng.random_range(0..6),
            rng.random_range(0..3),
            rng.random_range(0..3),
        );
        let x = matrix(&mut rng, n, p, finite);
        let ny = if rng.random_range(0..8) == 0 {
            n + 1
        } else {
            n
        };
        let y = matrix(&mut rng, ny, q, finite);
        let mut opts = CrfOptions::new(level(&mut rng), level(&mut rng));
        opts.center = rng.random::<bool>();
        opts.standardize = rng.random::<bool>();
        opts.input_mode =
            [InputMode::Auto, InputMode::Gram, InputMode::Data][rng.random_range(0..3)];
        opts.method = [
            CrfMethod::Joint,
            CrfMethod::Alternating,
            CrfMethod::QuasiNewton,
        ][rng.random_range(0..3)];
        opts.solver = options(&mut rng);
        let case = format!("CRF, iteration {it}: x {x:?}, y {y:?}, {opts:?}");
        if let Ok(f) = no_panic(&case, || fit(x.view(), y.view(), &opts)) {
            fitted += 1;
            if f.solution.status == Status::Converged {
                assert!(f.solution.objective.is_finite(), "{case}");
            }
            let m = f.model;
            let cols = if rng.random_range(0..5) == 0 {
                p + 1
            } else {
                p
            };
            let (rows, finite_x) = (rng.random_range(0..3), rng.random::<bool>());
            let xt = matrix(&mut rng, rows, cols, finite_x);
            let cols = if rng.random_range(0..5) == 0 {
                q + 1
            } else {
                q
            };
            let finite_y = rng.random::<bool>();
            let yt = matrix(&mut rng, xt.nrows(), cols, finite_y);
            let scenarios = rng.random_range(0..4);
            let case = format!("{case}, test x {xt:?}, test y {yt:?}");
            no_panic(&case, || {
                let _ = m.predict(xt.view());
                let _ = m.negative_log_likelihood(xt.view(), yt.view());
                if xt.nrows() > 0 {
                    let _ = m.sample(xt.row(0), scenarios, 1);
                }
                let _ = m.scenario_scores(xt.view(), yt.view(), scenarios, 1);
                let _ = m.to_json().map(|t| CrfModel::from_json(&t));
            });
        }
        let q = rng.random_range(0..3);
        let lam = matrix(&mut rng, q, q, finite);
        let lam = if rng.random::<bool>() {
            lam.t().dot(&lam) + Array2::<f64>::eye(q) * value(&mut rng, true).abs()
        } else {
            lam
        };
        let theta_rows = rng.random_range(0..3);
        let theta = matrix(&mut rng, theta_rows, q, finite);
        let offset: Vec<f64> = (0..q).map(|_| value(&mut rng, false)).collect();
        let case = format!("from_parts, iteration {it}: Λ {lam:?}, Θ {theta:?}");
        if let Ok(m) = no_panic(&case, || CrfModel::from_parts(lam, theta, offset)) {
            assert!(m.covariance().iter().all(|v| v.is_finite()), "{case}");
        }
    }
    assert!(fitted > 500, "only {fitted} fits returned Ok");
}
