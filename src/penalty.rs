//! The weighted ℓ1 penalty with an optional ℓ2 (elastic-net) term.
//!
//! For coordinates k = 0..m the penalty is
//!
//! ```text
//! P(x) = Σ_k λ_k |x_k| + (λ₂/2) Σ_{k: c_k > 0} x_k²,      λ_k = λ · w_k · c_k,
//! ```
//!
//! where λ ≥ 0 is the regularisation strength, w_k ≥ 0 are user weights (default 1, 0 means
//! unpenalised) and c_k ≥ 0 is a structural factor supplied by the loss
//! ([`Loss::structural_factor`](crate::loss::Loss::structural_factor)): 0 for an intercept or an
//! unpenalised diagonal, 2 for an off-diagonal entry of a symmetric matrix stored once.
//! The ℓ2 term applies to every coordinate the loss calls penalisable (c_k > 0).

use crate::error::{check_lambda, check_lambda_named, Error, Result};

/// Soft-thresholding, the proximal operator of t·|·|:
/// `S(z, t) = sign(z) · max(|z| − t, 0)`.
#[inline]
pub fn soft_threshold(z: f64, t: f64) -> f64 {
    if z > t {
        z - t
    } else if z < -t {
        z + t
    } else {
        0.0
    }
}

/// Contribution of one coordinate to the KKT residual: the absolute value of the
/// minimum-norm element of the subdifferential `g + λ ∂|x|`.
///
/// `|g + λ·sign(x)|` if `x ≠ 0`, otherwise `max(|g| − λ, 0)`; with λ = 0 it is `|g|`.
#[inline]
pub fn coordinate_residual(x: f64, g: f64, lambda: f64) -> f64 {
    if x > 0.0 {
        (g + lambda).abs()
    } else if x < 0.0 {
        (g - lambda).abs()
    } else {
        (g.abs() - lambda).max(0.0)
    }
}

/// A weighted ℓ1 penalty, optionally with an ℓ2 term (elastic net).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(try_from = "PenaltyFields")]
pub struct Penalty {
    lambda: f64,
    weights: Option<Vec<f64>>,
    l2: f64,
}

/// The serialised fields of a [`Penalty`], validated by the same checks as the builders
/// when deserialised (a penalty read from a file cannot carry a negative λ or weight).
#[derive(serde::Deserialize)]
struct PenaltyFields {
    lambda: f64,
    weights: Option<Vec<f64>>,
    l2: f64,
}

impl TryFrom<PenaltyFields> for Penalty {
    type Error = Error;
    fn try_from(f: PenaltyFields) -> Result<Self> {
        let p = Penalty::l1(f.lambda)?.with_l2(f.l2)?;
        match f.weights {
            Some(w) => p.with_weights(w),
            None => Ok(p),
        }
    }
}

impl Penalty {
    /// The plain ℓ1 penalty λ‖x‖₁ (every weight 1, no ℓ2 term).
    ///
    /// # Errors
    /// [`Error::InvalidLambda`] if λ is negative or not finite.
    pub fn l1(lambda: f64) -> Result<Self> {
        check_lambda("lambda", lambda)?;
        Ok(Self {
            lambda,
            weights: None,
            l2: 0.0,
        })
    }

    /// Sets per-coordinate weights w_k ≥ 0 (0 leaves a coordinate unpenalised). The length
    /// must equal the number of coordinates of the loss it is used with; that is checked by
    /// the solvers.
    ///
    /// # Errors
    /// [`Error::InvalidLambda`] for a negative or non-finite weight.
    pub fn with_weights(mut self, weights: Vec<f64>) -> Result<Self> {
        for (k, &w) in weights.iter().enumerate() {
            check_lambda_named(|| format!("weight[{k}]"), w)?;
        }
        self.weights = Some(weights);
        Ok(self)
    }

    /// Adds the ℓ2 term (λ₂/2)‖x‖² over penalisable coordinates (elastic net).
    ///
    /// # Errors
    /// [`Error::InvalidLambda`] if λ₂ is negative or not finite.
    pub fn with_l2(mut self, l2: f64) -> Result<Self> {
        check_lambda("l2", l2)?;
        self.l2 = l2;
        Ok(self)
    }

