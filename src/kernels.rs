//! The two vector kernels of the coordinate-descent inner loops: the dot product aᵀb (a Θ
//! coordinate of the CRF model, an entry of the precision model and a dense column of a
//! linear model each cost one, of length |R|, p or n) and the update y ← y + αx (a step
//! along a dense column).
//!
//! The dot product keeps sixteen independent partial sums (four 4-wide vectors), which hide
//! the latency of the floating-point adds, so the loop runs at the speed of its loads. On
//! x86-64 a second copy of each loop is compiled for AVX2 with fused multiply-adds and
//! chosen at run time when the processor has them (the crate is built for the baseline
//! x86-64 target, whose SSE2 code handles two doubles per instruction); elsewhere the
//! portable loop runs. The summation order is fixed by the code, not by the machine, except
//! that fused multiply-adds round once per term instead of twice.
//!
//! Measured: see the CHANGELOG (the wide CRF's Newton-CD solve, whose time is about 60 %
//! dot products, went from 12.2 to 9.1 s with the AVX2 copy).

/// Number of independent partial sums.
const LANES: usize = 16;

/// aᵀb over the common length of `a` and `b`.
#[inline]
pub(crate) fn dot(a: &[f64], b: &[f64]) -> f64 {
    #[cfg(target_arch = "x86_64")]
    {
        if a.len().min(b.len()) >= LANES && has_avx2_fma() {
            // SAFETY: the processor supports AVX2 and FMA (checked just above), the only
            // requirement of a `target_feature` function.
            return unsafe { dot_avx2_fma(a, b) };
        }
    }
    lanes::<false>(a, b)
}

/// Whether the processor has AVX2 and FMA (std caches the detection).
#[cfg(target_arch = "x86_64")]
#[inline]
fn has_avx2_fma() -> bool {
    std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma")
}

/// The same loop compiled for AVX2 with fused multiply-adds.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn dot_avx2_fma(a: &[f64], b: &[f64]) -> f64 {
    lanes::<true>(a, b)
}

/// The loop: `LANES` partial sums over full chunks, a fixed pairwise reduction, then the
/// remainder. With `FUSED`, each term is a fused multiply-add (only where the processor
/// has the instruction; in software it would be slow).
#[inline(always)]
fn lanes<const FUSED: bool>(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a, b) = (&a[..n], &b[..n]);
    let mut acc = [0.0f64; LANES];
    let (ca, cb) = (a.chunks_exact(LANES), b.chunks_exact(LANES));
    let (ra, rb) = (ca.remainder(), cb.remainder());
    for (x, y) in ca.zip(cb) {
        for t in 0..LANES {
            acc[t] = if FUSED {
                x[t].mul_add(y[t], acc[t])
            } else {
                acc[t] + x[t] * y[t]
            };
        }
    }
    let mut width = LANES;
    while width > 1 {
        width /= 2;
        for t in 0..width {
            acc[t] += acc[t + width];
        }
    }
    let mut s = acc[0];
    for (x, y) in ra.iter().zip(rb) {
        s += x * y;
    }
    s
}

/// y ← y + αx over the common length of `x` and `y`.
#[inline]
pub(crate) fn axpy(alpha: f64, x: &[f64], y: &mut [f64]) {
    #[cfg(target_arch = "x86_64")]
    {
        if x.len().min(y.len()) >= LANES && has_avx2_fma() {
            // SAFETY: the processor supports AVX2 and FMA (checked just above), the only
            // requirement of a `target_feature` function.
            return unsafe { axpy_avx2_fma(alpha, x, y) };
        }
    }
    axpy_loop::<false>(alpha, x, y);
}

/// The update loop compiled for AVX2 with fused multiply-adds.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn axpy_avx2_fma(alpha: f64, x: &[f64], y: &mut [f64]) {
    axpy_loop::<true>(alpha, x, y);
}

/// The update loop; with `FUSED`, y_i = fma(α, x_i, y_i).
#[inline(always)]
fn axpy_loop<const FUSED: bool>(alpha: f64, x: &[f64], y: &mut [f64]) {
    for (yi, &xi) in y.iter_mut().zip(x) {
        *yi = if FUSED {
            alpha.mul_add(xi, *yi)
        } else {
            *yi + alpha * xi
        };
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Against the plain sum on integer-valued data, where every partial sum is exact in
    /// floating point, so any order and rounding mode gives the same value: all lengths
    /// around the chunk size, mismatched lengths and empty slices.
    #[test]
    fn matches_the_exact_sum() {
        for n in 0..70 {
            let a: Vec<f64> = (0..n).map(|i| ((i * 7) % 11) as f64 - 5.0).collect();
            let b: Vec<f64> = (0..n + 3).map(|i| ((i * 5) % 13) as f64 - 6.0).collect();
            let exact: f64 = a.iter().zip(&b).map(|(x, y)| x * y).sum();
            assert_eq!(dot(&a, &b), exact, "n = {n}");
            assert_eq!(dot(&b, &a), exact, "n = {n}");
            assert_eq!(lanes::<false>(&a, &b), exact, "n = {n}");
        }
    }

    /// y + αx exactly on integer data (every product and sum exact), for lengths around
    /// the dispatch threshold.
    #[test]
    fn axpy_matches_the_exact_update() {
        for n in 0..40 {
            let x: Vec<f64> = (0..n).map(|i| ((i * 7) % 11) as f64 - 5.0).collect();
            let mut y: Vec<f64> = (0..n).map(|i| ((i * 5) % 13) as f64 - 6.0).collect();
            let exact: Vec<f64> = x.iter().zip(&y).map(|(a, b)| b + 3.0 * a).collect();
            axpy(3.0, &x, &mut y);
            assert_eq!(y, exact, "n = {n}");
        }
    }

    /// On general data, within the textbook forward-error bound of a summation,
    /// |error| ≤ γ_n Σ|a_i b_i| with γ_n = nε/(1 − nε) ("Accuracy and stability of
    /// numerical algorithms", SIAM, 2002, §3.1).
    #[test]
    fn within_the_summation_error_bound() {
        let n = 1003;
        let a: Vec<f64> = (0..n).map(|i| ((i as f64) * 0.731).sin() * 1e3).collect();
        let b: Vec<f64> = (0..n).map(|i| ((i as f64) * 1.37).cos() / 7.0).collect();
        let abs: f64 = a.iter().zip(&b).map(|(x, y)| (x * y).abs()).sum();
        let reference: f64 = a.iter().zip(&b).map(|(x, y)| x * y).sum();
        let eps = f64::EPSILON / 2.0;
        let gamma = n as f64 * eps / (1.0 - n as f64 * eps);
        // Both the reference and the kernel carry at most γ_n Σ|a_i b_i| of error.
        assert!((dot(&a, &b) - reference).abs() <= 2.0 * gamma * abs);
    }
}
