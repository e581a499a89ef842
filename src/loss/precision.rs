//! The log-det loss of sparse precision-matrix estimation:
//! f(Θ) = −log det Θ + tr(SΘ) over symmetric positive-definite Θ.
//!
//! # Coordinates
//!
//! A symmetric p × p matrix is stored once, as its upper triangle in column order:
//! coordinate k = j(j+1)/2 + i holds Θ_ij for i ≤ j ([`LogDet::coordinate`],
//! [`LogDet::entry`]). An off-diagonal coordinate moves the two entries Θ_ij = Θ_ji together,
//! so, writing E_k = e_ie_jᵀ + e_je_iᵀ (i ≠ j) or e_ie_iᵀ (i = j) and W = Θ⁻¹:
//!
//! * gradient: g_k = tr((S − W)E_k) = 2(S_ij − W_ij) off the diagonal, S_ii − W_ii on it;
//! * Hessian: from −log det(Θ + D) = −log det Θ − tr(WD) + ½ tr(WDWD) + O(‖D‖³),
//!   H_{kl} = tr(W E_k W E_l); in particular H_kk = 2(W_ij² + W_iiW_jj) off the diagonal and
//!   W_ii² on it, and (Hd)_k = tr(E_k WDW) = 2(WDW)_ij (or (WDW)_ii).
//!
//! The penalty λ Σ_{i≠j} w_ij|Θ_ij| counts each off-diagonal pair twice, hence
//! [`Loss::structural_factor`] 2 there; the KKT residual is reported per matrix entry (the
//! gradient of the matrix function is S − W), hence [`Loss::residual_scale`] ½ there. The
//! diagonal is unpenalised (factor 0) unless asked for (factor 1).
//!
//! Used directly with a solver, this loss does not check boundedness: with a singular S
//! and weights that leave a null direction of S unpenalised (λ = 0, or zero weights on the
//! pairs it needs) the objective falls without bound along a ray on which the gradient
//! vanishes, and the KKT test alone can report convergence there; such a point has no
//! duality gap (`duality_gap` is `None`). [`crate::precision::estimate_precision`] checks
//! this and returns [`crate::Error::Unbounded`].
//!
//! # The fast local model
//!
//! One Cholesky factorisation Θ = LLᵀ and one inverse W = Θ⁻¹ per outer iteration. The
//! direction D (symmetric, non-zero only on the free set) is kept as a compact list of its
//! non-zero coordinates. The inner products (WDW)_ij = w_iᵀ(D w_j) use y = D w_c for one
//! column c at a time: y is rebuilt from the list (O(nnz D), reading the single row w_c)
//! when a coordinate of another column is asked for, and kept exact in O(1) by each step
//! (D_ab += δ changes y_a by δW_bc and y_b by δW_ac). Coordinates are numbered by column and
//! the driver sweeps them in index order, so y is rebuilt once per column and sweep. A
//! coordinate then costs one contiguous inner product with the row w_i; a step costs O(1);
//! a sweep costs O(p·(|free set| + nnz D)). (Asking for coordinates of alternating columns
//! would rebuild y each time, O(nnz D) per call: correct, but not the intended order.)
//! Nothing is allocated per coordinate.
//! (An earlier version kept the p × p product U = DW, updating two rows per step and
//! reading a strided column per coordinate; it moved three times as much memory and was
//! measured slower at p = 2000.)
//!
//! The line search evaluates f(Θ + αD) by one Cholesky factorisation of Θ + αD: a failed
//! factorisation means "not positive definite" (outside the domain), a successful one gives
//! log det from the same factor, and tr(S(Θ + αD)) = tr(SΘ) + α tr(SD) costs O(|free set|).
//! The factor of the last successful trial point is kept, so the next outer iteration (whose
//! point is the accepted trial point) builds W from it without factorising again.
//!
//! # Duality gap
//!
//! min_Θ −log det Θ + tr(SΘ) + Σ λ_ij|Θ_ij| = min_Θ max_{|U_ij| ≤ λ_ij}
//! −log det Θ + tr((S + U)Θ); minimising over Θ (Θ = (S + U)⁻¹) gives the dual
//! max log det(S + U) + p over |U_ij| ≤ λ_ij (U_ii = 0 when the diagonal is unpenalised).
//! From an iterate, U = clip(W − S, −λ, λ) entrywise, which is the optimal U at the solution
//! (there W = S + U); the gap is F(Θ) − log det(S + U) − p, or `None` if S + U is not
//! positive definite (far from the solution) or an ℓ2 term is present.

use super::{LocalModel, Loss};
use crate::error::{Error, Result};
use crate::kernels::dot;
use crate::linalg::{self, Cholesky};
use crate::penalty::ResolvedPenalty;
use ndarray::{Array2, ArrayView2};
use std::sync::{Arc, Mutex, MutexGuard};

/// Relative tolerance of the symmetry check on S (relative to max |S_ij|).
const SYMMETRY_TOL: f64 = 1e-10;

