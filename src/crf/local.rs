//! The fast local quadratic model of the CRF loss for Newton coordinate descent.
//!
//! At (Λ, Θ) with Σ = Λ⁻¹, M = S_xxΘΣ and Φ = ΣΨΣ (see [`super::loss`]), a direction
//! (E, D) is built one coordinate at a time. The model keeps
//!
//! * Z = ΣE (q×q): a step on Λ_kl changes two columns, O(q);
//! * C = MᵀD (q×q): a step on Θ_ij changes column j by δ·M[i,:], O(q);
//! * Q = DΣ restricted to the *registered* rows of Θ (the rows the inner loop touches),
//!   stored by columns: a step on Θ_ij changes row i by δ·Σ[j,:], O(q);
//! * G = S_xx[R, R] for the registered rows R, formed before the inner loop (read off
//!   S_xx, or from the previous model's block plus one product X_Nᵀ X_R / n for the rows N
//!   new since then, see `gram_cache`), so no O(n·p) work happens in the inner loop.
//!
//! Then with H_Λ and H_Θ from the loss docs:
//!
//! ```text
//! (H_Λ)_kl = Σ_k·Z_l + Φ_l·Z_k + Φ_k·Z_l − Σ_k·C_l − Σ_l·C_k      (rows of Z = ΣE, C = MᵀD)
//! (H_Θ)_ij = 2 G_i·Q_{:,j} − 2 M_i·Z_j
//! ```
//!
//! so (Hd)_k costs O(q) for a Λ coordinate and O(|R| + q) for a Θ coordinate, and a step
//! costs O(q) either way. Curvatures are closed forms:
//! H_(kk) = Σ_kk² + 2Σ_kkΦ_kk, H_(kl) = 2(Σ_kl² + Σ_kkΣ_ll) + 2(2Σ_klΦ_kl + Σ_llΦ_kk + Σ_kkΦ_ll),
//! H_(ij) = 2 S_xx,ii Σ_jj.
//!
//! The registered rows are predicted at construction from the free-set rule of the driver
//! with λ = 1 (rows with a non-zero Θ_ij or |g_ij| ≥ λ_Θ); any other row is registered on
//! first use at O(n·|R|). Rows with non-zero Θ are always registered.
//!
//! **Line search.**
//!
//! ```text
//! f(Λ + αE, Θ + αD) = −log det(Λ + αE) + c₀ + α·ℓ
//!                     + tr((Λ + αE)⁻¹(Ψ + α(PᵀD + DᵀP) + α² DᵀS_xxD)),   P = S_xxΘ;
//! ```
//!
//! the two q×q matrices and ℓ = tr(S_yyE) + 2tr(S_yxD) are formed once per direction from G (only rows where Θ or
//! D is non-zero), so each trial costs one q×q Cholesky (which is also the
//! positive-definiteness test) and one q×q solve. If E = 0 the Cholesky is skipped.

use super::gram_cache::GramBlock;
use super::loss::{sandwich, CrfLoss};
use crate::error::{Error, Result};
use crate::kernels::dot;
use crate::linalg::{cholesky, gemm};
use crate::loss::{InnerLoopHints, LocalModel};
use ndarray::Array2;

const NONE: u32 = u32::MAX;

struct LineCache {
    lin: f64,
    psi1: Array2<f64>,
    psi2: Array2<f64>,
}

