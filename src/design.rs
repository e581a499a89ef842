//! The design matrix X (n rows × p columns), dense or sparse, behind one type.
//!
//! Coordinate descent touches X one column at a time, so both storages are column-major:
//! dense data is copied once into a contiguous column-major buffer (whatever layout the
//! caller's array had), sparse data is kept in compressed sparse column (CSC) form and is
//! never densified. Every kernel below costs O(n) for a dense column and O(nnz_j) for a
//! sparse one.
//!
//! The constructors and [`Design::select_rows`] validate their input and return typed
//! errors. The column kernels (`col_dot`, `col_axpy`, `matvec`, `tmatvec`, …) are inner-loop
//! building blocks for losses and do not re-check their arguments: they expect a column
//! index below p and vectors of length n (rows) or p (coefficients), and out-of-range
//! arguments are a caller bug that may panic, like indexing a slice out of range.

use crate::error::{Error, Result};
use ndarray::{ArrayView2, ShapeBuilder};
use rayon::prelude::*;
use sprs::CsMat;

#[derive(Debug, Clone, PartialEq)]
enum Storage {
    /// Column-major values, column j at `data[j*n .. (j+1)*n]`.
    Dense(Vec<f64>),
    /// Compressed sparse columns.
    Sparse(Csc),
}

/// Compressed sparse columns in plain vectors: column j's row indices (increasing) and
/// values are `rows[start[j]..start[j + 1]]` and `values[start[j]..start[j + 1]]`.
///
/// The design keeps its own copy of the arrays of the caller's `CsMat` rather than the
/// `CsMat` itself: with the `CsMat` inside `Storage`, code built at opt-level 1 and 2
/// (the crate's test profile) hoisted the sparse matrix's storage-kind lookup out of
/// `match` arms into the dense path, where it read an uninitialised byte and used it as a
/// table index (found by a panic-probe run: SIGSEGV in `matvec` on a dense design;
/// valgrind reports the uninitialised read on a 4 × 1 dense design). Plain vectors avoid
/// that lookup, and column access needs no offset or storage-kind check.
#[derive(Debug, Clone, PartialEq)]
struct Csc {
    start: Vec<usize>,
    rows: Vec<usize>,
    values: Vec<f64>,
}

impl Csc {
    /// From a matrix already in CSC form.
    fn from_csc(x: CsMat<f64>) -> Self {
        debug_assert!(x.is_csc());
        let (start, rows, values) = x.into_raw_storage();
        // An owned matrix's pointers normally start at 0; shift them if they do not.
        let base = start.first().copied().unwrap_or(0);
        let (start, rows, values) = if base == 0 {
            (start, rows, values)
        } else {
            let end = *start.last().unwrap_or(&base);
            (
                start.iter().map(|s| s - base).collect(),
                rows[base..end].to_vec(),
                values[base..end].to_vec(),
            )
        };
        Self {
            start,
            rows,
            values,
        }
    }

    /// Row indices and values of column j (empty for j out of range).
    #[inline]
    fn col(&self, j: usize) -> (&[usize], &[f64]) {
        match (self.start.get(j), self.start.get(j + 1)) {
            (Some(&a), Some(&b)) => (&self.rows[a..b], &self.values[a..b]),
            _ => (&[], &[]),
        }
    }

    fn nnz(&self) -> usize {
        self.values.len()
    }
}

/// A validated design matrix with fast column access.
#[derive(Debug, Clone, PartialEq)]
pub struct Design {
    n: usize,
    p: usize,
    storage: Storage,
}

impl Design {
    /// Copies a dense array of any memory layout into column-major storage.
    ///
    /// # Errors
    /// [`Error::Empty`] for zero rows or columns, [`Error::NonFinite`] for NaN/Inf,
    /// [`Error::ZeroColumn`] for a column of zeros, [`Error::InvalidArgument`] for a column
    /// whose squares all underflow (entries below about 10⁻¹⁶²).
    pub fn dense(x: ArrayView2<f64>) -> Result<Self> {
        let d = Self::dense_unchecked_zero(x)?;
        d.check_no_zero_column()?;
        Ok(d)
    }

