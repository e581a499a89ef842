//! The crate's one error type.
//!
//! Every public function returns [`Result`]; bad input is reported as a typed [`Error`]
//! variant, never as a panic. Non-convergence is *not* an error: it is a
//! [`Status`](crate::solver::Status) on the returned solution, which always carries the best
//! iterate found.

use thiserror::Error as ThisError;

/// Everything that can go wrong when calling into `ellone`.
#[derive(Debug, Clone, PartialEq, ThisError)]
#[non_exhaustive]
pub enum Error {
    /// An input contained NaN or ±Inf.
    #[error("{what} contains a non-finite value (NaN or Inf) at {location}")]
    NonFinite {
        /// Which input (e.g. "x", "y", "covariance").
        what: String,
        /// Where in that input, e.g. "row 3, column 7".
        location: String,
    },
    /// Two inputs whose sizes must agree do not.
    #[error("shape mismatch in {what}: expected {expected}, found {found}")]
    ShapeMismatch {
        /// Which inputs.
        what: String,
        /// The expected size.
        expected: String,
        /// The size found.
        found: String,
    },
    /// An input has no rows, no columns or no entries.
    #[error("{0} is empty")]
    Empty(String),
    /// A regularisation parameter is negative or not finite.
    #[error("invalid regularisation parameter {name} = {value}: it must be finite and >= 0")]
    InvalidLambda {
        /// Parameter name ("lambda", "lambda_theta", "l2", a weight, ...).
        name: String,
        /// The value given.
        value: f64,
    },
    /// A binary label is not 0 or 1.
    #[error("label at row {row} is {value}; labels must be 0 or 1")]
    InvalidLabel {
        /// Zero-based row.
        row: usize,
        /// The value found.
        value: f64,
    },
    /// A column of the design matrix is identically zero, so its coefficient is not identified.
    #[error("column {0} of the design matrix is all zeros")]
    ZeroColumn(usize),
    /// A matrix that must be symmetric is not.
    #[error("{what} is not symmetric: entry ({row}, {col}) differs from its transpose by {diff}")]
    NotSymmetric {
        /// Which matrix.
        what: String,
        /// Row of the offending entry.
        row: usize,
        /// Column of the offending entry.
        col: usize,
        /// Absolute difference.
        diff: f64,
    },
    /// A matrix that must be positive (semi)definite is not, or a diagonal entry is not
    /// positive.
    #[error("{0} is not positive definite")]
    NotPositiveDefinite(String),
    /// The problem has no finite minimiser (for example λ = 0 with a singular covariance).
    #[error("the problem is unbounded below: {0}")]
    Unbounded(String),
    /// An option or argument is out of its allowed range.
    #[error("invalid argument: {0}")]
    InvalidArgument(String),
    /// A file could not be parsed; names the file, the one-based line and column.
    #[error("{file}:{line}:{column}: {message}")]
    Parse {
        /// The file (or "<input>").
        file: String,
        /// One-based line number.
        line: usize,
        /// One-based column (field) number.
        column: usize,
        /// What is wrong.
        message: String,
    },
    /// An operating-system I/O failure.
    #[error("I/O error on {file}: {message}")]
    Io {
        /// The file.
        file: String,
        /// The system's message.
        message: String,
    },
    /// A numerical failure that the input did not cause directly (should be rare).
    #[error("numerical failure: {0}")]
    Numerical(String),
}

/// Shorthand for `std::result::Result<T, ellone::Error>`.
pub type Result<T> = std::result::Result<T, Error>;

/// Checks that every value of `values` is finite; `what` names the input in the error and
/// `locate` maps a flat index to a human-readable location.
pub(crate) fn check_finite<'a, I, F>(what: &str, values: I, locate: F) -> Result<()>
where
    I: IntoIterator<Item = &'a f64>,
    F: Fn(usize) -> String,
{
    for (i, v) in values.into_iter().enumerate() {
        if !v.is_finite() {
            return Err(Error::NonFinite {
                what: what.to_string(),
                location: locate(i),
            });
        }
    }
    Ok(())
}

/// Checks a row subset of n rows: non-empty, every index below n.
///
/// # Errors
/// [`Error::Empty`] for no rows, [`Error::InvalidArgument`] for an index ≥ n.
pub(crate) fn check_rows(rows: &[usize], n: usize) -> Result<()> {
    if rows.is_empty() {
        return Err(Error::Empty("row subset".into()));
    }
    match rows.iter().find(|&&i| i >= n) {
        Some(&i) => Err(Error::InvalidArgument(format!(
            "row index {i} is out of range 0..{n}"
        ))),
        None => Ok(()),
    }
}

/// A vector of `len` default values (zeros), or an error instead of an abort when `len`
/// values cannot be allocated (a length from a hand-built or deserialised value).
///
/// # Errors
/// [`Error::InvalidArgument`] naming `what` when the allocation fails.
pub(crate) fn filled<T: Clone + Default>(len: usize, what: &str) -> Result<Vec<T>> {
    let mut v = Vec::new();
    v.try_reserve_exact(len).map_err(|_| {
        Error::InvalidArgument(format!("{what} of length {len} cannot be allocated"))
    })?;
    v.resize(len, T::default());
    Ok(v)
}

/// Checks that `rows × cols` doubles can be allocated: the count does not overflow and the
/// allocator grants it (the memory is reserved and released at once). A size read from a
/// file header, or a p × p matrix derived from a few rows of data, then becomes a typed
/// error instead of an abort.
///
/// # Errors
/// [`Error::InvalidArgument`] naming `what` and the size.
pub(crate) fn check_allocation(rows: usize, cols: usize, what: &str) -> Result<()> {
    let granted = rows
        .checked_mul(cols)
        .is_some_and(|count| Vec::<f64>::new().try_reserve_exact(count).is_ok());
    if granted {
        Ok(())
    } else {
        Err(Error::InvalidArgument(format!(
            "{what} ({rows} × {cols} values) is too large to allocate"
        )))
    }
}

/// Checks that a regularisation parameter is finite and non-negative.
pub(crate) fn check_lambda(name: &str, value: f64) -> Result<()> {
    check_lambda_named(|| name.to_string(), value)
}

/// [`check_lambda`] for a name built from an index: `name` runs only when the check fails,
/// so per-coordinate checks in loops over millions of coordinates format nothing.
pub(crate) fn check_lambda_named(name: impl FnOnce() -> String, value: f64) -> Result<()> {
    if value.is_finite() && value >= 0.0 {
        Ok(())
    } else {
        Err(Error::InvalidLambda {
            name: name(),
            value,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Sizes whose element count overflows `usize`, or whose bytes exceed any 64-bit
    /// address space in use (2⁵⁰ doubles = 8 PiB, beyond the 128 TiB or 64 PiB of
    /// virtual memory of current processors), are refused without an abort; small ones pass.
    #[test]
    fn impossible_allocations_are_errors() {
        assert!(check_allocation(10, 10, "m").is_ok());
        assert!(check_allocation(0, usize::MAX, "m").is_ok());
        for (r, c) in [(usize::MAX, 2), (1 << 40, 1 << 10), (1 << 32, 1 << 32)] {
            match check_allocation(r, c, "m") {
                Err(Error::InvalidArgument(m)) => assert!(m.contains("too large"), "{m}"),
                other => panic!("{r} × {c}: {other:?}"),
            }
        }
        assert!(filled::<f64>(usize::MAX, "v").is_err());
    }
}
