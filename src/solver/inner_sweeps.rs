//! The inner loop of Newton coordinate descent: cyclic coordinate descent on the penalised
//! quadratic model over the free set, with adaptive over-relaxation and the forcing-rule
//! stop.

use super::extrapolation::Extrapolation;
use super::newton_cd::CdOptions;
use crate::loss::LocalModel;
use crate::penalty::{soft_threshold, ResolvedPenalty};

/// Cyclic coordinate descent over `free` on the penalised quadratic model
/// `q(d) = gᵀd + ½dᵀHd + Σ_k λ_k|x_k + d_k|` (ℓ2 term included), with `target = x + d`
/// updated in place: for a = H_kk, b = g_k + (Hd)_k, c = x_k + d_k the new value is
/// `S(c − b/a, λ_k/a)`. Stops after a sweep whose largest scaled change a·|Δ| is at most
/// `threshold`, or after `cd.max_inner_sweeps`. Steps are over-relaxed as
/// `cd.relaxation` says (see [`over_relaxed`] and [`adaptive_relaxation`]); the stopping
/// test always measures the plain step. Returns the sweeps done, whether the threshold was
/// met, and the change of the penalised model over the sweeps ([`Sweeps`]).
///
/// Loops that run past 2K sweeps (K = `cd.extrapolation`) are Anderson-extrapolated every K
/// sweeps ([`try_candidate`]) unless the active set has at most `newton_fallback`
/// coordinates: the caller's subspace Newton step, taken when the sweeps stall, is then
/// the better cure (on the Longley data, 3 outer iterations with it against 36 when the
/// extrapolated sweeps settle instead of stalling).
#[allow(clippy::too_many_arguments)]
pub(crate) fn coordinate_sweeps(
    model: &mut dyn LocalModel,
    pen: &ResolvedPenalty,
    g: &[f64],
    free: &[usize],
    target: &mut [f64],
    threshold: f64,
    cd: &CdOptions,
    newton_fallback: usize,
) -> Sweeps {
    let adaptive = cd.relaxation.is_none() && model.inner_loop_hints().over_relaxation;
    // The per-coordinate data of the free set, gathered once into contiguous slots (the
    // free set is a scattered subset of the coordinates, and a sweep that reads g, λ,
    // H_kk and x + d at each k touches a new cache line of every one of those arrays).
    let mut slots: Vec<Slot> = free
        .iter()
        .map(|&k| {
            let a = model.curvature(k) + pen.l2[k];
            Slot {
                k,
                a,
                g: g[k],
                t: pen.l1[k] / a,
                l2: pen.l2[k],
                c: target[k],
            }
        })
        // A coordinate without positive finite curvature has no coordinate minimiser; it
        // keeps its value.
        .filter(|s| s.a > 0.0 && s.a.is_finite())
        .collect();
    let mut control = SweepControl::new(cd, adaptive, threshold);
    // The starting point x (the direction is zero on entry) and the extrapolation history.
    let start: Vec<f64> = slots.iter().map(|s| s.c).collect();
    let mut accel = Extrapolation::new(cd.extrapolation);
    while control.more() {
        let mut tally = Tally::default();
        for slot in slots.iter_mut() {
            if let Some(step) = slot.visit(model.hd(slot.k), control.omega, &mut tally) {
                model.step(slot.k, step);
            }
        }
        control.record(&tally);
        // Inner loops that settle within 2K sweeps (well-conditioned models) are never
        // extrapolated: the history starts after sweep K.
        if control.more()
            && control.count >= cd.extrapolation
            && slots.iter().filter(|s| s.c != 0.0 || s.t == 0.0).count() > newton_fallback
        {
            if let Some(candidate) = accel.record(slots.iter().map(|s| s.c)) {
                if let Some(change) =
                    try_candidate(model, &mut slots, &start, &candidate, control.model_change)
                {
                    control.jumped(change);
                }
                accel.record(slots.iter().map(|s| s.c));
            }
        } else {
            accel.clear();
        }
    }
    for slot in &slots {
        target[slot.k] = slot.c;
    }
    control.finish()
}

/// Moves the free coordinates to an extrapolated `candidate` when the penalised quadratic
/// model is lower there than at the current iterate, whose model change from the start is
/// `current`. With d = z − x (x = `start`, where the direction is zero), the model change is
/// evaluated exactly after the move:
///
/// ```text
/// q(d) − q(0) = Σ_k [ g_k d_k + ½ d_k (Hd)_k + ½ ℓ2_k (z_k² − x_k²) + λ_k (|z_k| − |x_k|) ]
/// ```
///
/// (one (Hd)_k per free coordinate: about the cost of a sweep). Returns the new model change
/// when the candidate is kept; otherwise the model is moved back and `None` returned.
fn try_candidate(
    model: &mut dyn LocalModel,
    slots: &mut [Slot],
    start: &[f64],
    candidate: &[f64],
    current: f64,
) -> Option<f64> {
    for (slot, &z) in slots.iter().zip(candidate) {
        if z != slot.c {
            model.step(slot.k, z - slot.c);
        }
    }
    let mut change = 0.0;
    for ((slot, &z), &x) in slots.iter().zip(candidate).zip(start) {
        let d = z - x;
        let hd = if d != 0.0 { model.hd(slot.k) } else { 0.0 };
        change += d * (slot.g + 0.5 * hd)
            + 0.5 * slot.l2 * (z * z - x * x)
            + slot.a * slot.t * (z.abs() - x.abs());
    }
    if change < current {
        for (slot, &z) in slots.iter_mut().zip(candidate) {
            slot.c = z;
        }
        return Some(change);
    }
    for (slot, &z) in slots.iter().zip(candidate) {
        if z != slot.c {
            model.step(slot.k, slot.c - z);
        }
    }
    None
}