/// Validates a covariance matrix and returns a symmetrised, row-major copy.
///
/// Checks: non-empty, square, finite, symmetric to 1e-10·max|S_ij| (then symmetrised by
/// averaging), no negative diagonal entry.
///
/// # Errors
/// [`Error::Empty`], [`Error::ShapeMismatch`], [`Error::NonFinite`], [`Error::NotSymmetric`],
/// [`Error::NotPositiveDefinite`] (negative diagonal), each naming `what`.
pub fn validate_covariance(s: ArrayView2<f64>, what: &str) -> Result<Array2<f64>> {
    let (r, c) = s.dim();
    if r == 0 || c == 0 {
        return Err(Error::Empty(what.to_string()));
    }
    if r != c {
        return Err(Error::ShapeMismatch {
            what: format!("{what} (must be square)"),
            expected: format!("{r} x {r}"),
            found: format!("{r} x {c}"),
        });
    }
    let mut scale = 0.0f64;
    for ((i, j), v) in s.indexed_iter() {
        if !v.is_finite() {
            return Err(Error::NonFinite {
                what: what.to_string(),
                location: format!("row {i}, column {j}"),
            });
        }
        scale = scale.max(v.abs());
    }
    let tol = SYMMETRY_TOL * scale;
    let mut out = s.as_standard_layout().into_owned();
    for i in 0..r {
        if s[[i, i]] < 0.0 {
            return Err(Error::NotPositiveDefinite(format!(
                "{what}: diagonal entry {i} is negative ({})",
                s[[i, i]]
            )));
        }
        for j in 0..i {
            let diff = (s[[i, j]] - s[[j, i]]).abs();
            if diff > tol {
                return Err(Error::NotSymmetric {
                    what: what.to_string(),
                    row: i,
                    col: j,
                    diff,
                });
            }
            let v = 0.5 * (s[[i, j]] + s[[j, i]]);
            out[[i, j]] = v;
            out[[j, i]] = v;
        }
    }
    Ok(out)
}

/// The log-det loss f(Θ) = −log det Θ + tr(SΘ) over the upper triangle of a symmetric Θ.
pub struct LogDet {
    p: usize,
    /// S, row-major, exactly symmetric.
    s: Array2<f64>,
    /// S in coordinates, with the pair factor: 2S_ij (i < j), S_ii; so tr(SΘ) = s_coordᵀx.
    s_coord: Vec<f64>,
    /// Coordinate k ↦ (i, j), i ≤ j.
    pairs: Vec<(u32, u32)>,
    penalize_diagonal: bool,
    /// The last factorisation (and inverse) computed, keyed by its matrix.
    cache: Mutex<Option<Cached>>,
}

struct Cached {
    /// The factorised matrix, row-major.
    theta: Arc<Vec<f64>>,
    factor: Arc<Cholesky>,
    /// Θ⁻¹, row-major, once computed.
    inverse: Option<Arc<Vec<f64>>>,
}

impl std::fmt::Debug for LogDet {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("LogDet")
            .field("p", &self.p)
            .field("penalize_diagonal", &self.penalize_diagonal)
            .finish()
    }
}

impl Clone for LogDet {
    fn clone(&self) -> Self {
        Self {
            p: self.p,
            s: self.s.clone(),
            s_coord: self.s_coord.clone(),
            pairs: self.pairs.clone(),
            penalize_diagonal: self.penalize_diagonal,
            cache: Mutex::new(None),
        }
    }
}

/// A row-major p × p view of a slice of length p².
fn square_view(p: usize, v: &[f64]) -> Option<ArrayView2<'_, f64>> {
    ArrayView2::from_shape((p, p), v).ok()
}

/// A standard-layout array's data as a `Vec` (copying only if it is not standard).
fn into_row_major(a: Array2<f64>) -> Vec<f64> {
    let a = if a.is_standard_layout() {
        a
    } else {
        a.as_standard_layout().into_owned()
    };
    let (v, offset) = a.into_raw_vec_and_offset();
    debug_assert!(matches!(offset, None | Some(0)));
    v
}

impl LogDet {
    /// The loss for the sample covariance `s` (p × p). The diagonal of Θ is unpenalised
    /// unless `penalize_diagonal`.
    ///
    /// # Errors
    /// As [`validate_covariance`], and [`Error::NotPositiveDefinite`] for an S that is not
    /// positive semidefinite ([`crate::precision::check_semidefinite`]: with an indefinite
    /// S the problem can be unbounded below).
    pub fn new(s: ArrayView2<f64>, penalize_diagonal: bool) -> Result<Self> {
        let s = validate_covariance(s, "covariance")?;
        crate::precision::semidefinite(&s)?;
        let p = s.nrows();
        let dim = p * (p + 1) / 2;
        if dim >= NONE as usize {
            return Err(Error::InvalidArgument(format!(
                "dimension {p} is too large (at most 92681 variables)"
            )));
        }
        let mut pairs = Vec::with_capacity(dim);
        let mut s_coord = Vec::with_capacity(dim);
        for j in 0..p {
            for i in 0..=j {
                pairs.push((i as u32, j as u32));
                s_coord.push(if i == j { s[[i, i]] } else { 2.0 * s[[j, i]] });
            }
        }
        Ok(Self {
            p,
            s,
            s_coord,
            pairs,
            penalize_diagonal,
            cache: Mutex::new(None),
        })
    }

    /// The number of variables p.
    pub fn p(&self) -> usize {
        self.p
    }

    /// The (symmetrised) sample covariance S.
    pub fn covariance_input(&self) -> &Array2<f64> {
        &self.s
    }

    /// Whether the diagonal of Θ is penalised.
    pub fn penalizes_diagonal(&self) -> bool {
        self.penalize_diagonal
    }

