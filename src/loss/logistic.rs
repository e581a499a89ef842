//! Logistic regression: f(b, b₀) = (1/n) Σ_i [log(1 + e^{η_i}) − y_i η_i], η = Xb + b₀,
//! y_i ∈ {0, 1}.
//!
//! With π_i = σ(η_i) = 1/(1 + e^{−η_i}) and w_i = π_i(1 − π_i):
//!
//! * gradient: ∂f/∂b_k = x_kᵀ(π − y)/n;
//! * Hessian: H = Xᵀ diag(w) X / n, so H_kk = Σ_i w_i x_ik²/n (computed on first use per
//!   outer iteration) and, keeping u = Xd, (Hd)_k = Σ_i x_ik w_i u_i / n;
//! * line search: f(x + αd) = (1/n) Σ softplus(η_i + αu_i) − y_i(η_i + αu_i), O(n).
//!
//! Numerical stability: softplus(η) = max(η, 0) + log1p(e^{−|η|}) and
//! σ(η) = 1/(1 + e^{−η}) for η ≥ 0, e^{η}/(1 + e^{η}) otherwise, so |η| up to 1e3 (and
//! beyond) neither overflows nor loses the small terms.
//!
//! **Duality gap.** The dual is max_u −(1/n) Σ_i h(u_i), h(u) = u log u + (1−u) log(1−u),
//! over u ∈ \[0, 1\]ⁿ with |x_jᵀ(y − u)|/n ≤ λ_j (and Σ_i (y_i − u_i) = 0 with an intercept);
//! u* = π*. From an iterate, u = y − s·ρ̃ with ρ = y − π (centred when there is an
//! intercept) and s ∈ \[0, 1\] the largest scaling that keeps u feasible.
//!
//! **Separable labels.** When the unpenalised coordinates alone can separate the labels
//! (λ = 0 on linearly separable data, or every label equal with an intercept) f has
//! infimum 0 but no minimiser: the coefficients along the separating direction grow
//! without bound. The solvers then stop at a point whose KKT residual (and duality gap,
//! where defined) meet the tolerance, so its objective is within the tolerance of the
//! infimum, but those coefficients only reflect how far the tolerance let them grow
//! (an intercept of about 16 at the default tolerance): read them as "±∞", not as
//! estimates. A penalty on every coefficient (λ > 0) restores a minimiser.

use super::glm::LinearData;
use super::point_memo::PointMemo;
use super::weighted_columns::{ColumnPool, WeightedColumns};
use super::{InnerLoopHints, LocalModel, Loss};
use crate::design::Design;
use crate::error::{Error, Result};
use crate::penalty::ResolvedPenalty;
use crate::reuse::Reuse;
use ndarray::ArrayView2;
use sprs::CsMat;

/// log(1 + e^η) without overflow or cancellation.
#[inline]
pub fn softplus(eta: f64) -> f64 {
    eta.max(0.0) + (-eta.abs()).exp().ln_1p()
}

/// The logistic function σ(η) = 1/(1 + e^{−η}), stable for any finite η.
#[inline]
pub fn sigmoid(eta: f64) -> f64 {
    if eta >= 0.0 {
        1.0 / (1.0 + (-eta).exp())
    } else {
        let e = eta.exp();
        e / (1.0 + e)
    }
}

/// (σ(η), softplus(η)) from one exponential t = e^{−|η|}: σ = 1/(1 + t) for η ≥ 0 and
/// t/(1 + t) otherwise, softplus = max(η, 0) + log1p(t); the same values, bit for bit, as
/// [`sigmoid`] and [`softplus`].
#[inline]
fn sigmoid_and_softplus(eta: f64) -> (f64, f64) {
    let t = (-eta.abs()).exp();
    let s = if eta >= 0.0 {
        1.0 / (1.0 + t)
    } else {
        t / (1.0 + t)
    };
    (s, eta.max(0.0) + t.ln_1p())
}

/// u log u + (1 − u) log(1 − u), with 0 log 0 = 0.
fn neg_entropy(u: f64) -> f64 {
    let t = |v: f64| if v > 0.0 { v * v.ln() } else { 0.0 };
    t(u) + t(1.0 - u)
}

