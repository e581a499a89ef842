//! The Gaussian CRF negative log-likelihood as a [`Loss`] over the concatenated coordinates
//! `[upper triangle of Λ (q(q+1)/2, row by row), Θ (p·q, row-major)]`.
//!
//! With Σ = Λ⁻¹, M = S_xxΘΣ, Ψ = ΘᵀS_xxΘ and Φ = ΣΨΣ:
//!
//! ```text
//! f(Λ, Θ) = −log det Λ + tr(S_yy Λ) + 2 tr(S_yx Θ) + tr(Σ Ψ)
//! ∇_Λ f   = S_yy − Σ − Φ
//! ∇_Θ f   = 2 S_xy + 2 M
//! ```
//!
//! and the Hessian applied to a direction (E, D) (E symmetric q×q, D p×q):
//!
//! ```text
//! H_Λ[E, D] = ΣEΣ + ΣEΦ + ΦEΣ − ΣDᵀM − MᵀDΣ
//! H_Θ[E, D] = 2 S_xx D Σ − 2 M E Σ
//! ```
//!
//! (differentiate ∇f using dΣ = −ΣEΣ and dΨ = DᵀS_xxΘ + ΘᵀS_xxD). A coordinate of the upper
//! triangle with k < l moves Λ_kl and Λ_lk together, so its gradient is 2(∇_Λ f)_kl, its
//! Hessian row is 2 H_Λ[·]_kl, and its penalty factor is 2 (it appears twice in
//! Σ_{i≠j}|Λ_ij|) with residual scale ½ (the KKT residual is reported per matrix entry).
//!
//! **The two penalty levels.** The driver's [`crate::Penalty`] has one λ; this loss encodes
//! λ_Λ and λ_Θ in its structural [`Loss::structural_factor`]s (0 on the diagonal of Λ, 2λ_Λ
//! off it, λ_Θ on Θ), so the DESIGN.md objective is solved with `Penalty::l1(1.0)`. That
//! keeps λ_Λ = 0 or λ_Θ = 0 exact (no ratio of the two is ever formed). A caller may
//! still pass another λ (it scales both) or weights.

use super::data::{symmetrise, CrfData};
use super::gram_cache::GramPool;
use super::local::CrfLocal;
use crate::error::{check_lambda, Error, Result};
use crate::linalg::{cholesky, gemm};
use crate::loss::{LocalModel, Loss};
use ndarray::{Array2, ArrayView2};

/// The Gaussian CRF loss with its two penalty levels (see the module docs).
#[derive(Debug, Clone)]
pub struct CrfLoss {
    pub(crate) data: CrfData,
    pub(crate) lambda_precision: f64,
    pub(crate) lambda_interaction: f64,
    /// Number of Λ coordinates q(q+1)/2.
    pub(crate) nl: usize,
    /// (k, l), k ≤ l, of every Λ coordinate.
    pub(crate) pairs: Vec<(u32, u32)>,
    /// The Gram block of the last local model, reused by the next one.
    pub(crate) gram_pool: GramPool,
}

/// The quantities at a point that value, gradient and the local model share.
pub(crate) struct State {
    pub(crate) lam: Array2<f64>,
    pub(crate) sigma: Array2<f64>,
    pub(crate) log_det: f64,
    /// Non-zero rows of Θ and their values.
    pub(crate) rows: Vec<usize>,
    pub(crate) block: Array2<f64>,
    pub(crate) psi: Array2<f64>,
}

/// Index of the coordinate of Λ_kl in the row-by-row upper triangle of a q×q matrix:
/// `Some` for k ≤ l < q, `None` otherwise.
#[inline]
pub fn tri_index(q: usize, k: usize, l: usize) -> Option<usize> {
    (k <= l && l < q).then(|| tri_offset(q, k, l))
}

/// [`tri_index`] for k ≤ l < q.
#[inline]
fn tri_offset(q: usize, k: usize, l: usize) -> usize {
    k * (2 * q - k + 1) / 2 + (l - k)
}