pub(crate) struct CrfLocal<'a> {
    loss: &'a CrfLoss,
    q: usize,
    nl: usize,
    f: f64,
    g: Vec<f64>,
    log_det: f64,
    /// tr(S_yyΛ) + 2tr(S_yxΘ).
    base: f64,
    lam: Array2<f64>,
    sigma: Array2<f64>,
    phi: Array2<f64>,
    psi: Array2<f64>,
    /// M = S_xxΘΣ, p×q.
    m: Array2<f64>,
    // Registered rows.
    reg: Vec<usize>,
    pos: Vec<u32>,
    cap: usize,
    /// G (cap×cap, row-major, first |R| rows/cols valid).
    gram: Vec<f64>,
    /// Θ rows of registered rows (cap×q).
    theta_a: Vec<f64>,
    theta_row_on: Vec<bool>,
    /// Q = DΣ by columns: column l at [l·cap, l·cap + |R|).
    qcols: Vec<f64>,
    /// D rows of registered rows (cap×q).
    dreg: Vec<f64>,
    d_row_on: Vec<bool>,
    e: Array2<f64>,
    /// Z = ΣE.
    z: Array2<f64>,
    /// C = MᵀD.
    c: Array2<f64>,
    e_on: bool,
    d_on: bool,
    cache: Option<LineCache>,
}

impl<'a> CrfLocal<'a> {
    /// The model at x. With `theta_block = false` only the Λ block is usable: M = S_xxΘΣ
    /// (the one O(n·p·q) product) is not formed, the Θ part of the gradient is left at 0 and
    /// no row is registered, so the caller must not touch Θ coordinates (the alternating
    /// solver's Λ-step).
    pub(crate) fn new(loss: &'a CrfLoss, x: &[f64], theta_block: bool) -> Result<Self> {
        let data = &loss.data;
        let (p, q, nl) = (data.p, data.q, loss.nl);
        let st = loss.state(x, !theta_block).ok_or_else(|| {
            Error::InvalidArgument("the precision matrix is not positive definite".into())
        })?;
        let (m, psi) = if theta_block {
            data.products(&st.rows, st.block.view(), st.sigma.view())
        } else {
            (Array2::zeros((p, q)), st.psi)
        };
        let phi = sandwich(&st.sigma, &psi);
        let mut g = vec![0.0; loss.dim_total()];
        loss.write_gradient(&st.sigma, &phi, &m, &mut g);
        if !theta_block {
            g[nl..].iter_mut().for_each(|v| *v = 0.0);
        }
        let tr: f64 = st.sigma.iter().zip(psi.iter()).map(|(a, b)| a * b).sum();
        let base = loss.linear_part(x, &st.lam);
        let f = -st.log_det + base + tr;
        if !f.is_finite() {
            return Err(Error::Numerical("the CRF loss is not finite".into()));
        }
        // Predict the rows the driver's free set will touch (λ = 1).
        let lt = loss.lambda_interaction;
        let theta = &x[nl..];
        let gt = &g[nl..];
        let predicted: Vec<usize> = (0..p)
            .filter(|&i| {
                theta_block && (0..q).any(|j| theta[i * q + j] != 0.0 || gt[i * q + j].abs() >= lt)
            })
            .collect();
        let GramBlock {
            rows: reg,
            values: gram,
            cap,
        } = loss.gram_pool.assemble(data, &predicted);
        let mut pos = vec![NONE; p];
        let mut theta_a = vec![0.0; cap * q];
        let mut theta_row_on = vec![false; cap];
        for (a, &i) in reg.iter().enumerate() {
            pos[i] = a as u32;
            let row = &theta[i * q..(i + 1) * q];
            theta_a[a * q..(a + 1) * q].copy_from_slice(row);
            theta_row_on[a] = row.iter().any(|v| *v != 0.0);
        }
        Ok(Self {
            loss,
            q,
            nl,
            f,
            g,
            log_det: st.log_det,
            base,
            lam: st.lam,
            sigma: st.sigma,
            phi,
            psi,
            m,
            reg,
            pos,
            cap,
            gram,
            theta_a,
            theta_row_on,
            qcols: vec![0.0; q * cap],
            dreg: vec![0.0; cap * q],
            d_row_on: vec![false; cap],
            e: Array2::zeros((q, q)),
            z: Array2::zeros((q, q)),
            c: Array2::zeros((q, q)),
            e_on: false,
            d_on: false,
            cache: None,
        })
    }

