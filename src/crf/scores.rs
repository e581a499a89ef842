//! Proper scoring rules for scenario (ensemble) forecasts and the Gaussian closed form.
//!
//! From "Strictly proper scoring rules, prediction, and estimation", J. American
//! Statistical Association, 2007 (lower is better, in the negatively oriented form used
//! here):
//!
//! * **CRPS** of a forecast distribution F for an outcome y:
//!   CRPS(F, y) = E|X − y| − ½ E|X − X'| with X, X' ~ F independent.
//! * **Energy score** (its multivariate generalisation, exponent 1):
//!   ES(F, y) = E‖X − y‖ − ½ E‖X − X'‖ (Euclidean norm).
//!
//! For m scenarios x₁..x_m the functions below score their empirical distribution:
//! ES = (1/m)Σ_i‖x_i − y‖ − (1/(2m²))Σ_{i,j}‖x_i − x_j‖ (O(m²q)), and per output
//! CRPS = (1/m)Σ_i|x_i − y| − (1/(2m²))Σ_{i,j}|x_i − x_j|, where the double sum is
//! 2Σ_k (2k − m + 1)·x_(k) over the sorted values (O(m log m)). For q = 1 the two agree.
//!
//! For a normal forecast N(μ, σ²) the CRPS has the closed form
//! σ·[z(2Φ(z) − 1) + 2φ(z) − 1/√π], z = (y − μ)/σ (same paper).

use crate::error::{check_finite, Error, Result};
use ndarray::{ArrayView1, ArrayView2};

fn check_samples(samples: &ArrayView2<f64>, y: &ArrayView1<f64>) -> Result<()> {
    let (m, q) = samples.dim();
    if m == 0 || q == 0 {
        return Err(Error::Empty(format!("scenario matrix ({m}×{q})")));
    }
    if y.len() != q {
        return Err(Error::ShapeMismatch {
            what: "outcome vs scenario columns".into(),
            expected: q.to_string(),
            found: y.len().to_string(),
        });
    }
    check_finite("scenarios", samples.iter(), |i| {
        format!("row {}, column {}", i / q, i % q)
    })?;
    check_finite("outcome", y.iter(), |i| format!("entry {i}"))
}

/// The energy score of the empirical distribution of `samples` (m×q, one scenario per row)
/// for the outcome `y` (q).
///
/// # Errors
/// [`Error::Empty`] for no scenarios or outputs, [`Error::ShapeMismatch`] if `y` has the
/// wrong length, [`Error::NonFinite`] for NaN/Inf in the input, or for a score that
/// overflows (scenarios that differ by more than about 10³⁰⁸).
pub fn energy_score(samples: ArrayView2<f64>, y: ArrayView1<f64>) -> Result<f64> {
    check_samples(&samples, &y)?;
    let m = samples.nrows();
    let rows: Vec<Vec<f64>> = samples.rows().into_iter().map(|r| r.to_vec()).collect();
    // Euclidean distance; recomputed with the entries scaled by the largest one when the
    // plain sum of squares overflows (scenarios near ±1e200 would otherwise give ∞ − ∞).
    let dist = |a: &[f64], b: &[f64]| -> f64 {
        let plain = a
            .iter()
            .zip(b)
            .map(|(u, v)| (u - v) * (u - v))
            .sum::<f64>()
            .sqrt();
        if plain.is_finite() {
            return plain;
        }
        let top = a
            .iter()
            .zip(b)
            .map(|(u, v)| (u - v).abs())
            .fold(0.0, f64::max);
        top * a
            .iter()
            .zip(b)
            .map(|(u, v)| ((u - v) / top).powi(2))
            .sum::<f64>()
            .sqrt()
    };
    let yv = y.to_vec();
    let first: f64 = rows.iter().map(|r| dist(r, &yv)).sum::<f64>() / m as f64;
    let mut pair = 0.0;
    for i in 0..m {
        for j in 0..i {
            pair += dist(&rows[i], &rows[j]);
        }
    }
    // Σ_{i,j} = 2 Σ_{i<j}; times 1/(2m²).
    let score = first - pair / (m as f64 * m as f64);
    if !score.is_finite() {
        return Err(Error::NonFinite {
            what: "energy score (the scenarios' spread overflows)".into(),
            location: format!("{m} scenarios"),
        });
    }
    Ok(score)
}

