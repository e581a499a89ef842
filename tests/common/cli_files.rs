//! Helpers of the command-line tests (tests/cli.rs, tests/cli_path.rs): temporary input
//! files, headerless CSV text and running the built `ellone` binary. Included with
//! `#[path]` by those files only, since `CARGO_BIN_EXE_ellone` exists only with the `cli`
//! feature.
#![allow(dead_code)]

use ndarray::Array2;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::atomic::{AtomicUsize, Ordering};

/// A temporary file that is removed when dropped.
pub struct TempFile(PathBuf);

impl TempFile {
    /// A fresh, unique path in the system's temporary directory ending in `suffix`.
    pub fn new(suffix: &str) -> Self {
        static COUNTER: AtomicUsize = AtomicUsize::new(0);
        let k = COUNTER.fetch_add(1, Ordering::Relaxed);
        let name = format!("ellone-cli-test-{}-{k}-{suffix}", std::process::id());
        Self(std::env::temp_dir().join(name))
    }

    /// A temporary file holding `text`.
    pub fn with_text(suffix: &str, text: &str) -> Self {
        let f = Self::new(suffix);
        std::fs::write(&f.0, text).expect("write temporary file");
        f
    }

    /// The file's path.
    pub fn path(&self) -> &Path {
        &self.0
    }

    /// The file's path as a command-line argument.
    pub fn arg(&self) -> &str {
        self.0.to_str().expect("temporary paths are UTF-8 here")
    }
}

impl Drop for TempFile {
    fn drop(&mut self) {
        let _ = std::fs::remove_file(&self.0);
    }
}

/// Headerless CSV text of a matrix; Rust's `{}` for f64 is the shortest round-trip decimal.
pub fn csv_text(a: &Array2<f64>) -> String {
    let mut out = String::new();
    for row in a.rows() {
        let fields: Vec<String> = row.iter().map(|v| format!("{v}")).collect();
        out.push_str(&fields.join(","));
        out.push('\n');
    }
    out
}

/// Runs the built `ellone` binary with `args`.
pub fn ellone(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ellone"))
        .args(args)
        .output()
        .expect("the ellone binary runs")
}

/// The standard error of a run, as text.
pub fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}
