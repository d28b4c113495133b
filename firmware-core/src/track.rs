//! Stage 2b — tracking: follow the transmitter's phase and period through drift, and notice loss.
//!
//! A type-II digital PLL (Rice, Digital Communications: A Discrete-Time Approach, 2009, App. C):
//! loop filter F(z) = K1 + K2/(1 − z⁻¹), with θ = B_n·T_u/(ζ + 1/(4ζ)),
//! K1 = 4ζθ/(1 + 2ζθ + θ²), K2 = 4θ²/(1 + 2ζθ + θ²) (phase-detector and NCO gains 1). The gains
//! are computed once, in fixed point, from integer settings ([`TrackConfig::new`]).
//!
//! ## Event-driven updates
//! Detections come at irregular times, so the NCO is a frequency ν (cycles per ps, Q0.96) and an
//! anchor (time, position in slots as Q64.64): the position of any time is the anchor's plus
//! Δt·ν, exact over gaps of any length. A detection within ±w (`window`) of its nearest expected
//! arrival position gives the phase error e (slot fraction, signed): the anchor moves to it with
//! its position corrected by −K1·e, and ν changes by −K2·e/T_u, T_u = 1/R the mean time between
//! in-window *signal* detections. In the continuous limit this is the loop with ω_n² = K2·R² and
//! 2ζω_n = K1·R, i.e. ω_n = 2B_n/(ζ + 1/(4ζ)). Noise detections inside the window move the loop at
//! random but carry no phase information, so R counts signal only; they add to the measurement
//! noise. Positions are per channel, so time-bin peaks and per-channel delays do not pull the
//! loop.
//!
//! ## Choosing B_n [derived from the loop above]
//! A type-II loop follows a frequency offset with zero error and lags a frequency ramp by
//! e_r = a/ω_n², where a = D·f_rep slots/s² for a drift of D (fractional per second). The
//! integrator (the period estimate) then lags the true frequency by 2ζ·a/ω_n, the proportional
//! path making up the rest: a fractional period bias of 2ζ·D/ω_n (1.2e-9 for 0.1 ppm/s at
//! ω_n = 117 rad/s). The
//! measurement noise σ (slots rms per signal detection: σ_j² plus (n_w/R)·w²/3 for n_w uniform
//! noise detections per second inside the window) leaves a phase error σ_φ² = σ²·2B_n/R. Minimising e_r² + σ_φ² gives
//! B_n⁵ = 2a²R/(κ⁴σ²), κ = ω_n/B_n = 8ζ/(4ζ² + 1); f_rep cancels once σ is in ps and D in ppb/s:
//! B_n⁵ = 2·R·D_ppb²·10⁶/(κ⁴·σ_ps²) ([`bandwidth_for_mhz`]), and at the optimum e_r = σ_φ/2.
//! Examples (ζ = 0.707): R = 10⁶/s, 20 ppb/s, 35 ps → B_n = 139 Hz, lag 2.9e-5 slot at 100 MHz;
//! R = 10⁴/s, 100 ppb/s, 35 ps → 105 Hz (B_nT_u = 0.011), lag 2.5e-4 slot. Both lags are far
//! below a gate half-width (≥ 0.05 slot). Keep B_n·T_u ≤ 0.1 (checked) so the discrete loop
//! behaves like the continuous one.
//!
//! ## Decimated updates (`update_every` = N)
//! The loop filter may run once per N in-window detections instead of at each one: the
//! residuals are summed between updates (integrate and dump), and at the N-th the loop is
//! updated with their mean ē. N is a power of two so the mean is a shift, and N = 1 is the
//! per-detection loop above, bit for bit. The update interval is then T_u' = N·T_u, and the
//! gains are Rice's (App. C) for that interval, so the closed loop keeps its noise bandwidth B_n
//! and damping ζ in time: θ' = B_n·T_u'/(ζ + 1/(4ζ)), K1' = 4ζθ'/(1 + 2ζθ' + θ'²),
//! K2' = 4θ'²/(1 + 2ζθ' + θ'²); the anchor moves by −K1'·ē and ν by −K2'·ē/T_u'.
//! How they map to the per-detection gains (derived here): for small θ, K1 ≈ 4ζθ and K2 ≈ 4θ², so
//! K1' ≈ N·K1 and K2'/T_u' ≈ N·K2/T_u: applied to a mean of N residuals, each detection moves the
//! loop as much as before, only later. The mean of N residuals has variance σ²/N at the rate
//! R/N, so the phase noise σ²·2B_n·T_u' /N = σ²·2B_n/R is unchanged; what is lost is up to N − 1
//! detections of delay (half of T_u' on average), negligible while B_n·T_u' ≪ 1. The check
//! B_n·T_u' ≤ 0.1 applies to the update interval, which bounds N. Between updates a detection
//! costs a few adds and compares beyond locating it.
//!
//! ## Fixed-point cost
//! Everything derived from the settings (gains, window in Q0.64, max rms²) is computed in
//! [`TrackConfig::new`]. On the hot path the 128-bit state is only added and shifted: the
//! products are 64×64→high 64 ([`crate::clock`]'s `mul_hi`) and 32×32→64, so a 32-bit core
//! never calls a 128-bit multiply in the steady state.
//!
//! ## Lock quality and loss
//! Two averages over about 2^`average_shift` detections: the fraction of detections inside the
//! window, and the mean squared residual of those inside. The lock is lost when the fraction
//! falls below the midpoint between its value at lock and the value uniform noise would give (a
//! phase jump or a frequency step moves the peaks out of the windows), when the rms residual
//! exceeds `max_rms`, or when no in-window detection came for `blackout_ps`. Reacquisition and
//! slot-numbering continuity across the gap are decided by the recovered clock.
//!
//! ## Delay calibration
//! While locked, each channel keeps a 32-bin histogram of its residuals over ±1/2 slot and the
//! sum of those within ±w; [`Tracker::delay_corrections_ps`] turns them into per-channel delay
//! corrections (the noise inside the window is estimated from a guard band of equal width).