    /// Like [`Design::dense`] but accepts all-zero columns (their coefficients stay 0).
    /// Used for row subsets (cross-validation folds), where a rare feature may vanish.
    ///
    /// # Errors
    /// [`Error::Empty`], [`Error::NonFinite`].
    pub fn dense_unchecked_zero(x: ArrayView2<f64>) -> Result<Self> {
        let (n, p) = x.dim();
        if n == 0 || p == 0 {
            return Err(Error::Empty(format!("design matrix ({n}×{p})")));
        }
        let mut data = Vec::with_capacity(n * p);
        for j in 0..p {
            for i in 0..n {
                let v = x[[i, j]];
                if !v.is_finite() {
                    return Err(Error::NonFinite {
                        what: "design matrix".into(),
                        location: format!("row {i}, column {j}"),
                    });
                }
                data.push(v);
            }
        }
        Ok(Self {
            n,
            p,
            storage: Storage::Dense(data),
        })
    }

    /// Takes a sparse matrix (converted to CSC if given CSR; never densified).
    ///
    /// # Errors
    /// [`Error::Empty`], [`Error::NonFinite`], [`Error::ZeroColumn`] (a column with no
    /// non-zero value), [`Error::InvalidArgument`] (a column whose squares all underflow).
    pub fn sparse(x: CsMat<f64>) -> Result<Self> {
        let d = Self::sparse_unchecked_zero(x)?;
        d.check_no_zero_column()?;
        Ok(d)
    }

    /// Like [`Design::sparse`] but accepts all-zero columns.
    ///
    /// # Errors
    /// [`Error::Empty`], [`Error::NonFinite`].
    pub fn sparse_unchecked_zero(x: CsMat<f64>) -> Result<Self> {
        let (n, p) = x.shape();
        if n == 0 || p == 0 {
            return Err(Error::Empty(format!("design matrix ({n}×{p})")));
        }
        let x = if x.is_csc() { x } else { x.to_csc() };
        for (j, col) in x.outer_iterator().enumerate() {
            for (i, &v) in col.iter() {
                if !v.is_finite() {
                    return Err(Error::NonFinite {
                        what: "design matrix".into(),
                        location: format!("row {i}, column {j}"),
                    });
                }
            }
        }
        Ok(Self {
            n,
            p,
            storage: Storage::Sparse(Csc::from_csc(x)),
        })
    }

    fn check_no_zero_column(&self) -> Result<()> {
        for j in 0..self.p {
            if self.col_sq_norm(j) == 0.0 {
                let mut largest = 0.0f64;
                self.for_each_in_col(j, |_, v| largest = largest.max(v.abs()));
                if largest > 0.0 {
                    // Non-zero, but every square underflows: no usable curvature.
                    return Err(Error::InvalidArgument(format!(
                        "column {j} of the design matrix is too small to use (largest |x| = \
                         {largest:e}, whose square underflows): rescale it"
                    )));
                }
                return Err(Error::ZeroColumn(j));
            }
        }
        Ok(())
    }

    /// Number of rows n.
    pub fn nrows(&self) -> usize {
        self.n
    }

    /// Number of columns p.
    pub fn ncols(&self) -> usize {
        self.p
    }

    /// True for sparse (CSC) storage.
    pub fn is_sparse(&self) -> bool {
        matches!(self.storage, Storage::Sparse(_))
    }

    /// Number of stored entries (n·p for dense).
    pub fn nnz(&self) -> usize {
        match &self.storage {
            Storage::Dense(d) => d.len(),
            Storage::Sparse(s) => s.nnz(),
        }
    }

    /// Calls `f(i, x_ij)` for every stored entry of column j.
    #[inline]
    pub fn for_each_in_col(&self, j: usize, mut f: impl FnMut(usize, f64)) {
        match &self.storage {
            Storage::Dense(d) => {
                for (i, &v) in d[j * self.n..(j + 1) * self.n].iter().enumerate() {
                    f(i, v);
                }
            }
            Storage::Sparse(s) => {
                let (rows, values) = s.col(j);
                for (&i, &v) in rows.iter().zip(values) {
                    f(i, v);
                }
            }
        }
    }

    /// x_jᵀ v.
    #[inline]
    pub fn col_dot(&self, j: usize, v: &[f64]) -> f64 {
        match &self.storage {
            Storage::Dense(d) => dot(&d[j * self.n..(j + 1) * self.n], v),
            Storage::Sparse(s) => {
                let (rows, values) = s.col(j);
                rows.iter().zip(values).map(|(&i, &x)| x * v[i]).sum()
            }
        }
    }