    /// Position of row i among the registered rows, registering it if needed (its Θ row is
    /// zero: every row with a non-zero Θ entry was registered at construction).
    fn ensure(&mut self, i: usize) -> usize {
        let a = self.pos[i];
        if a != NONE {
            return a as usize;
        }
        let r = self.reg.len();
        let q = self.q;
        if r == self.cap {
            let cap = (2 * self.cap).max(16);
            let mut gram = vec![0.0; cap * cap];
            for b in 0..r {
                gram[b * cap..b * cap + r]
                    .copy_from_slice(&self.gram[b * self.cap..b * self.cap + r]);
            }
            let mut qcols = vec![0.0; q * cap];
            for l in 0..q {
                qcols[l * cap..l * cap + r]
                    .copy_from_slice(&self.qcols[l * self.cap..l * self.cap + r]);
            }
            self.gram = gram;
            self.qcols = qcols;
            self.theta_a.resize(cap * q, 0.0);
            self.dreg.resize(cap * q, 0.0);
            self.theta_row_on.resize(cap, false);
            self.d_row_on.resize(cap, false);
            self.cap = cap;
        }
        let cap = self.cap;
        self.reg.push(i);
        let row = self.loss.data.gram_row(i, &self.reg);
        for (b, &v) in row.iter().enumerate() {
            self.gram[r * cap + b] = v;
            self.gram[b * cap + r] = v;
        }
        self.pos[i] = r as u32;
        self.cache = None;
        r
    }

    fn split(&self, k: usize) -> Coord {
        if k < self.nl {
            let (a, b) = self.loss.pairs[k];
            Coord::Lam(a as usize, b as usize)
        } else {
            let t = k - self.nl;
            Coord::Theta(t / self.q, t % self.q)
        }
    }

    fn row(m: &Array2<f64>, i: usize) -> &[f64] {
        let q = m.ncols();
        &m.as_slice().expect("standard layout")[i * q..(i + 1) * q]
    }

    fn fill_line_cache(&mut self) {
        if self.cache.is_none() {
            let q = self.q;
            let cap = self.cap;
            let data = &self.loss.data;
            let mut lin: f64 = data.syy.iter().zip(self.e.iter()).map(|(s, e)| s * e).sum();
            let drows: Vec<usize> = (0..self.reg.len()).filter(|&a| self.d_row_on[a]).collect();
            let trows: Vec<usize> = (0..self.reg.len())
                .filter(|&a| self.theta_row_on[a])
                .collect();
            let mut psi1 = Array2::zeros((q, q));
            let mut psi2 = Array2::zeros((q, q));
            if !drows.is_empty() {
                let dd =
                    Array2::from_shape_fn((drows.len(), q), |(u, j)| self.dreg[drows[u] * q + j]);
                for (u, &a) in drows.iter().enumerate() {
                    let i = self.reg[a];
                    lin += 2.0 * dot(&data.sxy[i * q..(i + 1) * q], dd.row(u).as_slice().unwrap());
                }
                let gdd = Array2::from_shape_fn((drows.len(), drows.len()), |(u, v)| {
                    self.gram[drows[u] * cap + drows[v]]
                });
                let gd = gemm(gdd.view(), dd.view());
                psi2 = gemm(dd.t(), gd.view());
                if !trows.is_empty() {
                    let gdt = Array2::from_shape_fn((drows.len(), trows.len()), |(u, v)| {
                        self.gram[drows[u] * cap + trows[v]]
                    });
                    let tt = Array2::from_shape_fn((trows.len(), q), |(v, j)| {
                        self.theta_a[trows[v] * q + j]
                    });
                    let pd = gemm(gdt.view(), tt.view()); // P[Drows, :]
                    let a = gemm(pd.t(), dd.view());
                    psi1 = &a + &a.t();
                }
            }
            self.cache = Some(LineCache { lin, psi1, psi2 });
        }
    }
}