    /// Returns a copy with a different λ (weights and λ₂ kept).
    ///
    /// # Errors
    /// [`Error::InvalidLambda`] if λ is negative or not finite.
    pub fn with_lambda(&self, lambda: f64) -> Result<Self> {
        check_lambda("lambda", lambda)?;
        Ok(Self {
            lambda,
            ..self.clone()
        })
    }

    /// The regularisation strength λ.
    pub fn lambda(&self) -> f64 {
        self.lambda
    }

    /// The ℓ2 coefficient λ₂.
    pub fn l2(&self) -> f64 {
        self.l2
    }

    /// The user weights, if set.
    pub fn weights(&self) -> Option<&[f64]> {
        self.weights.as_deref()
    }

    /// The user weight w_k (1 when no weights were set).
    #[inline]
    pub fn weight(&self, k: usize) -> f64 {
        match &self.weights {
            Some(w) => w.get(k).copied().unwrap_or(1.0),
            None => 1.0,
        }
    }

    /// Checks that the weights (if any) have length `dim`.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] otherwise.
    pub fn check_dim(&self, dim: usize) -> Result<()> {
        match &self.weights {
            Some(w) if w.len() != dim => Err(Error::ShapeMismatch {
                what: "penalty weights vs number of coordinates".into(),
                expected: dim.to_string(),
                found: w.len().to_string(),
            }),
            _ => Ok(()),
        }
    }
}

/// The penalty resolved against a loss: one ℓ1 level λ_k and one ℓ2 coefficient per
/// coordinate, so solvers do not recompute λ·w_k·c_k in their inner loops.
#[derive(Debug, Clone)]
pub struct ResolvedPenalty {
    /// λ_k = λ · w_k · c_k.
    pub l1: Vec<f64>,
    /// λ₂ for penalisable coordinates, 0 for structural-unpenalised ones.
    pub l2: Vec<f64>,
}

impl ResolvedPenalty {
    /// Resolves `penalty` with the loss's structural factors `factor(k)`.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if the weights do not match `dim`; [`Error::InvalidLambda`]
    /// if a coordinate's λ_k = λ·w_k·c_k is not a finite non-negative number (a negative or
    /// NaN structural factor, or a product that overflows).
    pub fn new(penalty: &Penalty, dim: usize, factor: impl Fn(usize) -> f64) -> Result<Self> {
        penalty.check_dim(dim)?;
        let mut l1 = Vec::with_capacity(dim);
        let mut l2 = Vec::with_capacity(dim);
        for k in 0..dim {
            let c = factor(k);
            let lambda_k = penalty.lambda * penalty.weight(k) * c;
            check_lambda_named(|| format!("λ·weight·factor of coordinate {k}"), lambda_k)?;
            l1.push(lambda_k);
            l2.push(if c > 0.0 { penalty.l2 } else { 0.0 });
        }
        Ok(Self { l1, l2 })
    }

    /// Number of coordinates.
    pub fn dim(&self) -> usize {
        self.l1.len()
    }

    /// P(x) = Σ λ_k|x_k| + Σ (λ₂_k/2) x_k².
    pub fn value(&self, x: &[f64]) -> f64 {
        x.iter()
            .zip(self.l1.iter().zip(&self.l2))
            .map(|(&v, (&a, &b))| a * v.abs() + 0.5 * b * v * v)
            .sum()
    }

    /// P(x + α d) evaluated only over the coordinates in `support` (where d may be
    /// non-zero); the caller adds the unchanged rest.
    pub fn value_on(&self, x: &[f64], support: &[usize]) -> f64 {
        support
            .iter()
            .map(|&k| self.l1[k] * x[k].abs() + 0.5 * self.l2[k] * x[k] * x[k])
            .sum()
    }

