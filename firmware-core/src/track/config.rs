//! Tracking settings: validation and the loop gains (Rice, App. C), computed once.

use core::fmt;
use fixed::types::{U0F32, U0F64};

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
    /// The loop filter runs once per this many in-window detections, on their mean residual
    /// (a power of two, 1..=65536; 1: at every one).
    pub update_every: u32,
    /// Bandwidth multiplier of the wide gear, engaged on a large mean error (1..=64; 1: one
    /// gear). Capped so that the wide loop keeps B_n·T_u' ≤ 0.1.
    pub wide_factor: u32,
    /// Largest drift the transmitter's clock may show, ppb per second: bounds the drift
    /// estimate, and is the holdover's drift uncertainty until that estimate has matured.
    pub drift_ppb_per_s: u32,
    /// Least frequency uncertainty assumed in holdover, parts per 10¹² (the measured spread
    /// of the loop's frequency is used above it).
    pub hold_ppt: u32,
    /// Steer the model's frequency with the measured drift between loop updates (see
    /// [`super::Tracker`]); false leaves the plain type-II loop.
    pub drift_steering: bool,
}

impl TrackParams {
    /// Defaults: ζ = 0.707, w = 1/16 slot, averages over 256, max rms w/2, an update at every
    /// in-window detection, a wide gear 16 times the bandwidth, a drift of at most
    /// 0.1 ppm/s, a holdover frequency uncertainty of at least 20 ppt, and drift steering.
    pub const fn new(bandwidth_mhz: u32, rate_per_s: u64, blackout_ps: u64) -> Self {
        Self {
            bandwidth_mhz,
            damping_milli: 707,
            rate_per_s,
            window: U0F32::from_bits(1 << 28),
            average_shift: 8,
            blackout_ps,
            max_rms: U0F32::from_bits(1 << 27),
            update_every: 1,
            wide_factor: 16,
            drift_ppb_per_s: 100,
            hold_ppt: 20,
            drift_steering: true,
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
    /// `wide_factor` outside 1..=64.
    WideFactor,
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
            Self::WideFactor => write!(f, "wide_factor must lie in 1..=64"),
        }
    }
}

impl core::error::Error for TrackConfigError {}

/// Validated tracking settings with the loop gains and the constants the hot path uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
// No defmt::Format: the fixed-point fields have none.
pub struct TrackConfig {
    pub(super) p: TrackParams,
    pub(super) k1: u64,
    pub(super) k2: u64,
    /// K2/T_u': ν change (cycles/ps, Q0.96) per Q0.32 unit of mean phase error.
    pub(super) g2_q96: u128,
    /// K1 of the wide gear (Q0.64).
    pub(super) k1w: u64,
    /// K2/T_u' of the wide gear, as `g2_q96`.
    pub(super) g2w_q96: u128,
    /// Window half-width w, Q0.64 slot fraction.
    pub(super) window_q64: u64,
    /// max_rms², Q0.64 slot fraction squared.
    pub(super) max_r2_q64: u64,
    /// log2(update_every): the mean of the summed residuals is a shift.
    pub(super) mean_shift: u32,
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
        if !(1..=64).contains(&p.wide_factor) {
            return Err(TrackConfigError::WideFactor);
        }
        let (k1, k2, g2_q96) = gains(&p, u128::from(p.bandwidth_mhz))?;
        // The wide gear: B_n·factor, capped at B_n·T_u' = 0.1 (B ≤ 100·R/N mHz).
        let cap = 100 * u128::from(p.rate_per_s) / u128::from(p.update_every);
        let wide = (u128::from(p.bandwidth_mhz) * u128::from(p.wide_factor)).min(cap);
        let (k1w, _, g2w_q96) = gains(&p, wide.max(u128::from(p.bandwidth_mhz)))?;
        let max = u64::from(p.max_rms.to_bits());
        Ok(Self {
            p,
            k1,
            k2,
            g2_q96,
            k1w,
            g2w_q96,
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

/// K1, K2 (Q0.64) and K2/T_u' (Q0.96 per Q0.32 error) of a loop of bandwidth `b_mhz` with the
/// damping, rate and update interval of `p` (Rice, App. C).
fn gains(p: &TrackParams, b_mhz: u128) -> Result<(u64, u64, u128), TrackConfigError> {
    let rate = u128::from(p.rate_per_s);
    let n = u128::from(p.update_every);
    // B_n·T_u' = B_mHz·N / (1000·R), Q0.64.
    let bt = ((b_mhz * n) << 64) / (1000 * rate);
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
    Ok((
        u64::try_from(k1).unwrap_or(u64::MAX),
        u64::try_from(k2).unwrap_or(u64::MAX),
        g2_q96,
    ))
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
