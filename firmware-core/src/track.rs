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

mod cal;
mod config;
mod snapshot;

pub use config::{bandwidth_for_mhz, TrackConfig, TrackConfigError, TrackParams};
pub use snapshot::Snapshot;

use crate::acquire::fold::ChannelPattern;
use crate::acquire::AcquiredLock;
use crate::clock::{Located, SlotPos};
use crate::gates::MAX_CHANNELS;
use cal::ChannelCal;
use fixed::types::U0F32;
use snapshot::{mul_hi_signed, nu_step_q96};

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
