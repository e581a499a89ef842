//! Helpers shared by the integration tests: reading the reference CSV files in tests/data.
#![allow(dead_code)]

use ndarray::Array2;
use std::path::PathBuf;

/// Path of a file in tests/data.
pub fn data_path(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join("data")
        .join(name)
}

/// A CSV table with a header row: (column names, rows of raw string fields).
pub fn read_table(name: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let text = std::fs::read_to_string(data_path(name)).expect("reference file");
    let mut lines = text.lines().filter(|l| !l.trim().is_empty());
    let header = lines
        .next()
        .expect("header")
        .split(',')
        .map(|s| s.trim().to_string())
        .collect();
    let rows = lines
        .map(|l| l.split(',').map(|s| s.trim().to_string()).collect())
        .collect();
    (header, rows)
}

/// A numeric CSV table with a header row, as a matrix.
pub fn read_numeric_table(name: &str) -> (Vec<String>, Array2<f64>) {
    let (header, rows) = read_table(name);
    let p = header.len();
    let n = rows.len();
    let mut a = Array2::zeros((n, p));
    for (i, row) in rows.iter().enumerate() {
        for (j, v) in row.iter().enumerate() {
            a[[i, j]] = v.parse().expect("number");
        }
    }
    (header, a)
}

/// A headerless numeric CSV matrix.
pub fn read_matrix(name: &str) -> Array2<f64> {
    let text = std::fs::read_to_string(data_path(name)).expect("reference file");
    let rows: Vec<Vec<f64>> = text
        .lines()
        .filter(|l| !l.trim().is_empty())
        .map(|l| l.split(',').map(|s| s.trim().parse().unwrap()).collect())
        .collect();
    let (n, p) = (rows.len(), rows[0].len());
    Array2::from_shape_fn((n, p), |(i, j)| rows[i][j])
}

/// Number of agreeing significant digits between a computed and a reference value.
pub fn significant_digits(computed: f64, reference: f64) -> f64 {
    if computed == reference {
        return 16.0;
    }
    -((computed - reference).abs() / reference.abs()).log10()
}
