//! Dense linear algebra behind one seam (faer by default, OpenBLAS with feature `openblas`).
//!
//! Everything the solvers need from dense linear algebra goes through the few functions of
//! this module, so the rest of the crate never knows which backend runs:
//!
//! - [`cholesky`]: the factor L of a symmetric positive-definite A = L Lᵀ, with
//!   log det A = 2 Σᵢ log Lᵢᵢ, A⁻¹ = L⁻ᵀ L⁻¹ and solves A x = b by two triangular solves
//!   (L y = b, then Lᵀ x = y). A failed factorisation is the positive-definiteness test the
//!   log-det problems use for their domain checks, so it is reported as `None`, not as an
//!   error.
//! - [`sym_eigen`]: A = V diag(λ) Vᵀ for symmetric A.
//! - [`matmul`]: C = A B.
//!
//! # Layout
//!
//! Inputs may have any memory layout. Every returned matrix is in standard (row-major,
//! contiguous) layout, whichever backend produced it.
//!
//! For a symmetric matrix the row-major and the column-major readings of the same memory are
//! the same matrix (A = Aᵀ), so a standard-layout symmetric array is handed to the
//! column-major backends without a transposing copy, and a symmetric result computed in
//! column-major order is returned as row-major without one.
//!
//! # Backends
//!
//! The default backend is faer (pure Rust, multithreaded through rayon; it follows faer's
//! global parallelism setting). With the cargo feature `openblas` the same operations run
//! through LAPACK/CBLAS from the system OpenBLAS library. [`backend_name`] tells which one is
//! active.

use ndarray::{Array2, ArrayView2};

use crate::error::{Error, Result};

#[cfg(not(feature = "openblas"))]
use faer_backend as backend;
#[cfg(feature = "openblas")]
use openblas_backend as backend;

/// Cholesky factor L (lower) of a symmetric positive-definite matrix A = L Lᵀ.
///
/// Built by [`cholesky`]. Holds only the factor; A itself is not kept.
pub struct Cholesky {
    inner: backend::Factor,
}

impl std::fmt::Debug for Cholesky {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Cholesky")
            .field("dim", &self.dim())
            .field("backend", &backend_name())
            .finish()
    }
}

/// Cholesky factorisation A = L Lᵀ of a symmetric positive-definite matrix.
///
/// Returns `None` when A is not (numerically) positive definite: a pivot
/// Lⱼⱼ² = Aⱼⱼ − Σₖ<ⱼ Lⱼₖ² is ≤ 0 or not finite, or any entry of L is not finite (so NaN or
/// ±Inf in the input also give `None`). A non-square input gives `None` too.
///
/// Only one triangle of A is read; the caller guarantees that A is symmetric. The input may
/// be in standard (row-major) or any other layout; a standard-layout input is read without
/// any copy besides the factor itself.
///
/// ```
/// use ndarray::array;
/// let a = array![[4.0, 2.0], [2.0, 3.0]];
/// let c = ellone::linalg::cholesky(a.view()).unwrap();
/// assert!((c.log_det() - 8f64.ln()).abs() < 1e-14);
/// assert!(ellone::linalg::cholesky(array![[1.0, 2.0], [2.0, 1.0]].view()).is_none());
/// ```
pub fn cholesky(a: ArrayView2<f64>) -> Option<Cholesky> {
    if a.nrows() != a.ncols() {
        return None;
    }
    backend::factor(a).map(|inner| Cholesky { inner })
}

impl Cholesky {
    /// The dimension n of the n × n matrix A.
    pub fn dim(&self) -> usize {
        self.inner.dim()
    }

    /// log det A = 2 Σᵢ log Lᵢᵢ (0 for the empty matrix).
    pub fn log_det(&self) -> f64 {
        self.inner.log_det()
    }

    /// A⁻¹ = L⁻ᵀ L⁻¹, returned exactly symmetric (one triangle is computed and mirrored).
    pub fn inverse(&self) -> Array2<f64> {
        self.inner.inverse()
    }

    /// x = A⁻¹ b, by the triangular solves L y = b and Lᵀ x = y.
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if `b.len()` differs from [`dim`](Self::dim).
    pub fn solve(&self, b: &[f64]) -> Result<Vec<f64>> {
        self.check_rhs("Cholesky::solve right-hand side", b.len(), "length")?;
        Ok(self.inner.solve(b))
    }

    /// [`Self::solve`] for callers inside the crate whose shapes hold by construction.
    pub(crate) fn apply_inverse(&self, b: &[f64]) -> Vec<f64> {
        debug_assert_eq!(b.len(), self.dim());
        self.inner.solve(b)
    }

