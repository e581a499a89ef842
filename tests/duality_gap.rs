//! The duality gaps of least squares and logistic regression.
//!
//! Checked against weak duality ("Convex Optimization", textbook, 2004, §5.2.2): for any
//! primal point x and a dual-feasible point built from it, the gap is at least the
//! suboptimality F(x) − F* ≥ 0, with F* from a solve to a KKT tolerance of 1e-12. Also
//! checked: the gap computed from a gradient the caller already holds
//! (`Loss::duality_gap_with_gradient`, which Newton-CD uses to certify its final iterate
//! without another pass over the data) equals the gap computed from scratch, and the gap
//! reported on a solution is the gap at its coefficients. Random data (test data only).

use ellone::penalty::ResolvedPenalty;
use ellone::solver::{NewtonCd, Solver, SolverOptions};
use ellone::{LeastSquares, Logistic, Loss, Penalty};
use ndarray::Array2;
use rand::{rngs::StdRng, RngExt, SeedableRng};
use rand_distr::StandardNormal;
use sprs::TriMat;

/// Dense or sparse (about 40 % non-zeros) random data and a Gaussian or Bernoulli response.
fn losses(seed: u64, intercept: bool) -> Vec<Box<dyn Loss>> {
    let (n, p) = (60, 25);
    let mut rng = StdRng::seed_from_u64(seed);
    let mut dense = Array2::zeros((n, p));
    let mut tri = TriMat::new((n, p));
    for j in 0..p {
        for i in 0..n {
            if i % p == j || rng.random::<f64>() < 0.4 {
                let v: f64 = 1.0 + rng.sample::<f64, _>(StandardNormal);
                dense[[i, j]] = v;
                tri.add_triplet(i, j, v);
            }
        }
    }
    let eta: Vec<f64> = (0..n)
        .map(|i| 0.3 + dense[[i, 0]] - 0.8 * dense[[i, 2]])
        .collect();
    let y: Vec<f64> = eta
        .iter()
        .map(|e| e + 0.3 * rng.sample::<f64, _>(StandardNormal))
        .collect();
    let labels: Vec<f64> = eta
        .iter()
        .map(|e| f64::from(rng.random::<f64>() < 1.0 / (1.0 + (-e).exp())))
        .collect();
    let csc = tri.to_csc();
    vec![
        Box::new(LeastSquares::from_dense(dense.view(), &y, intercept).unwrap()),
        Box::new(LeastSquares::from_sparse(csc.clone(), &y, intercept).unwrap()),
        Box::new(Logistic::from_dense(dense.view(), &labels, intercept).unwrap()),
        Box::new(Logistic::from_sparse(csc, &labels, intercept).unwrap()),
    ]
}

#[test]
fn gap_from_a_held_gradient_matches_and_bounds_the_suboptimality() {
    let mut checked = 0;
    for seed in 0..3 {
        for intercept in [false, true] {
            for loss in losses(seed, intercept) {
                let m = loss.dim();
                // Per-coordinate weights (an unpenalised feature would leave no dual point
                // away from the solution).
                let weights: Vec<f64> = (0..m).map(|k| if k == 4 { 0.5 } else { 1.0 }).collect();
                let penalty = Penalty::l1(0.05).unwrap().with_weights(weights).unwrap();
                let pen = ResolvedPenalty::new(&penalty, m, |k| loss.structural_factor(k)).unwrap();
                let tight = NewtonCd::new(SolverOptions {
                    tol: 1e-12,
                    ..SolverOptions::default()
                });
                let best = tight.solve(loss.as_ref(), &penalty).unwrap();
                let mut rng = StdRng::seed_from_u64(100 + seed);
                let points = [
                    vec![0.0; m],
                    best.x.clone(),
                    (0..m)
                        .map(|k| best.x[k] + 0.05 * rng.sample::<f64, _>(StandardNormal))
                        .collect::<Vec<f64>>(),
                ];
                for x in &points {
                    let mut g = vec![0.0; m];
                    loss.gradient(x, &mut g);
                    let direct = loss.duality_gap(x, &pen).expect("a gap");
                    let held = loss.duality_gap_with_gradient(x, &g, &pen).expect("a gap");
                    let scale = 1.0 + direct.abs();
                    assert!(
                        (direct - held).abs() <= 1e-12 * scale,
                        "{}: {direct} vs {held}",
                        loss.name()
                    );
                    let sub = loss.value(x).unwrap() + pen.value(x) - best.objective;
                    // Weak duality: gap ≥ F(x) − F* (up to the rounding of the objectives).
                    assert!(held >= sub - 1e-12, "{}: gap {held} < {sub}", loss.name());
                    checked += 1;
                }
                // The gap reported on the solution is the gap at its coefficients.
                let reported = best.duality_gap.expect("gap on the solution");
                let again = loss.duality_gap(&best.x, &pen).unwrap();
                assert!((reported - again).abs() <= 1e-12 * (1.0 + again.abs()));
                assert!(reported <= 1e-9, "{}: gap {reported}", loss.name());
            }
        }
    }
    assert_eq!(checked, 3 * 2 * 4 * 3);
}