    /// Σ_i x_ij · w_i · v_i.
    #[inline]
    pub fn col_dot_weighted(&self, j: usize, w: &[f64], v: &[f64]) -> f64 {
        match &self.storage {
            Storage::Dense(d) => d[j * self.n..(j + 1) * self.n]
                .iter()
                .zip(w.iter().zip(v))
                .map(|(&x, (&a, &b))| x * a * b)
                .sum(),
            Storage::Sparse(s) => {
                let (rows, values) = s.col(j);
                rows.iter()
                    .zip(values)
                    .map(|(&i, &x)| x * w[i] * v[i])
                    .sum()
            }
        }
    }

    /// Σ_i w_i x_ij².
    #[inline]
    pub fn col_weighted_sq(&self, j: usize, w: &[f64]) -> f64 {
        let mut s = 0.0;
        self.for_each_in_col(j, |i, x| s += w[i] * x * x);
        s
    }

    /// ‖x_j‖².
    pub fn col_sq_norm(&self, j: usize) -> f64 {
        let mut s = 0.0;
        self.for_each_in_col(j, |_, x| s += x * x);
        s
    }

    /// Σ_i x_ij.
    pub fn col_sum(&self, j: usize) -> f64 {
        let mut s = 0.0;
        self.for_each_in_col(j, |_, x| s += x);
        s
    }

    /// v ← v + a · x_j.
    #[inline]
    pub fn col_axpy(&self, j: usize, a: f64, v: &mut [f64]) {
        match &self.storage {
            Storage::Dense(d) => crate::kernels::axpy(a, &d[j * self.n..(j + 1) * self.n], v),
            Storage::Sparse(s) => {
                let (rows, values) = s.col(j);
                for (&i, &x) in rows.iter().zip(values) {
                    v[i] += a * x;
                }
            }
        }
    }

    /// Column j of a dense design (`None` for sparse storage or j out of range).
    #[inline]
    pub fn dense_column(&self, j: usize) -> Option<&[f64]> {
        match &self.storage {
            Storage::Dense(d) if j < self.p => Some(&d[j * self.n..(j + 1) * self.n]),
            _ => None,
        }
    }

    /// out ← X b, skipping zero coefficients (cost O(n · nnz(b)) dense, O(Σ nnz_j) sparse).
    pub fn matvec(&self, b: &[f64], out: &mut [f64]) {
        out.iter_mut().for_each(|v| *v = 0.0);
        for (j, &bj) in b.iter().enumerate() {
            if bj != 0.0 {
                self.col_axpy(j, bj, out);
            }
        }
    }

    /// out_j ← x_jᵀ v for every column: one pass over the data, columns in parallel.
    pub fn tmatvec(&self, v: &[f64], out: &mut [f64]) {
        out.par_iter_mut()
            .with_min_len(64)
            .enumerate()
            .for_each(|(j, o)| *o = self.col_dot(j, v));
    }

    /// The rows `rows` of X (in that order, repeats allowed) as a new design; all-zero
    /// columns are allowed.
    ///
    /// # Errors
    /// [`Error::Empty`] for no rows, [`Error::InvalidArgument`] for a row index ≥ n.
    pub fn select_rows(&self, rows: &[usize]) -> Result<Design> {
        crate::error::check_rows(rows, self.n)?;
        let m = rows.len();
        match &self.storage {
            Storage::Dense(d) => {
                let mut data = Vec::with_capacity(m * self.p);
                for j in 0..self.p {
                    let col = &d[j * self.n..(j + 1) * self.n];
                    data.extend(rows.iter().map(|&i| col[i]));
                }
                Ok(Design {
                    n: m,
                    p: self.p,
                    storage: Storage::Dense(data),
                })
            }
            Storage::Sparse(s) => {
                // Map old row index → list of new positions (rows may repeat).
                let mut first = vec![usize::MAX; self.n];
                let mut next = vec![usize::MAX; m];
                for (new, &old) in rows.iter().enumerate().rev() {
                    next[new] = first[old];
                    first[old] = new;
                }
                let mut tri = sprs::TriMat::new((m, self.p));
                for j in 0..self.p {
                    let (col_rows, col_values) = s.col(j);
                    for (&i, &v) in col_rows.iter().zip(col_values) {
                        let mut k = first[i];
                        while k != usize::MAX {
                            tri.add_triplet(k, j, v);
                            k = next[k];
                        }
                    }
                }
                Ok(Design {
                    n: m,
                    p: self.p,
                    storage: Storage::Sparse(Csc::from_csc(tri.to_csc())),
                })
            }
        }
    }