    /// The coordinate index of entry (i, j) (or (j, i)): k = j(j+1)/2 + i for i ≤ j.
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] if i or j is not below p.
    pub fn coordinate(&self, i: usize, j: usize) -> Result<usize> {
        if i >= self.p || j >= self.p {
            return Err(Error::InvalidArgument(format!(
                "entry ({i}, {j}) outside a {p} x {p} matrix",
                p = self.p
            )));
        }
        let (i, j) = if i <= j { (i, j) } else { (j, i) };
        Ok(j * (j + 1) / 2 + i)
    }

    /// The entry (i, j), i ≤ j, of coordinate k.
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] if k is not below [`Loss::dim`].
    pub fn entry(&self, k: usize) -> Result<(usize, usize)> {
        self.pairs
            .get(k)
            .map(|&(i, j)| (i as usize, j as usize))
            .ok_or_else(|| Error::InvalidArgument(format!("coordinate {k} out of range")))
    }

    /// The symmetric matrix Θ of a coordinate vector x.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if x does not have p(p+1)/2 entries.
    pub fn to_matrix(&self, x: &[f64]) -> Result<Array2<f64>> {
        self.check_len(x, "coordinate vector")?;
        let v = self.dense(x);
        Array2::from_shape_vec((self.p, self.p), v).map_err(|e| Error::Numerical(e.to_string()))
    }

    /// The coordinate vector of a symmetric p × p matrix (its upper triangle).
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] for a wrong shape, [`Error::NonFinite`], or
    /// [`Error::NotSymmetric`] (tolerance 1e-10 relative to the largest entry).
    pub fn from_matrix(&self, theta: ArrayView2<f64>) -> Result<Vec<f64>> {
        let p = self.p;
        if theta.dim() != (p, p) {
            return Err(Error::ShapeMismatch {
                what: "matrix vs loss dimension".into(),
                expected: format!("{p} x {p}"),
                found: format!("{} x {}", theta.nrows(), theta.ncols()),
            });
        }
        let mut scale = 0.0f64;
        for ((i, j), v) in theta.indexed_iter() {
            if !v.is_finite() {
                return Err(Error::NonFinite {
                    what: "matrix".into(),
                    location: format!("row {i}, column {j}"),
                });
            }
            scale = scale.max(v.abs());
        }
        let mut x = Vec::with_capacity(self.pairs.len());
        for &(i, j) in &self.pairs {
            let (i, j) = (i as usize, j as usize);
            let diff = (theta[[i, j]] - theta[[j, i]]).abs();
            if diff > SYMMETRY_TOL * scale {
                return Err(Error::NotSymmetric {
                    what: "matrix".into(),
                    row: j,
                    col: i,
                    diff,
                });
            }
            x.push(0.5 * (theta[[i, j]] + theta[[j, i]]));
        }
        Ok(x)
    }

    /// W = Θ⁻¹ at the coordinate vector x (reusing the factorisation of the last outer
    /// iteration when x is that point).
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] for a wrong length, [`Error::NotPositiveDefinite`] if Θ is
    /// not positive definite.
    pub fn inverse_at(&self, x: &[f64]) -> Result<Array2<f64>> {
        self.check_len(x, "coordinate vector")?;
        let (_, w) = self.log_det_and_inverse(x).ok_or_else(not_pd)?;
        Array2::from_shape_vec((self.p, self.p), w.as_ref().clone())
            .map_err(|e| Error::Numerical(e.to_string()))
    }

    fn check_len(&self, x: &[f64], what: &str) -> Result<()> {
        if x.len() != self.pairs.len() {
            return Err(Error::ShapeMismatch {
                what: format!("{what} vs p(p+1)/2"),
                expected: self.pairs.len().to_string(),
                found: x.len().to_string(),
            });
        }
        Ok(())
    }

    /// Θ(x) as a row-major p² vector. Rows are filled contiguously in the lower triangle,
    /// then mirrored in tiles.
    fn dense(&self, x: &[f64]) -> Vec<f64> {
        let p = self.p;
        let mut t = vec![0.0; p * p];
        let mut k = 0;
        for j in 0..p {
            // Coordinates j(j+1)/2 .. +j are Θ_0j .. Θ_jj: row j of the lower triangle.
            t[j * p..j * p + j + 1].copy_from_slice(&x[k..k + j + 1]);
            k += j + 1;
        }
        mirror_lower(&mut t, p);
        t
    }

    /// Whether every off-diagonal coordinate of x is zero.
    fn is_diagonal(&self, x: &[f64]) -> bool {
        let mut k = 0;
        for j in 0..self.p {
            if x[k..k + j].iter().any(|v| *v != 0.0) {
                return false;
            }
            k += j + 1;
        }
        true
    }

    fn lock(&self) -> MutexGuard<'_, Option<Cached>> {
        self.cache.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// The cached factor (and inverse) if its matrix equals `theta` up to rounding:
    /// |a_ij − b_ij| ≤ 1e-14·max(|b_ii|, |b_jj|). The line search builds Θ + αD from the
    /// accumulated direction while the driver forms x + α(target − x); the two differ by
    /// a few units in the last place, far below the backward error of the factorisation.
    #[allow(clippy::type_complexity)]
    fn cached(&self, theta: &[f64]) -> Option<(Arc<Cholesky>, Option<Arc<Vec<f64>>>)> {
        let guard = self.lock();
        let c = guard.as_ref()?;
        let p = self.p;
        if c.theta.len() != theta.len() {
            return None;
        }
        let same = (0..p).all(|i| {
            let a = &c.theta[i * p..(i + 1) * p];
            let b = &theta[i * p..(i + 1) * p];
            let di = b[i].abs();
            a.iter().zip(b).enumerate().all(|(j, (u, v))| {
                u == v || (u - v).abs() <= 1e-14 * di.max(theta[j * p + j].abs())
            })
        });
        same.then(|| (c.factor.clone(), c.inverse.clone()))
    }

    /// (log det Θ, Θ⁻¹) at x, or `None` if Θ is not positive definite. Diagonal Θ takes a
    /// shortcut; otherwise the cached factor is used when it matches.
    fn log_det_and_inverse(&self, x: &[f64]) -> Option<(f64, Arc<Vec<f64>>)> {
        self.log_det_and_inverse_of(x, Arc::new(self.dense(x)))
    }

    /// As [`LogDet::log_det_and_inverse`] with Θ(x) already built (shared with the cache,
    /// not copied).
    fn log_det_and_inverse_of(
        &self,
        x: &[f64],
        theta: Arc<Vec<f64>>,
    ) -> Option<(f64, Arc<Vec<f64>>)> {
        let p = self.p;
        if self.is_diagonal(x) {
            let mut w = vec![0.0; p * p];
            let mut ld = 0.0;
            for i in 0..p {
                let t = x[i * (i + 1) / 2 + i];
                if !(t > 0.0 && t.is_finite()) {
                    return None;
                }
                ld += t.ln();
                w[i * p + i] = 1.0 / t;
            }
            return Some((ld, Arc::new(w)));
        }
        let (factor, inverse) = match self.cached(&theta) {
            Some(hit) => hit,
            None => {
                let f = Arc::new(linalg::cholesky(square_view(p, &theta)?)?);
                *self.lock() = Some(Cached {
                    theta,
                    factor: f.clone(),
                    inverse: None,
                });
                (f, None)
            }
        };
        let w = match inverse {
            Some(w) => w,
            None => {
                let w = Arc::new(into_row_major(factor.inverse()));
                if let Some(c) = self.lock().as_mut() {
                    if Arc::ptr_eq(&c.factor, &factor) {
                        c.inverse = Some(w.clone());
                    }
                }
                w
            }
        };
        Some((factor.log_det(), w))
    }

    /// log det Θ(x), or `None` if not positive definite.
    fn log_det(&self, x: &[f64]) -> Option<f64> {
        if self.is_diagonal(x) {
            let mut ld = 0.0;
            for i in 0..self.p {
                let t = x[i * (i + 1) / 2 + i];
                if !(t > 0.0 && t.is_finite()) {
                    return None;
                }
                ld += t.ln();
            }
            return Some(ld);
        }
        let theta = self.dense(x);
        if let Some((f, _)) = self.cached(&theta) {
            return Some(f.log_det());
        }
        let f = linalg::cholesky(square_view(self.p, &theta)?)?;
        Some(f.log_det())
    }

    /// g_k from W: S-part minus 2W_ij (or W_ii).
    fn fill_gradient(&self, w: &[f64], g: &mut [f64]) {
        let p = self.p;
        for (k, &(i, j)) in self.pairs.iter().enumerate() {
            let (i, j) = (i as usize, j as usize);
            let c = if i == j { 1.0 } else { 2.0 };
            g[k] = self.s_coord[k] - c * w[j * p + i];
        }
    }
}

