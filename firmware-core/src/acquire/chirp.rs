//! The chirp dimension of the search: a frequency that changes linearly over the span.
//!
//! A transmitter whose frequency drifts at ν̇ (cycles per ps²) puts detection i at phase
//! ν·t + a·t² (t from the first detection, a = ν̇/2). A constant-frequency fold misses the
//! quadratic term by up to a·T² turns over a span T (per harmonic k: k·a·T²), so the fold
//! smears once ½·ν̇·T² approaches 1/(4k) turn. The search therefore folds with
//! φ(t) = ν·t + a·t² on a lattice of chirps a, refined stage by stage like the frequency
//! (the "accelerated" epoch folding of pulsar searches; Ransom, Eikenberry & Middleditch,
//! AJ 124, 1788, 2002, Fourier-domain form).
//!
//! ## Lattice
//! The final chirp step is `4·Δν/T` (Δν the final frequency step, T the span): a half-step
//! error leaves a·t² minus its best straight line, at most (Δa/2)·T²/8 = Δν·T/4 turn, which the
//! frequency step's own 1/(4n)-turn rule bounds to n·Δν·T/4 = 1/16 turn at harmonic n. Stage s
//! (window T/2^(S−s)) thins the chirp lattice by 4^(S−s), so every stage keeps the same
//! resolution in turns: the number of chirp points grows fourfold per doubling of the window.
//! Final chirp indices run over `−half ..= half` (half = the points needed so that every
//! |a| ≤ a_max lies within half a step of one).
//!
//! A wrong chirp a + δa over a window [0, T_s] is best compensated by the frequency ν − δa·T_s
//! (the slope of t² on [0, T_s]): peaks of neighbouring chirps lie on a ridge. A refinement step
//! of k chirp points at stage s therefore moves the frequency centre by −2k of that stage's
//! frequency steps (stage s−1's window is half as long), and the ±2 frequency neighbours are
//! searched around that centre.

/// Chirp coefficient a = ν̇/2 in Q0.128 cycles per ps², for a drift of `drift_ppb_per_s` of the
/// frequency `nu_q64` (Q0.64 cycles per ps); `None` beyond `i64::MAX / 4` (the range the
/// phase arithmetic keeps exact).
pub fn chirp_max_q128(nu_q64: u64, drift_ppb_per_s: u32) -> Option<i64> {
    // ν̇ = drift·1e-9·ν per second = drift·ν/1e21 per ps; a = ν̇/2 in Q0.128.
    let x = u128::from(drift_ppb_per_s) * u128::from(nu_q64);
    let a = ((x << 40) / 1_000_000_000_000_000_000_000u128) << 23;
    let a = i64::try_from(a).ok()?;
    (a <= i64::MAX / 4).then_some(a)
}

/// a·Δt² as a wrapping Q0.64 phase (turns) for `dt_ps` (signed, two's complement) and the
/// chirp `a_q128` (Q0.128 cycles per ps²): two multiplies.
#[inline]
pub fn phase_q64(dt_ps: u64, a_q128: i64) -> u64 {
    let d = i128::from(dt_ps as i64);
    let d2 = d.unsigned_abs().wrapping_mul(d.unsigned_abs());
    let (hi, lo) = ((d2 >> 64) as u64, d2 as u64);
    let a = i128::from(a_q128);
    let low = ((a * i128::from(lo)) >> 64) as u64;
    low.wrapping_add(a_q128.wrapping_mul(hi as i64) as u64)
}

/// a·Δt² in slots, Q64.64 (not wrapped): `None` when it does not fit.
pub fn slots_q64(dt_ps: i128, a_q128: i64) -> Option<i128> {
    let d2 = dt_ps.checked_mul(dt_ps)?;
    let (hi, lo) = (d2 >> 64, d2 & i128::from(u64::MAX));
    let a = i128::from(a_q128);
    a.checked_mul(hi)?.checked_add((a * lo) >> 64)
}

/// Frequency change 2·a·Δt (Q0.64 cycles per ps) over `dt_ps`.
pub fn nu_change_q64(dt_ps: i128, a_q128: i64) -> Option<i128> {
    Some(i128::from(a_q128).checked_mul(dt_ps)? >> 63)
}

/// The chirp lattice of one search.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub(crate) struct ChirpLattice {
    /// Final chirp step, Q0.128 cycles per ps².
    pub step_q128: i64,
    /// Final indices run over −half ..= half.
    pub half: u64,
    /// Number of stages after the first (S).
    pub stages: u8,
    /// Whether the fit should read the curvature: the allowance reaches 1/32 step, so the chirp
    /// can bend the residuals by about 1/18 turn at harmonic n at the 1.5 spans the
    /// confirmation extrapolates to (1.75·a/step turns; false without an allowance).
    pub fit_curvature: bool,
}

impl ChirpLattice {
    /// The lattice for |a| ≤ `max_q128` over a span of `span_ps` whose final frequency step is
    /// `step_nu_q64`.
    pub fn new(max_q128: i64, step_nu_q64: u64, span_ps: u64, stages: u8) -> Self {
        if max_q128 <= 0 {
            return Self {
                step_q128: 0,
                half: 0,
                stages,
                fit_curvature: false,
            };
        }
        // 4·Δν/T in Q0.128: (Δν << 62)/T · 16 (Δν < 2^64, so the shift fits).
        let step =
            ((u128::from(step_nu_q64) << 62) / u128::from(span_ps.max(1))).saturating_mul(16);
        let step = i64::try_from(step).unwrap_or(i64::MAX).max(1);
        Self {
            step_q128: step,
            half: cover(max_q128.unsigned_abs(), step.unsigned_abs()),
            stages,
            fit_curvature: u128::from(max_q128.unsigned_abs()) * 32
                >= u128::from(step.unsigned_abs()),
        }
    }

