//! Whether the CRF objective with an unpenalised Θ (λ_Θ = 0) has a minimiser.
//!
//! With λ_Θ = 0 the minimum over Θ for fixed Λ is attained at Θ = −S_xx⁺S_xyΛ (the
//! least-squares regression of Y on X, B = S_xx⁺S_xy, times −Λ), and what remains is a
//! sparse precision problem on the residual covariance of that regression,
//!
//! ```text
//! min_Λ  −log det Λ + tr(S_res Λ) + λ_Λ Σ_{i≠j}|Λ_ij|,   S_res = S_yy − S_yx S_xx⁺ S_xy ⪰ 0.
//! ```
//!
//! The diagonal of Λ is unpenalised, so a zero residual variance (S_res)_kk = 0 — output k
//! is fitted exactly by the inputs, as happens whenever n ≤ p — lets Λ_kk grow without
//! bound while −log det Λ falls like −log Λ_kk: no minimiser. Conversely, with λ_Λ > 0 and
//! a positive diagonal of S_res the problem has one (the argument of the module docs of
//! [`crate::precision`]: U = −t·offdiag(S_res) is dual feasible for a small t > 0), and with
//! λ_Λ = 0 it has one exactly when S_res ≻ 0. Along the diverging ray the gradient vanishes
//! like 1/Λ_kk, so a solver's KKT test alone would stop far out on it and report
//! convergence; [`check_bounded`] refuses such problems before solving. (With λ_Θ > 0 and
//! λ_Λ = 0 the same happens along the null space of a singular S_yy, e.g. with fewer
//! samples than outputs, since Θ = 0 costs nothing; that is checked too.)
//!
//! S_xx⁺ is applied through an eigen-decomposition of the smaller of the two Gram matrices,
//! S_xx = XᵀX/n (p × p) or XXᵀ (n × n), with eigenvalues below [`RANK_CUTOFF`] times the
//! largest treated as zero. The regression's fitted second moment is then
//!
//! * p-side, S_xx = VDVᵀ: S_fit = (VᵀS_xy)ᵀ D⁺ (VᵀS_xy);
//! * n-side, XXᵀ = UΔUᵀ (so X = UΔ^{½}Wᵀ and S_xx = W(Δ/n)Wᵀ): with M = Δ⁺ Uᵀ(X S_xy),
//!   S_fit = n·MᵀM (since WᵀS_xy = Δ^{−½}UᵀXS_xy).

use super::data::{CrfData, Inputs};
use crate::error::{Error, Result};
use crate::linalg::{gemm, sym_eigen};
use ndarray::{Array2, ArrayView2, Axis};

/// Eigenvalues of the Gram matrix below this fraction of the largest span its null space.
pub const RANK_CUTOFF: f64 = 1e-12;

/// A residual variance (or, with λ_Λ = 0, an eigenvalue of S_res) at or below this
/// fraction of the output's second moment (of the largest one) counts as zero.
pub const EXACT_FIT: f64 = 1e-10;

/// Checks that the CRF objective of `data` with the given λ_Λ and λ_Θ has a minimiser (see
/// the module docs). With λ_Θ > 0 a penalised Θ keeps Λ_kk finite (growing it along the
/// mean-preserving direction costs λ_Θ·|ΘΣe_k|₁ per unit against a logarithmic gain), so
/// only λ_Λ = 0 needs a check there: S_yy ≻ 0, since Θ = 0 costs nothing.
///
/// # Errors
/// [`Error::Unbounded`] naming the output fitted exactly (λ_Θ = 0, λ_Λ > 0) or the
/// smallest eigenvalue of the singular matrix (λ_Λ = 0); [`Error::Numerical`] if an
/// eigen-decomposition fails.
pub fn check_bounded(data: &CrfData, lambda_precision: f64, lambda_interaction: f64) -> Result<()> {
    let q = data.q;
    if lambda_interaction > 0.0 {
        // Θ = 0 is free, so with λ_Λ = 0 a singular S_yy (e.g. n < q) leaves −log det Λ
        // + tr(S_yy Λ) unbounded along its null space; with λ_Λ > 0 the positive diagonal
        // of S_yy (checked by `CrfData::new`) suffices.
        if lambda_precision == 0.0 {
            return positive_definite(data.syy.view(), data, "the outputs' second moment S_yy");
        }
        return Ok(());
    }
    let s_res = residual_covariance(data)?;
    if lambda_precision > 0.0 {
        for k in 0..q {
            let (res, total) = (s_res[[k, k]], data.syy[[k, k]]);
            if res <= EXACT_FIT * total {
                return Err(Error::Unbounded(format!(
                    "with λ_Θ = 0 the inputs fit output {k} exactly (residual variance \
                     {res:.3e} of its second moment {total:.3e}), so Λ_{k}{k} → ∞; use \
                     λ_Θ > 0 or fewer inputs than samples"
                )));
            }
        }
        return Ok(());
    }
    positive_definite(
        s_res.view(),
        data,
        "the residual covariance of the outputs given the inputs (λ_Θ = 0)",
    )
}