    /// The KKT residual ‖min-norm subgradient‖∞ of f + P at x, given ∇f(x) = `g` and
    /// per-coordinate reporting scales `scale(k)` (1 except where a loss stores a symmetric
    /// pair of matrix entries as one coordinate).
    pub fn kkt_residual(&self, x: &[f64], g: &[f64], scale: impl Fn(usize) -> f64) -> f64 {
        let mut r = 0.0f64;
        for k in 0..x.len() {
            let gk = g[k] + self.l2[k] * x[k];
            let v = coordinate_residual(x[k], gk, self.l1[k]) * scale(k);
            if v > r || v.is_nan() {
                r = v;
            }
        }
        r
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn soft_threshold_closed_form() {
        assert_eq!(soft_threshold(3.0, 1.0), 2.0);
        assert_eq!(soft_threshold(-3.0, 1.0), -2.0);
        assert_eq!(soft_threshold(0.5, 1.0), 0.0);
        assert_eq!(soft_threshold(-1.0, 1.0), 0.0);
        assert_eq!(soft_threshold(2.0, 0.0), 2.0);
    }

    #[test]
    fn residual_cases() {
        assert_eq!(coordinate_residual(1.0, -0.5, 0.5), 0.0);
        assert_eq!(coordinate_residual(1.0, 0.5, 0.5), 1.0);
        assert_eq!(coordinate_residual(0.0, 0.3, 0.5), 0.0);
        assert!((coordinate_residual(0.0, -0.8, 0.5) - 0.3).abs() < 1e-15);
        assert_eq!(coordinate_residual(0.0, -0.8, 0.0), 0.8);
    }

    #[test]
    fn invalid_parameters_are_typed_errors() {
        assert!(matches!(
            Penalty::l1(-1.0),
            Err(Error::InvalidLambda { .. })
        ));
        assert!(matches!(
            Penalty::l1(f64::NAN),
            Err(Error::InvalidLambda { .. })
        ));
        let p = Penalty::l1(1.0).unwrap();
        assert!(p.clone().with_l2(-0.1).is_err());
        // The offending coordinate is named (the name is built only on failure).
        assert!(matches!(
            p.clone().with_weights(vec![1.0, -2.0]),
            Err(Error::InvalidLambda { name, value }) if name == "weight[1]" && value == -2.0
        ));
        let p = p.with_weights(vec![1.0, 2.0]).unwrap();
        assert!(matches!(p.check_dim(3), Err(Error::ShapeMismatch { .. })));
        // λ·w overflowing to ∞, and a negative structural factor.
        let huge = Penalty::l1(1e300)
            .unwrap()
            .with_weights(vec![1e300, 1.0])
            .unwrap();
        assert!(matches!(
            ResolvedPenalty::new(&huge, 2, |_| 1.0),
            Err(Error::InvalidLambda { .. })
        ));
        assert!(matches!(
            ResolvedPenalty::new(&p, 2, |k| if k == 1 { -1.0 } else { 1.0 }),
            Err(Error::InvalidLambda { name, .. }) if name == "λ·weight·factor of coordinate 1"
        ));
        // Deserialising runs the builders' checks.
        let ok: Penalty =
            serde_json::from_str(r#"{"lambda":0.5,"weights":[1.0,0.0],"l2":0.1}"#).unwrap();
        assert_eq!(ok.weights(), Some(&[1.0, 0.0][..]));
        for bad in [
            r#"{"lambda":-1.0,"weights":null,"l2":0.0}"#,
            r#"{"lambda":1.0,"weights":null,"l2":-10.0}"#,
            r#"{"lambda":1.0,"weights":[1.0,-2.0],"l2":0.0}"#,
        ] {
            assert!(serde_json::from_str::<Penalty>(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn resolved_value_and_factors() {
        let p = Penalty::l1(0.5)
            .unwrap()
            .with_weights(vec![1.0, 2.0, 1.0])
            .unwrap()
            .with_l2(1.0)
            .unwrap();
        let r = ResolvedPenalty::new(&p, 3, |k| if k == 2 { 0.0 } else { 1.0 }).unwrap();
        assert_eq!(r.l1, vec![0.5, 1.0, 0.0]);
        assert_eq!(r.l2, vec![1.0, 1.0, 0.0]);
        // 0.5*|1| + 0.5*1 + 1.0*|-2| + 0.5*4 + 0 = 5
        assert!((r.value(&[1.0, -2.0, 7.0]) - 5.0).abs() < 1e-15);
    }
}
