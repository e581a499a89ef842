//! Readers and writers for dense CSV, plain vectors and Matrix Market files.
//!
//! Every reader returns a typed [`Error`] instead of panicking, whatever the input: a
//! malformed file yields [`Error::Parse`] naming the file, the one-based line and the
//! one-based field (column) at fault; a file without data yields [`Error::Empty`]; an
//! operating-system failure yields [`Error::Io`].
//!
//! # Formats
//!
//! * **Dense CSV**: no header, fields separated by commas, every row with the same number of
//!   fields, spaces around fields ignored, `\n` or `\r\n` line endings, blank lines allowed
//!   only at the end. Every field must be a finite number (`NaN` and `inf` are rejected).
//! * **Vector**: one finite number per line (a CSV file with a single column).
//! * **Matrix Market** (coordinate): a header line
//!   `%%MatrixMarket matrix coordinate real general` (words case-insensitive; `integer`
//!   may replace `real` and `symmetric` may replace `general`), then `%` comment lines, a size
//!   line `rows cols entries` and one line `i j value` per entry with one-based indices,
//!   fields separated by whitespace. Duplicate entries are summed. A symmetric file stores
//!   the lower triangle (`i >= j`) and is expanded to both triangles on reading.
//!
//! Writers emit the shortest decimal text that reads back to the identical `f64`, so
//! write → read round-trips exactly.
//!
//! ```
//! use ellone::io::{parse_dense_csv, parse_matrix_market};
//!
//! let x = parse_dense_csv("1, 2\n3, 4\n", "x.csv").unwrap();
//! assert_eq!(x[[1, 0]], 3.0);
//!
//! let text = "%%MatrixMarket matrix coordinate real symmetric\n2 2 2\n1 1 4\n2 1 -1\n";
//! let s = parse_matrix_market(text, "s.mtx").unwrap();
//! assert_eq!(s.get(0, 1), Some(&-1.0));
//! assert_eq!(s.nnz(), 3);
//! ```

use std::fmt::Write as _;
use std::fs;
use std::io::{BufWriter, Write};
use std::path::Path;

use ndarray::{Array2, ArrayView2};
use sprs::{CsMat, TriMat};

use crate::error::{check_finite, Error, Result};

/// Largest number of rows or columns accepted from a Matrix Market size line.
///
/// A compressed matrix stores one offset per column, so an absurd declared size would
/// otherwise turn a tiny file into a huge allocation.
pub const MAX_MATRIX_MARKET_DIM: usize = 100_000_000;

/// At most this many characters of an offending field are quoted in an error message.
const QUOTE_LIMIT: usize = 40;

/// A design matrix as read from disk.
#[derive(Debug, Clone, PartialEq)]
pub enum MatrixInput {
    /// A dense matrix (from CSV).
    Dense(Array2<f64>),
    /// A sparse matrix in compressed sparse column form (from Matrix Market).
    Sparse(CsMat<f64>),
}

impl MatrixInput {
    /// The matrix as a dense array (a sparse one is expanded).
    ///
    /// # Errors
    /// [`Error::InvalidArgument`] when the dense array cannot be allocated (a Matrix Market
    /// header may declare sizes far beyond its entries).
    pub fn into_dense(self) -> Result<Array2<f64>> {
        match self {
            MatrixInput::Dense(a) => Ok(a),
            MatrixInput::Sparse(m) => {
                crate::error::check_allocation(m.rows(), m.cols(), "the dense form of the matrix")?;
                Ok(m.to_dense())
            }
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Shared helpers
// ---------------------------------------------------------------------------------------------

fn parse_error(file: &str, line: usize, column: usize, message: impl Into<String>) -> Error {
    Error::Parse {
        file: file.to_string(),
        line,
        column,
        message: message.into(),
    }
}

fn io_error(path: &Path, err: &std::io::Error) -> Error {
    Error::Io {
        file: path.display().to_string(),
        message: err.to_string(),
    }
}

fn read_text(path: &Path) -> Result<String> {
    fs::read_to_string(path).map_err(|e| io_error(path, &e))
}

/// Quotes a field for an error message, shortened so that fuzzed megabyte tokens do not
/// produce megabyte messages.
fn quote(field: &str) -> String {
    let mut out = String::with_capacity(field.len().min(QUOTE_LIMIT) + 5);
    out.push('\'');
    let mut chars = field.chars();
    for c in chars.by_ref().take(QUOTE_LIMIT) {
        out.push(c);
    }
    if chars.next().is_some() {
        out.push('…');
    }
    out.push('\'');
    out
}

/// Parses one (already trimmed) field as a finite `f64`; the error is the message only.
fn parse_finite(field: &str) -> std::result::Result<f64, String> {
    if field.is_empty() {
        return Err("empty field; expected a number".to_string());
    }
    match field.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(_) => Err(format!("{} is not a finite number", quote(field))),
        Err(_) => Err(format!("{} is not a number", quote(field))),
    }
}

/// The lines of `text` with one-based line numbers; a leading byte-order mark is dropped and
/// `\r\n` endings are accepted.
fn numbered_lines(text: &str) -> impl Iterator<Item = (usize, &str)> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    text.lines().enumerate().map(|(i, l)| (i + 1, l))
}

/// Yields the non-blank lines of `text`, failing on a blank line that is followed by data
/// (blank lines are allowed only at the end of the file).
struct DataLines<'a, I> {
    lines: I,
    file: &'a str,
}

