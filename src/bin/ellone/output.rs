//! Writing results: JSON (serde_json, shortest round-trip decimals) to stdout or to a file.
//! Non-finite numbers are refused before anything is written, so the output never holds NaN
//! or Inf (which JSON cannot represent).

use crate::{CliError, CliResult};
use serde::Serialize;
use std::io::Write;
use std::path::Path;

/// Fails with a message naming `what` if `v` is NaN or ±Inf.
pub fn finite(what: &str, v: f64) -> CliResult<f64> {
    if v.is_finite() {
        // Normalise −0 to 0 so an exact zero always prints as 0.
        Ok(if v == 0.0 { 0.0 } else { v })
    } else {
        Err(CliError::new(format!(
            "the solver produced a non-finite {what} ({v}); no output written"
        )))
    }
}

/// [`finite`] for every entry of a slice.
pub fn finite_vec(what: &str, v: &[f64]) -> CliResult<Vec<f64>> {
    v.iter()
        .enumerate()
        .map(|(i, &x)| finite(&format!("{what}[{i}]"), x))
        .collect()
}

/// Fails early (before a long solve) if `path` cannot be written: its directory must exist
/// and the path must not be a directory.
pub fn check_writable(path: &Path) -> CliResult<()> {
    let dir = path.parent().filter(|d| !d.as_os_str().is_empty());
    if dir.is_some_and(|d| !d.is_dir()) || path.is_dir() {
        return Err(CliError::new(format!(
            "cannot write --out {}: no such directory, or it is a directory",
            path.display()
        )));
    }
    Ok(())
}

/// Serialises `value` as pretty JSON followed by a newline, to `out` or to stdout.
pub fn write_json<T: Serialize>(value: &T, out: Option<&Path>) -> CliResult<()> {
    let mut text = serde_json::to_string_pretty(value)
        .map_err(|e| CliError::new(format!("cannot serialise the result: {e}")))?;
    text.push('\n');
    match out {
        Some(path) => std::fs::write(path, text)
            .map_err(|e| CliError::new(format!("cannot write {}: {e}", path.display()))),
        None => {
            let mut stdout = std::io::stdout().lock();
            stdout
                .write_all(text.as_bytes())
                .and_then(|()| stdout.flush())
                .map_err(|e| CliError::new(format!("cannot write to stdout: {e}")))
        }
    }
}