/// What [`coordinate_sweeps`] did.
pub(crate) struct Sweeps {
    /// Sweeps run.
    pub(crate) count: usize,
    /// Whether the stopping threshold was met.
    pub(crate) settled: bool,
    /// q(d) − q(d₀) of the penalised quadratic model (≤ 0), summed over the steps.
    pub(crate) model_change: f64,
}

/// One free coordinate k of the inner loop: a = H_kk + ℓ2 weight, g_k, the threshold
/// t = λ_k/a of its soft-thresholding step (fixed for the whole inner loop, so divided once
/// rather than at every visit), its ℓ2 weight, and the current value c = x_k + d_k.
struct Slot {
    k: usize,
    a: f64,
    g: f64,
    t: f64,
    l2: f64,
    c: f64,
}

impl Slot {
    /// One coordinate step given hd = (Hd)_k: moves c to the (over-relaxed) coordinate
    /// minimiser and returns the step z − c to apply to the model, or `None` when c is
    /// already the minimiser. Adds the plain step's size and the exact model change to
    /// `tally`.
    #[inline]
    fn visit(&mut self, hd: f64, omega: f64, tally: &mut Tally) -> Option<f64> {
        let a = self.a;
        let c = self.c;
        let b = self.g + self.l2 * c + hd;
        let z = soft_threshold(c - b / a, self.t);
        if z == c {
            return None;
        }
        let change = a * (z - c).abs();
        tally.biggest = tally.biggest.max(change);
        tally.energy += change * (z - c).abs();
        let z = over_relaxed(c, z, omega);
        // Exact change of the penalised quadratic model along coordinate k:
        // b·δ + ½aδ² + λ_k(|z| − |c|), with λ_k = a·t.
        let step = z - c;
        tally.change += step * (b + 0.5 * a * step) + a * self.t * (z.abs() - c.abs());
        self.c = z;
        Some(step)
    }
}

/// What one sweep did: the largest scaled plain step
/// a·|z − c|, the scaled energy Σ a·(z − c)², and the model change.
#[derive(Default, Clone, Copy)]
struct Tally {
    biggest: f64,
    energy: f64,
    change: f64,
}

/// The sweep-to-sweep decisions of the inner loop: when to stop, and the over-relaxation
/// factor ω of the next sweep.
struct SweepControl {
    max_sweeps: usize,
    threshold: f64,
    adaptive: bool,
    /// ω for the next sweep.
    omega: f64,
    /// Scaled energy of the previous sweep, when that sweep ran with the current ω.
    previous: Option<f64>,
    count: usize,
    settled: bool,
    model_change: f64,
}

impl SweepControl {
    fn new(cd: &CdOptions, adaptive: bool, threshold: f64) -> Self {
        Self {
            max_sweeps: cd.max_inner_sweeps.max(1),
            threshold,
            adaptive,
            omega: cd.relaxation.unwrap_or(1.0),
            previous: None,
            count: 0,
            settled: false,
            model_change: 0.0,
        }
    }

    /// Whether another sweep is due.
    fn more(&self) -> bool {
        !self.settled && self.count < self.max_sweeps
    }

    /// Books a finished sweep: stop when its largest scaled step is within the threshold;
    /// otherwise, with adaptive ω, re-estimate ω from the contraction of the step energy
    /// between two sweeps run with the same ω.
    fn record(&mut self, tally: &Tally) {
        self.count += 1;
        self.model_change += tally.change;
        if tally.biggest <= self.threshold {
            self.settled = true;
            return;
        }
        if self.adaptive && self.count >= 2 {
            if let Some(e) = self.previous.filter(|&e| e > 0.0) {
                let w = adaptive_relaxation((tally.energy / e).sqrt(), self.omega);
                if w > self.omega {
                    self.omega = w;
                    self.previous = None;
                    return;
                }
            }
            self.previous = Some(tally.energy);
        }
    }

    /// Books a kept extrapolation: the model change from the start is now `change`, and the
    /// contraction observed before the jump says nothing about the sweeps after it.
    fn jumped(&mut self, change: f64) {
        self.model_change = change;
        self.previous = None;
    }

    fn finish(self) -> Sweeps {
        Sweeps {
            count: self.count,
            settled: self.settled,
            model_change: self.model_change,
        }
    }
}