    /// X = A⁻¹ B for an n × k matrix B (all k columns at once).
    ///
    /// # Errors
    /// [`Error::ShapeMismatch`] if `b.nrows()` differs from [`dim`](Self::dim).
    pub fn solve_mat(&self, b: ArrayView2<f64>) -> Result<Array2<f64>> {
        self.check_rhs("Cholesky::solve_mat right-hand side", b.nrows(), "rows")?;
        Ok(self.inner.solve_mat(b))
    }

    /// [`Self::solve_mat`] for callers inside the crate whose shapes hold by construction.
    pub(crate) fn apply_inverse_mat(&self, b: ArrayView2<f64>) -> Array2<f64> {
        debug_assert_eq!(b.nrows(), self.dim());
        self.inner.solve_mat(b)
    }

    fn check_rhs(&self, what: &str, found: usize, unit: &str) -> Result<()> {
        if found == self.dim() {
            return Ok(());
        }
        Err(Error::ShapeMismatch {
            what: what.to_string(),
            expected: format!(
                "{} {unit} (the matrix is {} x {})",
                self.dim(),
                self.dim(),
                self.dim()
            ),
            found: format!("{found} {unit}"),
        })
    }

    /// The lower-triangular factor L (zeros above the diagonal), e.g. to draw samples from
    /// N(0, A) as L z with z ~ N(0, I).
    pub fn lower(&self) -> Array2<f64> {
        self.inner.lower()
    }
}

/// Eigen-decomposition A = V diag(λ) Vᵀ of a symmetric matrix: eigenvalues ascending,
/// eigenvectors as the (orthonormal) columns of V, column j belonging to λⱼ.
///
/// Only one triangle of A is read; the caller guarantees symmetry.
///
/// # Errors
/// [`Error::ShapeMismatch`] if A is not square, [`Error::NonFinite`] if an entry is NaN
/// or ±Inf, [`Error::Numerical`] if the backend's iteration fails to
/// converge.
pub fn sym_eigen(a: ArrayView2<f64>) -> Result<(Vec<f64>, Array2<f64>)> {
    if a.nrows() != a.ncols() {
        return Err(Error::ShapeMismatch {
            what: "sym_eigen input".to_string(),
            expected: "a square matrix".to_string(),
            found: format!("{} x {}", a.nrows(), a.ncols()),
        });
    }
    let n = a.nrows();
    // Every entry, not one triangle: which triangle the backend reads depends on the
    // layout of the input.
    for i in 0..n {
        for j in 0..n {
            if !a[[i, j]].is_finite() {
                return Err(Error::NonFinite {
                    what: "sym_eigen input".to_string(),
                    location: format!("row {i}, column {j}"),
                });
            }
        }
    }
    if n == 0 {
        return Ok((Vec::new(), Array2::zeros((0, 0))));
    }
    backend::sym_eigen(a)
}

/// C = A B, the dense product of an m × k and a k × n matrix, through the backend's
/// (multithreaded) GEMM. Inputs may have any layout; C is in standard layout.
///
/// # Errors
/// [`Error::ShapeMismatch`] if `a.ncols() != b.nrows()`.
pub fn matmul(a: ArrayView2<f64>, b: ArrayView2<f64>) -> Result<Array2<f64>> {
    if a.ncols() != b.nrows() {
        return Err(Error::ShapeMismatch {
            what: "matmul inner dimensions".to_string(),
            expected: format!("{} rows in the right factor", a.ncols()),
            found: format!(
                "{} x {} times {} x {}",
                a.nrows(),
                a.ncols(),
                b.nrows(),
                b.ncols()
            ),
        });
    }
    Ok(gemm(a, b))
}

/// [`matmul`] for callers inside the crate whose shapes hold by construction.
pub(crate) fn gemm(a: ArrayView2<f64>, b: ArrayView2<f64>) -> Array2<f64> {
    debug_assert_eq!(a.ncols(), b.nrows());
    let (m, k, n) = (a.nrows(), a.ncols(), b.ncols());
    let mut c = Array2::zeros((m, n));
    if m == 0 || n == 0 || k == 0 {
        return c;
    }
    backend::matmul_into(a, b, &mut c);
    c
}

/// Name of the active backend: `"faer"` or `"openblas"`.
pub fn backend_name() -> &'static str {
    backend::NAME
}

/// Whether every entry of the lower triangle of a column-major n × n factor is finite and
/// every diagonal entry is > 0. `col(j)` returns the rows j..n of column j.
fn factor_is_valid<'a>(n: usize, col: impl Fn(usize) -> &'a [f64]) -> bool {
    (0..n).all(|j| {
        let c = col(j);
        c[0] > 0.0 && c.iter().all(|v| v.is_finite())
    })
}

