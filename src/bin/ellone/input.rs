//! Reading the tool's inputs: design matrices (dense CSV or Matrix Market, by extension),
//! response vectors and penalty weights. Parse errors come from [`ellone::io`] and already
//! name the file, line and column; errors found after parsing (shapes, labels, zero columns)
//! are prefixed here with the option and file they concern.

use crate::{CliError, CliResult};
use ellone::io::{self, MatrixInput};
use ellone::precision::{check_semidefinite, sample_covariance};
use ellone::{Design, Error};
use std::path::Path;

/// `--NAME FILE` for error messages.
pub fn option_file(option: &str, path: &Path) -> String {
    format!("--{option} {}", path.display())
}

/// Reads a design matrix: `.mtx` is Matrix Market (kept sparse), anything else dense CSV.
pub fn design(option: &str, path: &Path) -> CliResult<Design> {
    let matrix = io::read_matrix(path)?;
    let design = match matrix {
        MatrixInput::Dense(a) => Design::dense(a.view()),
        MatrixInput::Sparse(m) => Design::sparse(m),
    };
    design.map_err(|e| {
        let e = match e {
            // The library counts columns from 0; files are read by people counting from 1.
            Error::ZeroColumn(j) => CliError::new(format!(
                "column {} is all zeros, so its coefficient is not identified; drop it",
                j + 1
            )),
            other => CliError::from(other),
        };
        e.context(option_file(option, path))
    })
}

/// Reads a dense matrix (CSV; Matrix Market is densified) for inputs that are not designs,
/// such as a covariance matrix.
pub fn dense_matrix(path: &Path) -> CliResult<ndarray::Array2<f64>> {
    io::read_matrix(path)?
        .into_dense()
        .map_err(|e| CliError::from(e).context(path.display().to_string()))
}

/// Reads a vector, one value per line, and checks its length against `expected` (what the
/// length must match, e.g. "the number of rows of --x").
pub fn vector(option: &str, path: &Path, expected: Option<(usize, &str)>) -> CliResult<Vec<f64>> {
    let v = io::read_vector(path)?;
    if let Some((len, what)) = expected {
        if v.len() != len {
            return Err(
                CliError::new(format!("{} values, but {what} is {len}", v.len()))
                    .context(option_file(option, path)),
            );
        }
    }
    Ok(v)
}

/// Checks binary labels, naming the offending line of the file.
pub fn check_labels(option: &str, path: &Path, y: &[f64]) -> CliResult<()> {
    match y.iter().position(|&v| v != 0.0 && v != 1.0) {
        Some(i) => Err(CliError::new(format!(
            "line {}: label {} is not 0 or 1 (logistic regression needs 0/1 labels)",
            i + 1,
            y[i]
        ))
        .context(option_file(option, path))),
        None => Ok(()),
    }
}

/// The covariance S of `--loss precision`: `--cov FILE` as given (it must be positive
/// semidefinite), or S = X̃ᵀX̃/n from `--x FILE` (X̃ centred only with `center`). Exactly one
/// of the two must be set. Returns S and the `--option FILE` label for later errors.
pub fn covariance(
    cov: Option<&Path>,
    x: Option<&Path>,
    center: bool,
) -> CliResult<(ndarray::Array2<f64>, String)> {
    let (option, path) = match (cov, x) {
        (Some(c), None) => ("cov", c),
        (None, Some(x)) => ("x", x),
        _ => {
            return Err(CliError::new(
                "--loss precision needs exactly one of --cov FILE or --x FILE",
            ))
        }
    };
    let label = option_file(option, path);
    let matrix = dense_matrix(path)?;
    let s = if cov.is_some() {
        check_semidefinite(matrix.view()).map(|()| matrix)
    } else {
        sample_covariance(matrix.view(), center)
    };
    Ok((
        s.map_err(|e| CliError::from(e).context(label.clone()))?,
        label,
    ))
}