/// The logistic loss on dense or sparse data, with an optional intercept.
///
/// Memory: Newton coordinate descent keeps compact copies of the columns it has visited
/// between iterations (row indices as `u32` plus values, and their weighted values), at most
/// about the size of the sparse design again, or one n-vector per visited dense column;
/// they live as long as the loss (a clone starts without them).
#[derive(Debug, Clone)]
pub struct Logistic {
    data: LinearData,
    /// Column buffers reused by successive local models.
    pool: ColumnPool,
    /// η, π and the loss terms at the last point a model was built for or accepted.
    memo: Reuse<PointMemo>,
}

impl Logistic {
    /// Logistic regression of labels `y` ∈ {0,1} on `x`; `intercept` adds an unpenalised b₀
    /// (the last coordinate).
    ///
    /// # Errors
    /// [`Error::InvalidLabel`] for a label other than 0 or 1, plus the errors of
    /// [`crate::loss::LeastSquares::new`].
    pub fn new(x: Design, y: Vec<f64>, intercept: bool) -> Result<Self> {
        let data = LinearData::new(x, y, intercept)?;
        if let Some((row, &value)) = data
            .y
            .iter()
            .enumerate()
            .find(|(_, &v)| v != 0.0 && v != 1.0)
        {
            return Err(Error::InvalidLabel { row, value });
        }
        Ok(Self {
            data,
            pool: ColumnPool::default(),
            memo: Reuse::default(),
        })
    }

    /// From a dense array (any layout).
    ///
    /// # Errors
    /// As [`Design::dense`] and [`Logistic::new`].
    pub fn from_dense(x: ArrayView2<f64>, y: &[f64], intercept: bool) -> Result<Self> {
        Self::new(Design::dense(x)?, y.to_vec(), intercept)
    }

    /// From a sparse matrix (kept sparse).
    ///
    /// # Errors
    /// As [`Design::sparse`] and [`Logistic::new`].
    pub fn from_sparse(x: CsMat<f64>, y: &[f64], intercept: bool) -> Result<Self> {
        Self::new(Design::sparse(x)?, y.to_vec(), intercept)
    }

    /// The design matrix.
    pub fn design(&self) -> &Design {
        &self.data.x
    }

    /// The labels.
    pub fn labels(&self) -> &[f64] {
        &self.data.y
    }

    /// Whether an intercept is fitted.
    pub fn has_intercept(&self) -> bool {
        self.data.intercept
    }

    /// Splits a coordinate vector into (coefficients b, intercept b₀ or 0).
    pub fn split<'s>(&self, x: &'s [f64]) -> (&'s [f64], f64) {
        let p = self.data.p();
        (&x[..p], if self.data.intercept { x[p] } else { 0.0 })
    }

    fn value_at_eta(&self, eta: &[f64]) -> f64 {
        let s: f64 = eta
            .iter()
            .zip(&self.data.y)
            .map(|(&e, &y)| softplus(e) - y * e)
            .sum();
        s / eta.len() as f64
    }

    fn gradient_at_eta(&self, eta: &[f64], g: &mut [f64]) {
        let resid: Vec<f64> = eta
            .iter()
            .zip(&self.data.y)
            .map(|(&e, &y)| sigmoid(e) - y)
            .collect();
        self.gradient_of_residual(&resid, None, g);
    }

    /// ρ = y − π with π = σ(η), centred when there is an intercept.
    fn centred_residual(&self, pi: &[f64]) -> Vec<f64> {
        let mut rho: Vec<f64> = pi.iter().zip(&self.data.y).map(|(&p, &y)| y - p).collect();
        if self.data.intercept {
            let mean = rho.iter().sum::<f64>() / rho.len() as f64;
            rho.iter_mut().for_each(|v| *v -= mean);
        }
        rho
    }

    /// The gap at x from the loss value f(x), the centred residual ρ (see
    /// `centred_residual`) and the correlations x_jᵀρ/n of the features (see the module
    /// notes for the dual point).
    fn gap_from(
        &self,
        x: &[f64],
        value: f64,
        rho: &[f64],
        corr: &[f64],
        pen: &ResolvedPenalty,
    ) -> Option<f64> {
        let n = self.data.n() as f64;
        let mut s = self.data.dual_scale(corr, &pen.l1)?;
        // Keep u = y − sρ inside [0, 1].
        for (&r, &y) in rho.iter().zip(&self.data.y) {
            let ok_sign = if y == 1.0 { r >= 0.0 } else { r <= 0.0 };
            if !ok_sign {
                s = 0.0;
                break;
            }
            if r != 0.0 {
                s = s.min(1.0 / r.abs());
            }
        }
        let dual = -rho
            .iter()
            .zip(&self.data.y)
            .map(|(&r, &y)| neg_entropy(y - s * r))
            .sum::<f64>()
            / n;
        let primal = value + pen.value(x);
        Some(primal - dual)
    }

    /// g = [X 1]ᵀ(π − y)/n from the residual π − y, on `subset` only when one is given.
    fn gradient_of_residual(&self, resid: &[f64], subset: Option<&[usize]>, g: &mut [f64]) {
        match subset {
            Some(s) => self.data.tmatvec_subset(resid, s, g),
            None => self.data.tmatvec(resid, g),
        }
        let n = resid.len() as f64;
        g.iter_mut().for_each(|v| *v /= n);
    }
}