#[cfg(not(feature = "openblas"))]
mod faer_backend {
    //! The faer backend: column-major views straight onto ndarray memory.

    use faer::dyn_stack::{MemBuffer, MemStack};
    use faer::linalg::cholesky::llt::inverse as llt_inverse;
    use faer::linalg::solvers::{Llt, Solve};
    use faer::{Accum, MatMut, MatRef, Side};
    use ndarray::{Array2, ArrayView2};

    use crate::error::{Error, Result};

    pub const NAME: &str = "faer";

    /// A faer view of an ndarray view, with the same strides (any layout, no copy).
    fn view<'a>(a: ArrayView2<'a, f64>) -> MatRef<'a, f64> {
        let (rs, cs) = (a.strides()[0], a.strides()[1]);
        // SAFETY: the pointer, shape and strides come from a live ndarray view whose data
        // outlives 'a, so every (i, j) with i < nrows, j < ncols addresses a valid element.
        unsafe { MatRef::from_raw_parts(a.as_ptr(), a.nrows(), a.ncols(), rs, cs) }
    }

    /// A faer view of a *symmetric* square ndarray view, preferring unit row stride: the
    /// transposed view of a row-major array is column-major and, as A = Aᵀ, the same matrix.
    fn sym_view<'a>(a: ArrayView2<'a, f64>) -> MatRef<'a, f64> {
        let (s0, s1) = (a.strides()[0], a.strides()[1]);
        if s0.unsigned_abs() > s1.unsigned_abs() {
            view(a.reversed_axes())
        } else {
            view(a)
        }
    }

    /// A mutable column-major faer view of a standard-layout ndarray matrix's memory: it
    /// sees the transpose, (i, j) ↦ m[[j, i]].
    fn transposed_view_mut(m: &mut Array2<f64>) -> MatMut<'_, f64> {
        assert!(m.is_standard_layout());
        let (r, c) = m.dim();
        // SAFETY: standard layout, r × c contiguous elements, exclusively borrowed.
        unsafe { MatMut::from_raw_parts_mut(m.as_mut_ptr(), c, r, 1, c as isize) }
    }

    /// A mutable faer view of a standard-layout ndarray matrix (row stride = ncols).
    fn view_mut(m: &mut Array2<f64>) -> MatMut<'_, f64> {
        assert!(m.is_standard_layout());
        let (r, c) = m.dim();
        // SAFETY: standard layout, r × c contiguous elements, exclusively borrowed.
        unsafe { MatMut::from_raw_parts_mut(m.as_mut_ptr(), r, c, c as isize, 1) }
    }

    /// Copies a column-major faer matrix into a standard-layout array, in tiles.
    fn to_standard(m: MatRef<'_, f64>) -> Array2<f64> {
        const TILE: usize = 64;
        let (r, c) = (m.nrows(), m.ncols());
        let mut out = Array2::zeros((r, c));
        let o = out.as_slice_mut().expect("fresh array is standard layout");
        let cols: Option<Vec<&[f64]>> = (0..c)
            .map(|j| m.col(j).try_as_col_major().map(|col| col.as_slice()))
            .collect();
        match cols {
            Some(cols) => {
                for ib in (0..r).step_by(TILE) {
                    for jb in (0..c).step_by(TILE) {
                        for i in ib..(ib + TILE).min(r) {
                            let row = &mut o[i * c..(i + 1) * c];
                            for j in jb..(jb + TILE).min(c) {
                                row[j] = cols[j][i];
                            }
                        }
                    }
                }
            }
            None => {
                for i in 0..r {
                    for j in 0..c {
                        o[i * c + j] = m[(i, j)];
                    }
                }
            }
        }
        out
    }

    /// Copies the upper triangle of a square standard-layout matrix onto its lower triangle,
    /// in cache-sized tiles.
    fn mirror_upper_to_lower(m: &mut Array2<f64>) {
        const TILE: usize = 64;
        let n = m.nrows();
        let s = m
            .as_slice_mut()
            .expect("mirror_upper_to_lower: standard layout");
        for ib in (0..n).step_by(TILE) {
            for jb in (0..=ib).step_by(TILE) {
                for i in ib..(ib + TILE).min(n) {
                    for j in jb..(jb + TILE).min(i) {
                        s[i * n + j] = s[j * n + i];
                    }
                }
            }
        }
    }

    pub struct Factor {
        llt: Llt<f64>,
    }

    pub fn factor(a: ArrayView2<f64>) -> Option<Factor> {
        let n = a.nrows();
        let llt = sym_view(a).llt(Side::Lower).ok()?;
        let l = llt.L();
        let valid = super::factor_is_valid(n, |j| {
            &l.col(j)
                .try_as_col_major()
                .expect("faer's factor is column-major")
                .as_slice()[j..]
        });
        valid.then_some(Factor { llt })
    }

    impl Factor {
        pub fn dim(&self) -> usize {
            self.llt.L().nrows()
        }

        pub fn log_det(&self) -> f64 {
            let l = self.llt.L();
            2.0 * (0..l.nrows()).map(|i| l[(i, i)].ln()).sum::<f64>()
        }

        pub fn inverse(&self) -> Array2<f64> {
            let n = self.dim();
            let mut out = Array2::zeros((n, n));
            if n == 0 {
                return out;
            }
            let par = faer::get_global_parallelism();
            let mut mem = MemBuffer::new(llt_inverse::inverse_scratch::<f64>(n, par));
            // faer fills the lower triangle of its column-major view, i.e. the upper
            // triangle of `out` in row-major terms; the result is symmetric, so mirror it.
            llt_inverse::inverse(
                transposed_view_mut(&mut out),
                self.llt.L(),
                par,
                MemStack::new(&mut mem),
            );
            mirror_upper_to_lower(&mut out);
            out
        }

        pub fn solve(&self, b: &[f64]) -> Vec<f64> {
            let mut x = b.to_vec();
            let n = x.len();
            if n == 0 {
                return x;
            }
            // SAFETY: x is an exclusively borrowed contiguous n-vector.
            let col = unsafe { MatMut::from_raw_parts_mut(x.as_mut_ptr(), n, 1, 1, n as isize) };
            self.llt.solve_in_place(col);
            x
        }

        pub fn solve_mat(&self, b: ArrayView2<f64>) -> Array2<f64> {
            let mut x = b.as_standard_layout().into_owned();
            if x.is_empty() {
                return x;
            }
            self.llt.solve_in_place(view_mut(&mut x));
            x
        }

        pub fn lower(&self) -> Array2<f64> {
            to_standard(self.llt.L())
        }
    }

    pub fn sym_eigen(a: ArrayView2<f64>) -> Result<(Vec<f64>, Array2<f64>)> {
        let evd = sym_view(a)
            .self_adjoint_eigen(Side::Lower)
            .map_err(|e| Error::Numerical(format!("symmetric eigen-decomposition: {e:?}")))?;
        let s = evd.S().column_vector();
        let values = (0..s.nrows()).map(|i| s[i]).collect();
        Ok((values, to_standard(evd.U())))
    }

    pub fn matmul_into(a: ArrayView2<f64>, b: ArrayView2<f64>, c: &mut Array2<f64>) {
        faer::linalg::matmul::matmul(
            view_mut(c),
            Accum::Replace,
            view(a),
            view(b),
            1.0,
            faer::get_global_parallelism(),
        );
    }
}