impl Drop for CrfLocal<'_> {
    /// Hands the Gram block (with any rows registered during the inner loop) to the loss
    /// for the next model.
    fn drop(&mut self) {
        if !self.reg.is_empty() {
            self.loss.gram_pool.give(GramBlock {
                rows: std::mem::take(&mut self.reg),
                values: std::mem::take(&mut self.gram),
                cap: self.cap,
            });
        }
    }
}

#[derive(Clone, Copy)]
enum Coord {
    Lam(usize, usize),
    Theta(usize, usize),
}

impl CrfLoss {
    pub(crate) fn dim_total(&self) -> usize {
        self.nl + self.data.p * self.data.q
    }
}

impl LocalModel for CrfLocal<'_> {
    fn value(&self) -> f64 {
        self.f
    }

    fn gradient(&self) -> &[f64] {
        &self.g
    }

    fn curvature(&mut self, k: usize) -> f64 {
        let s = &self.sigma;
        match self.split(k) {
            Coord::Lam(a, b) if a == b => {
                s[[a, a]] * s[[a, a]] + 2.0 * s[[a, a]] * self.phi[[a, a]]
            }
            Coord::Lam(a, b) => {
                let ph = &self.phi;
                2.0 * (s[[a, b]] * s[[a, b]] + s[[a, a]] * s[[b, b]])
                    + 2.0
                        * (2.0 * s[[a, b]] * ph[[a, b]]
                            + s[[b, b]] * ph[[a, a]]
                            + s[[a, a]] * ph[[b, b]])
            }
            Coord::Theta(i, j) => 2.0 * self.loss.data.sxx_diag[i] * s[[j, j]],
        }
    }

    fn hd(&mut self, k: usize) -> f64 {
        match self.split(k) {
            Coord::Lam(a, b) => {
                let mut h = 0.0;
                let (s, ph) = (&self.sigma, &self.phi);
                if self.e_on {
                    let (za, zb) = (Self::row(&self.z, a), Self::row(&self.z, b));
                    h += dot(Self::row(s, a), zb)
                        + dot(Self::row(ph, b), za)
                        + dot(Self::row(ph, a), zb);
                }
                if self.d_on {
                    h -= dot(Self::row(s, a), Self::row(&self.c, b))
                        + dot(Self::row(s, b), Self::row(&self.c, a));
                }
                if a == b {
                    h
                } else {
                    2.0 * h
                }
            }
            Coord::Theta(i, j) => {
                let mut h = 0.0;
                if self.d_on {
                    let a = self.ensure(i);
                    let (cap, r) = (self.cap, self.reg.len());
                    h += 2.0
                        * dot(
                            &self.gram[a * cap..a * cap + r],
                            &self.qcols[j * cap..j * cap + r],
                        );
                }
                if self.e_on {
                    h -= 2.0 * dot(Self::row(&self.m, i), Self::row(&self.z, j));
                }
                h
            }
        }
    }

    fn step(&mut self, k: usize, delta: f64) {
        if delta == 0.0 {
            return;
        }
        self.cache = None;
        let q = self.q;
        match self.split(k) {
            Coord::Lam(a, b) => {
                self.e_on = true;
                // Z = ΣE: column b gains δΣ[:,a]; column a gains δΣ[:,b] (once if a = b).
                self.e[[a, b]] += delta;
                if a != b {
                    self.e[[b, a]] += delta;
                }
                for t in 0..q {
                    self.z[[t, b]] += delta * self.sigma[[t, a]];
                }
                if a != b {
                    for t in 0..q {
                        self.z[[t, a]] += delta * self.sigma[[t, b]];
                    }
                }
            }
            Coord::Theta(i, j) => {
                self.d_on = true;
                let a = self.ensure(i);
                let cap = self.cap;
                self.dreg[a * q + j] += delta;
                self.d_row_on[a] = true;
                let srow = Self::row(&self.sigma, j);
                for (l, sv) in srow.iter().enumerate() {
                    self.qcols[l * cap + a] += delta * sv;
                }
                // C = MᵀD: column j gains δ·M[i,:].
                let mrow = Self::row(&self.m, i);
                let cs = self.c.as_slice_mut().expect("standard layout");
                for (l, mv) in mrow.iter().enumerate() {
                    cs[l * q + j] += delta * mv;
                }
            }
        }
    }

    fn clear(&mut self) {
        self.e.fill(0.0);
        self.z.fill(0.0);
        self.c.fill(0.0);
        self.qcols.iter_mut().for_each(|v| *v = 0.0);
        self.dreg.iter_mut().for_each(|v| *v = 0.0);
        self.d_row_on.iter_mut().for_each(|v| *v = false);
        self.e_on = false;
        self.d_on = false;
        self.cache = None;
    }

    /// The first Newton step from a cold start otherwise frees every input–output pair whose
    /// gradient exceeds λ_Θ (157 000 of 300 000 on a p = 3000, q = 100 benchmark) and
    /// lands far from the solution; with the cold-start working set the p = 3000 races ran
    /// 37 s → 16.5 s (dense solution) and 0.15 s → 0.084 s (sparse solution).
    fn inner_loop_hints(&self) -> InnerLoopHints {
        InnerLoopHints {
            over_relaxation: false,
            cold_start_working_set: true,
        }
    }

    /// The exact block H_AA from the closed forms of the module docs, O(|A|²) after
    /// registering the Θ rows of A. With Λ coordinates u = (k, l), v = (c, d) (each standing
    /// for E = e_ce_dᵀ + e_de_cᵀ, or e_ce_cᵀ on the diagonal) and Θ coordinates (i, j):
    ///
    /// ```text
    /// H[(k,l),(c,d)] = m_kl Σ_{(c',d') ∈ {(c,d),(d,c)}} Σ_kc'Σ_d'l + Σ_kc'Φ_d'l + Φ_kc'Σ_d'l
    /// H[(i,j),(c,d)] = −2 Σ_{(c',d')} M_ic'Σ_d'j
    /// H[(i,j),(i',j')] = 2 S_xx,ii' Σ_jj'
    /// ```
    ///
    /// (m_kl = 2 off the diagonal, 1 on it; the pair sum has one term when c = d).
    fn hessian_block(&mut self, idx: &[usize]) -> Vec<f64> {
        let m = idx.len();
        let coords: Vec<Coord> = idx.iter().map(|&k| self.split(k)).collect();
        let rows: Vec<usize> = coords
            .iter()
            .map(|c| match *c {
                Coord::Theta(i, _) => self.ensure(i),
                Coord::Lam(..) => 0,
            })
            .collect();
        let (s, ph, mm, cap) = (&self.sigma, &self.phi, &self.m, self.cap);
        let ll = |k: usize, l: usize, c: usize, d: usize| {
            s[[k, c]] * s[[d, l]] + s[[k, c]] * ph[[d, l]] + ph[[k, c]] * s[[d, l]]
        };
        let tl = |i: usize, j: usize, c: usize, d: usize| {
            let mut t = mm[[i, c]] * s[[d, j]];
            if c != d {
                t += mm[[i, d]] * s[[c, j]];
            }
            -2.0 * t
        };
        let mut h = vec![0.0; m * m];
        for a in 0..m {
            for b in a..m {
                let v = match (coords[a], coords[b]) {
                    (Coord::Lam(k, l), Coord::Lam(c, d)) => {
                        let mut t = ll(k, l, c, d);
                        if c != d {
                            t += ll(k, l, d, c);
                        }
                        if k != l {
                            2.0 * t
                        } else {
                            t
                        }
                    }
                    (Coord::Theta(i, j), Coord::Lam(c, d))
                    | (Coord::Lam(c, d), Coord::Theta(i, j)) => tl(i, j, c, d),
                    (Coord::Theta(_, j), Coord::Theta(_, j2)) => {
                        2.0 * self.gram[rows[a] * cap + rows[b]] * s[[j2, j]]
                    }
                };
                h[a * m + b] = v;
                h[b * m + a] = v;
            }
        }
        h
    }

    fn value_along(&mut self, alpha: f64) -> Option<f64> {
        let (lin, psi_a) = {
            self.fill_line_cache();
            let c = self.cache.as_ref()?;
            let psi_a = &self.psi + &(&c.psi1 * alpha) + &(&c.psi2 * (alpha * alpha));
            (c.lin, psi_a)
        };
        let (log_det, tr) = if self.e_on {
            let lam_a = &self.lam + &(&self.e * alpha);
            let ch = cholesky(lam_a.view())?;
            let sol = ch.apply_inverse_mat(psi_a.view());
            (ch.log_det(), sol.diag().sum())
        } else {
            let tr: f64 = self
                .sigma
                .iter()
                .zip(psi_a.iter())
                .map(|(a, b)| a * b)
                .sum();
            (self.log_det, tr)
        };
        let f = -log_det + self.base + alpha * lin + tr;
        f.is_finite().then_some(f)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::crf::data::{CrfData, InputMode};
    use crate::loss::Loss;
    use ndarray::Array2;

    /// The exact Hessian block against central differences of the gradient,
    /// (∇f(x + h e_v) − ∇f(x − h e_v)) / 2h, whose error is O(h²) (textbook calculus).
    #[test]
    fn hessian_block_matches_central_differences_of_the_gradient() {
        let (n, p, q) = (40, 4, 3);
        let x = Array2::from_shape_fn((n, p), |(i, j)| ((i * 7 + j * 3) % 11) as f64 / 5.0 - 1.0);
        let y = Array2::from_shape_fn((n, q), |(i, k)| {
            ((i * 5 + k * 13) % 17) as f64 / 8.0 - 1.0 + 0.3 * x[[i, k % p]]
        });
        let data = CrfData::new(x.view(), y.view(), true, false, InputMode::Auto).unwrap();
        let loss = CrfLoss::new(data, 0.1, 0.1).unwrap();
        let lam = ndarray::array![[2.0, -0.4, 0.1], [-0.4, 1.5, -0.3], [0.1, -0.3, 1.8]];
        let theta = Array2::from_shape_fn((p, q), |(i, j)| {
            if (i + j) % 3 == 0 {
                0.0
            } else {
                0.2 * (i as f64) - 0.15 * (j as f64) + 0.05
            }
        });
        let x0 = loss.pack(lam.view(), theta.view()).unwrap();
        let dim = loss.dim();
        // Λ coordinates (diagonal and off-diagonal), Θ entries zero and non-zero.
        let idx: Vec<usize> = vec![0, 1, 2, 4, 6, 7, 9, 12, 15, 17];
        let mut model = CrfLocal::new(&loss, &x0, true).unwrap();
        let h = model.hessian_block(&idx);
        let step = 1e-5;
        let (mut gp, mut gm) = (vec![0.0; dim], vec![0.0; dim]);
        for (b, &v) in idx.iter().enumerate() {
            let (mut xp, mut xm) = (x0.clone(), x0.clone());
            xp[v] += step;
            xm[v] -= step;
            loss.gradient(&xp, &mut gp);
            loss.gradient(&xm, &mut gm);
            for (a, &u) in idx.iter().enumerate() {
                let fd = (gp[u] - gm[u]) / (2.0 * step);
                let e = h[a * idx.len() + b];
                assert!(
                    (fd - e).abs() <= 1e-5 * (1.0 + fd.abs()),
                    "H[{u},{v}]: closed form {e}, differences {fd}"
                );
            }
        }
        // The diagonal agrees with the model's curvatures.
        for (a, &u) in idx.iter().enumerate() {
            let c = model.curvature(u);
            assert!((h[a * idx.len() + a] - c).abs() <= 1e-12 * (1.0 + c.abs()));
        }
    }
}