fn not_pd() -> Error {
    Error::NotPositiveDefinite("the precision matrix iterate".into())
}

/// Copies the lower triangle of a row-major p × p matrix onto its upper triangle, in tiles.
fn mirror_lower(t: &mut [f64], p: usize) {
    const TILE: usize = 64;
    for ib in (0..p).step_by(TILE) {
        for jb in (ib..p).step_by(TILE) {
            for i in ib..(ib + TILE).min(p) {
                for j in jb.max(i + 1)..(jb + TILE).min(p) {
                    t[i * p + j] = t[j * p + i];
                }
            }
        }
    }
}

impl Loss for LogDet {
    fn dim(&self) -> usize {
        self.pairs.len()
    }

    fn name(&self) -> &str {
        "log-det"
    }

    fn value(&self, x: &[f64]) -> Option<f64> {
        if x.len() != self.dim() {
            return None;
        }
        Some(-self.log_det(x)? + dot(&self.s_coord, x))
    }

    fn gradient(&self, x: &[f64], g: &mut [f64]) {
        match self.log_det_and_inverse(x) {
            Some((_, w)) => self.fill_gradient(&w, g),
            None => g.iter_mut().for_each(|v| *v = f64::NAN),
        }
    }

    /// (Hv)_k = tr(E_k W V W) with V the symmetric matrix of v (two dense products).
    fn hess_vec(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
        let p = self.p;
        let Some((_, w)) = self.log_det_and_inverse(x) else {
            out.iter_mut().for_each(|o| *o = f64::NAN);
            return;
        };
        let vm = self.dense(v);
        let (Some(wv), Some(vv)) = (square_view(p, &w), square_view(p, &vm)) else {
            return;
        };
        let wvw = linalg::gemm(linalg::gemm(wv, vv).view(), wv);
        for (k, &(i, j)) in self.pairs.iter().enumerate() {
            let (i, j) = (i as usize, j as usize);
            let c = if i == j { 1.0 } else { 2.0 };
            out[k] = c * 0.5 * (wvw[[i, j]] + wvw[[j, i]]);
        }
    }