impl Loss for Logistic {
    fn dim(&self) -> usize {
        self.data.dim()
    }

    fn name(&self) -> &str {
        "logistic"
    }

    fn value(&self, x: &[f64]) -> Option<f64> {
        Some(self.value_at_eta(&self.data.eta(x)))
    }

    fn gradient(&self, x: &[f64], g: &mut [f64]) {
        self.gradient_at_eta(&self.data.eta(x), g);
    }

    fn hess_vec(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
        let eta = self.data.eta(x);
        let mut u = self.data.eta(v);
        for (ui, &e) in u.iter_mut().zip(&eta) {
            let p = sigmoid(e);
            *ui *= p * (1.0 - p);
        }
        self.data.tmatvec(&u, out);
        let n = eta.len() as f64;
        out.iter_mut().for_each(|o| *o /= n);
    }

    fn structural_factor(&self, k: usize) -> f64 {
        if self.data.is_intercept(k) {
            0.0
        } else {
            1.0
        }
    }

    fn duality_gap(&self, x: &[f64], pen: &ResolvedPenalty) -> Option<f64> {
        if pen.l2.iter().any(|&v| v > 0.0) {
            return None; // no clean dual with the ℓ2 term
        }
        let (value, pi) = self.value_and_probabilities(x);
        let rho = self.centred_residual(&pi);
        let corr = self.data.correlations(&rho);
        self.gap_from(x, value, &rho, &corr, pen)
    }

    fn duality_gap_with_gradient(
        &self,
        x: &[f64],
        g: &[f64],
        pen: &ResolvedPenalty,
    ) -> Option<f64> {
        if g.len() != self.dim() || pen.l2.iter().any(|&v| v > 0.0) {
            return self.duality_gap(x, pen);
        }
        let (value, pi) = self.value_and_probabilities(x);
        let rho = self.centred_residual(&pi);
        let corr = self.data.correlations_from_gradient(g);
        self.gap_from(x, value, &rho, &corr, pen)
    }

    fn local_model<'a>(&'a self, x: &[f64]) -> Result<Box<dyn LocalModel + 'a>> {
        self.model(x, None)
    }

    fn local_model_subset<'a>(
        &'a self,
        x: &[f64],
        subset: &[usize],
    ) -> Result<Box<dyn LocalModel + 'a>> {
        self.model(x, Some(subset))
    }
}

impl Logistic {
    /// π = σ(η) and Σ_i (softplus(η_i) − y_i η_i), from one exponential per row.
    fn probabilities(&self, eta: &[f64]) -> (Vec<f64>, f64) {
        let mut total = 0.0;
        let pi = eta
            .iter()
            .zip(&self.data.y)
            .map(|(&e, &y)| {
                let (p, sp) = sigmoid_and_softplus(e);
                total += sp - y * e;
                p
            })
            .collect();
        (pi, total)
    }

