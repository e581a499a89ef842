//! A finite-difference derivative checker for loss authors.
//!
//! Central differences: for a unit direction u,
//! `(f(x+hu) − f(x−hu)) / 2h = ∇f(x)ᵀu + O(h²)` and
//! `(∇f(x+hu) − ∇f(x−hu)) / 2h = ∇²f(x)u + O(h²)`.
//! With h ≈ ε^{1/3}·max(1, ‖x‖∞) the truncation and rounding errors balance, so a correct
//! implementation typically agrees to 1e-6 relative or better.

use super::Loss;
use crate::error::{Error, Result};
use rand::{rngs::StdRng, RngExt, SeedableRng};

/// The largest discrepancies found by [`check_derivatives`].
#[derive(Debug, Clone, PartialEq)]
pub struct DerivativeReport {
    /// max over tested directions of |∇fᵀu − FD| / max(1, |∇fᵀu|).
    pub gradient_error: f64,
    /// max over tested directions of ‖∇²f u − FD‖∞ / max(1, ‖∇²f u‖∞).
    pub hessian_error: f64,
    /// Number of random directions tested.
    pub directions: usize,
}

impl DerivativeReport {
    /// True when both errors are below `tol`.
    pub fn passes(&self, tol: f64) -> bool {
        self.gradient_error <= tol && self.hessian_error <= tol
    }
}

/// Compares [`Loss::gradient`] and [`Loss::hess_vec`] at `x` with central finite
/// differences along `directions` random unit directions (seeded, reproducible).
///
/// # Errors
/// [`Error::ShapeMismatch`] if `x` has the wrong length, [`Error::NonFinite`] if it holds
/// NaN or ±Inf, [`Error::InvalidArgument`] if x or the finite-difference points leave the
/// domain. A NaN anywhere in the comparison (a loss that returns NaN) makes the reported
/// error NaN, which [`DerivativeReport::passes`] rejects.
pub fn check_derivatives<L: Loss + ?Sized>(
    loss: &L,
    x: &[f64],
    directions: usize,
    seed: u64,
) -> Result<DerivativeReport> {
    let m = loss.dim();
    if x.len() != m {
        return Err(Error::ShapeMismatch {
            what: "point vs loss dimension".into(),
            expected: m.to_string(),
            found: x.len().to_string(),
        });
    }
    crate::error::check_finite("point", x, |k| format!("coordinate {k}"))?;
    let outside = || Error::InvalidArgument("finite-difference point outside the domain".into());
    loss.value(x).ok_or_else(outside)?;
    let scale = x.iter().fold(1.0f64, |a, v| a.max(v.abs()));
    let h = f64::EPSILON.cbrt() * scale;
    let mut rng = StdRng::seed_from_u64(seed);
    let mut g = vec![0.0; m];
    loss.gradient(x, &mut g);
    let (mut gp, mut gm, mut hv) = (vec![0.0; m], vec![0.0; m], vec![0.0; m]);
    let (mut xp, mut xm) = (vec![0.0; m], vec![0.0; m]);
    let mut report = DerivativeReport {
        gradient_error: 0.0,
        hessian_error: 0.0,
        directions,
    };
    for _ in 0..directions {
        let mut u: Vec<f64> = (0..m).map(|_| rng.random::<f64>() - 0.5).collect();
        let norm = u
            .iter()
            .map(|v| v * v)
            .sum::<f64>()
            .sqrt()
            .max(f64::MIN_POSITIVE);
        u.iter_mut().for_each(|v| *v /= norm);
        for k in 0..m {
            xp[k] = x[k] + h * u[k];
            xm[k] = x[k] - h * u[k];
        }
        let fp = loss.value(&xp).ok_or_else(outside)?;
        let fm = loss.value(&xm).ok_or_else(outside)?;
        let fd = (fp - fm) / (2.0 * h);
        let an: f64 = g.iter().zip(&u).map(|(a, b)| a * b).sum();
        report.gradient_error = nan_max(report.gradient_error, (an - fd).abs() / an.abs().max(1.0));
        loss.gradient(&xp, &mut gp);
        loss.gradient(&xm, &mut gm);
        loss.hess_vec(x, &u, &mut hv);
        let hnorm = hv.iter().fold(1.0f64, |a, v| a.max(v.abs()));
        let err = (0..m)
            .map(|k| (hv[k] - (gp[k] - gm[k]) / (2.0 * h)).abs())
            .fold(0.0f64, nan_max);
        report.hessian_error = nan_max(report.hessian_error, err / hnorm);
    }
    Ok(report)
}

/// max(a, b), NaN if either is NaN (`f64::max` would drop a NaN and hide a broken loss).
fn nan_max(a: f64, b: f64) -> f64 {
    if a.is_nan() || b.is_nan() {
        f64::NAN
    } else {
        a.max(b)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::LeastSquares;

    /// A non-finite point is a typed error; a loss whose gradient is NaN fails the check
    /// instead of passing with error 0.
    #[test]
    fn non_finite_points_and_nan_derivatives_are_caught() {
        let x = ndarray::array![[1.0, 0.5], [0.0, 2.0], [1.5, -1.0]];
        let ls = LeastSquares::from_dense(x.view(), &[1.0, 0.0, 2.0], false).unwrap();
        assert!(check_derivatives(&ls, &[0.1, 0.2], 5, 1)
            .unwrap()
            .passes(1e-6));
        for bad in [[f64::NAN, 0.0], [0.0, f64::INFINITY]] {
            assert!(matches!(
                check_derivatives(&ls, &bad, 5, 1),
                Err(Error::NonFinite { .. })
            ));
        }
        /// ½‖x‖² with a NaN in its gradient.
        struct BrokenGradient;
        impl Loss for BrokenGradient {
            fn dim(&self) -> usize {
                2
            }
            fn value(&self, x: &[f64]) -> Option<f64> {
                Some(0.5 * x.iter().map(|v| v * v).sum::<f64>())
            }
            fn gradient(&self, x: &[f64], g: &mut [f64]) {
                g.copy_from_slice(x);
                g[1] = f64::NAN;
            }
            fn hess_vec(&self, _x: &[f64], v: &[f64], out: &mut [f64]) {
                out.copy_from_slice(v);
            }
        }
        let report = check_derivatives(&BrokenGradient, &[0.3, -0.2], 5, 1).unwrap();
        assert!(!report.passes(1e-6), "{report:?}");
    }
}