    /// Final chirp points (the chirp factor of the trial count).
    pub fn points(&self) -> u64 {
        2 * self.half + 1
    }

    /// Chirp stride (final indices) at `stage`: 4^(S − stage).
    pub fn stride(&self, stage: u8) -> u64 {
        1u64 << (2 * u32::from(self.stages.saturating_sub(stage)))
    }

    /// Stage-0 rows: −rows ..= rows, each `stride(0)` apart.
    pub fn rows0(&self) -> u64 {
        cover(self.half, self.stride(0))
    }

    /// Whether final index `c` is on the lattice `stage` may visit (within half its stride of
    /// the covered range).
    pub fn allowed(&self, c: i64, stage: u8) -> bool {
        let m = u128::from(c.unsigned_abs());
        if stage >= self.stages {
            m <= u128::from(self.half)
        } else {
            2 * m <= 2 * u128::from(self.half) + u128::from(self.stride(stage))
        }
    }

    /// Chirp coefficient of final index `c`, Q0.128 cycles per ps².
    pub fn value(&self, c: i64) -> i64 {
        c.saturating_mul(self.step_q128)
    }
}

/// Points m ≥ 0 so that every x in [−max, max] lies within `step`/2 of some k·step, |k| ≤ m.
fn cover(max: u64, step: u64) -> u64 {
    let (max, step) = (u128::from(max), u128::from(step.max(1)));
    if 2 * max <= step {
        0
    } else {
        u64::try_from((2 * max - step).div_ceil(2 * step)).unwrap_or(u64::MAX)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn phase_matches_the_float_product() {
        // Reference: f64 evaluation of a·t² mod 1 with a in cycles/ps² (the definition).
        let a_q128 = 17_000_000_000_000_000i64; // ≈ 5e-23 cycles/ps²: 0.1 ppm/s at 1 GHz
        for dt in [0u64, 1, 1_000_000_000, 3_000_000_000_000, 9_999_999_999_999] {
            let got = phase_q64(dt, a_q128) as f64 / 2f64.powi(64);
            let a = a_q128 as f64 / 2f64.powi(128);
            let want = (a * (dt as f64) * (dt as f64)).rem_euclid(1.0);
            let err = (got - want).abs().min(1.0 - (got - want).abs());
            assert!(err < 1e-3, "dt={dt}: {got} vs {want}");
            let full = slots_q64(i128::from(dt), a_q128).unwrap() as f64 / 2f64.powi(64);
            assert!((full - a * (dt as f64).powi(2)).abs() < 1e-3 * full.max(1.0));
        }
        assert_eq!(phase_q64(12_345, 0), 0);
        // A negative step (reordered detection) squares to the same phase.
        assert_eq!(phase_q64(5u64.wrapping_neg(), a_q128), phase_q64(5, a_q128));
    }

    #[test]
    fn drift_maps_to_half_the_frequency_rate() {
        // 1 GHz (1e-3 cycles/ps), 100 ppb/s: ν̇ = 1e-7·1e-3/1e12 = 1e-22 cycles/ps², a = 5e-23.
        let nu = (1e-3 * 2f64.powi(64)) as u64;
        let a = chirp_max_q128(nu, 100).unwrap() as f64 / 2f64.powi(128);
        assert!((a / 5e-23 - 1.0).abs() < 1e-6, "{a:e}");
        assert_eq!(chirp_max_q128(nu, 0), Some(0));
        assert_eq!(chirp_max_q128(u64::MAX, u32::MAX), None);
    }

    #[test]
    fn lattice_covers_the_range_and_thins_by_four() {
        let l = ChirpLattice {
            step_q128: 10,
            half: cover(1000, 10),
            stages: 3,
            fit_curvature: true,
        };
        assert_eq!(
            l.half, 100,
            "100 steps of 10 cover 1000 (the last within 5)"
        );
        assert_eq!(l.points(), 201);
        assert_eq!((l.stride(0), l.stride(3)), (64, 1));
        assert_eq!(l.rows0(), 2, "±128 covers ±100 within 32");
        assert!(l.allowed(128, 0) && !l.allowed(192, 0));
        assert!(l.allowed(100, 3) && !l.allowed(101, 3));
        assert_eq!(cover(5, 10), 0);
        let off = ChirpLattice::new(0, 1 << 40, 1 << 40, 3);
        assert_eq!((off.points(), off.rows0(), off.value(0)), (1, 0, 0));
        assert!(!off.fit_curvature);
        // Step (Δν·2^62/T)·16 = (16·2^62/2^62)·16 = 256: 1/32 step is 8.
        let small = ChirpLattice::new(8, 16, 1 << 62, 3);
        assert_eq!((small.step_q128, small.points()), (256, 1));
        assert!(small.fit_curvature && !ChirpLattice::new(7, 16, 1 << 62, 3).fit_curvature);
    }
}
