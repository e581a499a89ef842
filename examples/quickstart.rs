//! Quick start: a lasso and a sparse logistic regression with certified optimality.
//! The same code is shown in the README. The data are invented for the demonstration.
//!
//! Run with `cargo run --example quickstart`.

use ellone::solver::{NewtonCd, Solver, SolverOptions};
use ellone::{LeastSquares, Logistic, Penalty};
use ndarray::array;

fn main() -> ellone::Result<()> {
    // 8 samples × 3 features (invented), a continuous response and 0/1 labels.
    let x = array![
        [1.0, 0.5, -1.2],
        [0.3, -1.1, 0.4],
        [-0.7, 0.2, 1.5],
        [1.4, 1.0, -0.3],
        [-1.2, -0.4, 0.9],
        [0.6, 1.3, 0.1],
        [-0.2, -0.9, -1.4],
        [0.9, 0.1, 0.6],
    ];
    let y = [2.1, 0.4, -0.9, 3.0, -1.8, 1.9, 0.2, 1.2];
    let labels = [1.0, 0.0, 0.0, 1.0, 0.0, 1.0, 1.0, 0.0];

    // Least squares with an intercept b0:
    //   minimise (1/(2n)) Σ_i (y_i − b0 − x_iᵀb)² + λ Σ_j |b_j|,  λ = 0.3.
    let loss = LeastSquares::from_dense(x.view(), &y, true)?;
    let solution = NewtonCd::default().solve(&loss, &Penalty::l1(0.3)?)?;
    let (b, b0) = loss.split(&solution.x);
    println!("least squares: b = {b:?}, b0 = {b0:.6}");
    println!(
        "  status {:?}, objective {:.10}, KKT residual {:.1e}, duality gap {:?}",
        solution.status, solution.objective, solution.kkt_residual, solution.duality_gap
    );

    // Logistic regression (labels 0/1) with an intercept, a tighter tolerance and an
    // elastic-net term:
    //   minimise (1/n) Σ_i [log(1 + e^{η_i}) − y_i η_i] + λ‖b‖₁ + (λ₂/2)‖b‖²,  η = b0 + Xb.
    let loss = Logistic::from_dense(x.view(), &labels, true)?;
    let solver = NewtonCd::new(SolverOptions {
        tol: 1e-10,
        ..SolverOptions::default()
    });
    let penalty = Penalty::l1(0.02)?.with_l2(0.01)?;
    let solution = solver.solve(&loss, &penalty)?;
    let (b, b0) = loss.split(&solution.x);
    println!("logistic: b = {b:?}, b0 = {b0:.6}");
    println!(
        "  status {:?}, {} non-zero coefficients, KKT residual {:.1e}, duality gap {:?}",
        solution.status,
        b.iter().filter(|v| **v != 0.0).count(),
        solution.kkt_residual,
        solution.duality_gap
    );
    Ok(())
}