#[cfg(feature = "openblas")]
mod openblas_backend {
    //! The OpenBLAS backend: LAPACK through ndarray-linalg, CBLAS for the triangular solves
    //! and ndarray's BLAS-backed GEMM.
    //!
    //! The factor is kept in column-major (Fortran) layout, as LAPACK wants it. Read in
    //! row-major order the same memory is U = Lᵀ, which lets the triangular solves run on
    //! row-major right-hand sides without transposing anything.

    use cblas_sys::{
        cblas_dtrsm, cblas_dtrsv, CBLAS_DIAG, CBLAS_LAYOUT, CBLAS_SIDE, CBLAS_TRANSPOSE, CBLAS_UPLO,
    };
    use ndarray::{Array2, ArrayView2, ShapeBuilder};
    use ndarray_linalg::cholesky::{CholeskyFactorized, CholeskyInto, InverseCInto};
    use ndarray_linalg::eigh::EighInto;
    use ndarray_linalg::UPLO;

    use crate::error::{Error, Result};

    pub const NAME: &str = "openblas";

    /// A column-major copy of a *symmetric* square matrix. For a row-major input the raw
    /// memory is copied unchanged: read column-major it is Aᵀ = A.
    fn fortran_copy_sym(a: ArrayView2<f64>) -> Array2<f64> {
        if a.is_standard_layout() {
            a.to_owned().reversed_axes()
        } else {
            let n = a.nrows();
            let mut f = Array2::zeros((n, n).f());
            f.assign(&a);
            f
        }
    }

    fn to_c_int(n: usize) -> i32 {
        i32::try_from(n).expect("matrix dimension exceeds the BLAS integer range")
    }

    pub struct Factor {
        /// L, lower triangular, column-major (zeros above the diagonal).
        l: Array2<f64>,
    }