/// The CRPS of the empirical distribution of each column of `samples` (m×q) for the
/// matching entry of `y`: one score per output.
///
/// # Errors
/// As [`energy_score`] (including an overflowing score).
pub fn crps(samples: ArrayView2<f64>, y: ArrayView1<f64>) -> Result<Vec<f64>> {
    check_samples(&samples, &y)?;
    let m = samples.nrows() as f64;
    let scores: Vec<f64> = samples
        .columns()
        .into_iter()
        .zip(y.iter())
        .map(|(col, &yj)| {
            let mut v = col.to_vec();
            let first = v.iter().map(|x| (x - yj).abs()).sum::<f64>() / m;
            v.sort_by(|a, b| a.total_cmp(b));
            let pair: f64 = v
                .iter()
                .enumerate()
                .map(|(k, x)| (2.0 * k as f64 - m + 1.0) * x)
                .sum::<f64>();
            // Σ_{i,j}|x_i − x_j| = 2·pair; times 1/(2m²).
            first - pair / (m * m)
        })
        .collect();
    match scores.iter().position(|v| !v.is_finite()) {
        Some(j) => Err(Error::NonFinite {
            what: "CRPS (the scenarios' spread overflows)".into(),
            location: format!("output {j}"),
        }),
        None => Ok(scores),
    }
}

/// erfc(x) to about 1e-14: the Maclaurin series of erf for |x| < 3 (its largest term is
/// below 200, so little is lost to cancellation) and the continued fraction
/// erfc(x) = e^{−x²}/√π · 1/(x + ½/(x + 1/(x + (3/2)/(x + …)))) for x ≥ 3, evaluated
/// backwards from 80 terms (textbook expansions: "Handbook of mathematical functions",
/// National Bureau of Standards, 1964, formulas 7.1.5 and 7.1.14).
fn erfc(x: f64) -> f64 {
    if x.is_nan() {
        return f64::NAN;
    }
    if x.abs() < 3.0 {
        // erf(x) = 2/√π Σ_n (−1)^n x^{2n+1} / (n! (2n+1)).
        let x2 = x * x;
        let mut term = x; // (−1)^n x^{2n+1} / n!
        let mut sum = x;
        let mut n = 0.0;
        while term.abs() > 1e-17 * sum.abs() {
            n += 1.0;
            term *= -x2 / n;
            sum += term / (2.0 * n + 1.0);
        }
        1.0 - 2.0 / std::f64::consts::PI.sqrt() * sum
    } else if x > 0.0 {
        let mut t = x;
        for k in (1..=80).rev() {
            t = x + (k as f64 / 2.0) / t;
        }
        (-x * x).exp() / (std::f64::consts::PI.sqrt() * t)
    } else {
        2.0 - erfc(-x)
    }
}

/// Standard normal distribution function Φ(z) = ½ erfc(−z/√2).
pub fn normal_cdf(z: f64) -> f64 {
    0.5 * erfc(-z / std::f64::consts::SQRT_2)
}