    /// f(x) and π = σ(η) at x, from the memo when it holds x (see `point_memo.rs`).
    fn value_and_probabilities(&self, x: &[f64]) -> (f64, Vec<f64>) {
        let memo = self.memo.take();
        let n = self.data.n() as f64;
        if memo.matches(x) {
            let out = (memo.total / n, memo.pi.clone());
            self.memo.give(memo);
            return out;
        }
        let eta = self.data.eta(x);
        let (pi, total) = self.probabilities(&eta);
        (total / n, pi)
    }

    fn model<'a>(
        &'a self,
        x: &[f64],
        subset: Option<&[usize]>,
    ) -> Result<Box<dyn LocalModel + 'a>> {
        let cols = WeightedColumns::new(&self.data.x, &self.pool);
        let n = self.data.n();
        let memo = self.memo.take();
        let (eta, pi, total, x_copy) = if memo.matches(x) {
            (memo.eta, memo.pi, memo.total, memo.x)
        } else {
            let mut eta = vec![0.0; n];
            cols.matvec(x, &mut eta);
            self.data.add_intercept(x, &mut eta);
            let (pi, total) = self.probabilities(&eta);
            let mut x_copy = memo.x;
            x_copy.clear();
            x_copy.extend_from_slice(x);
            (eta, pi, total, x_copy)
        };
        let resid: Vec<f64> = pi.iter().zip(&self.data.y).map(|(&p, &y)| p - y).collect();
        let mut g = vec![0.0; self.dim()];
        self.gradient_of_residual(&resid, subset, &mut g);
        let w = pi.iter().map(|&p| p * (1.0 - p)).collect();
        let m = self.dim();
        Ok(Box::new(LogisticModel {
            loss: self,
            f: total / n as f64,
            total,
            x: x_copy,
            eta,
            pi,
            trial: None,
            handed_over: false,
            g,
            w,
            curv: vec![f64::NAN; m],
            cols,
            d: vec![0.0; m],
            touched: Vec::new(),
            u: vec![0.0; n],
            u_current: true,
            wu: vec![0.0; n],
            inv_n: 1.0 / n as f64,
        }))
    }
}

/// Local model of the logistic loss at η (Newton's quadratic model plus exact line values).
///
/// The inner loop only needs H_kk and (Hd)_k = x_kᵀ(W u)/n with u = [X 1] d, so a step keeps
/// W u current and nothing else: with column k and w ∘ x_k loaded the first time coordinate
/// k is visited (together with H_kk, see [`WeightedColumns`]), a step is one scatter
/// `Wu += δ (w ∘ x_k)` and (Hd)_k one gather. The direction d itself is kept as
/// coordinates; u = [X 1] d is rebuilt once, when the line search first asks for f(x + αd).
struct LogisticModel<'a> {
    loss: &'a Logistic,
    /// The point x, η = Xb + b₀ and π = σ(η) there.
    x: Vec<f64>,
    eta: Vec<f64>,
    pi: Vec<f64>,
    f: f64,
    /// n·f.
    total: f64,
    /// The last line-search trial: α, η + αu, σ(η + αu) and n·f there.
    trial: Option<Trial>,
    /// Whether `accept` left a memo for the next model (else the model leaves its own).
    handed_over: bool,
    g: Vec<f64>,
    /// IRLS weights π(1 − π).
    w: Vec<f64>,
    /// H_kk, NaN until first computed.
    curv: Vec<f64>,
    /// Columns x_k and w ∘ x_k, loaded with H_kk.
    cols: WeightedColumns<'a>,
    /// The direction d, and the coordinates where it may be non-zero.
    d: Vec<f64>,
    touched: Vec<usize>,
    /// u = [X 1] d when `u_current`.
    u: Vec<f64>,
    u_current: bool,
    /// W u, kept current by every step.
    wu: Vec<f64>,
    inv_n: f64,
}