impl CrfLoss {
    /// The CRF loss on `data` with penalty levels λ_Λ (off-diagonal of Λ) and λ_Θ.
    ///
    /// # Errors
    /// [`Error::InvalidLambda`] if either level is negative or not finite;
    /// [`Error::Unbounded`] when the objective has no minimiser for these levels (λ_Θ = 0 with
    /// an output the inputs fit exactly, e.g. n ≤ p; λ_Λ = 0 with a singular S_yy or residual
    /// covariance; see [`super::bounded`]). The check reads which levels are zero: solving
    /// with a penalty whose λ is 0 (both levels then vanish) is not covered.
    pub fn new(data: CrfData, lambda_precision: f64, lambda_interaction: f64) -> Result<Self> {
        check_lambda("lambda", lambda_precision)?;
        check_lambda("lambda_theta", lambda_interaction)?;
        super::bounded::check_bounded(&data, lambda_precision, lambda_interaction)?;
        let q = data.q;
        let nl = q * (q + 1) / 2;
        let mut pairs = Vec::with_capacity(nl);
        for k in 0..q {
            for l in k..q {
                pairs.push((k as u32, l as u32));
            }
        }
        Ok(Self {
            data,
            lambda_precision,
            lambda_interaction,
            nl,
            pairs,
            gram_pool: GramPool::default(),
        })
    }

    /// The data.
    pub fn data(&self) -> &CrfData {
        &self.data
    }

    /// λ_Λ.
    pub fn lambda_precision(&self) -> f64 {
        self.lambda_precision
    }

    /// λ_Θ.
    pub fn lambda_interaction(&self) -> f64 {
        self.lambda_interaction
    }

    /// Number of Λ coordinates, q(q+1)/2; Θ's coordinates follow them.
    pub fn precision_coordinates(&self) -> usize {
        self.nl
    }

    /// Λ (symmetric q×q) from a coordinate vector.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if `x` does not have [`Loss::dim`] entries.
    pub fn precision_of(&self, x: &[f64]) -> Result<Array2<f64>> {
        self.check_len(x)?;
        Ok(self.lambda_matrix(x))
    }

    /// Θ (p×q) from a coordinate vector.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if `x` does not have [`Loss::dim`] entries.
    pub fn interaction_of(&self, x: &[f64]) -> Result<Array2<f64>> {
        self.check_len(x)?;
        Array2::from_shape_vec((self.data.p, self.data.q), x[self.nl..].to_vec())
            .map_err(|e| Error::Numerical(e.to_string()))
    }

    /// The coordinate vector of (Λ, Θ); only the upper triangle of Λ is read.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] for wrong shapes.
    pub fn pack(&self, lam: ArrayView2<f64>, theta: ArrayView2<f64>) -> Result<Vec<f64>> {
        let (p, q) = (self.data.p, self.data.q);
        if lam.dim() != (q, q) || theta.dim() != (p, q) {
            return Err(Error::ShapeMismatch {
                what: "(precision, interaction) vs (q×q, p×q)".into(),
                expected: format!("({q}×{q}, {p}×{q})"),
                found: format!(
                    "({}×{}, {}×{})",
                    lam.nrows(),
                    lam.ncols(),
                    theta.nrows(),
                    theta.ncols()
                ),
            });
        }
        let mut x = Vec::with_capacity(self.dim());
        x.extend(
            self.pairs
                .iter()
                .map(|&(k, l)| lam[[k as usize, l as usize]]),
        );
        x.extend(theta.iter().copied());
        Ok(x)
    }

    /// The penalised objective f + λ_Λ Σ_{i≠j}|Λ_ij| + λ_Θ Σ|Θ_ij| at x, or `None` if Λ is
    /// not positive definite.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if `x` has the wrong length.
    pub fn objective(&self, x: &[f64]) -> Result<Option<f64>> {
        self.check_len(x)?;
        Ok(self.value(x).map(|f| {
            f + x
                .iter()
                .enumerate()
                .map(|(k, v)| self.structural_factor(k) * v.abs())
                .sum::<f64>()
        }))
    }