/// The CRPS of the normal forecast N(mean, sd²) for the outcome y (closed form above).
///
/// # Errors
/// [`Error::InvalidArgument`] unless sd > 0 and all inputs are finite.
pub fn gaussian_crps(mean: f64, sd: f64, y: f64) -> Result<f64> {
    if !(sd > 0.0 && sd.is_finite() && mean.is_finite() && y.is_finite()) {
        return Err(Error::InvalidArgument(format!(
            "gaussian_crps needs finite mean and outcome and sd > 0 (mean {mean}, sd {sd}, y {y})"
        )));
    }
    let d = y - mean;
    if !d.is_finite() {
        return Err(Error::InvalidArgument(format!(
            "gaussian_crps: y − mean overflows (mean {mean}, y {y})"
        )));
    }
    let z = d / sd;
    let pdf = (-0.5 * z * z).exp() / (2.0 * std::f64::consts::PI).sqrt();
    // sd·z(2Φ(z) − 1) written as d(2Φ(z) − 1): with a tiny sd, z overflows to ±∞ and the
    // CRPS tends to |y − mean|, which this form returns instead of sd·∞.
    Ok(d * (2.0 * normal_cdf(z) - 1.0) + sd * (2.0 * pdf - 1.0 / std::f64::consts::PI.sqrt()))
}

#[cfg(test)]
mod tests {
    use super::*;

    // From memory: Φ(1) = 0.841344746068543, Φ(−1.96) = 0.024997895148220.
    #[test]
    fn normal_cdf_values() {
        assert!((normal_cdf(1.0) - 0.841_344_746_068_543).abs() < 1e-13);
        assert!((normal_cdf(-1.96) - 0.024_997_895_148_220).abs() < 1e-13);
        // From memory: Φ(−5) = 2.866515718791939e-7, Φ(5) = 1 − that.
        assert!((normal_cdf(-5.0) / 2.866_515_718_791_939e-7 - 1.0).abs() < 1e-10);
        assert!((normal_cdf(5.0) - (1.0 - 2.866_515_718_791_939e-7)).abs() < 1e-14);
        assert!((normal_cdf(0.0) - 0.5).abs() < 1e-9);
    }

    // Closed form at y = μ: CRPS = σ(2φ(0) − 1/√π) = σ(√2 − 1)/√π.
    #[test]
    fn gaussian_crps_at_the_mean() {
        let v = gaussian_crps(1.0, 2.0, 1.0).unwrap();
        let expect = 2.0 * (2f64.sqrt() - 1.0) / std::f64::consts::PI.sqrt();
        assert!((v - expect).abs() < 1e-13);
    }

    // Limit sd → 0: the forecast is a point mass at μ, whose CRPS is |y − μ| (closed form:
    // the CRPS of a deterministic forecast is the absolute error). A subnormal sd used to
    // give ∞ (sd·z with z = ∞); an overflowing difference is an error.
    #[test]
    fn gaussian_crps_of_a_point_forecast() {
        for sd in [1e-12, 1e-300, 1e-320] {
            let v = gaussian_crps(0.5, sd, 2.0).unwrap();
            assert!((v - 1.5).abs() < 1e-11, "sd {sd}: {v}");
        }
        assert!(gaussian_crps(-1e308, 1.0, 1e308).is_err());
    }

    // By hand: scenarios {0, 2}, outcome 1: E|X − y| = 1, E|X − X'| = (0 + 2 + 2 + 0)/4 = 1,
    // so CRPS = ES = 1 − 0.5 = 0.5.
    #[test]
    fn two_point_ensemble_by_hand() {
        let s = ndarray::array![[0.0], [2.0]];
        let y = ndarray::array![1.0];
        assert!((crps(s.view(), y.view()).unwrap()[0] - 0.5).abs() < 1e-15);
        assert!((energy_score(s.view(), y.view()).unwrap() - 0.5).abs() < 1e-15);
        // The same ensemble scaled by 1e200 (squares overflow): the score scales with it.
        let big = &s * 1e200;
        let y_big = &y * 1e200;
        let es = energy_score(big.view(), y_big.view()).unwrap();
        assert!((es / 1e200 - 0.5).abs() < 1e-12, "{es}");
        // Spreads beyond the double range are errors, not ∞ − ∞ = NaN.
        let wide = ndarray::array![[-1e308], [1e308]];
        assert!(crps(wide.view(), ndarray::array![0.0].view()).is_err());
        assert!(energy_score(wide.view(), ndarray::array![0.0].view()).is_err());
    }
}