    /// A dense copy as an ndarray (column-major). Meant for small matrices: tests, baselines
    /// that need a factorisation, reporting.
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] when n × p values cannot be allocated.
    pub fn to_dense(&self) -> Result<ndarray::Array2<f64>> {
        crate::error::check_allocation(self.n, self.p, "the dense copy of the design")?;
        let mut a = ndarray::Array2::<f64>::zeros((self.n, self.p).f());
        for j in 0..self.p {
            self.for_each_in_col(j, |i, v| a[[i, j]] = v);
        }
        Ok(a)
    }
}

pub(crate) use crate::kernels::dot;

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn dense_and_sparse_kernels_agree() {
        let a = array![
            [1.0, 0.0, 2.0],
            [0.0, 3.0, 0.0],
            [4.0, 0.0, 5.0],
            [0.0, 6.0, 0.0]
        ];
        let dense = Design::dense(a.view()).unwrap();
        let sparse = Design::sparse(CsMat::csr_from_dense(a.view(), 0.0)).unwrap();
        let v = [1.0, -1.0, 0.5, 2.0];
        let w = [1.0, 2.0, 3.0, 4.0];
        for j in 0..3 {
            assert_eq!(dense.col_dot(j, &v), sparse.col_dot(j, &v));
            assert_eq!(dense.col_weighted_sq(j, &w), sparse.col_weighted_sq(j, &w));
            assert_eq!(
                dense.col_dot_weighted(j, &w, &v),
                sparse.col_dot_weighted(j, &w, &v)
            );
        }
        assert_eq!(dense.dense_column(2), Some(&[2.0, 0.0, 5.0, 0.0][..]));
        assert_eq!(dense.dense_column(3), None);
        assert_eq!(sparse.dense_column(0), None);
        let (mut o1, mut o2) = ([0.0; 4], [0.0; 4]);
        dense.matvec(&[1.0, 2.0, 3.0], &mut o1);
        sparse.matvec(&[1.0, 2.0, 3.0], &mut o2);
        assert_eq!(o1, [7.0, 6.0, 19.0, 12.0]);
        assert_eq!(o1, o2);
        let rows = [3, 0, 0];
        assert_eq!(
            dense.select_rows(&rows).unwrap().to_dense().unwrap(),
            sparse.select_rows(&rows).unwrap().to_dense().unwrap()
        );
        for d in [&dense, &sparse] {
            assert!(matches!(d.select_rows(&[]), Err(Error::Empty(_))));
            assert!(matches!(
                d.select_rows(&[0, 4]),
                Err(Error::InvalidArgument(_))
            ));
        }
    }

    #[test]
    fn bad_designs_are_typed_errors() {
        let a = array![[1.0, 0.0], [2.0, 0.0]];
        assert_eq!(Design::dense(a.view()), Err(Error::ZeroColumn(1)));
        let a = array![[1.0, f64::NAN]];
        assert!(matches!(
            Design::dense(a.view()),
            Err(Error::NonFinite { .. })
        ));
        let a = ndarray::Array2::<f64>::zeros((0, 3));
        assert!(matches!(Design::dense(a.view()), Err(Error::Empty(_))));
        // Non-zero but below the square root of the smallest double: named as such, not
        // as a zero column.
        let a = array![[1.0, 1e-320], [2.0, 0.0]];
        match Design::dense(a.view()) {
            Err(Error::InvalidArgument(m)) => assert!(m.contains("underflows"), "{m}"),
            other => panic!("{other:?}"),
        }
    }

    #[test]
    fn any_layout_is_read_correctly() {
        let a = array![[1.0, 2.0], [3.0, 4.0], [5.0, 6.0]];
        let t = a.t().to_owned();
        let d1 = Design::dense(a.view()).unwrap();
        let d2 = Design::dense(t.t()).unwrap();
        assert_eq!(d1, d2);
        assert_eq!(d1.col_dot(1, &[1.0, 1.0, 1.0]), 12.0);
    }
}