    fn check_len(&self, x: &[f64]) -> Result<()> {
        if x.len() != self.dim() {
            return Err(Error::ShapeMismatch {
                what: "CRF coordinate vector".into(),
                expected: self.dim().to_string(),
                found: x.len().to_string(),
            });
        }
        Ok(())
    }

    pub(crate) fn lambda_matrix(&self, x: &[f64]) -> Array2<f64> {
        let q = self.data.q;
        let mut lam = Array2::zeros((q, q));
        for (c, &(k, l)) in self.pairs.iter().enumerate() {
            lam[[k as usize, l as usize]] = x[c];
            lam[[l as usize, k as usize]] = x[c];
        }
        lam
    }

    /// Non-zero rows of Θ and the r×q block of their values.
    pub(crate) fn theta_rows(&self, x: &[f64]) -> (Vec<usize>, Array2<f64>) {
        let q = self.data.q;
        let theta = &x[self.nl..];
        let rows: Vec<usize> = (0..self.data.p)
            .filter(|&i| theta[i * q..(i + 1) * q].iter().any(|v| *v != 0.0))
            .collect();
        let mut block = Array2::zeros((rows.len(), q));
        for (a, &i) in rows.iter().enumerate() {
            block
                .row_mut(a)
                .iter_mut()
                .zip(&theta[i * q..(i + 1) * q])
                .for_each(|(b, v)| *b = *v);
        }
        (rows, block)
    }

    /// Σ, log det Λ and (if `with_psi`; else an empty matrix) Ψ at x; `None` if Λ is not
    /// positive definite.
    pub(crate) fn state(&self, x: &[f64], with_psi: bool) -> Option<State> {
        let lam = self.lambda_matrix(x);
        let ch = cholesky(lam.view())?;
        let log_det = ch.log_det();
        let sigma = ch.inverse();
        let (rows, block) = self.theta_rows(x);
        let psi = if with_psi {
            self.data.quadratic(&rows, block.view())
        } else {
            Array2::zeros((0, 0))
        };
        Some(State {
            lam,
            sigma,
            log_det,
            rows,
            block,
            psi,
        })
    }

    /// tr(S_yy Λ) + 2 tr(S_yx Θ), the linear part of f.
    pub(crate) fn linear_part(&self, x: &[f64], lam: &Array2<f64>) -> f64 {
        let a: f64 = self
            .data
            .syy
            .iter()
            .zip(lam.iter())
            .map(|(s, l)| s * l)
            .sum();
        let b: f64 = self
            .data
            .sxy
            .iter()
            .zip(&x[self.nl..])
            .map(|(s, t)| s * t)
            .sum();
        a + 2.0 * b
    }

    /// Writes the coordinate gradient given Σ, Φ = ΣΨΣ and M = S_xxΘΣ.
    pub(crate) fn write_gradient(
        &self,
        sigma: &Array2<f64>,
        phi: &Array2<f64>,
        m: &Array2<f64>,
        g: &mut [f64],
    ) {
        for (c, &(k, l)) in self.pairs.iter().enumerate() {
            let (k, l) = (k as usize, l as usize);
            let v = self.data.syy[[k, l]] - sigma[[k, l]] - phi[[k, l]];
            g[c] = if k == l { v } else { 2.0 * v };
        }
        let ms = m.as_slice().expect("standard layout");
        for ((gk, s), mk) in g[self.nl..].iter_mut().zip(&self.data.sxy).zip(ms) {
            *gk = 2.0 * (s + mk);
        }
    }
}

/// Φ = ΣΨΣ, exactly symmetric.
pub(crate) fn sandwich(sigma: &Array2<f64>, psi: &Array2<f64>) -> Array2<f64> {
    let t = gemm(sigma.view(), psi.view());
    let mut phi = gemm(t.view(), sigma.view());
    symmetrise(&mut phi);
    phi
}

impl Loss for CrfLoss {
    fn dim(&self) -> usize {
        self.nl + self.data.p * self.data.q
    }

    fn name(&self) -> &str {
        "gaussian-crf"
    }