    pub fn factor(a: ArrayView2<f64>) -> Option<Factor> {
        let n = a.nrows();
        if n == 0 {
            return Some(Factor {
                l: Array2::zeros((0, 0).f()),
            });
        }
        let l = fortran_copy_sym(a).cholesky_into(UPLO::Lower).ok()?;
        debug_assert!(l.t().is_standard_layout());
        let data = l.as_slice_memory_order()?;
        let valid = super::factor_is_valid(n, |j| &data[j * n + j..(j + 1) * n]);
        valid.then_some(Factor { l })
    }

    impl Factor {
        pub fn dim(&self) -> usize {
            self.l.nrows()
        }

        pub fn log_det(&self) -> f64 {
            2.0 * self.l.diag().iter().map(|d| d.ln()).sum::<f64>()
        }

        pub fn inverse(&self) -> Array2<f64> {
            let n = self.dim();
            if n == 0 {
                return Array2::zeros((0, 0));
            }
            let f = CholeskyFactorized {
                factor: self.l.clone(),
                uplo: UPLO::Lower,
            };
            // Column-major and exactly symmetric (LAPACK fills one triangle, ndarray-linalg
            // mirrors it), so reversing the axes gives the same matrix in row-major layout.
            f.invc_into()
                .expect("inverse from a valid Cholesky factor")
                .reversed_axes()
        }

        pub fn solve(&self, b: &[f64]) -> Vec<f64> {
            let mut x = b.to_vec();
            let n = to_c_int(x.len());
            if n == 0 {
                return x;
            }
            let l = self.l.as_ptr();
            // SAFETY: L is n × n column-major with leading dimension n; x has n entries.
            unsafe {
                for trans in [CBLAS_TRANSPOSE::CblasNoTrans, CBLAS_TRANSPOSE::CblasTrans] {
                    cblas_dtrsv(
                        CBLAS_LAYOUT::CblasColMajor,
                        CBLAS_UPLO::CblasLower,
                        trans,
                        CBLAS_DIAG::CblasNonUnit,
                        n,
                        l,
                        n,
                        x.as_mut_ptr(),
                        1,
                    );
                }
            }
            x
        }

        pub fn solve_mat(&self, b: ArrayView2<f64>) -> Array2<f64> {
            let mut x = b.as_standard_layout().into_owned();
            if x.is_empty() {
                return x;
            }
            let (n, k) = (to_c_int(x.nrows()), to_c_int(x.ncols()));
            let u = self.l.as_ptr();
            // Row-major reading of the factor's memory is U = Lᵀ (upper): L Y = B is
            // Uᵀ Y = B, then Lᵀ X = Y is U X = Y.
            // SAFETY: U is n × n row-major with leading dimension n; X is n × k row-major
            // with leading dimension k, exclusively borrowed.
            unsafe {
                for trans in [CBLAS_TRANSPOSE::CblasTrans, CBLAS_TRANSPOSE::CblasNoTrans] {
                    cblas_dtrsm(
                        CBLAS_LAYOUT::CblasRowMajor,
                        CBLAS_SIDE::CblasLeft,
                        CBLAS_UPLO::CblasUpper,
                        trans,
                        CBLAS_DIAG::CblasNonUnit,
                        n,
                        k,
                        1.0,
                        u,
                        n,
                        x.as_mut_ptr(),
                        k,
                    );
                }
            }
            x
        }

        pub fn lower(&self) -> Array2<f64> {
            self.l.as_standard_layout().into_owned()
        }
    }

    pub fn sym_eigen(a: ArrayView2<f64>) -> Result<(Vec<f64>, Array2<f64>)> {
        let (values, vectors) = fortran_copy_sym(a)
            .eigh_into(UPLO::Lower)
            .map_err(|e| Error::Numerical(format!("symmetric eigen-decomposition: {e}")))?;
        Ok((values.to_vec(), vectors.as_standard_layout().into_owned()))
    }