use crate::acquire::fold::ChannelPattern;
use crate::acquire::AcquiredLock;
use crate::clock::{mul_hi, Located, SlotPos};
use crate::gates::MAX_CHANNELS;
use core::fmt;
use fixed::types::{U0F32, U0F64, U32F32};

/// Tracking settings before validation.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
// No defmt::Format: the fixed-point fields have none.
pub struct TrackParams {
    /// Loop noise bandwidth B_n in mHz.
    pub bandwidth_mhz: u32,
    /// Damping ζ in thousandths (707 for 1/√2).
    pub damping_milli: u32,
    /// Expected rate R of signal detections (noise excluded) inside the window, per second
    /// (at most 10¹²: one per ps).
    pub rate_per_s: u64,
    /// Half-width w of the window around each expected position, slot fraction (0, 1/4].
    pub window: U0F32,
    /// Averages run over about 2^shift detections (1..=16).
    pub average_shift: u8,
    /// Lock is lost after this long without an in-window detection, ps.
    pub blackout_ps: u64,
    /// Lock is lost when the rms residual of in-window detections exceeds this, slot fraction.
    pub max_rms: U0F32,
    /// Frequency uncertainty assumed when bridging a gap, parts per 10⁹.
    pub bridge_ppb: u32,
    /// The loop filter runs once per this many in-window detections, on their mean residual
    /// (a power of two, 1..=65536; 1: at every one).
    pub update_every: u32,
}