/// The SOR factor ω' for the next sweeps, given the contraction `rate` of the update sizes
/// per sweep observed under factor ω. Young's relation for consistently ordered systems,
/// (rate + ω − 1)² = rate·ω²·μ², recovers the squared Jacobi spectral radius μ², and
/// ω' = 2/(1 + √(1 − μ²)) is the optimal factor ("Iterative solution of large linear
/// systems", Academic Press, 1971; the same re-estimation loop is the adaptive SOR of
/// "Applied iterative methods", Academic Press, 1981). Early sweeps damp the fast error
/// components first and underestimate μ, so ω only grows from one estimate to the next;
/// clamped to [1, 1.8], a margin below the divergence bound 2 for a noisy estimate.
fn adaptive_relaxation(rate: f64, omega: f64) -> f64 {
    if !(rate > 0.0 && rate < 1.0) {
        return omega;
    }
    let mu2 = (rate + omega - 1.0).powi(2) / (rate * omega * omega);
    if mu2.is_nan() || mu2 >= 1.0 {
        return omega;
    }
    (2.0 / (1.0 + (1.0 - mu2).sqrt())).clamp(1.0, 1.8)
}

/// Over-relaxed coordinate update: from c, the exact coordinate minimiser z is replaced by
/// r = c + ω(z − c) when c, z and r lie in one closed orthant with z ≠ 0. There the penalised
/// model is a smooth quadratic along the coordinate, symmetric about z, so for ω ∈ (0, 2)
/// the step still decreases it (by a·(ω − ω²/2)·(z − c)², against a·(z − c)²/2 for ω = 1):
/// successive over-relaxation restricted to the current orthant ("Iterative solution of
/// large linear systems", Academic Press, 1971, for SOR on symmetric positive-definite
/// systems). Across a kink (a sign change, or z = 0) the plain update is kept, so zeros stay
/// exact.
#[inline]
fn over_relaxed(c: f64, z: f64, omega: f64) -> f64 {
    if omega == 1.0 || z == 0.0 || (c != 0.0 && c.signum() != z.signum()) {
        return z;
    }
    let r = c + omega * (z - c);
    if r.signum() == z.signum() && r != 0.0 {
        r
    } else {
        z
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// φ(t) = b·t + ½a·t² + λ|c + t|, the penalised model along one coordinate from c.
    fn along(a: f64, b: f64, lambda: f64, c: f64, t: f64) -> f64 {
        b * t + 0.5 * a * t * t + lambda * (c + t).abs()
    }

    #[test]
    fn over_relaxed_steps_still_descend_and_keep_zeros_exact() {
        // Deterministic grid over curvature, slope, λ, start and ω.
        for &a in &[0.3, 1.0, 7.0] {
            for &b in &[-3.0, -0.4, 0.0, 0.2, 2.5] {
                for &lambda in &[0.0, 0.1, 1.0] {
                    for &c in &[-2.0, -0.05, 0.0, 0.3, 4.0] {
                        let z = soft_threshold(c - b / a, lambda / a);
                        for &omega in &[0.5, 1.0, 1.5, 1.9] {
                            let r = over_relaxed(c, z, omega);
                            let f0 = along(a, b, lambda, c, 0.0);
                            let fr = along(a, b, lambda, c, r - c);
                            assert!(fr <= f0 + 1e-12, "a {a} b {b} λ {lambda} c {c} ω {omega}");
                            if z == 0.0 {
                                assert_eq!(r, 0.0);
                            }
                            if r != z {
                                // Relaxed only inside one orthant.
                                assert_eq!(r.signum(), z.signum());
                                assert!(c == 0.0 || c.signum() == z.signum());
                            }
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn adaptive_relaxation_matches_the_model_problem_optimum() {
        // Tridiagonal (−1, 2, −1) of order N, a consistently ordered matrix: the Jacobi
        // spectral radius is μ = cos(π/(N+1)), Gauss–Seidel contracts by μ² per sweep and
        // the optimal SOR factor is 2/(1 + sin(π/(N+1))) ("Iterative solution of large
        // linear systems", Academic Press, 1971; textbook closed form).
        for n in [3usize, 5, 8] {
            let h = std::f64::consts::PI / (n + 1) as f64;
            let mu = h.cos();
            let optimum = 2.0 / (1.0 + h.sin());
            let from_gs = adaptive_relaxation(mu * mu, 1.0);
            assert!((from_gs - optimum.min(1.8)).abs() < 1e-12, "N {n}");
            // At the optimum SOR contracts by ω − 1: the estimate is a fixed point.
            if optimum < 1.8 {
                let again = adaptive_relaxation(optimum - 1.0, optimum);
                assert!((again - optimum).abs() < 1e-12);
            }
        }
        // No information, no change.
        assert_eq!(adaptive_relaxation(1.2, 1.3), 1.3);
        assert_eq!(adaptive_relaxation(0.0, 1.0), 1.0);
    }
}