    pub fn matmul_into(a: ArrayView2<f64>, b: ArrayView2<f64>, c: &mut Array2<f64>) {
        ndarray::linalg::general_mat_mul(1.0, &a, &b, 0.0, c);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{array, s, ShapeBuilder};
    use rand::rngs::StdRng;
    use rand::{RngExt, SeedableRng};

    fn random_matrix(rng: &mut StdRng, r: usize, c: usize) -> Array2<f64> {
        Array2::from_shape_fn((r, c), |_| rng.random::<f64>() * 2.0 - 1.0)
    }

    /// A random SPD matrix G Gᵀ/n + I/2 (well conditioned), exactly symmetric.
    fn random_spd(seed: u64, n: usize) -> Array2<f64> {
        let mut rng = StdRng::seed_from_u64(seed);
        let g = random_matrix(&mut rng, n, n);
        let mut a = naive_matmul(&g, &g.t().to_owned()) / n as f64;
        for i in 0..n {
            a[[i, i]] += 0.5;
        }
        for i in 0..n {
            for j in 0..i {
                a[[i, j]] = a[[j, i]];
            }
        }
        a
    }

    fn naive_matmul(a: &Array2<f64>, b: &Array2<f64>) -> Array2<f64> {
        let (m, k, n) = (a.nrows(), a.ncols(), b.ncols());
        let mut c = Array2::zeros((m, n));
        for i in 0..m {
            for j in 0..n {
                let mut acc = 0.0;
                for l in 0..k {
                    acc += a[[i, l]] * b[[l, j]];
                }
                c[[i, j]] = acc;
            }
        }
        c
    }

    fn max_abs_diff(a: &Array2<f64>, b: &Array2<f64>) -> f64 {
        assert_eq!(a.dim(), b.dim());
        a.iter()
            .zip(b.iter())
            .map(|(x, y)| (x - y).abs())
            .fold(0.0, f64::max)
    }

    fn identity_error(m: &Array2<f64>) -> f64 {
        max_abs_diff(m, &Array2::eye(m.nrows()))
    }

    #[test]
    fn backend_is_named() {
        let expected = if cfg!(feature = "openblas") {
            "openblas"
        } else {
            "faer"
        };
        assert_eq!(backend_name(), expected);
    }

    #[test]
    fn cholesky_2x2_closed_form() {
        // [[4,2],[2,3]] = L Lᵀ with L = [[2,0],[1,√2]]; det = 8.
        let a = array![[4.0, 2.0], [2.0, 3.0]];
        let c = cholesky(a.view()).expect("SPD");
        assert_eq!(c.dim(), 2);
        let l = c.lower();
        assert!(l.is_standard_layout());
        let expected = array![[2.0, 0.0], [1.0, 2f64.sqrt()]];
        assert!(max_abs_diff(&l, &expected) < 1e-15, "{l}");
        assert!((c.log_det() - 8f64.ln()).abs() < 1e-14);
        // A⁻¹ = [[3,-2],[-2,4]]/8.
        let inv = c.inverse();
        let expected_inv = array![[3.0, -2.0], [-2.0, 4.0]] / 8.0;
        assert!(max_abs_diff(&inv, &expected_inv) < 1e-15, "{inv}");
        // A x = [2, 1]: x = [[3,-2],[-2,4]]·[2,1]/8 = [4, 0]/8.
        let x = c.solve(&[2.0, 1.0]).unwrap();
        assert!((x[0] - 0.5).abs() < 1e-15 && x[1].abs() < 1e-15, "{x:?}");
    }

    #[test]
    fn cholesky_3x3_closed_form() {
        // L = [[2,0,0],[1,3,0],[-1,2,1]] gives A = L Lᵀ below; det A = (2·3·1)² = 36.
        let l_true = array![[2.0, 0.0, 0.0], [1.0, 3.0, 0.0], [-1.0, 2.0, 1.0]];
        let a = array![[4.0, 2.0, -2.0], [2.0, 10.0, 5.0], [-2.0, 5.0, 6.0]];
        assert!(max_abs_diff(&naive_matmul(&l_true, &l_true.t().to_owned()), &a) == 0.0);
        let c = cholesky(a.view()).expect("SPD");
        assert!(max_abs_diff(&c.lower(), &l_true) < 1e-15);
        assert!((c.log_det() - 36f64.ln()).abs() < 1e-14);
        // Column-major input gives the same factor.
        let mut af = Array2::zeros((3, 3).f());
        af.assign(&a);
        let cf = cholesky(af.view()).expect("SPD");
        assert!(max_abs_diff(&cf.lower(), &l_true) < 1e-15);
        // A strided (non-contiguous) view gives it too.
        let mut big = Array2::zeros((6, 6));
        big.slice_mut(s![..;2, ..;2]).assign(&a);
        let cs = cholesky(big.slice(s![..;2, ..;2])).expect("SPD");
        assert!(max_abs_diff(&cs.lower(), &l_true) < 1e-15);
        // Negative strides: the reversed matrix P A P is symmetric too; check L Lᵀ = P A P.
        let rev = a.slice(s![..;-1, ..;-1]);
        let l = cholesky(rev).expect("SPD").lower();
        let llt = naive_matmul(&l, &l.t().to_owned());
        assert!(max_abs_diff(&llt, &rev.to_owned()) < 1e-14);
    }

    #[test]
    fn inverse_times_a_is_identity_50() {
        let a = random_spd(7, 50);
        let c = cholesky(a.view()).expect("SPD");
        let inv = c.inverse();
        assert!(inv.is_standard_layout());
        for i in 0..50 {
            for j in 0..50 {
                assert_eq!(
                    inv[[i, j]],
                    inv[[j, i]],
                    "inverse must be exactly symmetric"
                );
            }
        }
        let err = identity_error(&naive_matmul(&inv, &a));
        assert!(err < 1e-12, "|A⁻¹A − I|∞ = {err}");
        let err = identity_error(&matmul(a.view(), inv.view()).unwrap());
        assert!(err < 1e-12, "|A A⁻¹ − I|∞ = {err}");
    }

    #[test]
    fn solves_agree_with_the_inverse() {
        let n = 40;
        let a = random_spd(11, n);
        let c = cholesky(a.view()).expect("SPD");
        let mut rng = StdRng::seed_from_u64(12);
        let b = random_matrix(&mut rng, n, 5);
        let x = c.solve_mat(b.view()).unwrap();
        assert!(x.is_standard_layout());
        assert!(max_abs_diff(&naive_matmul(&a, &x), &b) < 1e-12);
        // Column-major right-hand side.
        let mut bf = Array2::zeros((n, 5).f());
        bf.assign(&b);
        assert!(max_abs_diff(&c.solve_mat(bf.view()).unwrap(), &x) < 1e-14);
        // Vector solve, column by column.
        for j in 0..5 {
            let xj = c.solve(&b.column(j).to_vec()).unwrap();
            for i in 0..n {
                assert!((xj[i] - x[[i, j]]).abs() < 1e-12);
            }
        }
        // L Lᵀ reconstructs A, and log det matches the eigenvalues.
        let l = c.lower();
        assert!(max_abs_diff(&naive_matmul(&l, &l.t().to_owned()), &a) < 1e-13);
        let (vals, _) = sym_eigen(a.view()).unwrap();
        let ld: f64 = vals.iter().map(|v| v.ln()).sum();
        assert!((ld - c.log_det()).abs() < 1e-11);
    }

    #[test]
    fn not_positive_definite_is_none() {
        assert!(cholesky(array![[1.0, 2.0], [2.0, 1.0]].view()).is_none());
        assert!(cholesky(array![[0.0, 0.0], [0.0, 1.0]].view()).is_none());
        assert!(cholesky(array![[-1.0]].view()).is_none());
        // Singular PSD: rank one.
        assert!(cholesky(array![[1.0, 1.0], [1.0, 1.0]].view()).is_none());
        // Indefinite with a late negative pivot.
        let mut a = random_spd(3, 30);
        a[[29, 29]] = -1.0;
        assert!(cholesky(a.view()).is_none());
        // Not square.
        assert!(cholesky(Array2::<f64>::zeros((2, 3)).view()).is_none());
    }

    #[test]
    fn non_finite_is_none() {
        assert!(cholesky(array![[f64::NAN, 0.0], [0.0, 1.0]].view()).is_none());
        assert!(cholesky(array![[1.0, f64::NAN], [f64::NAN, 1.0]].view()).is_none());
        assert!(cholesky(array![[f64::INFINITY, 0.0], [0.0, 1.0]].view()).is_none());
        assert!(cholesky(array![[1.0, f64::INFINITY], [f64::INFINITY, 1.0]].view()).is_none());
        let mut a = random_spd(5, 20);
        a[[13, 4]] = f64::NAN;
        a[[4, 13]] = f64::NAN;
        assert!(cholesky(a.view()).is_none());
    }

    #[test]
    fn empty_matrix() {
        let c = cholesky(Array2::<f64>::zeros((0, 0)).view()).expect("empty is PD");
        assert_eq!(c.dim(), 0);
        assert_eq!(c.log_det(), 0.0);
        assert_eq!(c.inverse().dim(), (0, 0));
        assert!(c.solve(&[]).unwrap().is_empty());
        assert_eq!(
            c.solve_mat(Array2::zeros((0, 3)).view()).unwrap().dim(),
            (0, 3)
        );
        let (v, u) = sym_eigen(Array2::<f64>::zeros((0, 0)).view()).unwrap();
        assert!(v.is_empty() && u.dim() == (0, 0));
        let m = matmul(Array2::zeros((3, 0)).view(), Array2::zeros((0, 2)).view()).unwrap();
        assert_eq!(m, Array2::<f64>::zeros((3, 2)));
    }

    /// Mismatched shapes and non-finite entries are typed errors, not panics.
    #[test]
    fn mismatched_shapes_are_errors() {
        let c = cholesky(array![[4.0, 2.0], [2.0, 3.0]].view()).unwrap();
        let shape = |r: Result<_>| matches!(r, Err(Error::ShapeMismatch { .. }));
        assert!(shape(c.solve(&[1.0]).map(|_| ())));
        assert!(shape(c.solve(&[1.0, 2.0, 3.0]).map(|_| ())));
        assert!(shape(c.solve_mat(Array2::zeros((3, 2)).view()).map(|_| ())));
        assert!(shape(
            matmul(Array2::zeros((2, 3)).view(), Array2::zeros((2, 3)).view()).map(|_| ())
        ));
        assert!(shape(sym_eigen(Array2::zeros((2, 3)).view()).map(|_| ())));
        // A NaN in either triangle, whatever the layout, is refused.
        for (i, j) in [(0, 1), (1, 0)] {
            let mut a = array![[2.0, 0.5], [0.5, 1.0]];
            a[[i, j]] = f64::NAN;
            assert!(matches!(sym_eigen(a.view()), Err(Error::NonFinite { .. })));
            assert!(matches!(sym_eigen(a.t()), Err(Error::NonFinite { .. })));
        }
    }

    #[test]
    fn eigen_reconstructs() {
        // Closed form: [[2,1],[1,2]] has eigenvalues 1 and 3.
        let (vals, vecs) = sym_eigen(array![[2.0, 1.0], [1.0, 2.0]].view()).unwrap();
        assert!((vals[0] - 1.0).abs() < 1e-14 && (vals[1] - 3.0).abs() < 1e-14);
        let r = std::f64::consts::FRAC_1_SQRT_2;
        assert!(
            (vecs[[0, 1]].abs() - r).abs() < 1e-14 && (vecs[[1, 1]] - vecs[[0, 1]]).abs() < 1e-14
        );

        let n = 40;
        let mut rng = StdRng::seed_from_u64(21);
        let g = random_matrix(&mut rng, n, n);
        let a = (&g + &g.t()) / 2.0; // symmetric, indefinite
        let (vals, v) = sym_eigen(a.view()).unwrap();
        assert!(v.is_standard_layout());
        assert!(vals.windows(2).all(|w| w[0] <= w[1]), "ascending");
        // V diag(λ) Vᵀ = A and Vᵀ V = I.
        let mut vd = v.clone();
        for (j, lam) in vals.iter().enumerate() {
            vd.column_mut(j).mapv_inplace(|x| x * lam);
        }
        let vt = v.t().to_owned();
        assert!(max_abs_diff(&naive_matmul(&vd, &vt), &a) < 1e-12);
        assert!(identity_error(&naive_matmul(&vt, &v)) < 1e-12);
        // A v_j = λ_j v_j.
        let av = naive_matmul(&a, &v);
        assert!(max_abs_diff(&av, &vd) < 1e-12);
    }

    #[test]
    fn eigen_rejects_bad_input() {
        assert!(matches!(
            sym_eigen(Array2::<f64>::zeros((2, 3)).view()),
            Err(Error::ShapeMismatch { .. })
        ));
        assert!(matches!(
            sym_eigen(array![[1.0, f64::NAN], [f64::NAN, 1.0]].view()),
            Err(Error::NonFinite { .. })
        ));
    }

    #[test]
    fn matmul_matches_naive_loops() {
        let mut rng = StdRng::seed_from_u64(31);
        let a = random_matrix(&mut rng, 37, 23);
        let b = random_matrix(&mut rng, 23, 41);
        let expected = naive_matmul(&a, &b);
        let c = matmul(a.view(), b.view()).unwrap();
        assert!(c.is_standard_layout());
        assert!(max_abs_diff(&c, &expected) < 1e-13);
        // Column-major and transposed inputs.
        let mut af = Array2::zeros((37, 23).f());
        af.assign(&a);
        let bt = b.t().to_owned();
        let c2 = matmul(af.view(), bt.t()).unwrap();
        assert!(c2.is_standard_layout());
        assert!(max_abs_diff(&c2, &expected) < 1e-13);
        // Strided views.
        let big = random_matrix(&mut rng, 74, 46);
        let sa = big.slice(s![..;2, ..;2]);
        let c3 = matmul(sa, b.view()).unwrap();
        assert!(max_abs_diff(&c3, &naive_matmul(&sa.to_owned(), &b)) < 1e-13);
        // Vector-shaped products.
        let x = random_matrix(&mut rng, 23, 1);
        assert!(max_abs_diff(&matmul(a.view(), x.view()).unwrap(), &naive_matmul(&a, &x)) < 1e-13);
    }

    #[test]
    #[should_panic(expected = "inner dimensions")]
    fn matmul_shape_mismatch_panics() {
        let _ = matmul(Array2::zeros((2, 3)).view(), Array2::zeros((2, 3)).view()).unwrap();
    }
}