impl TrackParams {
    /// Defaults: ζ = 0.707, w = 1/16 slot, averages over 256, max rms w/2, bridge 50 ppb (about
    /// five times the loop's frequency rms at the rates of the examples above), an update at
    /// every in-window detection.
    pub const fn new(bandwidth_mhz: u32, rate_per_s: u64, blackout_ps: u64) -> Self {
        Self {
            bandwidth_mhz,
            damping_milli: 707,
            rate_per_s,
            window: U0F32::from_bits(1 << 28),
            average_shift: 8,
            blackout_ps,
            max_rms: U0F32::from_bits(1 << 27),
            bridge_ppb: 50,
            update_every: 1,
        }
    }
}

/// Why tracking settings were refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum TrackConfigError {
    /// Zero bandwidth or zero rate.
    Zero,
    /// Rate above 10¹² per second.
    Rate,
    /// B_n·T_u' above 0.1 (loop too wide for its update interval T_u' = update_every/R).
    TooWide,
    /// Damping outside 0.1..=4.
    Damping,
    /// Window zero or wider than a quarter slot.
    Window,
    /// Averaging shift outside 1..=16.
    AverageShift,
    /// Zero blackout time or zero max rms.
    Limits,
    /// `update_every` not a power of two in 1..=65536.
    UpdateEvery,
}

impl fmt::Display for TrackConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Zero => write!(f, "bandwidth_mhz and rate_per_s must be nonzero"),
            Self::Rate => write!(f, "rate_per_s must be at most 10^12"),
            Self::TooWide => write!(
                f,
                "bandwidth_mhz · update_every / rate_per_s exceeds 0.1 (B_n·T_u)"
            ),
            Self::Damping => write!(f, "damping_milli must lie in 100..=4000"),
            Self::Window => write!(f, "window must lie in (0, 1/4] slot"),
            Self::AverageShift => write!(f, "average_shift must lie in 1..=16"),
            Self::Limits => write!(f, "blackout_ps and max_rms must be nonzero"),
            Self::UpdateEvery => write!(f, "update_every must be a power of two in 1..=65536"),
        }
    }
}

impl core::error::Error for TrackConfigError {}

/// Validated tracking settings with the loop gains and the constants the hot path uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
// No defmt::Format: the fixed-point fields have none.
pub struct TrackConfig {
    p: TrackParams,
    k1: u64,
    k2: u64,
    /// K2/T_u': ν change (cycles/ps, Q0.96) per Q0.32 unit of mean phase error.
    g2_q96: u128,
    /// Window half-width w, Q0.64 slot fraction.
    window_q64: u64,
    /// max_rms², Q0.64 slot fraction squared.
    max_r2_q64: u64,
    /// log2(update_every): the mean of the summed residuals is a shift.
    mean_shift: u32,
}