impl LogisticModel<'_> {
    /// Rebuilds u = [X 1] d from the coordinates of d, unless it is current.
    fn refresh_u(&mut self) {
        if self.u_current {
            return;
        }
        self.u.iter_mut().for_each(|v| *v = 0.0);
        // `touched` may list a coordinate twice (its d returned to 0 and moved again);
        // sort and deduplicate so each column enters u once.
        self.touched.sort_unstable();
        self.touched.dedup();
        let p = self.loss.data.p();
        for &k in &self.touched {
            let dk = self.d[k];
            if dk == 0.0 {
                continue;
            }
            if k == p {
                self.u.iter_mut().for_each(|u| *u += dk); // the intercept
            } else {
                self.cols.axpy(k, dk, &mut self.u);
            }
        }
        self.u_current = true;
    }
}

/// One line-search trial of the logistic model.
struct Trial {
    alpha: f64,
    eta: Vec<f64>,
    pi: Vec<f64>,
    total: f64,
}

impl Drop for LogisticModel<'_> {
    fn drop(&mut self) {
        if !self.handed_over {
            self.loss.memo.give(PointMemo {
                x: std::mem::take(&mut self.x),
                eta: std::mem::take(&mut self.eta),
                pi: std::mem::take(&mut self.pi),
                total: self.total,
            });
        }
    }
}