impl<'a, I: Iterator<Item = (usize, &'a str)>> Iterator for DataLines<'a, I> {
    type Item = Result<(usize, &'a str)>;

    fn next(&mut self) -> Option<Self::Item> {
        let mut first_blank = None;
        for (no, line) in self.lines.by_ref() {
            if line.trim().is_empty() {
                first_blank.get_or_insert(no);
                continue;
            }
            return Some(match first_blank {
                Some(blank) => Err(parse_error(
                    self.file,
                    blank,
                    1,
                    "blank line before the end of the data",
                )),
                None => Ok((no, line)),
            });
        }
        None
    }
}

fn data_lines<'a>(
    text: &'a str,
    file: &'a str,
) -> DataLines<'a, impl Iterator<Item = (usize, &'a str)>> {
    DataLines {
        lines: numbered_lines(text),
        file,
    }
}

/// Writes `v` as the shortest text that parses back to exactly `v`: plain decimal for
/// moderate magnitudes, scientific notation for very large or very small ones.
fn push_f64(out: &mut String, v: f64) {
    let a = v.abs();
    // Writing into a String cannot fail.
    let _ = if a == 0.0 || (1e-5..1e16).contains(&a) {
        write!(out, "{v}")
    } else {
        write!(out, "{v:e}")
    };
}

/// Creates `path` and writes `text` into it.
fn write_text(path: &Path, text: &str) -> Result<()> {
    let file = fs::File::create(path).map_err(|e| io_error(path, &e))?;
    let mut w = BufWriter::new(file);
    w.write_all(text.as_bytes())
        .and_then(|()| w.flush())
        .map_err(|e| io_error(path, &e))
}

// ---------------------------------------------------------------------------------------------
// Readers
// ---------------------------------------------------------------------------------------------

/// Reads a design matrix, choosing the format by extension: `.mtx` (any case) is Matrix
/// Market and gives [`MatrixInput::Sparse`]; anything else is dense CSV and gives
/// [`MatrixInput::Dense`].
pub fn read_matrix(path: &Path) -> Result<MatrixInput> {
    let is_mtx = path
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| e.eq_ignore_ascii_case("mtx"));
    if is_mtx {
        read_matrix_market(path).map(MatrixInput::Sparse)
    } else {
        read_dense_csv(path).map(MatrixInput::Dense)
    }
}

/// Reads a dense CSV matrix from `path`; see [`parse_dense_csv`] for the format.
pub fn read_dense_csv(path: &Path) -> Result<Array2<f64>> {
    let text = read_text(path)?;
    parse_dense_csv(&text, &path.display().to_string())
}

/// Parses a dense matrix from CSV text (no header, comma-separated, one row per line).
///
/// `file` names the source in error messages. Every row must have as many fields as the
/// first; a row with a different count is reported at its line, with the column of the
/// first missing or extra field. Non-finite values are rejected. Text without any data row
/// gives [`Error::Empty`].
pub fn parse_dense_csv(text: &str, file: &str) -> Result<Array2<f64>> {
    let mut data = Vec::new();
    let mut ncols = 0;
    let mut nrows = 0;
    for item in data_lines(text, file) {
        let (no, line) = item?;
        let mut count = 0;
        for (k, field) in line.split(',').enumerate() {
            let col = k + 1;
            if nrows > 0 && col > ncols {
                return Err(parse_error(
                    file,
                    no,
                    col,
                    format!("row has more than the {ncols} fields of the first row"),
                ));
            }
            let v = parse_finite(field.trim()).map_err(|m| parse_error(file, no, col, m))?;
            data.push(v);
            count = col;
        }
        if nrows == 0 {
            ncols = count;
        } else if count < ncols {
            return Err(parse_error(
                file,
                no,
                count + 1,
                format!("row has {count} fields but the first row has {ncols}"),
            ));
        }
        nrows += 1;
    }
    if nrows == 0 {
        return Err(Error::Empty(file.to_string()));
    }
    Array2::from_shape_vec((nrows, ncols), data).map_err(|e| Error::ShapeMismatch {
        what: file.to_string(),
        expected: format!("{nrows}x{ncols} values"),
        found: e.to_string(),
    })
}

/// Reads a vector (one value per line) from `path`; see [`parse_vector`].
pub fn read_vector(path: &Path) -> Result<Vec<f64>> {
    let text = read_text(path)?;
    parse_vector(&text, &path.display().to_string())
}

/// Parses a vector written one finite number per line (a single CSV column).
///
/// Blank lines are allowed at the end only. A line with more than one comma-separated field
/// is an error at column 2. Text without any value gives [`Error::Empty`].
pub fn parse_vector(text: &str, file: &str) -> Result<Vec<f64>> {
    let mut out = Vec::new();
    for item in data_lines(text, file) {
        let (no, line) = item?;
        let mut fields = line.split(',');
        let first = fields.next().unwrap_or("");
        if fields.next().is_some() {
            return Err(parse_error(
                file,
                no,
                2,
                "expected one value per line, found a comma",
            ));
        }
        out.push(parse_finite(first.trim()).map_err(|m| parse_error(file, no, 1, m))?);
    }
    if out.is_empty() {
        return Err(Error::Empty(file.to_string()));
    }
    Ok(out)
}