impl TrackConfig {
    /// Check the settings and compute K1, K2 (Rice App. C) in Q0.64 for the update interval
    /// T_u' = update_every/R.
    pub fn new(p: TrackParams) -> Result<Self, TrackConfigError> {
        if p.bandwidth_mhz == 0 || p.rate_per_s == 0 {
            return Err(TrackConfigError::Zero);
        }
        if p.rate_per_s > 1_000_000_000_000 {
            return Err(TrackConfigError::Rate);
        }
        if !(100..=4000).contains(&p.damping_milli) {
            return Err(TrackConfigError::Damping);
        }
        if p.window == U0F32::ZERO || p.window.to_bits() > 1 << 30 {
            return Err(TrackConfigError::Window);
        }
        if !(1..=16).contains(&p.average_shift) {
            return Err(TrackConfigError::AverageShift);
        }
        if p.blackout_ps == 0 || p.max_rms == U0F32::ZERO {
            return Err(TrackConfigError::Limits);
        }
        if !p.update_every.is_power_of_two() || p.update_every > 1 << 16 {
            return Err(TrackConfigError::UpdateEvery);
        }
        let rate = u128::from(p.rate_per_s);
        let n = u128::from(p.update_every);
        // B_n·T_u' = B_mHz·N / (1000·R), Q0.64.
        let bt = ((u128::from(p.bandwidth_mhz) * n) << 64) / (1000 * rate);
        if bt > (1u128 << 64) / 10 {
            return Err(TrackConfigError::TooWide);
        }
        let z = u128::from(p.damping_milli);
        // θ = B_nT_u / (ζ + 1/(4ζ)) = B_nT_u · 4ζ / (4ζ² + 1), ζ = z/1000.
        let theta = bt * 4000 * z / (4 * z * z + 1_000_000);
        let d = (1u128 << 64) + 2 * z * theta / 1000 + ((theta * theta) >> 64);
        let k1 = ((4 * z * theta / 1000) << 64) / d;
        let k2 = 4 * theta * theta / d;
        // K2/T_u' in Q0.96 per Q0.32 error: K2·2^32·R/(N·10^12) = K2·R·2^20/(244140625·N),
        // below 2^92 (K2 < 0.04 at B_n·T_u' ≤ 0.1, R ≤ 10^12), as the hot path needs.
        let g2_q96 = k2.saturating_mul(rate).saturating_mul(1 << 20) / 244_140_625 / n;
        let max = u64::from(p.max_rms.to_bits());
        Ok(Self {
            p,
            k1: u64::try_from(k1).unwrap_or(u64::MAX),
            k2: u64::try_from(k2).unwrap_or(u64::MAX),
            g2_q96,
            window_q64: u64::from(p.window.to_bits()) << 32,
            max_r2_q64: max * max,
            mean_shift: p.update_every.trailing_zeros(),
        })
    }

    /// The settings.
    pub const fn params(&self) -> &TrackParams {
        &self.p
    }

    /// Proportional gain K1 per loop update (Q0.64).
    pub fn k1(&self) -> U0F64 {
        U0F64::from_bits(self.k1)
    }

    /// Integral gain K2 per loop update (Q0.64).
    pub fn k2(&self) -> U0F64 {
        U0F64::from_bits(self.k2)
    }
}

/// x·n/d for d > 0, saturating instead of overflowing.
fn mul_div(x: u128, n: u128, d: u128) -> u128 {
    (x / d)
        .saturating_mul(n)
        .saturating_add((x % d).saturating_mul(n) / d)
}

/// Optimal loop bandwidth in mHz for in-window rate `rate_per_s`, drift `drift_ppb_per_s` and
/// per-detection phase noise `sigma_ps` (rms, ps), damping ζ = `damping_milli`/1000:
/// B_n⁵ = 2·R·D²·10⁶/(κ⁴·σ²), κ = 8ζ/(4ζ² + 1). Not clamped to B_n·T_u ≤ 0.1.
pub fn bandwidth_for_mhz(
    rate_per_s: u64,
    drift_ppb_per_s: u64,
    sigma_ps: u64,
    damping_milli: u32,
) -> u64 {
    let s2 = u128::from(sigma_ps.max(1)).pow(2);
    // 10^15 mHz⁵ per Hz⁵, 10^6 from the units.
    let mut x = mul_div(
        (2 * u128::from(rate_per_s)).saturating_mul(u128::from(drift_ppb_per_s).pow(2)),
        1_000_000_000_000_000_000_000,
        s2,
    );
    let z = u128::from(damping_milli.max(1));
    // (1/κ)^4 = ((4z² + 10^6) / (8000·z))^4.
    for _ in 0..4 {
        x = mul_div(x, 4 * z * z + 1_000_000, 8000 * z);
    }
    // Integer fifth root by bisection.
    let (mut lo, mut hi) = (0u64, 1u64 << 26);
    while lo < hi {
        let mid = lo + (hi - lo).div_ceil(2);
        match u128::from(mid).checked_pow(5) {
            Some(v) if v <= x => lo = mid,
            _ => hi = mid - 1,
        }
    }
    lo
}

