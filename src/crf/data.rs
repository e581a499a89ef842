//! The data of a Gaussian CRF: validated inputs X (n×p) and outputs Y (n×q), their optional
//! centring and scaling, and the sufficient statistics the loss needs.
//!
//! The loss needs S_yy = YᵀY/n (q×q), S_xy = XᵀY/n (p×q) and products with
//! S_xx = XᵀX/n (p×p). S_xx is formed only when p is small enough to hold it
//! ([`InputMode::Gram`]); otherwise every product goes through X itself
//! ([`InputMode::Data`]): S_xx·B = Xᵀ(X·B)/n, and a block S_xx[A, A] = X_Aᵀ X_A / n for a
//! small row set A. X is then stored transposed (p×n, row-major), so that the column x_i of
//! input i is one contiguous slice.
//!
//! **Centring and scaling.** With `center`, the column means are subtracted from X and Y;
//! with `standardize`, every column is further divided by its standard deviation (dividing
//! by n; a constant column keeps scale 1). The fit then runs on the transformed data; the
//! transformation is recorded so the fitted model can be mapped back to the original units
//! (see [`crate::crf::CrfModel`]).

use crate::error::{Error, Result};
use crate::kernels::dot;
use crate::linalg::gemm;
use ndarray::{Array2, ArrayView2, Axis};

/// Largest p for which [`InputMode::Auto`] forms S_xx (p² doubles: 32 MiB at 2048).
pub const GRAM_MAX_INPUTS: usize = 2048;

/// How the loss computes products with S_xx = XᵀX/n.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum InputMode {
    /// [`InputMode::Gram`] when p ≤ [`GRAM_MAX_INPUTS`], else [`InputMode::Data`].
    #[default]
    Auto,
    /// Form S_xx once (p×p doubles of memory).
    Gram,
    /// Never form S_xx; work through X (n×p doubles of memory).
    Data,
}

/// The affine map applied to one block of columns: z = (v − shift) / scale.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ColumnMap {
    /// Subtracted from each column (zeros without centring).
    pub shift: Vec<f64>,
    /// Each column is divided by this after the shift (ones without scaling).
    pub scale: Vec<f64>,
}

impl ColumnMap {
    fn identity(k: usize) -> Self {
        Self {
            shift: vec![0.0; k],
            scale: vec![1.0; k],
        }
    }
}

/// How the products with S_xx are computed.
#[derive(Debug, Clone)]
pub(crate) enum Inputs {
    /// S_xx itself, p×p.
    Gram(Array2<f64>),
    /// Xᵀ, p×n (row i is the column x_i of X).
    Data(Array2<f64>),
}

/// Validated, transformed CRF data and its sufficient statistics.
#[derive(Debug, Clone)]
pub struct CrfData {
    pub(crate) n: usize,
    pub(crate) p: usize,
    pub(crate) q: usize,
    /// S_yy = YᵀY/n.
    pub(crate) syy: Array2<f64>,
    /// S_xy = XᵀY/n, p×q row-major (entry (i, j) at i·q + j, the order of Θ's coordinates).
    pub(crate) sxy: Vec<f64>,
    /// diag(S_xx).
    pub(crate) sxx_diag: Vec<f64>,
    pub(crate) inputs: Inputs,
    pub(crate) x_map: ColumnMap,
    pub(crate) y_map: ColumnMap,
}

fn check_matrix(what: &str, a: &ArrayView2<f64>) -> Result<()> {
    for ((i, j), v) in a.indexed_iter() {
        if !v.is_finite() {
            return Err(Error::NonFinite {
                what: what.to_string(),
                location: format!("row {i}, column {j}"),
            });
        }
    }
    Ok(())
}

fn column_map(a: &Array2<f64>, center: bool, standardize: bool) -> ColumnMap {
    let (n, k) = a.dim();
    let mut map = ColumnMap::identity(k);
    for j in 0..k {
        let col = a.column(j);
        let mean = if center { col.sum() / n as f64 } else { 0.0 };
        map.shift[j] = mean;
        if standardize {
            let var = col.iter().map(|v| (v - mean) * (v - mean)).sum::<f64>() / n as f64;
            let sd = var.sqrt();
            map.scale[j] = if sd > 0.0 && sd.is_finite() { sd } else { 1.0 };
        }
    }
    map
}

fn apply_map(a: &mut Array2<f64>, map: &ColumnMap) {
    for (j, mut col) in a.axis_iter_mut(Axis(1)).enumerate() {
        let (s, c) = (map.shift[j], map.scale[j]);
        col.mapv_inplace(|v| (v - s) / c);
    }
}

/// Checks that the sufficient statistics are finite (finite data beyond about 10¹⁵⁴
/// overflow when multiplied); `width` is the row length of the flattened matrix, for the
/// location.
fn check_moments<'a>(
    name: &str,
    inputs: &str,
    values: impl IntoIterator<Item = &'a f64>,
    width: usize,
) -> Result<()> {
    crate::error::check_finite(
        &format!("{name} (products of {inputs} overflow: rescale the data)"),
        values,
        |k| format!("entry ({}, {})", k / width, k % width),
    )
}