    fn structure(&self) -> Option<super::LossStructure<'_>> {
        let pairs = self.pairs.iter().map(|&(i, j)| (i as usize, j as usize));
        Some(super::LossStructure::Precision {
            s: self.s.view(),
            pairs: pairs.collect::<Vec<_>>().into(),
        })
    }

    fn structural_factor(&self, k: usize) -> f64 {
        match self.pairs.get(k) {
            Some(&(i, j)) if i != j => 2.0,
            _ if self.penalize_diagonal => 1.0,
            _ => 0.0,
        }
    }

    fn residual_scale(&self, k: usize) -> f64 {
        match self.pairs.get(k) {
            Some(&(i, j)) if i != j => 0.5,
            _ => 1.0,
        }
    }

    /// Θ₀ = diag(1/S_ii) (1 where S_ii = 0): positive definite, and the solution for
    /// λ ≥ max_{i≠j}|S_ij|/w_ij with an unpenalised diagonal.
    fn start(&self) -> Vec<f64> {
        let mut x = vec![0.0; self.dim()];
        for i in 0..self.p {
            let s = self.s[[i, i]];
            x[i * (i + 1) / 2 + i] = if s > 0.0 { 1.0 / s } else { 1.0 };
        }
        x
    }

    fn duality_gap(&self, x: &[f64], pen: &ResolvedPenalty) -> Option<f64> {
        if x.len() != self.dim() || pen.l2.iter().any(|v| *v != 0.0) {
            return None;
        }
        let p = self.p;
        let (ld, w) = self.log_det_and_inverse(x)?;
        let primal = -ld + dot(&self.s_coord, x) + pen.value(x);
        // S + U with U = clip(W − S, ±λ_ij), λ_ij = l1_k / 2 off the diagonal, l1_k on it.
        // Row j of the lower triangle holds the coordinates of column j (contiguous).
        let mut m = vec![0.0; p * p];
        let sv = self.s.as_slice()?;
        for (k, &(i, j)) in self.pairs.iter().enumerate() {
            let (i, j) = (i as usize, j as usize);
            let lam = if i == j { pen.l1[k] } else { 0.5 * pen.l1[k] };
            let sij = sv[j * p + i];
            m[j * p + i] = sij + (w[j * p + i] - sij).clamp(-lam, lam);
        }
        mirror_lower(&mut m, p);
        let dual = linalg::cholesky(square_view(p, &m)?)?.log_det() + p as f64;
        Some(primal - dual)
    }

    fn local_model<'a>(&'a self, x: &[f64]) -> Result<Box<dyn LocalModel + 'a>> {
        self.check_len(x, "point")?;
        let theta = Arc::new(self.dense(x));
        let (ld, w) = self
            .log_det_and_inverse_of(x, theta.clone())
            .ok_or_else(not_pd)?;
        let mut g = vec![0.0; self.dim()];
        self.fill_gradient(&w, &mut g);
        let p = self.p;
        let tr_s_theta = dot(&self.s_coord, x);
        let wdiag = (0..p).map(|i| w[i * p + i]).collect();
        Ok(Box::new(LogDetModel {
            loss: self,
            p,
            theta,
            w,
            wdiag,
            w_diagonal: self.is_diagonal(x),
            active: Vec::new(),
            pos: vec![NONE; self.dim()],
            y: vec![0.0; BLOCK * p],
            ycol: 0,
            ycount: 0,
            lanes: vec![[0.0; BLOCK]; p],
            wt: vec![[0.0; BLOCK]; p],
            f: -ld + tr_s_theta,
            tr_s_theta,
            g,
        }))
    }
}

/// "No entry" marker of [`LogDetModel::pos`].
const NONE: u32 = u32::MAX;

/// Columns c of the products y_c = D w_c that the model forms in one pass over D.
const BLOCK: usize = 8;

/// The local model of the log-det loss at Θ.
///
/// Holds W = Θ⁻¹ and the direction D as a compact list of its non-zero coordinates. For
/// the inner products (WDW)_ij = w_iᵀ(D w_j) it keeps y_c = D w_c for a block of
/// [`BLOCK`] consecutive columns c₀ ≤ c < c₀ + 8: formed from the list in one pass, when a
/// coordinate of a column outside the block is asked for (the driver sweeps coordinates in
/// index order, i.e. column by column, so this happens once per 8 columns and sweep), and
/// kept exact in O(1) per column by every step (D_ab += δ changes y_c,a by δW_bc and y_c,b
/// by δW_ac). One pass serves 8 columns because W is symmetric: the 8 factors W_{c₀..c₀+8, b}
/// an entry needs are the b-th entries of the block's 8 rows of W, which the pass first
/// interleaves into one 8-wide entry per b; the pass then does 8-wide vector work for the
/// price of its scattered loads and stores, which bound it. A coordinate then costs one
/// contiguous inner product with w_i, and a step O(1): nothing of order p² is touched per
/// coordinate, and the only O(p) memory traffic is the row w_i. Measured on the AR(1)
/// precision race of benches/baselines.rs (p = 1000, about 5 000 entries in D): see the
/// CHANGELOG.
struct LogDetModel<'a> {
    loss: &'a LogDet,
    p: usize,
    /// Θ, row-major (shared with the factorisation cache).
    theta: Arc<Vec<f64>>,
    /// W = Θ⁻¹, row-major.
    w: Arc<Vec<f64>>,
    /// diag W.
    wdiag: Vec<f64>,
    /// Whether W is diagonal (the diagonal start): then (WDW)_ij = W_ii D_ij W_jj.
    w_diagonal: bool,
    /// (i, j, d_k) for every coordinate k = (i, j) the direction has touched.
    active: Vec<(u32, u32, f64)>,
    /// Position of coordinate k in `active`, or [`NONE`].
    pos: Vec<u32>,
    /// y_c = D w_c for the cached columns c = ycol + t, t < ycount, at [t·p, (t + 1)·p).
    y: Vec<f64>,
    ycol: usize,
    ycount: usize,
    /// Scratch of the block pass: entry r holds (y_c)_r for the block's columns.
    lanes: Vec<[f64; BLOCK]>,
    /// Scratch of the block pass: the block's rows of W, interleaved.
    wt: Vec<[f64; BLOCK]>,
    f: f64,
    /// tr(SΘ).
    tr_s_theta: f64,
    g: Vec<f64>,
}