/// ⌊e·k/2^64⌋ for signed e: the unsigned high product of e's bits, less k when e < 0
/// (e's bits are e + 2^64 then). The result fits in an i64, so the wrapping sum is exact.
fn mul_hi_signed(e: i64, k: u64) -> i64 {
    let hi = mul_hi(e as u64, k);
    (if e < 0 { hi.wrapping_sub(k) } else { hi }) as i64
}

/// ⌊Δt·ν/2^32⌋ for ν = hi·2^32 + lo and Δt < 2^62 (< 2^127), and whether the division left a
/// remainder: two 64×64→128 products on 64-bit hosts, [`advance_limbs`] elsewhere.
#[inline(always)]
fn advance(dt_ps: u64, hi: u64, lo: u32) -> (u128, bool) {
    #[cfg(target_pointer_width = "64")]
    {
        let part = u128::from(dt_ps) * u128::from(lo);
        (
            u128::from(dt_ps) * u128::from(hi) + (part >> 32),
            part as u32 != 0,
        )
    }
    #[cfg(not(target_pointer_width = "64"))]
    {
        advance_limbs(dt_ps, hi, lo)
    }
}

/// [`advance`] from `mul_hi` and 32×32→64 products, for 32-bit cores (where a 128-bit multiply
/// is a library call): Δt·lo/2^32 = (Δt div 2^32)·lo + (Δt mod 2^32)·lo/2^32.
#[cfg_attr(target_pointer_width = "64", allow(dead_code))]
#[inline(always)]
fn advance_limbs(dt_ps: u64, hi: u64, lo: u32) -> (u128, bool) {
    let lo = u64::from(lo);
    let whole = (u128::from(mul_hi(dt_ps, hi)) << 64) | u128::from(dt_ps.wrapping_mul(hi));
    let low = (dt_ps & 0xFFFF_FFFF) * lo;
    let part = (dt_ps >> 32) * lo + (low >> 32);
    (whole + u128::from(part), low as u32 != 0)
}

/// ⌊e_q32·g/2^32⌋ (the ν step, Q0.96) for a 32-bit error and g < 2^96 (checked in
/// [`TrackConfig::new`]): one 128-bit product on 64-bit hosts, [`nu_step_limbs`] elsewhere.
#[inline(always)]
fn nu_step_q96(e_q32: i32, g_q96: u128) -> i128 {
    #[cfg(target_pointer_width = "64")]
    {
        (i128::from(e_q32) * g_q96 as i128) >> 32
    }
    #[cfg(not(target_pointer_width = "64"))]
    {
        nu_step_limbs(e_q32, g_q96)
    }
}

/// [`nu_step_q96`] from three 32×32→64 products of g's 32-bit limbs.
#[cfg_attr(target_pointer_width = "64", allow(dead_code))]
#[inline(always)]
fn nu_step_limbs(e_q32: i32, g_q96: u128) -> i128 {
    let e = i64::from(e_q32);
    let limb = |k: u32| i64::from((g_q96 >> k) as u32);
    // |e| ≤ 2^31 and each limb < 2^32, so each product fits in an i64; the two upper ones are
    // whole after the shift by 32.
    (i128::from(e * limb(64)) << 32) + i128::from(e * limb(32)) + i128::from((e * limb(0)) >> 32)
}

/// Where the receiver stands with the transmitter's clock.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LockState {
    /// Cold start: searching the full prior.
    Acquiring,
    /// Tracking: slots are given.
    Locked,
    /// Lock just lost; reacquisition starts with the next detection.
    Lost,
    /// Searching again around the last known period.
    Reacquiring,
}

/// Why the lock was lost.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LossCause {
    /// No in-window detection for `blackout_ps`.
    Blackout,
    /// The in-window fraction fell below its threshold.
    InWindowFraction,
    /// The rms residual exceeded `max_rms`.
    ResidualRms,
}

/// The loop's model at one instant: enough to extrapolate slot positions.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Snapshot {
    /// Anchor time in ps.
    pub t_ps: u64,
    /// Position at the anchor in slots (Q64.64).
    pub pos_q64: i128,
    /// Frequency in cycles per ps (Q0.96).
    pub nu_q96: u128,
}

