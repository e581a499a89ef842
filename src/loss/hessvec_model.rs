//! The generic local model built from Hessian-vector products only.
//!
//! Cost per outer iteration: H_kk and the column H e_k are computed on first use, one
//! Hessian-vector product each, and cached; (Hd)_k is then maintained exactly as
//! Hd ← Hd + δ·H e_k when d_k changes by δ. The line search evaluates f(x + αd) directly.
//! This is correct for any [`Loss`] and slow; fast losses override
//! [`Loss::local_model`].

use super::{LocalModel, Loss};
use crate::error::{Error, Result};
use std::collections::HashMap;

/// A [`LocalModel`] for any loss, from value, gradient and Hessian-vector products.
pub struct HessVecModel<'a, L: Loss + ?Sized> {
    loss: &'a L,
    x: Vec<f64>,
    f: f64,
    g: Vec<f64>,
    d: Vec<f64>,
    hd: Vec<f64>,
    columns: HashMap<usize, Vec<f64>>,
    trial: Vec<f64>,
}

impl<'a, L: Loss + ?Sized> HessVecModel<'a, L> {
    /// The model of `loss` at `x`.
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] if x is outside the domain of the loss.
    pub fn new(loss: &'a L, x: &[f64]) -> Result<Self> {
        let m = loss.dim();
        let f = loss.value(x).ok_or_else(|| {
            Error::InvalidArgument("the point is outside the domain of the loss".into())
        })?;
        let mut g = vec![0.0; m];
        loss.gradient(x, &mut g);
        Ok(Self {
            loss,
            x: x.to_vec(),
            f,
            g,
            d: vec![0.0; m],
            hd: vec![0.0; m],
            columns: HashMap::new(),
            trial: vec![0.0; m],
        })
    }

    fn column(&mut self, k: usize) -> &[f64] {
        let (loss, x) = (self.loss, &self.x);
        self.columns.entry(k).or_insert_with(|| {
            let m = x.len();
            let mut e = vec![0.0; m];
            e[k] = 1.0;
            let mut out = vec![0.0; m];
            loss.hess_vec(x, &e, &mut out);
            out
        })
    }
}

impl<L: Loss + ?Sized> LocalModel for HessVecModel<'_, L> {
    fn value(&self) -> f64 {
        self.f
    }
    fn gradient(&self) -> &[f64] {
        &self.g
    }
    fn curvature(&mut self, k: usize) -> f64 {
        self.column(k)[k]
    }
    fn hd(&mut self, k: usize) -> f64 {
        self.hd[k]
    }
    fn step(&mut self, k: usize, delta: f64) {
        self.d[k] += delta;
        let col = self.column(k).to_vec();
        for (h, c) in self.hd.iter_mut().zip(col) {
            *h += delta * c;
        }
    }
    fn clear(&mut self) {
        self.d.iter_mut().for_each(|v| *v = 0.0);
        self.hd.iter_mut().for_each(|v| *v = 0.0);
    }
    fn value_along(&mut self, alpha: f64) -> Option<f64> {
        for ((t, &x), &d) in self.trial.iter_mut().zip(&self.x).zip(&self.d) {
            *t = x + alpha * d;
        }
        self.loss.value(&self.trial)
    }
}