/// Reads a Matrix Market coordinate file from `path`; see [`parse_matrix_market`].
pub fn read_matrix_market(path: &Path) -> Result<CsMat<f64>> {
    let text = read_text(path)?;
    parse_matrix_market(&text, &path.display().to_string())
}

/// What the header declares: whether the matrix is symmetric, and whether its values are
/// integers.
struct MmHeader {
    symmetric: bool,
    integer: bool,
}

/// Parses the header line's words.
fn parse_mm_header(line: &str, file: &str) -> Result<MmHeader> {
    let words: Vec<&str> = line.split_whitespace().collect();
    let err = |col: usize, msg: String| Err(parse_error(file, 1, col, msg));
    let expected = "expected '%%MatrixMarket matrix coordinate real general'";
    match words.first() {
        Some(w) if w.eq_ignore_ascii_case("%%MatrixMarket") => {}
        _ => return err(1, format!("missing Matrix Market header; {expected}")),
    }
    let object = words.get(1).copied().unwrap_or("");
    if !object.eq_ignore_ascii_case("matrix") {
        return err(
            2,
            format!("object {} is not supported; {expected}", quote(object)),
        );
    }
    let format = words.get(2).copied().unwrap_or("");
    if format.eq_ignore_ascii_case("array") {
        return err(
            3,
            "the dense 'array' format is not supported; use 'coordinate' (or a CSV file)"
                .to_string(),
        );
    }
    if !format.eq_ignore_ascii_case("coordinate") {
        return err(
            3,
            format!("format {} is not supported; {expected}", quote(format)),
        );
    }
    let field = words.get(3).copied().unwrap_or("");
    if field.eq_ignore_ascii_case("complex") || field.eq_ignore_ascii_case("pattern") {
        return err(
            4,
            format!(
                "'{}' matrices are not supported; values must be 'real' or 'integer'",
                field.to_ascii_lowercase()
            ),
        );
    }
    if !(field.eq_ignore_ascii_case("real") || field.eq_ignore_ascii_case("integer")) {
        return err(
            4,
            format!(
                "value type {} is not supported; expected 'real' or 'integer'",
                quote(field)
            ),
        );
    }
    let symmetry = words.get(4).copied().unwrap_or("");
    let symmetric = if symmetry.eq_ignore_ascii_case("general") {
        false
    } else if symmetry.eq_ignore_ascii_case("symmetric") {
        true
    } else {
        return err(
            5,
            format!(
                "symmetry {} is not supported; expected 'general' or 'symmetric'",
                quote(symmetry)
            ),
        );
    };
    if words.len() > 5 {
        return err(
            6,
            format!("unexpected word {} after the header", quote(words[5])),
        );
    }
    Ok(MmHeader {
        symmetric,
        integer: field.eq_ignore_ascii_case("integer"),
    })
}

/// Parses a one-based index field and checks it against `limit`.
fn parse_index(
    field: &str,
    what: &str,
    limit: usize,
    file: &str,
    line: usize,
    column: usize,
) -> Result<usize> {
    match field.parse::<usize>() {
        Ok(i) if (1..=limit).contains(&i) => Ok(i - 1),
        Ok(i) => Err(parse_error(
            file,
            line,
            column,
            format!("{what} index {i} is out of range 1..={limit}"),
        )),
        Err(_) => Err(parse_error(
            file,
            line,
            column,
            format!("{what} index {} is not a positive integer", quote(field)),
        )),
    }
}