impl Snapshot {
    /// Position of time `t_ps` in slots (Q64.64); `None` beyond ±2^62 ps from the anchor.
    pub fn position(&self, t_ps: u64) -> Option<i128> {
        let (dt_ps, early) = match t_ps.checked_sub(self.t_ps) {
            Some(d) => (d, false),
            None => (self.t_ps - t_ps, true),
        };
        if dt_ps >= 1 << 62 {
            return None;
        }
        let Ok(hi) = u64::try_from(self.nu_q96 >> 32) else {
            return self.position_wide(t_ps);
        };
        let (adv, inexact) = advance(dt_ps, hi, self.nu_q96 as u32);
        // An early time rounds the negative advance down, as the 128-bit product would.
        let adv = adv as i128;
        self.pos_q64.checked_add(if early {
            -adv - i128::from(inexact)
        } else {
            adv
        })
    }

    /// [`Self::position`] with 128-bit products, for frequencies of 2^-32 cycles/ps and above.
    fn position_wide(&self, t_ps: u64) -> Option<i128> {
        let d = i128::from(t_ps) - i128::from(self.t_ps);
        let hi = (self.nu_q96 >> 32) as i128;
        let lo = (self.nu_q96 & 0xFFFF_FFFF) as i128;
        self.pos_q64.checked_add(d * hi + ((d * lo) >> 32))
    }

    /// Period in ps (Q32.32).
    pub fn period_ps(&self) -> U32F32 {
        let bits = u128::MAX / self.nu_q96.max(1);
        U32F32::from_bits(u64::try_from(bits).unwrap_or(u64::MAX))
    }
}

const BINS: usize = 32;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct ChannelCal {
    hist: [u32; BINS],
    sum_in_q32: i64,
    n_in: u32,
    n_guard: u32,
}

impl ChannelCal {
    const EMPTY: Self = Self {
        hist: [0; BINS],
        sum_in_q32: 0,
        n_in: 0,
        n_guard: 0,
    };

    fn record(&mut self, r: i64, w: u64) {
        let bin = (((r as u64) ^ (1 << 63)) >> 59) as usize;
        if let Some(h) = self.hist.get_mut(bin) {
            *h = h.saturating_add(1);
        }
        if r.unsigned_abs() <= w {
            self.sum_in_q32 = self.sum_in_q32.saturating_add(r >> 32);
            self.n_in = self.n_in.saturating_add(1);
        } else if r.unsigned_abs() <= 2 * w {
            self.n_guard = self.n_guard.saturating_add(1);
        }
    }

    /// Mean residual of the channel's peak, Q0.32 slot fraction.
    fn offset_q32(&self, w: u64) -> Option<i64> {
        let h = |b: usize| i64::from(self.hist.get(b % BINS).copied().unwrap_or(0));
        let total: i64 = (0..BINS).map(h).sum();
        if total < 64 {
            return None;
        }
        let peak = (0..BINS).max_by_key(|&b| h(b + BINS - 1) + h(b) + h(b + 1))?;
        let centre = |b: usize| ((2 * b as i64 + 1) << 26) - (1 << 31);
        let signal = i64::from(self.n_in) - i64::from(self.n_guard);
        if centre(peak).unsigned_abs() <= (w >> 32) + (1 << 26) && signal >= 16 {
            return Some(self.sum_in_q32 / signal);
        }
        // Outside the window: centroid of the three peak bins above the floor.
        let outside: i64 = (0..BINS)
            .filter(|&b| (b + BINS - peak) % BINS > 3 && (peak + BINS - b) % BINS > 3)
            .map(h)
            .sum();
        let floor = outside / (BINS as i64 - 7);
        let (mut wsum, mut xsum) = (0i64, 0i64);
        for b in [peak + BINS - 1, peak, peak + 1] {
            let wt = (h(b) - floor).max(0);
            let c = centre(b % BINS);
            // The bins are circular: keep the neighbours on the peak's side of ±1/2.
            let c = if (c - centre(peak)).abs() > 1 << 31 {
                c - c.signum() * (1 << 32)
            } else {
                c
            };
            wsum += wt;
            xsum = xsum.saturating_add(wt.saturating_mul(c));
        }
        (wsum > 0).then(|| xsum / wsum)
    }
}