impl CrfData {
    /// Validates X (n×p) and Y (n×q), applies the optional centring/scaling and computes
    /// the sufficient statistics.
    ///
    /// # Errors
    /// [`Error::Empty`] if n, p or q is 0; [`Error::ShapeMismatch`] if the row counts
    /// differ; [`Error::NonFinite`] for NaN/Inf, in the data or in the second moments
    /// (data beyond about 10¹⁵⁴ overflow); [`Error::InvalidArgument`] if S_yy, S_xy (or
    /// S_xx, with the Gram matrix) cannot be allocated; [`Error::Unbounded`] if an output column
    /// has zero second moment (after centring), since then −log det Λ + tr(S_yy Λ) has no
    /// minimiser.
    pub fn new(
        x: ArrayView2<f64>,
        y: ArrayView2<f64>,
        center: bool,
        standardize: bool,
        mode: InputMode,
    ) -> Result<Self> {
        let (n, p) = x.dim();
        let (ny, q) = y.dim();
        if q == 0 {
            return Err(Error::Empty(format!("output matrix Y ({ny}×0)")));
        }
        if p == 0 {
            return Err(Error::Empty(format!("input matrix X ({n}×0)")));
        }
        if n == 0 {
            return Err(Error::Empty("input matrix X (0 rows)".into()));
        }
        if n != ny {
            return Err(Error::ShapeMismatch {
                what: "rows of X vs rows of Y".into(),
                expected: n.to_string(),
                found: ny.to_string(),
            });
        }
        check_matrix("x", &x)?;
        check_matrix("y", &y)?;
        // The statistics below are q × q and p × q (and p × p with the Gram matrix): sizes
        // that a few rows of very wide data make impossible to allocate.
        crate::error::check_allocation(q, q, "S_yy (outputs × outputs)")?;
        crate::error::check_allocation(p, q, "S_xy (inputs × outputs)")?;
        let mut xs = x.as_standard_layout().into_owned();
        let mut ys = y.as_standard_layout().into_owned();
        let x_map = column_map(&xs, center, standardize);
        let y_map = column_map(&ys, center, standardize);
        apply_map(&mut xs, &x_map);
        apply_map(&mut ys, &y_map);
        let nf = n as f64;
        let mut syy = gemm(ys.t(), ys.view());
        syy.mapv_inplace(|v| v / nf);
        // Exact symmetry (the GEMM may round the two triangles differently).
        check_moments("S_yy = YᵀY/n", "Y", syy.iter(), q)?;
        for i in 0..q {
            if syy[[i, i]] <= 0.0 {
                // All zeros, or squares below the smallest double.
                let underflow = ys.column(i).iter().any(|&v| v != 0.0);
                return Err(Error::Unbounded(format!(
                    "output column {i} has zero second moment{}",
                    if underflow {
                        " (its squares underflow: rescale Y)"
                    } else if center {
                        " after centring"
                    } else {
                        ""
                    }
                )));
            }
            for j in 0..i {
                let v = 0.5 * (syy[[i, j]] + syy[[j, i]]);
                syy[[i, j]] = v;
                syy[[j, i]] = v;
            }
        }
        let mut sxy = gemm(xs.t(), ys.view());
        sxy.mapv_inplace(|v| v / nf);
        check_moments("S_xy = XᵀY/n", "X and Y", sxy.iter(), q)?;
        let sxy = sxy.into_raw_vec_and_offset().0;
        let sxx_diag: Vec<f64> = (0..p)
            .map(|i| xs.column(i).iter().map(|v| v * v).sum::<f64>() / nf)
            .collect();
        check_moments("diag(XᵀX)/n", "X", sxx_diag.iter(), 1)?;
        let use_gram = match mode {
            InputMode::Gram => true,
            InputMode::Data => false,
            InputMode::Auto => p <= GRAM_MAX_INPUTS,
        };
        let inputs = if use_gram {
            crate::error::check_allocation(p, p, "S_xx (inputs × inputs)")?;
            let mut sxx = gemm(xs.t(), xs.view());
            sxx.mapv_inplace(|v| v / nf);
            for i in 0..p {
                sxx[[i, i]] = sxx_diag[i];
                for j in 0..i {
                    let v = 0.5 * (sxx[[i, j]] + sxx[[j, i]]);
                    sxx[[i, j]] = v;
                    sxx[[j, i]] = v;
                }
            }
            Inputs::Gram(sxx)
        } else {
            Inputs::Data(xs.t().as_standard_layout().into_owned())
        };
        Ok(Self {
            n,
            p,
            q,
            syy,
            sxy,
            sxx_diag,
            inputs,
            x_map,
            y_map,
        })
    }

    /// Number of samples n.
    pub fn samples(&self) -> usize {
        self.n
    }

    /// Number of inputs p.
    pub fn inputs(&self) -> usize {
        self.p
    }

    /// Number of outputs q.
    pub fn outputs(&self) -> usize {
        self.q
    }