/// Parses a Matrix Market coordinate matrix into compressed sparse column form.
///
/// `file` names the source in error messages. Accepted headers:
/// `%%MatrixMarket matrix coordinate {real|integer} {general|symmetric}` (case-insensitive).
/// The dense `array` format and `complex` or `pattern` values are rejected with a
/// [`Error::Parse`] at the offending header word. Comment lines (`%`) and blank lines may
/// appear anywhere after the header. Errors name the line and whitespace-separated field of:
/// a malformed size line, an index out of range, a non-numeric or non-finite value, a
/// symmetric entry above the diagonal, an entry beyond the declared count (too many) or the
/// size line's count field (too few entries). Duplicate entries are summed; a symmetric
/// matrix is expanded to both triangles. The result has sorted indices.
///
/// Each dimension must be at most [`MAX_MATRIX_MARKET_DIM`]; a zero dimension or text
/// without a header gives [`Error::Empty`].
pub fn parse_matrix_market(text: &str, file: &str) -> Result<CsMat<f64>> {
    let lines: Vec<(usize, &str)> = numbered_lines(text).collect();
    if lines.iter().all(|(_, l)| l.trim().is_empty()) {
        return Err(Error::Empty(file.to_string()));
    }
    let header = lines.first().map_or("", |&(_, l)| l);
    let MmHeader { symmetric, integer } = parse_mm_header(header, file)?;

    // Everything after the header that is neither blank nor a comment.
    let mut content = lines
        .iter()
        .enumerate()
        .skip(1)
        .filter(|(_, (_, l))| {
            let t = l.trim_start();
            !t.is_empty() && !t.starts_with('%')
        })
        .map(|(idx, &(no, l))| (idx, no, l));

    let Some((size_idx, size_no, size_line)) = content.next() else {
        let last = lines.last().map_or(1, |&(no, _)| no);
        return Err(parse_error(
            file,
            last + 1,
            1,
            "missing size line 'rows columns entries'",
        ));
    };
    let size_fields: Vec<&str> = size_line.split_whitespace().collect();
    let mut dims = [0usize; 3];
    for (k, name) in ["rows", "columns", "entries"].iter().enumerate() {
        let field = size_fields.get(k).copied().ok_or_else(|| {
            parse_error(
                file,
                size_no,
                k + 1,
                format!(
                    "size line has {} fields; expected 'rows columns entries'",
                    size_fields.len()
                ),
            )
        })?;
        dims[k] = field.parse::<usize>().map_err(|_| {
            parse_error(
                file,
                size_no,
                k + 1,
                format!(
                    "number of {name} {} is not a non-negative integer",
                    quote(field)
                ),
            )
        })?;
    }
    if size_fields.len() > 3 {
        return Err(parse_error(
            file,
            size_no,
            4,
            "size line has more than 3 fields; expected 'rows columns entries'",
        ));
    }
    let [rows, cols, nnz] = dims;
    for (k, d) in [rows, cols].into_iter().enumerate() {
        if d > MAX_MATRIX_MARKET_DIM {
            return Err(parse_error(
                file,
                size_no,
                k + 1,
                format!("dimension {d} exceeds the supported maximum {MAX_MATRIX_MARKET_DIM}"),
            ));
        }
    }
    if symmetric && rows != cols {
        return Err(parse_error(
            file,
            size_no,
            2,
            format!("a symmetric matrix must be square, but the size is {rows}x{cols}"),
        ));
    }
    if rows == 0 || cols == 0 {
        return Err(Error::Empty(file.to_string()));
    }

    // Never trust the declared count for allocation beyond what the text can hold.
    let remaining = lines.len().saturating_sub(size_idx + 1);
    let capacity = nnz
        .min(remaining)
        .saturating_mul(if symmetric { 2 } else { 1 });
    let mut tri = TriMat::with_capacity((rows, cols), capacity);
    let mut count = 0usize;
    for (_, no, line) in content {
        if count == nnz {
            return Err(parse_error(
                file,
                no,
                1,
                format!("more entries than the {nnz} declared on line {size_no}"),
            ));
        }
        let mut fields = line.split_whitespace();
        let mut next_field = |col: usize| {
            fields.next().ok_or_else(|| {
                parse_error(
                    file,
                    no,
                    col,
                    format!("entry has {} fields; expected 'row column value'", col - 1),
                )
            })
        };
        let i = parse_index(next_field(1)?, "row", rows, file, no, 1)?;
        let j = parse_index(next_field(2)?, "column", cols, file, no, 2)?;
        let text = next_field(3)?;
        if integer && text.parse::<i64>().is_err() {
            return Err(parse_error(
                file,
                no,
                3,
                format!(
                    "{} is not an integer (the header declares 'integer')",
                    quote(text)
                ),
            ));
        }
        let v = parse_finite(text).map_err(|m| parse_error(file, no, 3, m))?;
        if fields.next().is_some() {
            return Err(parse_error(
                file,
                no,
                4,
                "entry has more than 3 fields; expected 'row column value'",
            ));
        }
        if symmetric {
            if i < j {
                return Err(parse_error(
                    file,
                    no,
                    1,
                    format!(
                        "entry ({}, {}) is above the diagonal; a symmetric file stores only \
                         the lower triangle (row >= column)",
                        i + 1,
                        j + 1
                    ),
                ));
            }
            if i != j {
                tri.add_triplet(j, i, v);
            }
        }
        tri.add_triplet(i, j, v);
        count += 1;
    }
    if count < nnz {
        return Err(parse_error(
            file,
            size_no,
            3,
            format!("{nnz} entries declared but only {count} found"),
        ));
    }
    let m: CsMat<f64> = tri.to_csc();
    // Summing duplicates can overflow to infinity.
    if let Some((_, (r, c))) = m.iter().find(|(v, _)| !v.is_finite()) {
        return Err(Error::NonFinite {
            what: file.to_string(),
            location: format!(
                "entry ({}, {}) after summing duplicate entries",
                r + 1,
                c + 1
            ),
        });
    }
    Ok(m)
}

// ---------------------------------------------------------------------------------------------
// Writers
// ---------------------------------------------------------------------------------------------

/// Writes `a` as dense CSV (no header), one row per line, with round-trip exact numbers.
///
/// Fails with [`Error::NonFinite`] (before creating the file) if `a` holds NaN or ±Inf,
/// since such a file could not be read back.
pub fn write_dense_csv(path: &Path, a: ArrayView2<f64>) -> Result<()> {
    let ncols = a.ncols().max(1);
    check_finite(&path.display().to_string(), a.iter(), |k| {
        format!("row {}, column {}", k / ncols + 1, k % ncols + 1)
    })?;
    let mut out = String::with_capacity(a.len() * 8 + a.nrows());
    for row in a.rows() {
        for (k, &v) in row.iter().enumerate() {
            if k > 0 {
                out.push(',');
            }
            push_f64(&mut out, v);
        }
        out.push('\n');
    }
    write_text(path, &out)
}

/// Writes `v` one value per line, with round-trip exact numbers.
///
/// Fails with [`Error::NonFinite`] (before creating the file) if `v` holds NaN or ±Inf.
pub fn write_vector(path: &Path, v: &[f64]) -> Result<()> {
    check_finite(&path.display().to_string(), v, |k| {
        format!("line {}", k + 1)
    })?;
    let mut out = String::with_capacity(v.len() * 8);
    for &x in v {
        push_f64(&mut out, x);
        out.push('\n');
    }
    write_text(path, &out)
}