/// With λ_Λ = 0: an error unless the smallest eigenvalue of `m` exceeds [`EXACT_FIT`] times
/// the largest second moment of an output.
fn positive_definite(m: ArrayView2<f64>, data: &CrfData, what: &str) -> Result<()> {
    let (values, _) = sym_eigen(m)?;
    let smallest = values.iter().copied().fold(f64::INFINITY, f64::min);
    let largest = (0..data.q).map(|k| data.syy[[k, k]]).fold(0.0, f64::max);
    if smallest <= EXACT_FIT * largest {
        return Err(Error::Unbounded(format!(
            "with λ_Λ = 0, {what} is singular (smallest eigenvalue {smallest:.3e}, e.g. fewer \
             samples than outputs), so Λ grows without bound; use λ_Λ > 0"
        )));
    }
    Ok(())
}

/// S_res = S_yy − S_yx S_xx⁺ S_xy of the (transformed) data, from the smaller Gram matrix.
fn residual_covariance(data: &CrfData) -> Result<Array2<f64>> {
    let (n, p, q) = (data.n, data.p, data.q);
    let sxy = ArrayView2::from_shape((p, q), &data.sxy)
        .map_err(|e| Error::Numerical(format!("S_xy layout: {e}")))?;
    let fit = match &data.inputs {
        Inputs::Gram(sxx) => p_side(sxx.view(), sxy)?,
        Inputs::Data(xt) if p <= n => {
            let mut sxx = gemm(xt.view(), xt.t());
            sxx.mapv_inplace(|v| v / n as f64);
            p_side(sxx.view(), sxy)?
        }
        Inputs::Data(xt) => {
            // xt is Xᵀ (p × n): XXᵀ = (Xᵀ)ᵀXᵀ and X S_xy = (Xᵀ)ᵀ S_xy.
            let k = gemm(xt.t(), xt.view());
            let (delta, u) = sym_eigen(k.view())?;
            let xs = gemm(xt.t(), sxy);
            let mut m = gemm(u.t(), xs.view());
            pseudo_inverse_rows(&mut m, &delta);
            let mut f = gemm(m.t(), m.view());
            f.mapv_inplace(|v| v * n as f64);
            f
        }
    };
    Ok(&data.syy - &fit)
}

/// S_fit = (VᵀS_xy)ᵀ D⁺ (VᵀS_xy) for S_xx = VDVᵀ.
fn p_side(sxx: ArrayView2<f64>, sxy: ArrayView2<f64>) -> Result<Array2<f64>> {
    let (d, v) = sym_eigen(sxx)?;
    let t = gemm(v.t(), sxy);
    let mut scaled = t.clone();
    pseudo_inverse_rows(&mut scaled, &d);
    Ok(gemm(t.t(), scaled.view()))
}

/// Multiplies row i of `a` by 1/values[i] where values[i] is above the rank cutoff, and by
/// 0 elsewhere: D⁺a for D = diag(values), the pseudo-inverse's treatment of the null space.
fn pseudo_inverse_rows(a: &mut Array2<f64>, values: &[f64]) {
    let top = values.iter().copied().fold(0.0, f64::max);
    for (mut row, &v) in a.axis_iter_mut(Axis(0)).zip(values) {
        let factor = if v > RANK_CUTOFF * top { 1.0 / v } else { 0.0 };
        row.mapv_inplace(|x| x * factor);
    }
}