impl LogDetModel<'_> {
    #[inline]
    fn pair(&self, k: usize) -> (usize, usize) {
        let (i, j) = self.loss.pairs[k];
        (i as usize, j as usize)
    }

    /// y_c = D w_c for the block of columns c₀ ≤ c < c₀ + 8 from the list of non-zero
    /// coordinates of D, in one pass.
    fn rebuild(&mut self, c0: usize) {
        let p = self.p;
        let count = BLOCK.min(p - c0);
        let mut lanes = std::mem::take(&mut self.lanes);
        lanes.iter_mut().for_each(|l| *l = [0.0; BLOCK]);
        // The block's rows of W, interleaved: wt[r][t] = W_{c₀+t, r}.
        let mut wt = std::mem::take(&mut self.wt);
        if count == BLOCK {
            // Eight row streams in, one full 8-wide entry out per r.
            let rows: [&[f64]; BLOCK] =
                std::array::from_fn(|t| &self.w[(c0 + t) * p..(c0 + t + 1) * p]);
            for (r, l) in wt.iter_mut().enumerate() {
                *l = std::array::from_fn(|t| rows[t][r]);
            }
        } else {
            wt.iter_mut().for_each(|l| *l = [0.0; BLOCK]);
            for t in 0..count {
                let row = &self.w[(c0 + t) * p..(c0 + t + 1) * p];
                for (l, &v) in wt.iter_mut().zip(row) {
                    l[t] = v;
                }
            }
        }
        // The list is mostly grouped by column b (coordinates are first touched in index
        // order), so the y_b terms are summed in registers and stored once per run of
        // equal b, avoiding a store-to-load dependency chain through y_b.
        let mut run_b = usize::MAX;
        let mut acc = [0.0; BLOCK];
        for &(a, b, v) in &self.active {
            let (a, b) = (a as usize, b as usize);
            let wb = wt[b];
            for (y, w) in lanes[a].iter_mut().zip(&wb) {
                *y += v * w;
            }
            if a != b {
                if b != run_b {
                    if run_b != usize::MAX {
                        for (y, s) in lanes[run_b].iter_mut().zip(&acc) {
                            *y += s;
                        }
                    }
                    run_b = b;
                    acc = [0.0; BLOCK];
                }
                let wa = wt[a];
                for (s, w) in acc.iter_mut().zip(&wa) {
                    *s += v * w;
                }
            }
        }
        if run_b != usize::MAX {
            for (y, s) in lanes[run_b].iter_mut().zip(&acc) {
                *y += s;
            }
        }
        for t in 0..count {
            for (y, l) in self.y[t * p..(t + 1) * p].iter_mut().zip(&lanes) {
                *y = l[t];
            }
        }
        self.lanes = lanes;
        self.wt = wt;
        self.ycol = c0;
        self.ycount = count;
    }
}

