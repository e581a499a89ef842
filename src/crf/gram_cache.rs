//! Reuse of the Gram block G = S_xx[R, R] between the local models of one CRF loss.
//!
//! Every local model of the CRF (see `local`) needs G for its registered rows R: the rows
//! of Θ its inner loop may touch. Without a stored S_xx (p above
//! [`super::data::GRAM_MAX_INPUTS`]) each entry is a dot product of length n, so forming G
//! costs O(n·|R|²) at every outer iteration, although R changes little from one iteration
//! to the next. The block of the last model is therefore kept in a [`GramPool`] owned by
//! the loss, and the next model copies the entries it shares with it and computes only the
//! others.
//!
//! The cache never changes a result: the new block has its rows in the order asked for,
//! and every entry, copied or computed, comes from [`CrfData::gram_entry`], whose bits do
//! not depend on how the block was assembled. So a loss shared between threads (a grid of
//! penalty levels fitted in parallel) gives the same iterates as separate losses.
//!
//! Measured on the `crf-wide` race problem of benches/baselines.rs (n = 1000, p = 3000,
//! q = 100, |R| ≈ 3000, 2 cores): forming G by a product X_Rᵀ X_R at every outer iteration
//! took about 2 s of a 14 s solve; with the cache the first block takes about 0.5 s and
//! the later ones nothing (same rows) or a copy of 0.04–0.05 s.

use super::data::CrfData;
use crate::reuse::Reuse;
use rayon::prelude::*;

/// A Gram block: entry (a, b) of S_xx[rows, rows] at `values[a·cap + b]`.
#[derive(Debug, Default)]
pub(crate) struct GramBlock {
    /// The input rows, in the order of the block.
    pub(crate) rows: Vec<usize>,
    /// Row-major with row stride `cap`; the first `rows.len()` rows and columns are valid.
    pub(crate) values: Vec<f64>,
    /// Allocated rows (≥ `rows.len()`).
    pub(crate) cap: usize,
}

/// The block of the last local model, kept between models. Cloning a loss starts an empty
/// pool.
#[derive(Debug, Default, Clone)]
pub(crate) struct GramPool(Reuse<GramBlock>);

impl GramPool {
    /// Hands a model's block back for the next model.
    pub(crate) fn give(&self, block: GramBlock) {
        self.0.give(block);
    }

    /// The block for the rows `wanted`, in that order (no repeats): the kept block itself
    /// when it has exactly these rows, else a new one. Peak memory: the kept block and the
    /// new one. An empty `wanted` leaves the kept block in place for a later
    /// model.
    pub(crate) fn assemble(&self, data: &CrfData, wanted: &[usize]) -> GramBlock {
        let r = wanted.len();
        let cap = r.max(16);
        if r == 0 {
            return GramBlock {
                rows: Vec::new(),
                values: vec![0.0; cap * cap],
                cap,
            };
        }
        let old = self.0.take();
        if old.rows == wanted {
            // The same rows in the same order (the rule in the local phase): nothing to do.
            return old;
        }
        let mut values = vec![0.0; cap * cap];
        let mut old_pos = vec![usize::MAX; data.p];
        for (a, &i) in old.rows.iter().enumerate() {
            old_pos[i] = a;
        }
        // The lower triangle row by row in parallel (each row's entries are independent),
        // then the mirror image.
        values
            .par_chunks_mut(cap)
            .take(r)
            .enumerate()
            .for_each(|(a, row)| {
                let (i, oa) = (wanted[a], old_pos[wanted[a]]);
                for (b, &j) in wanted[..=a].iter().enumerate() {
                    let ob = old_pos[j];
                    row[b] = if oa != usize::MAX && ob != usize::MAX {
                        old.values[oa * old.cap + ob]
                    } else {
                        data.gram_entry(i, j)
                    };
                }
            });
        for a in 0..r {
            for b in 0..a {
                values[b * cap + a] = values[a * cap + b];
            }
        }
        GramBlock {
            rows: wanted.to_vec(),
            values,
            cap,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::crf::data::InputMode;
    use ndarray::Array2;

    /// The assembled block equals S_xx[R, R] computed directly from its definition
    /// S_xx = XᵀX/n, and has the same bits as a block assembled without a cache, whatever
    /// the previous block was (growing, shrinking, reordering).
    #[test]
    fn assembled_blocks_match_the_definition_bit_for_bit() {
        let (n, p, q) = (37, 9, 2);
        let x = Array2::from_shape_fn((n, p), |(i, j)| ((i * 31 + j * 17) as f64 * 0.37).sin());
        let y = Array2::from_shape_fn((n, q), |(i, j)| ((i * 7 + j * 5) % 11) as f64 - 5.0);
        for mode in [InputMode::Data, InputMode::Gram] {
            let data = CrfData::new(x.view(), y.view(), false, false, mode).unwrap();
            let pool = GramPool::default();
            for wanted in [
                vec![1, 4, 5],
                vec![5, 0, 1, 8, 2, 3, 6, 7, 4],
                vec![7, 2],
                vec![],
                vec![2, 3, 7],
                vec![0, 1, 2, 3, 4, 5, 6, 7, 8],
            ] {
                let block = pool.assemble(&data, &wanted);
                let fresh = GramPool::default().assemble(&data, &wanted);
                assert_eq!(block.rows, wanted);
                for (a, &i) in block.rows.iter().enumerate() {
                    for (b, &j) in block.rows.iter().enumerate() {
                        let direct: f64 =
                            (0..n).map(|t| x[[t, i]] * x[[t, j]]).sum::<f64>() / n as f64;
                        let got = block.values[a * block.cap + b];
                        assert!((got - direct).abs() <= 1e-14 * direct.abs().max(1.0));
                        assert_eq!(got.to_bits(), fresh.values[a * fresh.cap + b].to_bits());
                    }
                }
                if !wanted.is_empty() {
                    pool.give(block);
                }
            }
        }
    }
}
