//! Anderson extrapolation of the inner coordinate-descent iterates.
//!
//! Cyclic coordinate descent on a quadratic model is a fixed-point iteration z ← T(z) (one
//! sweep); on an ill-conditioned model it contracts slowly, along a few persistent
//! directions. Anderson extrapolation ("Iterative procedures for nonlinear integral
//! equations", J. ACM, 1965; for coordinate descent on ℓ1 problems: "Anderson acceleration of
//! coordinate descent", AISTATS, 2021) combines the last K + 1 iterates z_0 … z_K with the
//! differences u_i = z_{i+1} − z_i (U = [u_0 … u_{K−1}]):
//!
//! ```text
//! c = argmin ‖U c‖²  subject to  Σ_i c_i = 1   ⇔   c = (UᵀU)⁻¹1 / (1ᵀ(UᵀU)⁻¹1)
//! z_e = Σ_i c_i z_{i+1}
//! ```
//!
//! For a linear map z ← M z + f the extrapolation error is M p(M) e_0 with p a polynomial of
//! degree K − 1 and p(1) = 1, so K differences cancel up to K − 1 distinct persistent error
//! directions (eigenvalues of M) exactly. The extrapolated point is only a *candidate*: the
//! caller evaluates the penalised model there and keeps it only when it is lower than at the
//! current iterate, so an extrapolation can never make the inner loop worse (the "guarded"
//! variant of the 2021 paper). The small system is solved by the crate's Cholesky
//! factorisation (`linalg`) with a relative ridge (10⁻¹⁰ of the largest diagonal entry:
//! near-parallel differences make UᵀU singular).

/// The history of inner iterates and the extrapolation rule (see the module docs).
pub(crate) struct Extrapolation {
    /// K, the number of differences combined (0 disables).
    depth: usize,
    /// The last iterates, oldest first (at most K + 1).
    history: Vec<Vec<f64>>,
}

/// Relative ridge added to UᵀU before it is factorised.
const RIDGE: f64 = 1e-10;

impl Extrapolation {
    /// An empty history for combinations of `depth` differences (0: never extrapolate).
    pub(crate) fn new(depth: usize) -> Self {
        Self {
            depth,
            history: Vec::new(),
        }
    }

    /// Forgets the history (the next iterates are not consecutive with it).
    pub(crate) fn clear(&mut self) {
        self.history.clear();
    }

    /// Records the iterate `z` (after a sweep, or the starting point). Returns the
    /// extrapolated candidate once K + 1 iterates are held, and then starts a fresh history
    /// (the caller records the point it continues from). `None` when disabled, when more
    /// iterates are needed, or when the combination is not finite.
    pub(crate) fn record(&mut self, z: impl Iterator<Item = f64>) -> Option<Vec<f64>> {
        if self.depth == 0 {
            return None;
        }
        self.history.push(z.collect());
        if self.history.len() <= self.depth {
            return None;
        }
        let history = std::mem::take(&mut self.history);
        combine(&history)
    }
}

/// z_e = Σ_i c_i z_{i+1} with the coefficients of the module docs, from the iterates
/// z_0 … z_K (each of one length).
fn combine(z: &[Vec<f64>]) -> Option<Vec<f64>> {
    let k = z.len().checked_sub(1).filter(|&k| k > 0)?;
    let m = z[0].len();
    let u: Vec<Vec<f64>> = (0..k)
        .map(|i| (0..m).map(|j| z[i + 1][j] - z[i][j]).collect())
        .collect();
    // Gram matrix UᵀU (k × k).
    let mut gram = ndarray::Array2::<f64>::zeros((k, k));
    for a in 0..k {
        for b in a..k {
            let v = crate::kernels::dot(&u[a], &u[b]);
            gram[[a, b]] = v;
            gram[[b, a]] = v;
        }
    }
    let top = gram.diag().fold(0.0f64, |t, &v| t.max(v));
    if !(top > 0.0 && top.is_finite()) {
        return None;
    }
    gram.diag_mut().mapv_inplace(|v| v + RIDGE * top);
    let y = crate::linalg::cholesky(gram.view())?.apply_inverse(&vec![1.0; k]);
    let sum: f64 = y.iter().sum();
    if !(sum.is_finite() && sum != 0.0) {
        return None;
    }
    let mut out = vec![0.0; m];
    for (i, yi) in y.iter().enumerate() {
        let c = yi / sum;
        for (o, v) in out.iter_mut().zip(&z[i + 1]) {
            *o += c * v;
        }
    }
    out.iter().all(|v| v.is_finite()).then_some(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A linear fixed-point iteration z ← M z + f with M = diag(μ_1, μ_2) has the error
    /// e_i = M^i e_0 in two directions; three differences (four iterates) give a quadratic
    /// p with p(1) = 1 vanishing at μ_1 and μ_2, so the extrapolation is the fixed point
    /// z* = (I − M)⁻¹ f exactly (the defining property of the minimal-polynomial / Anderson
    /// combination, "Iterative procedures for nonlinear integral equations", J. ACM, 1965),
    /// up to the ridge. Two differences cannot: a linear p with p(1) = 1 has one root.
    #[test]
    fn three_differences_recover_the_fixed_point_of_a_two_mode_linear_map() {
        let (mu, f) = ([0.9, -0.5], [1.0, 3.0]);
        let fixed = [f[0] / (1.0 - mu[0]), f[1] / (1.0 - mu[1])];
        let mut z = vec![0.0, 0.0];
        let mut ex = Extrapolation::new(3);
        let mut out = ex.record(z.iter().copied());
        for _ in 0..3 {
            assert!(out.is_none());
            z = vec![mu[0] * z[0] + f[0], mu[1] * z[1] + f[1]];
            out = ex.record(z.iter().copied());
        }
        let e = out.expect("three iterates give a candidate");
        for (a, b) in e.iter().zip(fixed) {
            assert!((a - b).abs() < 1e-6 * b.abs(), "{a} against {b}");
        }
        // The history starts afresh.
        assert!(ex.record(z.iter().copied()).is_none());
    }

    #[test]
    fn disabled_or_degenerate_histories_give_no_candidate() {
        let mut off = Extrapolation::new(0);
        for _ in 0..5 {
            assert!(off.record([1.0, 2.0].into_iter()).is_none());
        }
        // No movement: UᵀU = 0.
        let mut still = Extrapolation::new(2);
        let mut out = None;
        for _ in 0..3 {
            out = still.record([1.0, 2.0].into_iter());
        }
        assert!(out.is_none());
    }

    /// The small system goes through the crate's Cholesky (`linalg`); the hand-solved
    /// case it relies on, and the refusal of an indefinite Gram matrix.
    #[test]
    fn small_spd_solve_matches_a_hand_computed_system() {
        // [4 2; 2 3] y = [2, 1]: y = [0.5, 0] (exact in binary).
        let a = ndarray::array![[4.0, 2.0], [2.0, 3.0]];
        let y = crate::linalg::cholesky(a.view())
            .unwrap()
            .apply_inverse(&[2.0, 1.0]);
        assert!((y[0] - 0.5).abs() < 1e-15 && y[1].abs() < 1e-15);
        let bad = ndarray::array![[1.0, 2.0], [2.0, 1.0]];
        assert!(crate::linalg::cholesky(bad.view()).is_none());
    }
}
