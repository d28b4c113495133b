//! The drift estimate: how fast the loop's frequency moves, for holdover and steering.
//!
//! A type-II loop follows a frequency ramp with a constant lag, but it holds no state for the
//! ramp itself, so a model frozen at the start of a cut would miss ½·ν̇·Δt² of phase: a full
//! slot after 1 s at 0.02 ppm/s and 100 MHz. The estimate samples the loop's frequency every
//! 2^32 ps (4.3 ms, about the loop's correlation time at the default bandwidth) and averages the
//! slope between samples over 2^[`EMA_SHIFT`] samples (about 2.2 s), an exponentially weighted
//! finite difference; the first 2^EMA_SHIFT samples are averaged with equal weights. It also
//! keeps a smoothed frequency (carried forward by the slope, corrected by 2^−4 of each sample's
//! innovation), and the innovations' mean square, from which the holdover's bound takes the
//! standard errors of both (`docs/holdover.md` §2). Samples are skipped while the wide gear is
//! engaged, and the few after it only settle the smoothing: a step's transient is not a drift.

/// log2 of the sampling interval, ps.
pub(super) const SAMPLE_SHIFT: u32 = 32;
/// The slope average runs over about 2^EMA_SHIFT samples.
pub(super) const EMA_SHIFT: u32 = 9;
/// Samples averaged with equal weights before the average turns exponential (so the start
/// carries no bias toward zero).
pub(super) const MATURE_SAMPLES: u32 = 1 << EMA_SHIFT;
/// Samples before the slope is used at all (about 0.27 s).
pub(super) const FIRST_USE: u32 = 64;
/// The smoothed frequency follows its samples with gain 2^-SMOOTH_SHIFT.
const SMOOTH_SHIFT: u32 = 4;
/// Samples after a transient that only settle the smoothed frequency (gain 1/2).
const SETTLE: u8 = 4;

/// Running slope of the loop frequency.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(super) struct DriftEstimate {
    t_mark: u64,
    nu_mark_q64: u64,
    /// Change of ν (Q0.64 cycles/ps) per 2^32 ps, with 16 more fractional bits.
    rate_q16: i64,
    /// Mean square of the frequency samples' deviation from their prediction (the smoothed
    /// frequency carried forward by the slope), (Q0.64 cycles/ps)².
    var: u64,
    /// Smoothed frequency at `t_mark`, Q0.64 cycles/ps.
    nu_smooth_q64: u64,
    /// Samples still to settle after a transient: they move the smoothed frequency only.
    settle: u8,
    samples: u32,
}

impl DriftEstimate {
    pub(super) const fn new() -> Self {
        Self {
            t_mark: 0,
            nu_mark_q64: 0,
            rate_q16: 0,
            var: 0,
            nu_smooth_q64: 0,
            settle: 0,
            samples: 0,
        }
    }

    /// Start over (a cold lock): no slope known.
    pub(super) fn reset(&mut self, t_ps: u64, nu_q96: u128) {
        *self = Self::new();
        self.remark(t_ps, nu_q96);
    }

    /// Take a new reference point without a sample (during a transient); the slope is kept,
    /// the smoothed frequency restarts from this one, and the next [`SETTLE`] samples only
    /// settle it.
    pub(super) fn remark(&mut self, t_ps: u64, nu_q96: u128) {
        self.t_mark = t_ps;
        self.nu_mark_q64 = (nu_q96 >> 32) as u64;
        self.nu_smooth_q64 = self.nu_mark_q64;
        self.settle = SETTLE;
    }

    /// Sample the loop's frequency at `t_ps` once a sampling interval has passed.
    #[inline]
    pub(super) fn observe(&mut self, t_ps: u64, nu_q96: u128) {
        let dt = t_ps.wrapping_sub(self.t_mark);
        if dt >> SAMPLE_SHIFT == 0 || dt >> 62 != 0 {
            return;
        }
        self.sample(t_ps, nu_q96, dt);
    }

    #[inline(never)]
    fn sample(&mut self, t_ps: u64, nu_q96: u128, dt: u64) {
        let nu = (nu_q96 >> 32) as u64;
        let dnu = i128::from(nu.wrapping_sub(self.nu_mark_q64) as i64);
        // Per 2^32 ps with 16 fractional bits: Δν·2^48/Δt.
        let d = ((dnu << (SAMPLE_SHIFT + 16)) / i128::from(dt))
            .clamp(i128::from(i64::MIN >> 1), i128::from(i64::MAX >> 1)) as i64;
        // The smoothed frequency, carried forward by the slope, against the new sample.
        let pred = self
            .nu_smooth_q64
            .wrapping_add(Self::advance(self.rate_q16, dt) as u64);
        let innov = nu.wrapping_sub(pred) as i64;
        self.t_mark = t_ps;
        self.nu_mark_q64 = nu;
        if self.settle > 0 {
            self.settle -= 1;
            self.nu_smooth_q64 = pred.wrapping_add((innov >> 1) as u64);
            return;
        }
        // Both averages stay within their inputs' ranges (|d| < 2^62, sq < 2^62): no overflow.
        let sq = innov.unsigned_abs().min(1 << 31).pow(2);
        self.samples = self.samples.saturating_add(1);
        let step = |x: i64| {
            if self.samples < MATURE_SAMPLES {
                x / i64::from(self.samples)
            } else {
                x >> EMA_SHIFT
            }
        };
        self.rate_q16 += step(d - self.rate_q16);
        self.var = (self.var as i64 + step(sq as i64 - self.var as i64)) as u64;
        self.nu_smooth_q64 = pred.wrapping_add((innov >> SMOOTH_SHIFT) as u64);
    }

    /// Change of ν (Q0.64) over `dt` ps at slope `rate_q16`.
    fn advance(rate_q16: i64, dt: u64) -> i64 {
        ((i128::from(rate_q16) * i128::from(dt)) >> (SAMPLE_SHIFT + 16)) as i64
    }

    /// The smoothed frequency carried to `t_ps` (Q0.64 cycles/ps), once the slope is in use.
    pub(super) fn nu_at(&self, t_ps: u64) -> Option<u64> {
        let dt = i128::from(t_ps) - i128::from(self.t_mark);
        let adv = (i128::from(self.rate_q16) * dt) >> (SAMPLE_SHIFT + 16);
        (self.samples >= FIRST_USE).then(|| self.nu_smooth_q64.wrapping_add(adv as u64))
    }

    /// Standard error of the smoothed frequency (Q0.64 cycles/ps): the innovations' rms
    /// scaled by the smoothing's √(g/(2 − g)), g = 2^-SMOOTH_SHIFT.
    pub(super) fn nu_error_q64(&self) -> u64 {
        (self.var / ((2 << SMOOTH_SHIFT) - 1)).isqrt()
    }

    /// Standard error of the slope (Q0.64 cycles/ps per 2^32 ps): an average of differences
    /// telescopes to a difference over its span, so √2 times the frequency noise over the
    /// span in samples (n, then 2^EMA_SHIFT). `None` before [`FIRST_USE`] samples.
    pub(super) fn slope_error_q64(&self) -> Option<u64> {
        let span = u64::from(self.samples.min(MATURE_SAMPLES));
        (self.samples >= FIRST_USE).then(|| self.var.isqrt().saturating_mul(141) / (100 * span))
    }

    /// The slope: change of ν (Q0.64 cycles/ps) per 2^32 ps, 16 fractional bits, clamped to
    /// ±`max_q16`.
    pub(super) fn rate_q16(&self, max_q16: i64) -> i64 {
        self.rate_q16.clamp(-max_q16, max_q16)
    }
}