impl LocalModel for LogisticModel<'_> {
    fn value(&self) -> f64 {
        self.f
    }
    fn gradient(&self) -> &[f64] {
        &self.g
    }
    fn curvature(&mut self, k: usize) -> f64 {
        if self.curv[k].is_nan() {
            let data = &self.loss.data;
            let s = if data.is_intercept(k) {
                self.w.iter().sum()
            } else {
                self.cols.load(k, &self.w)
            };
            self.curv[k] = s * self.inv_n;
        }
        self.curv[k]
    }
    fn hd(&mut self, k: usize) -> f64 {
        let data = &self.loss.data;
        let dot = if data.is_intercept(k) {
            data.col_dot(k, &self.wu)
        } else {
            self.cols.dot(k, &self.wu)
        };
        dot * self.inv_n
    }
    fn step(&mut self, k: usize, delta: f64) {
        if self.d[k] == 0.0 {
            self.touched.push(k);
        }
        self.d[k] += delta;
        self.u_current = false;
        let data = &self.loss.data;
        if data.is_intercept(k) {
            for (wu, &w) in self.wu.iter_mut().zip(&self.w) {
                *wu += delta * w;
            }
        } else if self.cols.loaded(k) {
            self.cols.axpy_weighted(k, delta, &mut self.wu);
        } else {
            data.x
                .for_each_in_col(k, |i, x| self.wu[i] += delta * self.w[i] * x);
        }
    }
    fn clear(&mut self) {
        for &k in &self.touched {
            self.d[k] = 0.0;
        }
        self.touched.clear();
        self.u.iter_mut().for_each(|v| *v = 0.0);
        self.wu.iter_mut().for_each(|v| *v = 0.0);
        self.u_current = true;
    }
    fn inner_loop_hints(&self) -> InnerLoopHints {
        InnerLoopHints {
            over_relaxation: true,
            cold_start_working_set: true,
        }
    }
    fn value_along(&mut self, alpha: f64) -> Option<f64> {
        self.refresh_u();
        // The trial's η + αu and σ(η + αu) are kept for `accept` (the buffers of the
        // previous trial are reused).
        let mut trial = self.trial.take().unwrap_or_else(|| Trial {
            alpha,
            eta: Vec::new(),
            pi: Vec::new(),
            total: 0.0,
        });
        trial.eta.clear();
        trial.pi.clear();
        let mut s = 0.0;
        for ((&e, &u), &y) in self.eta.iter().zip(&self.u).zip(&self.loss.data.y) {
            let t = e + alpha * u;
            let (p, sp) = sigmoid_and_softplus(t);
            s += sp - y * t;
            trial.eta.push(t);
            trial.pi.push(p);
        }
        trial.alpha = alpha;
        trial.total = s;
        self.trial = Some(trial);
        Some(s * self.inv_n)
    }
    fn accept(&mut self, alpha: f64, x_new: &[f64]) {
        let Some(trial) = self.trial.take() else {
            return;
        };
        if trial.alpha != alpha || !trial.total.is_finite() {
            return;
        }
        let mut x = std::mem::take(&mut self.x);
        x.clear();
        x.extend_from_slice(x_new);
        self.loss.memo.give(PointMemo {
            x,
            eta: trial.eta,
            pi: trial.pi,
            total: trial.total,
        });
        self.handed_over = true;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The memo handed from a line search to the next model (and to the duality gap)
    /// reproduces a fresh evaluation: the same loss value, gradient and gap at the accepted
    /// point, to rounding (η + αu against X(x + αd)). The check is internal consistency
    /// (cached against recomputed), so the data only need to be generic.
    #[test]
    fn memo_matches_a_fresh_evaluation() {
        let (n, p) = (9, 4);
        let x = ndarray::Array2::from_shape_fn((n, p), |(i, j)| {
            ((i * 7 + j * 3) % 5) as f64 - 2.0 + 0.1 * j as f64
        });
        let y: Vec<f64> = (0..n).map(|i| ((i * 5) % 3 == 0) as u8 as f64).collect();
        let loss = Logistic::from_dense(x.view(), &y, true).unwrap();
        let fresh = loss.clone(); // a clone starts without a memo
        let x0 = vec![0.2, 0.0, -0.1, 0.0, 0.05];
        let mut model = loss.local_model(&x0).unwrap();
        let steps = [(0, 0.3), (2, -0.2), (3, 0.15), (4, 0.1)];
        for &(k, d) in &steps {
            model.curvature(k);
            model.step(k, d);
        }
        let alpha = 0.5;
        let f_trial = model.value_along(alpha).unwrap();
        let mut x1 = x0.clone();
        for &(k, d) in &steps {
            x1[k] += alpha * d;
        }
        model.accept(alpha, &x1);
        drop(model);
        let cached = loss.local_model(&x1).unwrap();
        let direct = fresh.local_model(&x1).unwrap();
        assert!((cached.value() - f_trial).abs() <= 1e-15 * f_trial.abs());
        assert!((cached.value() - direct.value()).abs() <= 1e-14 * direct.value().abs());
        for (a, b) in cached.gradient().iter().zip(direct.gradient()) {
            assert!((a - b).abs() <= 1e-14, "{a} vs {b}");
        }
        let g = direct.gradient().to_vec();
        drop(direct);
        drop(cached);
        let pen = ResolvedPenalty::new(&crate::Penalty::l1(0.01).unwrap(), 5, |k| {
            loss.structural_factor(k)
        })
        .unwrap();
        let (a, b) = (
            loss.duality_gap_with_gradient(&x1, &g, &pen).unwrap(),
            fresh.duality_gap_with_gradient(&x1, &g, &pen).unwrap(),
        );
        assert!((a - b).abs() <= 1e-14, "{a} vs {b}");
        // A memo is used only at its own point.
        let mut other = x1.clone();
        other[1] = 0.25;
        let (m1, m2) = (
            loss.local_model(&other).unwrap(),
            fresh.local_model(&other).unwrap(),
        );
        assert_eq!(m1.value().to_bits(), m2.value().to_bits());
    }

    #[test]
    fn one_exponential_gives_the_same_sigmoid_and_softplus() {
        let mut eta = vec![
            0.0, -0.0, 1e-300, -1e-300, 36.7, -36.7, 745.0, -745.0, 1e3, -1e3,
        ];
        eta.extend((-400..=400).map(|i| f64::from(i) * 0.0731));
        for e in eta {
            let (s, sp) = sigmoid_and_softplus(e);
            assert_eq!(s.to_bits(), sigmoid(e).to_bits(), "σ({e})");
            assert_eq!(sp.to_bits(), softplus(e).to_bits(), "softplus({e})");
        }
    }
}