/// The type-II tracking loop with lock detection and per-channel delay calibration.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Tracker {
    cfg: TrackConfig,
    locked: bool,
    model: Snapshot,
    last_good: Snapshot,
    in_frac_q32: i64,
    lost_below_q32: i64,
    r2_q64: i64,
    t_last_in: u64,
    loss: Option<LossCause>,
    cal: [ChannelCal; MAX_CHANNELS],
    updates: u64,
    /// Sum of the in-window residuals, each divided by `update_every`, since the last loop
    /// update (Q0.64 slot fraction).
    acc_q64: i64,
    /// In-window detections since the last loop update.
    acc_n: u32,
}

impl Tracker {
    /// An idle tracker.
    pub const fn new(cfg: TrackConfig) -> Self {
        let s = Snapshot {
            t_ps: 0,
            pos_q64: 0,
            nu_q96: 1,
        };
        Self {
            cfg,
            locked: false,
            model: s,
            last_good: s,
            in_frac_q32: 0,
            lost_below_q32: 0,
            r2_q64: 0,
            t_last_in: 0,
            loss: None,
            cal: [ChannelCal::EMPTY; MAX_CHANNELS],
            updates: 0,
            acc_q64: 0,
            acc_n: 0,
        }
    }

    /// The settings.
    pub const fn config(&self) -> &TrackConfig {
        &self.cfg
    }

    /// Start tracking from an acquisition; the slot at the lock's anchor gets number `slot`.
    pub fn start(&mut self, lock: &AcquiredLock, slot: u64) {
        self.model = Snapshot {
            t_ps: lock.anchor_t_ps,
            pos_q64: (i128::from(slot) << 64) + i128::from(lock.anchor_phase_q64),
            nu_q96: u128::from(lock.nu_q64) << 32,
        };
        self.last_good = self.model;
        let in_frac = i64::from(lock.in_window.to_bits());
        self.in_frac_q32 = in_frac;
        self.lost_below_q32 = (in_frac + i64::from(lock.null_window.to_bits())) / 2;
        self.r2_q64 = i64::try_from(lock.mean_r2_q64).unwrap_or(i64::MAX);
        self.t_last_in = lock.anchor_t_ps;
        self.loss = None;
        self.cal = [ChannelCal::EMPTY; MAX_CHANNELS];
        self.acc_q64 = 0;
        self.acc_n = 0;
        self.locked = true;
    }

    /// Whether slots are being given.
    pub const fn is_locked(&self) -> bool {
        self.locked
    }

    /// Why the last lock ended.
    pub const fn loss(&self) -> Option<LossCause> {
        self.loss
    }

    /// The current model.
    pub const fn model(&self) -> &Snapshot {
        &self.model
    }

    /// The model at the last in-window detection while the lock was healthy.
    pub const fn last_good(&self) -> &Snapshot {
        &self.last_good
    }

    /// In-window detections (each feeds the loop) since construction.
    pub const fn updates(&self) -> u64 {
        self.updates
    }

    /// Running fraction of detections inside the window (Q0.32).
    pub fn in_window_fraction(&self) -> U0F32 {
        U0F32::from_bits(self.in_frac_q32.clamp(0, i64::from(u32::MAX)) as u32)
    }

    /// Renumber: add `slots` to every slot number from now on.
    pub fn shift_slots(&mut self, slots: i64) {
        let d = i128::from(slots) << 64;
        self.model.pos_q64 += d;
        self.last_good.pos_q64 += d;
    }