impl LocalModel for LogDetModel<'_> {
    fn value(&self) -> f64 {
        self.f
    }

    fn gradient(&self) -> &[f64] {
        &self.g
    }

    fn curvature(&mut self, k: usize) -> f64 {
        let (i, j) = self.pair(k);
        let wii = self.wdiag[i];
        if i == j {
            wii * wii
        } else {
            let wij = self.w[j * self.p + i];
            2.0 * (wij * wij + wii * self.wdiag[j])
        }
    }

    fn hd(&mut self, k: usize) -> f64 {
        let (i, j) = self.pair(k);
        if self.w_diagonal {
            let d = match self.pos[k] {
                NONE => 0.0,
                q => self.active[q as usize].2,
            };
            let s = self.wdiag[i] * d * self.wdiag[j];
            return if i == j { s } else { 2.0 * s };
        }
        if !(self.ycol..self.ycol + self.ycount).contains(&j) {
            self.rebuild(j);
        }
        let p = self.p;
        let t = j - self.ycol;
        // (WDW)_ij = w_iᵀ (D w_j).
        let s = dot(&self.w[i * p..(i + 1) * p], &self.y[t * p..(t + 1) * p]);
        if i == j {
            s
        } else {
            2.0 * s
        }
    }

    fn step(&mut self, k: usize, delta: f64) {
        let (a, b) = self.pair(k);
        match self.pos[k] {
            NONE => {
                self.pos[k] = self.active.len() as u32;
                self.active.push((a as u32, b as u32, delta));
            }
            q => self.active[q as usize].2 += delta,
        }
        // W_{c,b} and W_{c,a} for the cached columns c, from the block pass's interleaved
        // rows (the same values the pass used).
        let p = self.p;
        let (wb, wa) = (self.wt[b], self.wt[a]);
        for t in 0..self.ycount {
            self.y[t * p + a] += delta * wb[t];
            if a != b {
                self.y[t * p + b] += delta * wa[t];
            }
        }
    }

    fn clear(&mut self) {
        for &(a, b, _) in &self.active {
            let (a, b) = (a as usize, b as usize);
            self.pos[b * (b + 1) / 2 + a] = NONE;
        }
        self.active.clear();
        self.ycount = 0;
    }

    fn value_along(&mut self, alpha: f64) -> Option<f64> {
        let p = self.p;
        let mut trial = self.theta.as_ref().clone();
        let mut tr_sd = 0.0;
        for &(i, j, dk) in &self.active {
            if dk == 0.0 {
                continue;
            }
            let (i, j) = (i as usize, j as usize);
            tr_sd += dk
                * if i == j {
                    self.loss.s[[i, i]]
                } else {
                    2.0 * self.loss.s[[i, j]]
                };
            trial[i * p + j] += alpha * dk;
            if i != j {
                trial[j * p + i] += alpha * dk;
            }
        }
        let factor = linalg::cholesky(square_view(p, &trial)?)?;
        let value = -factor.log_det() + self.tr_s_theta + alpha * tr_sd;
        *self.loss.lock() = Some(Cached {
            theta: Arc::new(trial),
            factor: Arc::new(factor),
            inverse: None,
        });
        value.is_finite().then_some(value)
    }

    /// H_{kl} = tr(W E_k W E_l) = Σ_{(r,s)∈E_k} Σ_{(t,u)∈E_l} W_st W_ur, O(|A|²).
    fn hessian_block(&mut self, idx: &[usize]) -> Vec<f64> {
        let m = idx.len();
        let p = self.p;
        let w = &self.w;
        let mut h = vec![0.0; m * m];
        for (a, &k) in idx.iter().enumerate() {
            let (i, j) = self.pair(k);
            for (b, &l) in idx.iter().enumerate().skip(a) {
                let (r, s) = self.pair(l);
                let v = if i == j && r == s {
                    w[i * p + r] * w[i * p + r]
                } else if i == j {
                    2.0 * w[i * p + r] * w[i * p + s]
                } else if r == s {
                    2.0 * w[r * p + i] * w[r * p + j]
                } else {
                    2.0 * (w[i * p + r] * w[j * p + s] + w[i * p + s] * w[j * p + r])
                };
                h[a * m + b] = v;
                h[b * m + a] = v;
            }
        }
        h
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::loss::{check_derivatives, HessVecModel};
    use rand::{rngs::StdRng, RngExt, SeedableRng};

    /// A random symmetric positive-definite p × p matrix G Gᵀ/p + I/2.
    fn random_spd(seed: u64, p: usize) -> Array2<f64> {
        let mut rng = StdRng::seed_from_u64(seed);
        let g = Array2::from_shape_fn((p, p), |_| rng.random::<f64>() - 0.5);
        let mut a = g.dot(&g.t()) / p as f64;
        for i in 0..p {
            a[[i, i]] += 0.5;
        }
        a
    }

    fn point(loss: &LogDet, seed: u64) -> Vec<f64> {
        let t = random_spd(seed, loss.p());
        loss.from_matrix(t.view()).unwrap()
    }

    #[test]
    fn coordinates_round_trip() {
        let loss = LogDet::new(random_spd(1, 5).view(), false).unwrap();
        assert_eq!(loss.dim(), 15);
        for k in 0..loss.dim() {
            let (i, j) = loss.entry(k).unwrap();
            assert!(i <= j);
            assert_eq!(loss.coordinate(i, j).unwrap(), k);
            assert_eq!(loss.coordinate(j, i).unwrap(), k);
        }
        let t = random_spd(2, 5);
        let x = loss.from_matrix(t.view()).unwrap();
        let back = loss.to_matrix(&x).unwrap();
        assert!(back
            .iter()
            .zip(t.iter())
            .all(|(a, b)| (a - b).abs() < 1e-15));
        assert!(loss.entry(15).is_err() && loss.coordinate(5, 0).is_err());
    }

    /// Central finite differences (the crate's checker) confirm the gradient 2(S − W)_ij /
    /// (S − W)_ii and the Hessian-vector product with the pair conventions.
    #[test]
    fn derivatives_match_finite_differences() {
        let loss = LogDet::new(random_spd(3, 6).view(), false).unwrap();
        let x = point(&loss, 4);
        let r = check_derivatives(&loss, &x, 8, 5).unwrap();
        assert!(r.passes(1e-6), "{r:?}");
    }

    /// The fast model agrees with the generic Hessian-vector model: curvature, (Hd)_k after
    /// a few steps, the dense Hessian block, and the line-search value.
    #[test]
    fn fast_model_matches_generic_model() {
        let p = 5;
        let loss = LogDet::new(random_spd(6, p).view(), true).unwrap();
        let x = point(&loss, 7);
        let mut fast = loss.local_model(&x).unwrap();
        let mut slow = HessVecModel::new(&loss, &x).unwrap();
        assert!((fast.value() - slow.value()).abs() < 1e-12);
        for (a, b) in fast.gradient().iter().zip(slow.gradient()) {
            assert!((a - b).abs() < 1e-12);
        }
        let steps = [
            (0usize, 0.1),
            (4, -0.05),
            (9, 0.02),
            (2, 0.03),
            (4, 0.01),
            (14, -0.2),
        ];
        for &(k, d) in &steps {
            fast.step(k, d);
            slow.step(k, d);
        }
        for k in 0..loss.dim() {
            assert!(
                (fast.curvature(k) - slow.curvature(k)).abs() < 1e-10,
                "H_kk at {k}"
            );
            assert!((fast.hd(k) - slow.hd(k)).abs() < 1e-10, "(Hd)_k at {k}");
        }
        // Steps interleaved with reads in the same and in other columns (the cached
        // column vector must follow every step).
        let mut rng = StdRng::seed_from_u64(77);
        for _ in 0..200 {
            let k = rng.random_range(0..loss.dim());
            if rng.random::<f64>() < 0.5 {
                let d = 0.01 * (rng.random::<f64>() - 0.5);
                fast.step(k, d);
                slow.step(k, d);
            } else {
                assert!((fast.hd(k) - slow.hd(k)).abs() < 1e-10, "(Hd)_k at {k}");
            }
        }
        fast.clear();
        slow.clear();
        for &(k, d) in &steps {
            fast.step(k, d);
            slow.step(k, d);
        }
        for alpha in [1.0, 0.5, 0.125] {
            let mut xa = x.clone();
            let mut dsum = vec![0.0; loss.dim()];
            for &(k, d) in &steps {
                dsum[k] += d;
            }
            for k in 0..loss.dim() {
                xa[k] += alpha * dsum[k];
            }
            let v = fast.value_along(alpha).unwrap();
            assert!((v - loss.value(&xa).unwrap()).abs() < 1e-12);
        }
        // Far outside the domain: not positive definite.
        fast.step(0, -1e3);
        assert!(fast.value_along(1.0).is_none());
        let idx = [0usize, 2, 4, 7, 9, 14];
        let hf = fast.hessian_block(&idx);
        let hs = slow.hessian_block(&idx);
        for (a, b) in hf.iter().zip(&hs) {
            assert!((a - b).abs() < 1e-10);
        }
    }

    /// At a diagonal Θ (the default start) the model takes the shortcut
    /// (WDW)_ij = W_ii D_ij W_jj; it must agree with the generic model.
    #[test]
    fn diagonal_point_model_matches_generic_model() {
        let loss = LogDet::new(random_spd(12, 4).view(), false).unwrap();
        let x = loss.start();
        let mut fast = loss.local_model(&x).unwrap();
        let mut slow = HessVecModel::new(&loss, &x).unwrap();
        for &(k, d) in &[(1usize, 0.1), (3, -0.2), (5, 0.05), (1, 0.02), (9, 0.3)] {
            fast.step(k, d);
            slow.step(k, d);
            for q in 0..loss.dim() {
                assert!((fast.hd(q) - slow.hd(q)).abs() < 1e-12, "(Hd)_k at {q}");
                assert!((fast.curvature(q) - slow.curvature(q)).abs() < 1e-12);
            }
        }
        let v = fast.value_along(0.5).unwrap();
        assert!((v - slow.value_along(0.5).unwrap()).abs() < 1e-12);
    }

    /// The cached factorisation is reused only for the same matrix: after a line-search
    /// trial, value and gradient at a different point are still exact.
    #[test]
    fn cache_never_serves_a_different_point() {
        let loss = LogDet::new(random_spd(8, 4).view(), false).unwrap();
        let x = point(&loss, 9);
        let y = point(&loss, 10);
        let fresh = LogDet::new(random_spd(8, 4).view(), false).unwrap();
        let mut m = loss.local_model(&x).unwrap();
        m.step(1, 0.05);
        m.value_along(1.0).unwrap();
        drop(m);
        assert_eq!(loss.value(&y), fresh.value(&y));
        let (mut g1, mut g2) = (vec![0.0; 10], vec![0.0; 10]);
        loss.gradient(&y, &mut g1);
        fresh.gradient(&y, &mut g2);
        assert_eq!(g1, g2);
    }

    #[test]
    fn bad_covariances_are_typed_errors() {
        let ns = ndarray::array![[1.0, 0.5], [0.4, 1.0]];
        assert!(matches!(
            LogDet::new(ns.view(), false),
            Err(Error::NotSymmetric { .. })
        ));
        let nan = ndarray::array![[1.0, f64::NAN], [f64::NAN, 1.0]];
        assert!(matches!(
            LogDet::new(nan.view(), false),
            Err(Error::NonFinite { .. })
        ));
        let neg = ndarray::array![[1.0, 0.0], [0.0, -1.0]];
        assert!(matches!(
            LogDet::new(neg.view(), false),
            Err(Error::NotPositiveDefinite(_))
        ));
        // Positive diagonal but indefinite (eigenvalues 3 and −1): unbounded below.
        let indefinite = ndarray::array![[1.0, 2.0], [2.0, 1.0]];
        assert!(matches!(
            LogDet::new(indefinite.view(), false),
            Err(Error::NotPositiveDefinite(_))
        ));
        let rect = Array2::<f64>::zeros((2, 3));
        assert!(matches!(
            LogDet::new(rect.view(), false),
            Err(Error::ShapeMismatch { .. })
        ));
        assert!(matches!(
            LogDet::new(Array2::<f64>::zeros((0, 0)).view(), false),
            Err(Error::Empty(_))
        ));
    }
}