/// Writes `a` (CSC or CSR) as a general real Matrix Market coordinate file with one-based
/// indices and round-trip exact values; every stored entry is written, in storage order.
///
/// Fails with [`Error::NonFinite`] (before creating the file) if a stored value is NaN or
/// ±Inf.
pub fn write_matrix_market(path: &Path, a: &CsMat<f64>) -> Result<()> {
    if let Some((_, (r, c))) = a.iter().find(|(v, _)| !v.is_finite()) {
        return Err(Error::NonFinite {
            what: path.display().to_string(),
            location: format!("entry ({}, {})", r + 1, c + 1),
        });
    }
    let mut out = String::with_capacity(a.nnz() * 24 + 64);
    out.push_str("%%MatrixMarket matrix coordinate real general\n");
    let _ = writeln!(out, "{} {} {}", a.rows(), a.cols(), a.nnz());
    for (&v, (r, c)) in a.iter() {
        let _ = write!(out, "{} {} ", r + 1, c + 1);
        push_f64(&mut out, v);
        out.push('\n');
    }
    write_text(path, &out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;
    use rand::rngs::StdRng;
    use rand::{RngExt, SeedableRng};
    use std::path::PathBuf;

    /// A fresh path in the system temporary directory, unique per test and process.
    fn tmp(name: &str) -> PathBuf {
        std::env::temp_dir().join(format!("ellone-io-{}-{name}", std::process::id()))
    }

    /// Asserts that `r` is a parse error at `(line, column)` and returns its message.
    #[track_caller]
    fn parse_err_at<T: std::fmt::Debug>(r: Result<T>, line: usize, column: usize) -> String {
        match r {
            Err(Error::Parse {
                line: l,
                column: c,
                message,
                file,
            }) => {
                assert_eq!((l, c), (line, column), "wrong position; message: {message}");
                assert_eq!(file, "f");
                message
            }
            other => panic!("expected a parse error at {line}:{column}, got {other:?}"),
        }
    }

    fn mm(body: &str) -> Result<CsMat<f64>> {
        parse_matrix_market(
            &format!("%%MatrixMarket matrix coordinate real general\n{body}"),
            "f",
        )
    }

    fn awkward_values() -> Vec<f64> {
        vec![
            0.0,
            -0.0,
            1.0,
            -2.5,
            0.1,
            1.0 / 3.0,
            1e-5,
            9.999e15,
            1e16,
            1e300,
            -1e-300,
            f64::MAX,
            f64::MIN,
            f64::MIN_POSITIVE,
            5e-324,
            123_456_789.123_456_78,
            std::f64::consts::PI,
        ]
    }

    #[test]
    fn number_text_round_trips_exactly() {
        let mut rng = StdRng::seed_from_u64(7);
        let mut values = awkward_values();
        while values.len() < 20_000 {
            let v = f64::from_bits(rng.random::<u64>());
            if v.is_finite() {
                values.push(v);
            }
        }
        let mut s = String::new();
        for v in values {
            s.clear();
            push_f64(&mut s, v);
            let back: f64 = s.parse().unwrap();
            assert_eq!(back.to_bits(), v.to_bits(), "{v:e} written as {s}");
        }
    }

    #[test]
    fn dense_csv_round_trip() {
        let vals = awkward_values();
        let a = Array2::from_shape_fn((vals.len(), 3), |(i, j)| vals[(i + j) % vals.len()]);
        let p = tmp("round.csv");
        write_dense_csv(&p, a.view()).unwrap();
        let b = read_dense_csv(&p).unwrap();
        assert_eq!(a.shape(), b.shape());
        for (x, y) in a.iter().zip(b.iter()) {
            assert_eq!(x.to_bits(), y.to_bits());
        }
        assert_eq!(read_matrix(&p).unwrap(), MatrixInput::Dense(a));
        std::fs::remove_file(&p).unwrap();
    }

    #[test]
    fn vector_round_trip() {
        let v = awkward_values();
        let p = tmp("round.txt");
        write_vector(&p, &v).unwrap();
        let w = read_vector(&p).unwrap();
        assert_eq!(v.len(), w.len());
        for (x, y) in v.iter().zip(&w) {
            assert_eq!(x.to_bits(), y.to_bits());
        }
        std::fs::remove_file(&p).unwrap();
    }

    #[test]
    fn matrix_market_round_trip() {
        let mut tri = TriMat::new((4, 5));
        for (k, &v) in awkward_values()
            .iter()
            .enumerate()
            .filter(|(_, v)| **v != 0.0)
        {
            tri.add_triplet((k * 3) % 4, (k * 7) % 5, v);
        }
        let a: CsMat<f64> = tri.to_csc();
        let p = tmp("round.MTX");
        write_matrix_market(&p, &a).unwrap();
        let b = read_matrix_market(&p).unwrap();
        assert_eq!(a, b);
        assert_eq!(read_matrix(&p).unwrap(), MatrixInput::Sparse(a.clone()));
        // A CSR input reads back as the same matrix in CSC form.
        write_matrix_market(&p, &a.to_csr()).unwrap();
        assert_eq!(read_matrix_market(&p).unwrap(), a);
        std::fs::remove_file(&p).unwrap();
    }

    #[test]
    fn writers_reject_non_finite_values() {
        let p = tmp("never-created.csv");
        let err = write_dense_csv(&p, array![[1.0, 2.0], [3.0, f64::NAN]].view()).unwrap_err();
        assert!(
            matches!(err, Error::NonFinite { ref location, .. } if location == "row 2, column 2")
        );
        let err = write_vector(&p, &[1.0, f64::INFINITY]).unwrap_err();
        assert!(matches!(err, Error::NonFinite { ref location, .. } if location == "line 2"));
        let mut tri = TriMat::new((2, 2));
        tri.add_triplet(1, 0, f64::NAN);
        let err = write_matrix_market(&p, &tri.to_csc()).unwrap_err();
        assert!(matches!(err, Error::NonFinite { ref location, .. } if location == "entry (2, 1)"));
        assert!(!p.exists());
    }

    #[test]
    fn missing_file_is_an_io_error() {
        let p = tmp("does-not-exist.csv");
        assert!(matches!(read_dense_csv(&p), Err(Error::Io { .. })));
        assert!(matches!(read_vector(&p), Err(Error::Io { .. })));
        assert!(matches!(
            read_matrix(&p.with_extension("mtx")),
            Err(Error::Io { .. })
        ));
    }

    #[test]
    fn csv_accepts_crlf_spaces_bom_and_trailing_blank_lines() {
        let a = parse_dense_csv("\u{feff} 1 , 2.5\r\n-3,\t4e1 \r\n\r\n  \n", "f").unwrap();
        assert_eq!(a, array![[1.0, 2.5], [-3.0, 40.0]]);
        assert_eq!(parse_dense_csv("7", "f").unwrap(), array![[7.0]]);
    }

    #[test]
    fn csv_rejects_non_finite_and_non_numeric_fields() {
        for bad in ["NaN", "nan", "inf", "-Infinity", "1e400"] {
            let msg = parse_err_at(parse_dense_csv(&format!("1,2\n3,{bad}\n"), "f"), 2, 2);
            assert!(msg.contains("not a finite number"), "{msg}");
        }
        let msg = parse_err_at(parse_dense_csv("1,2,3\n4,x5,6\n", "f"), 2, 2);
        assert!(msg.contains("not a number"), "{msg}");
        let msg = parse_err_at(parse_dense_csv("1,,3\n", "f"), 1, 2);
        assert!(msg.contains("empty"), "{msg}");
        parse_err_at(parse_dense_csv("1,2,\n", "f"), 1, 3);
    }

    #[test]
    fn csv_ragged_rows_name_the_row_and_field() {
        // Short row: the first missing field.
        let msg = parse_err_at(parse_dense_csv("1,2,3\n4,5,6\n7,8\n9,9,9\n", "f"), 3, 3);
        assert!(msg.contains("2 fields") && msg.contains('3'), "{msg}");
        // Long row: the first extra field.
        parse_err_at(parse_dense_csv("1,2\r\n3,4,5\r\n", "f"), 2, 3);
    }

    #[test]
    fn csv_blank_line_inside_data_is_an_error() {
        parse_err_at(parse_dense_csv("1,2\n3,4\n\n \n5,6\n", "f"), 3, 1);
    }

    #[test]
    fn csv_without_rows_is_empty() {
        for text in ["", "\n", " \r\n\n\t\n", "\u{feff}"] {
            assert_eq!(parse_dense_csv(text, "f"), Err(Error::Empty("f".into())));
        }
    }

    #[test]
    fn vector_parsing() {
        assert_eq!(
            parse_vector("1\r\n-2.5\n 3 \n\n\n", "f").unwrap(),
            vec![1.0, -2.5, 3.0]
        );
        parse_err_at(parse_vector("1\n\n2\n", "f"), 2, 1);
        parse_err_at(parse_vector("1\n2,3\n", "f"), 2, 2);
        parse_err_at(parse_vector("1\n2,\n", "f"), 2, 2);
        let msg = parse_err_at(parse_vector("1\n2\nnan\n", "f"), 3, 1);
        assert!(msg.contains("not a finite number"), "{msg}");
        parse_err_at(parse_vector("1\nabc\n", "f"), 2, 1);
        assert_eq!(parse_vector("\n \n", "f"), Err(Error::Empty("f".into())));
        assert_eq!(parse_vector("", "f"), Err(Error::Empty("f".into())));
    }

    #[test]
    fn matrix_market_basic_with_comments_crlf_and_duplicates() {
        let text = "%%MatrixMarket matrix coordinate real general\r\n\
                    % a comment\r\n\
                    \r\n\
                    3 2 4\r\n\
                    1 1 1.5\r\n\
                    % interleaved comment\r\n\
                    3 2 -2\r\n\
                    2\t1   4e0\r\n\
                    1 1 0.5\r\n\r\n";
        let m = parse_matrix_market(text, "f").unwrap();
        assert!(m.is_csc());
        assert_eq!((m.rows(), m.cols(), m.nnz()), (3, 2, 3));
        assert_eq!(m.to_dense(), array![[2.0, 0.0], [4.0, 0.0], [0.0, -2.0]]);
        // Explicit zero entries and an all-zero matrix are fine.
        assert_eq!(mm("2 2 0\n").unwrap().nnz(), 0);
    }

    #[test]
    fn matrix_market_indices_are_sorted() {
        let mut body = String::from("5 4 12\n");
        for (i, j) in [
            (5, 4),
            (1, 4),
            (3, 1),
            (2, 2),
            (1, 1),
            (4, 4),
            (5, 1),
            (2, 1),
            (3, 3),
            (1, 3),
            (4, 2),
            (2, 4),
        ] {
            body.push_str(&format!("{i} {j} {}\n", i * 10 + j));
        }
        let m = mm(&body).unwrap();
        for col in m.outer_iterator() {
            assert!(col.indices().windows(2).all(|w| w[0] < w[1]));
        }
        assert_eq!(m.get(4, 3), Some(&54.0));
        assert_eq!(m.get(1, 1), Some(&22.0));
    }

    #[test]
    fn matrix_market_header_variants() {
        for header in [
            "%%MatrixMarket matrix coordinate real general",
            "%%matrixmarket MATRIX Coordinate REAL General",
            "%%MatrixMarket   matrix\tcoordinate integer general  ",
        ] {
            let m = parse_matrix_market(&format!("{header}\n2 2 1\n2 1 3\n"), "f").unwrap();
            assert_eq!(m.to_dense(), array![[0.0, 0.0], [3.0, 0.0]], "{header}");
        }
        let cases = [
            ("%%MatrixMarket matrix array real general", 3, "array"),
            (
                "%%MatrixMarket matrix coordinate complex general",
                4,
                "complex",
            ),
            (
                "%%MatrixMarket matrix coordinate pattern general",
                4,
                "pattern",
            ),
            (
                "%%MatrixMarket matrix coordinate real skew-symmetric",
                5,
                "skew",
            ),
            (
                "%%MatrixMarket matrix coordinate real hermitian",
                5,
                "hermitian",
            ),
            ("%%MatrixMarket vector coordinate real general", 2, "vector"),
            ("%%MatrixMarket matrix coordinate real", 5, "symmetry"),
            (
                "%%MatrixMarket matrix coordinate real general extra",
                6,
                "extra",
            ),
            ("% just a comment", 1, "header"),
            ("2 2 1", 1, "header"),
        ];
        for (header, column, word) in cases {
            let msg = parse_err_at(
                parse_matrix_market(&format!("{header}\n2 2 1\n1 1 1\n"), "f"),
                1,
                column,
            );
            assert!(msg.to_lowercase().contains(word), "{header}: {msg}");
        }
    }

    #[test]
    fn matrix_market_symmetric_expands_both_triangles() {
        let text = "%%MatrixMarket matrix coordinate real symmetric\n\
                    3 3 4\n1 1 2\n2 1 -1\n3 2 0.5\n3 3 7\n";
        let m = parse_matrix_market(text, "f").unwrap();
        assert_eq!(m.nnz(), 6);
        assert_eq!(
            m.to_dense(),
            array![[2.0, -1.0, 0.0], [-1.0, 0.0, 0.5], [0.0, 0.5, 7.0]]
        );
        let sym = |body: &str| {
            parse_matrix_market(
                &format!("%%MatrixMarket matrix coordinate real symmetric\n{body}"),
                "f",
            )
        };
        let msg = parse_err_at(sym("3 3 1\n1 2 5\n"), 3, 1);
        assert!(msg.contains("lower triangle"), "{msg}");
        let msg = parse_err_at(sym("3 4 1\n1 1 5\n"), 2, 2);
        assert!(msg.contains("square"), "{msg}");
    }

    #[test]
    fn matrix_market_entry_errors_name_line_and_field() {
        // Lines: 1 header, 2 size, 3.. entries.
        parse_err_at(mm("2 3 2\n1 1 1\n3 1 1\n"), 4, 1);
        parse_err_at(mm("2 3 2\n1 1 1\n0 1 1\n"), 4, 1);
        parse_err_at(mm("2 3 2\n1 1 1\n-1 1 1\n"), 4, 1);
        parse_err_at(mm("2 3 2\n1 1 1\n2 4 1\n"), 4, 2);
        parse_err_at(mm("2 3 1\n1 1.0 1\n"), 3, 2);
        let msg = parse_err_at(mm("2 3 1\n1 1 abc\n"), 3, 3);
        assert!(msg.contains("not a number"), "{msg}");
        let msg = parse_err_at(mm("2 3 1\n1 1 NaN\n"), 3, 3);
        assert!(msg.contains("not a finite number"), "{msg}");
        parse_err_at(mm("2 3 1\n1 1 -inf\n"), 3, 3);
        // Too few fields: the first missing one; too many: the first extra one.
        parse_err_at(mm("2 3 1\n1 1\n"), 3, 3);
        parse_err_at(mm("2 3 1\n1\n"), 3, 2);
        parse_err_at(mm("2 3 1\n1 1 1 1\n"), 3, 4);
    }

    #[test]
    fn matrix_market_entry_count_errors() {
        // Too many: the first surplus entry's line.
        let msg = parse_err_at(mm("2 2 2\n1 1 1\n% c\n2 2 1\n1 2 1\n"), 6, 1);
        assert!(msg.contains("more entries than the 2"), "{msg}");
        // Too few: the count field of the size line.
        let msg = parse_err_at(mm("% c\n2 2 3\n1 1 1\n2 2 1\n\n"), 3, 3);
        assert!(msg.contains("only 2"), "{msg}");
        // A huge declared count with no entries must not allocate for it.
        parse_err_at(mm("2 2 18446744073709551615\n1 1 1\n"), 2, 3);
    }

    #[test]
    fn matrix_market_size_line_errors() {
        parse_err_at(mm("2 x 1\n"), 2, 2);
        parse_err_at(mm("2 2\n"), 2, 3);
        parse_err_at(mm("2 2 1 9\n1 1 1\n"), 2, 4);
        parse_err_at(mm("-2 2 1\n"), 2, 1);
        // Beyond usize and beyond the supported dimension.
        parse_err_at(mm("18446744073709551616 2 1\n"), 2, 1);
        let msg = parse_err_at(mm("2 18446744073709551615 0\n"), 2, 2);
        assert!(msg.contains("maximum"), "{msg}");
        let big = MAX_MATRIX_MARKET_DIM;
        parse_err_at(mm(&format!("{} 1 0\n", big + 1)), 2, 1);
        // Missing size line: the line after the end.
        parse_err_at(mm("% only comments\n"), 3, 1);
        assert_eq!(mm("0 3 0\n"), Err(Error::Empty("f".into())));
        assert_eq!(parse_matrix_market("", "f"), Err(Error::Empty("f".into())));
        assert_eq!(
            parse_matrix_market("\n \n", "f"),
            Err(Error::Empty("f".into()))
        );
    }

    #[test]
    fn matrix_market_duplicate_sum_overflow_is_non_finite() {
        let err = mm("2 2 2\n2 1 1e308\n2 1 1e308\n").unwrap_err();
        assert!(
            matches!(err, Error::NonFinite { ref location, .. } if location.contains("(2, 1)"))
        );
    }

    /// The Matrix Market format ("The Matrix Market exchange formats: initial design",
    /// NIST report, 1996): an `integer` file holds integer values only.
    #[test]
    fn matrix_market_integer_values_are_integers() {
        let header = "%%MatrixMarket matrix coordinate integer general\n";
        let ok = parse_matrix_market(&format!("{header}2 2 2\n1 1 3\n2 2 -4\n"), "f").unwrap();
        assert_eq!(ok.to_dense(), ndarray::array![[3.0, 0.0], [0.0, -4.0]]);
        let msg = parse_err_at(
            parse_matrix_market(&format!("{header}2 2 1\n1 1 1.5\n"), "f"),
            3,
            3,
        );
        assert!(msg.contains("not an integer"), "{msg}");
    }

    #[test]
    fn long_offending_fields_are_quoted_briefly() {
        let long = "x".repeat(10_000);
        let msg = parse_err_at(parse_vector(&long, "f"), 1, 1);
        assert!(msg.len() < 200, "{msg}");
    }

    /// Random text built from pieces that the parsers care about, so that the generator
    /// reaches deep into each parser rather than failing on the first byte.
    fn random_text(rng: &mut StdRng) -> String {
        const PIECES: &[&str] = &[
            "%%MatrixMarket matrix coordinate real general\n",
            "%%MatrixMarket matrix coordinate real symmetric\n",
            "%%matrixmarket matrix coordinate integer general\n",
            "%%MatrixMarket matrix array real general\n",
            "%",
            "\n",
            "\r\n",
            "\r",
            " ",
            "\t",
            ",",
            "0",
            "1",
            "2",
            "3",
            "-",
            "+",
            ".",
            "e",
            "E",
            "-1",
            "1e308",
            "1e-320",
            "nan",
            "inf",
            "18446744073709551615",
            "18446744073709551616",
            "100000000",
            "99999999999",
            "x",
            "\u{feff}",
            "é",
            "",
        ];
        let n = rng.random_range(0..40);
        let mut s = String::new();
        for _ in 0..n {
            s.push_str(PIECES[rng.random_range(0..PIECES.len())]);
        }
        s
    }

    fn random_bytes(rng: &mut StdRng) -> String {
        let n = rng.random_range(0..64);
        let bytes: Vec<u8> = (0..n).map(|_| rng.random::<u8>()).collect();
        String::from_utf8_lossy(&bytes).into_owned()
    }

    #[test]
    fn parsers_never_panic_on_random_input() {
        let mut rng = StdRng::seed_from_u64(0x5eed);
        for k in 0..6000 {
            let text = if k % 2 == 0 {
                random_text(&mut rng)
            } else {
                random_bytes(&mut rng)
            };
            let _ = parse_dense_csv(&text, "f");
            let _ = parse_vector(&text, "f");
            let _ = parse_matrix_market(&text, "f");
            // A valid header and size line, random entries.
            let _ = parse_matrix_market(
                &format!("%%MatrixMarket matrix coordinate real symmetric\n3 3 3\n{text}"),
                "f",
            );
            let _ = mm(&format!("4 3 2\n{text}"));
        }
    }

    #[test]
    fn parsers_never_panic_on_random_valid_shaped_input() {
        // Well-formed random files must parse; their values must round-trip.
        let mut rng = StdRng::seed_from_u64(11);
        for _ in 0..300 {
            let (r, c) = (rng.random_range(1..6usize), rng.random_range(1..6usize));
            let a = Array2::from_shape_fn((r, c), |_| rng.random_range(-1e3..1e3));
            let mut text = String::new();
            for row in a.rows() {
                let fields: Vec<String> = row.iter().map(|v| v.to_string()).collect();
                text.push_str(&fields.join(","));
                text.push_str(if rng.random::<bool>() { "\r\n" } else { "\n" });
            }
            assert_eq!(parse_dense_csv(&text, "f").unwrap(), a);
        }
    }
}