    /// Whether S_xx was formed ([`InputMode::Gram`]) rather than working through X.
    pub fn uses_gram(&self) -> bool {
        matches!(self.inputs, Inputs::Gram(_))
    }

    /// S_yy = YᵀY/n of the (transformed) outputs.
    pub fn syy(&self) -> ArrayView2<'_, f64> {
        self.syy.view()
    }

    /// The centring/scaling applied to X.
    pub fn x_map(&self) -> &ColumnMap {
        &self.x_map
    }

    /// The centring/scaling applied to Y.
    pub fn y_map(&self) -> &ColumnMap {
        &self.y_map
    }

    /// S_xx[i, j]: read off S_xx, or x_iᵀx_j/n by the crate's fixed-order dot product, so
    /// an entry has the same bits however a block of them is assembled (the diagonal is the
    /// exact diag(S_xx)).
    #[inline]
    pub(crate) fn gram_entry(&self, i: usize, j: usize) -> f64 {
        match &self.inputs {
            Inputs::Gram(s) => s[[i, j]],
            Inputs::Data(_) if i == j => self.sxx_diag[i],
            Inputs::Data(xt) => {
                let (a, b) = (xt.row(i), xt.row(j));
                match (a.as_slice(), b.as_slice()) {
                    (Some(a), Some(b)) => dot(a, b) / self.n as f64,
                    _ => a.dot(&b) / self.n as f64,
                }
            }
        }
    }

    /// S_xx[i, rows] (one row of the Gram matrix against a row set).
    pub(crate) fn gram_row(&self, i: usize, rows: &[usize]) -> Vec<f64> {
        rows.iter().map(|&r| self.gram_entry(i, r)).collect()
    }

    /// Ψ = ΘᵀS_xxΘ for Θ given by its non-zero rows `rows` and their values `block`
    /// (r×q).
    pub(crate) fn quadratic(&self, rows: &[usize], block: ArrayView2<f64>) -> Array2<f64> {
        let q = self.q;
        if rows.is_empty() {
            return Array2::zeros((q, q));
        }
        let mut psi = match &self.inputs {
            Inputs::Gram(s) => {
                let sa = s.select(Axis(0), rows).select(Axis(1), rows);
                let sb = gemm(sa.view(), block);
                gemm(block.t(), sb.view())
            }
            Inputs::Data(xt) => {
                let xa = xt.select(Axis(0), rows);
                let t = gemm(xa.t(), block);
                let mut psi = gemm(t.t(), t.view());
                let nf = self.n as f64;
                psi.mapv_inplace(|v| v / nf);
                psi
            }
        };
        symmetrise(&mut psi);
        psi
    }

    /// (M, Ψ) with M = S_xxΘΣ (p×q) and Ψ = ΘᵀS_xxΘ (q×q), for Θ given by its non-zero rows
    /// `rows` and their values `block` (r×q).
    pub(crate) fn products(
        &self,
        rows: &[usize],
        block: ArrayView2<f64>,
        sigma: ArrayView2<f64>,
    ) -> (Array2<f64>, Array2<f64>) {
        let (p, q) = (self.p, self.q);
        if rows.is_empty() {
            return (Array2::zeros((p, q)), Array2::zeros((q, q)));
        }
        match &self.inputs {
            Inputs::Gram(s) => {
                let sa = s.select(Axis(1), rows);
                let pm = gemm(sa.view(), block); // S_xx Θ, p×q
                let pa = pm.select(Axis(0), rows);
                let mut psi = gemm(block.t(), pa.view());
                symmetrise(&mut psi);
                (gemm(pm.view(), sigma), psi)
            }
            Inputs::Data(xt) => {
                let nf = self.n as f64;
                let xa = xt.select(Axis(0), rows);
                let t = gemm(xa.t(), block); // XΘ, n×q
                let mut psi = gemm(t.t(), t.view());
                psi.mapv_inplace(|v| v / nf);
                symmetrise(&mut psi);
                let u = gemm(t.view(), sigma); // XΘΣ, n×q
                let mut m = gemm(xt.view(), u.view());
                m.mapv_inplace(|v| v / nf);
                (m, psi)
            }
        }
    }

    /// S_xx·B for a dense p×q matrix B (used by the exact Hessian-vector product).
    pub(crate) fn sxx_times(&self, b: ArrayView2<f64>) -> Array2<f64> {
        match &self.inputs {
            Inputs::Gram(s) => gemm(s.view(), b),
            Inputs::Data(xt) => {
                let t = gemm(xt.t(), b);
                let mut m = gemm(xt.view(), t.view());
                let nf = self.n as f64;
                m.mapv_inplace(|v| v / nf);
                m
            }
        }
    }
}

/// Replaces a square matrix by (A + Aᵀ)/2.
pub(crate) fn symmetrise(a: &mut Array2<f64>) {
    let n = a.nrows();
    for i in 0..n {
        for j in 0..i {
            let v = 0.5 * (a[[i, j]] + a[[j, i]]);
            a[[i, j]] = v;
            a[[j, i]] = v;
        }
    }
}