    fn value(&self, x: &[f64]) -> Option<f64> {
        let st = self.state(x, true)?;
        let tr: f64 = st.sigma.iter().zip(st.psi.iter()).map(|(a, b)| a * b).sum();
        let f = -st.log_det + self.linear_part(x, &st.lam) + tr;
        f.is_finite().then_some(f)
    }

    fn gradient(&self, x: &[f64], g: &mut [f64]) {
        let Some(st) = self.state(x, false) else {
            g.iter_mut().for_each(|v| *v = f64::NAN);
            return;
        };
        let (m, psi) = self
            .data
            .products(&st.rows, st.block.view(), st.sigma.view());
        let phi = sandwich(&st.sigma, &psi);
        self.write_gradient(&st.sigma, &phi, &m, g);
    }

    fn hess_vec(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
        let Some(st) = self.state(x, false) else {
            out.iter_mut().for_each(|o| *o = f64::NAN);
            return;
        };
        let (p, q) = (self.data.p, self.data.q);
        let (m, psi) = self
            .data
            .products(&st.rows, st.block.view(), st.sigma.view());
        let phi = sandwich(&st.sigma, &psi);
        let e = self.lambda_matrix(v);
        let d = Array2::from_shape_vec((p, q), v[self.nl..].to_vec()).expect("shape");
        let s = st.sigma.view();
        let es = gemm(e.view(), s);
        let ses = gemm(s, es.view());
        let sep = gemm(gemm(s, e.view()).view(), phi.view());
        let pes = gemm(phi.view(), es.view());
        let dtm = gemm(d.t(), m.view());
        let sdtm = gemm(s, dtm.view());
        let h_lam = &ses + &sep + &pes - &sdtm - sdtm.t();
        for (c, &(k, l)) in self.pairs.iter().enumerate() {
            let (k, l) = (k as usize, l as usize);
            out[c] = if k == l {
                h_lam[[k, l]]
            } else {
                h_lam[[k, l]] + h_lam[[l, k]]
            };
        }
        let sd = self.data.sxx_times(d.view());
        let h_theta = (gemm(sd.view(), s) - gemm(m.view(), es.view())) * 2.0;
        out[self.nl..]
            .iter_mut()
            .zip(h_theta.iter())
            .for_each(|(o, h)| *o = *h);
    }

    fn structural_factor(&self, k: usize) -> f64 {
        if k < self.nl {
            let (a, b) = self.pairs[k];
            if a == b {
                0.0
            } else {
                2.0 * self.lambda_precision
            }
        } else {
            self.lambda_interaction
        }
    }

    fn residual_scale(&self, k: usize) -> f64 {
        if k < self.nl && self.pairs[k].0 != self.pairs[k].1 {
            0.5
        } else {
            1.0
        }
    }

    /// Λ = diag(1/S_yy,ii), Θ = 0: the minimiser over diagonal Λ at Θ = 0.
    fn start(&self) -> Vec<f64> {
        let q = self.data.q;
        let mut x = vec![0.0; self.dim()];
        for k in 0..q {
            x[tri_offset(q, k, k)] = 1.0 / self.data.syy[[k, k]];
        }
        x
    }

    fn local_model<'a>(&'a self, x: &[f64]) -> Result<Box<dyn LocalModel + 'a>> {
        Ok(Box::new(CrfLocal::new(self, x, true)?))
    }
}

#[cfg(test)]
mod tests {
    use super::tri_index;

    /// The upper triangle of a q×q matrix, row by row, numbers its q(q+1)/2 entries
    /// 0, 1, 2, … without gaps; pairs outside it have no index.
    #[test]
    fn triangle_indices_count_row_by_row() {
        let q = 5;
        let mut next = 0;
        for k in 0..q {
            for l in k..q {
                assert_eq!(tri_index(q, k, l), Some(next));
                next += 1;
            }
        }
        assert_eq!(next, q * (q + 1) / 2);
        assert_eq!(tri_index(3, 2, 1), None);
        assert_eq!(tri_index(3, 1, 3), None);
        assert_eq!(tri_index(3, 5, 9), None);
    }
}