    /// Stop giving slots.
    pub fn lose(&mut self, cause: LossCause) {
        self.locked = false;
        self.loss = Some(cause);
    }

    /// Locate one delay-corrected detection and update the loop with it.
    pub fn update(&mut self, t_ps: u64, channel: Option<u8>, pat: &ChannelPattern) -> Located {
        if !self.locked {
            return Located::NotLocked;
        }
        if t_ps.saturating_sub(self.t_last_in) > self.cfg.p.blackout_ps {
            self.lose(LossCause::Blackout);
            return Located::NotLocked;
        }
        let Some(pos) = self.model.position(t_ps) else {
            self.lose(LossCause::Blackout);
            return Located::NotLocked;
        };
        if pos < 0 {
            return Located::BeforeOrigin;
        }
        let frac = pos as u64;
        let w = self.cfg.window_q64;
        let (r, _) = pat.residual(frac);
        if let Some(c) = channel.and_then(|c| self.cal.get_mut(usize::from(c))) {
            c.record(r, w);
        }
        let shift = self.cfg.p.average_shift;
        let inside = r.unsigned_abs() <= w;
        let ind = if inside { 1i64 << 32 } else { 0 };
        self.in_frac_q32 += (ind - self.in_frac_q32) >> shift;
        if inside {
            self.updates += 1;
            // An i64 shifted right by 32 fits in 32 bits, so the square is one 32×32 product.
            let r_q32 = i64::from((r >> 32) as i32);
            self.r2_q64 += (r_q32 * r_q32 - self.r2_q64) >> shift;
            self.t_last_in = self.t_last_in.max(t_ps);
            // N residuals within ±1/4 slot, each divided by N: the sum stays within ±1/4.
            self.acc_q64 += r >> self.cfg.mean_shift;
            self.acc_n += 1;
            if self.acc_n >> self.cfg.mean_shift != 0 {
                self.filter(t_ps, pos);
            }
        }
        if self.in_frac_q32 < self.lost_below_q32 {
            self.lose(LossCause::InWindowFraction);
            return Located::NotLocked;
        }
        if self.r2_q64.unsigned_abs() > self.cfg.max_r2_q64 {
            self.lose(LossCause::ResidualRms);
            return Located::NotLocked;
        }
        Located::At(SlotPos {
            slot: (pos >> 64) as u64,
            phase: U0F32::from_bits((frac >> 32) as u32),
        })
    }

    /// Run the loop filter on the mean residual since the last update; the detection at `t_ps`
    /// (model position `pos`) becomes the anchor.
    fn filter(&mut self, t_ps: u64, pos: i128) {
        let e = self.acc_q64;
        self.acc_q64 = 0;
        self.acc_n = 0;
        let dnu = nu_step_q96((e >> 32) as i32, self.cfg.g2_q96);
        self.model = Snapshot {
            t_ps,
            pos_q64: pos - i128::from(mul_hi_signed(e, self.cfg.k1)),
            nu_q96: (self.model.nu_q96 as i128 - dnu).max(1) as u128,
        };
        if self.in_frac_q32 >= self.lost_below_q32 {
            self.last_good = self.model;
        }
    }

    /// Per-channel delay corrections in ps to add to each channel's configured delay (positive:
    /// the channel's detections come late); `None` with fewer than 64 detections since lock.
    pub fn delay_corrections_ps(&self) -> [Option<i64>; MAX_CHANNELS] {
        let w = u64::from(self.cfg.p.window.to_bits()) << 32;
        let period = i128::from(self.model.period_ps().to_bits());
        let mut out = [None; MAX_CHANNELS];
        for (o, c) in out.iter_mut().zip(self.cal.iter()) {
            *o = c
                .offset_q32(w)
                .map(|q| ((i128::from(q) * period) >> 64) as i64);
        }
        out
    }
}

#[cfg(test)]
mod tests;
