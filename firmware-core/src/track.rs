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
//! ## Lock quality, gears and holdover
//! Two averages over about 2^`average_shift` detections: the fraction of detections inside the
//! window, and the mean squared residual of those inside. When the fraction falls below the
//! midpoint between its value at lock and the value uniform noise would give (a cut, a phase
//! jump, a frequency step the loop could not follow), when the rms residual exceeds `max_rms`,
//! or when no in-window detection came for `blackout_ps`, the tracker goes into holdover
//! ([`hold`]): it extrapolates its last good model with the drift estimate (`drift`), gives no
//! slot, and looks for the arrivals around the prediction. It resumes with the numbers kept
//! when it finds them, and loses the lock when the prediction's error bound reaches 3/8 slot;
//! reacquisition and the numbering after a loss are the recovered clock's.
//!
//! A fast average of the in-window residuals (over about 16) shifts the loop into a wide gear
//! (`wide_factor` times the bandwidth, Rice's gains for it) when its bias exceeds the
//! single-detection rms, and back after 2^`average_shift` calm detections. A type-II loop
//! answers a frequency step Δf (slots/s) with a peak phase error of e^(−π/4)·Δf/ω_n ≈
//! 0.46·Δf/ω_n at ζ = 0.707 [derived from the loop's step response]: 0.35 slot for +2 ppm at
//! 100 MHz and ω_n = 264 rad/s, far outside a ±1/16-slot window, and 0.02 slot with 16 times
//! ω_n. A lock and a holdover's end also start wide, to pull in their residual error.
//!
//! Each channel's own in-window fraction is watched (`health`): a blinded or saturated detector
//! is set aside, its detections given no slot, without taking the lock down. Once the drift
//! estimate is in use, the model's frequency is steered by it between loop updates
//! (`Tracker::steer`), so the loop carries no ramp lag and a model without in-window
//! detections for a while follows the drift instead of walking off it.

//! ## Delay calibration
//! While locked, each channel keeps a 32-bin histogram of its residuals over ±1/2 slot and the
//! sum of those within ±w; [`Tracker::delay_corrections_ps`] turns them into per-channel delay
//! corrections (the noise inside the window is estimated from a guard band of equal width).

mod cal;
mod config;
mod drift;
mod health;
pub mod hold;
mod snapshot;

pub use config::{bandwidth_for_mhz, TrackConfig, TrackConfigError, TrackParams};
pub use hold::{Prediction, Resumed, TrackEvent};
pub use snapshot::Snapshot;

use crate::acquire::fold::ChannelPattern;
use crate::acquire::AcquiredLock;
use crate::clock::{Located, SlotPos};
use crate::gates::MAX_CHANNELS;
use cal::ChannelCal;
use drift::DriftEstimate;
use fixed::types::U0F32;
use health::Health;
use hold::Hold;
use snapshot::{mul_hi_signed, nu_step_q96};

/// Where the receiver stands with the transmitter's clock.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LockState {
    /// Cold start: searching the full prior.
    Acquiring,
    /// Tracking: slots are given.
    Locked,
    /// The lock's averages failed: the model is extrapolated and no slot is given, until the
    /// arrivals are found again (see [`hold`]).
    Holdover,
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

/// Counters of the tracker's robustness machinery since construction.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TrackCounters {
    /// Times the wide gear was engaged.
    pub wide_gear: u32,
    /// Times a channel was set aside.
    pub set_asides: u32,
    /// Detections given no slot because their channel was set aside.
    pub aside_detections: u64,
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
    /// In-window fraction at lock, Q0.32.
    lock_in_q32: i64,
    /// Mean squared residual at lock, Q0.64.
    lock_r2_q64: i64,
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
    /// Fast average of the in-window residuals (over about 16), Q0.64.
    e_fast_q64: i64,
    /// Wide gear engaged.
    wide: bool,
    /// In-window detections in a row with a small mean error, while wide.
    calm: u32,
    wide_gear: u32,
    drift: DriftEstimate,
    health: Health,
    hold: Hold,
    event: Option<TrackEvent>,
    /// Time of the latest drift steering (see `Tracker::steer`).
    steered_ps: u64,
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
            lock_in_q32: 0,
            lock_r2_q64: 0,
            r2_q64: 0,
            t_last_in: 0,
            loss: None,
            cal: [ChannelCal::EMPTY; MAX_CHANNELS],
            updates: 0,
            acc_q64: 0,
            acc_n: 0,
            e_fast_q64: 0,
            wide: false,
            calm: 0,
            wide_gear: 0,
            drift: DriftEstimate::new(),
            health: Health::new(),
            hold: Hold::new(),
            event: None,
            steered_ps: 0,
        }
    }

    /// The settings.
    pub const fn config(&self) -> &TrackConfig {
        &self.cfg
    }

    /// Start tracking from an acquisition; the slot at the lock's anchor gets number `slot`.
    /// A cold lock (`cold`) forgets the drift estimate; a relock keeps it.
    pub fn start(&mut self, lock: &AcquiredLock, slot: u64, cold: bool) {
        self.model = Snapshot {
            t_ps: lock.anchor_t_ps,
            pos_q64: (i128::from(slot) << 64) + i128::from(lock.anchor_phase_q64),
            nu_q96: u128::from(lock.nu_q64) << 32,
        };
        self.last_good = self.model;
        let in_frac = i64::from(lock.in_window.to_bits());
        self.lock_in_q32 = in_frac;
        self.lost_below_q32 = (in_frac + i64::from(lock.null_window.to_bits())) / 2;
        self.lock_r2_q64 = i64::try_from(lock.mean_r2_q64).unwrap_or(i64::MAX);
        self.loss = None;
        self.cal = [ChannelCal::EMPTY; MAX_CHANNELS];
        if cold {
            self.drift.reset(lock.anchor_t_ps, self.model.nu_q96);
        } else {
            self.drift.remark(lock.anchor_t_ps, self.model.nu_q96);
        }
        self.resume_averages(lock.anchor_t_ps);
        // Pull in the acquisition's residual error fast (and keep the pull-in out of the drift
        // estimate).
        self.wide = true;
        self.locked = true;
    }

    /// Restart the lock's averages at their values at lock (after a lock or a holdover).
    fn resume_averages(&mut self, t_ps: u64) {
        self.in_frac_q32 = self.lock_in_q32;
        // A lock whose fit spanned a cut can report a large residual; the average starts no
        // higher than half its limit and has to earn a loss on fresh detections.
        self.r2_q64 = self.lock_r2_q64.min((self.cfg.max_r2_q64 / 2) as i64);
        self.t_last_in = t_ps;
        self.acc_q64 = 0;
        self.acc_n = 0;
        self.e_fast_q64 = 0;
        self.calm = 0;
        self.health.reset();
        self.hold.active = false;
        self.steered_ps = t_ps;
    }

    /// Whether the lock is held (tracking or in holdover).
    pub const fn is_locked(&self) -> bool {
        self.locked
    }

    /// Whether the tracker is in holdover (locked, no slots given).
    pub const fn in_holdover(&self) -> bool {
        self.locked && self.hold.active
    }

    /// The lock event of the latest detection, if any (taken once).
    pub fn take_event(&mut self) -> Option<TrackEvent> {
        self.event.take()
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

    /// Wide-gear engagements and channel set-asides since construction.
    pub const fn counters(&self) -> TrackCounters {
        TrackCounters {
            wide_gear: self.wide_gear,
            set_asides: self.health.set_asides,
            aside_detections: self.health.aside_detections,
        }
    }

    /// Channels set aside now (bit c: channel c).
    pub const fn channels_set_aside(&self) -> u16 {
        self.health.aside()
    }

    /// Whether the wide gear is engaged.
    pub const fn wide(&self) -> bool {
        self.wide
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
        self.hold.active = false;
        self.loss = Some(cause);
    }

    /// The last good model extrapolated to `t_ps` with the drift estimate, and the bound on its
    /// error ([`hold`]); `None` beyond 4.4 s from it.
    pub fn predict(&self, t_ps: u64) -> Option<Prediction> {
        let p = &self.cfg.p;
        let mut from = self.last_good;
        let nu_q64 = (from.nu_q96 >> 32) as u64;
        // The drift allowance as a slope: ν·D per 2^32 ps.
        let allow_q64 = (u128::from(nu_q64) * u128::from(p.drift_ppb_per_s)) << 32;
        let allow_q64 =
            u64::try_from(allow_q64 / 1_000_000_000_000_000_000_000).unwrap_or(u64::MAX);
        let floor = u128::from(nu_q64) * u128::from(p.hold_ppt) / 1_000_000_000_000;
        let floor = u64::try_from(floor).unwrap_or(u64::MAX);
        let sigmas = hold::SIGMAS;
        // With the drift known, extrapolate from the smoothed frequency (its noise a quarter of
        // the loop's); before, from the loop's own, bounded by the whole allowance.
        let (nu_bound, slope_bound) =
            match (self.drift.nu_at(from.t_ps), self.drift.slope_error_q64()) {
                (Some(nu), Some(slope_err)) => {
                    from.nu_q96 = u128::from(nu) << 32;
                    (
                        self.drift.nu_error_q64().saturating_mul(sigmas).max(floor),
                        slope_err.saturating_mul(sigmas),
                    )
                }
                _ => (floor.max(allow_q64), allow_q64),
            };
        let rate = match self.drift.slope_error_q64() {
            Some(_) => self.drift.rate_q16((allow_q64.min(1 << 46) as i64) << 16),
            None => 0,
        };
        hold::predict(&from, t_ps, rate, nu_bound, slope_bound)
    }

    /// Locate one delay-corrected detection and update the loop with it.
    pub fn update(&mut self, t_ps: u64, channel: Option<u8>, pat: &ChannelPattern) -> Located {
        if !self.locked {
            return Located::NotLocked;
        }
        if self.hold.active {
            return self.hold_update(t_ps, channel, pat);
        }
        if t_ps.saturating_sub(self.t_last_in) > self.cfg.p.blackout_ps {
            return self.enter_hold(LossCause::Blackout, t_ps, channel, pat);
        }
        if t_ps.wrapping_sub(self.steered_ps) >> drift::SAMPLE_SHIFT != 0 {
            self.steer(t_ps);
        }
        let Some(pos) = self.model.position(t_ps) else {
            return self.enter_hold(LossCause::Blackout, t_ps, channel, pat);
        };
        if pos < 0 {
            return Located::BeforeOrigin;
        }
        let frac = pos as u64;
        let w = self.cfg.window_q64;
        let (r, _) = pat.residual(frac);
        let inside = r.unsigned_abs() <= w;
        if let Some(c) = channel {
            // Recorded even when the channel is set aside: a channel whose delay is off shows
            // no in-window fraction, and its histogram is what finds the correction.
            if let Some(cal) = self.cal.get_mut(usize::from(c)) {
                cal.record(r, w);
            }
            let null = (pat.null_fraction(self.cfg.p.window) >> 16) as u16;
            if !self.health.observe(usize::from(c), inside, null) {
                return Located::NotLocked;
            }
        }
        let shift = self.cfg.p.average_shift;
        let ind = if inside { 1i64 << 32 } else { 0 };
        self.in_frac_q32 += (ind - self.in_frac_q32) >> shift;
        if inside {
            self.updates += 1;
            // An i64 shifted right by 32 fits in 32 bits, so the square is one 32×32 product.
            let r_q32 = i64::from((r >> 32) as i32);
            self.r2_q64 += (r_q32 * r_q32 - self.r2_q64) >> shift;
            self.t_last_in = self.t_last_in.max(t_ps);
            self.gear(r);
            // N residuals within ±1/4 slot, each divided by N: the sum stays within ±1/4.
            self.acc_q64 += r >> self.cfg.mean_shift;
            self.acc_n += 1;
            if self.acc_n >> self.cfg.mean_shift != 0 {
                self.filter(t_ps, pos);
            }
        }
        if self.in_frac_q32 < self.lost_below_q32 {
            return self.enter_hold(LossCause::InWindowFraction, t_ps, channel, pat);
        }
        if self.r2_q64.unsigned_abs() > self.cfg.max_r2_q64 {
            return self.enter_hold(LossCause::ResidualRms, t_ps, channel, pat);
        }
        Located::At(SlotPos {
            slot: (pos >> 64) as u64,
            phase: U0F32::from_bits((frac >> 32) as u32),
        })
    }

    /// Shift gears on the fast mean error: wide when its square exceeds the mean squared
    /// residual (a bias of one single-detection rms σ, about six times the fast mean's own
    /// noise σ/√31), narrow again after 2^`average_shift` in-window detections in a row below
    /// σ/2 (2.8 times its noise, so a calm loop passes 99.5 % of them).
    #[inline]
    fn gear(&mut self, r: i64) {
        self.e_fast_q64 += (r - self.e_fast_q64) >> 4;
        let e = i64::from((self.e_fast_q64 >> 32) as i32);
        let e2 = e * e;
        if !self.wide {
            if e2 > self.r2_q64 {
                self.wide = true;
                self.calm = 0;
                self.wide_gear = self.wide_gear.saturating_add(1);
            }
        } else if e2.saturating_mul(4) < self.r2_q64 {
            self.calm += 1;
            if self.calm >> self.cfg.p.average_shift != 0 {
                self.wide = false;
            }
        } else {
            self.calm = 0;
        }
    }

    /// Run the loop filter on the mean residual since the last update; the detection at `t_ps`
    /// (model position `pos`) becomes the anchor.
    fn filter(&mut self, t_ps: u64, pos: i128) {
        let e = self.acc_q64;
        self.acc_q64 = 0;
        self.acc_n = 0;
        let (k1, g2) = if self.wide {
            (self.cfg.k1w, self.cfg.g2w_q96)
        } else {
            (self.cfg.k1, self.cfg.g2_q96)
        };
        let dnu = nu_step_q96((e >> 32) as i32, g2);
        self.model = Snapshot {
            t_ps,
            pos_q64: pos - i128::from(mul_hi_signed(e, k1)),
            nu_q96: (self.model.nu_q96 as i128 - dnu).max(1) as u128,
        };
        if self.in_frac_q32 >= self.lost_below_q32 {
            self.last_good = self.model;
            if self.wide {
                self.drift.remark(t_ps, self.model.nu_q96);
            } else {
                self.drift.observe(t_ps, self.model.nu_q96);
            }
        }
    }

    /// Steer the model with the drift estimate, once per sampling interval (4.3 ms) and on any
    /// detection: ν moves by ν̇·Δt, the position stays. The loop then follows a ramp without
    /// the type-II lag, and a model that gets no in-window detection for a while (noise, a
    /// fade) keeps following the drift instead of walking off it by ½·ν̇·Δt², which at 1 GHz
    /// and 0.1 ppm/s is half a slot in 0.1 s. Off when `drift_steering` is false or before the
    /// slope is in use.
    #[inline(never)]
    fn steer(&mut self, t_ps: u64) {
        let dt = t_ps.wrapping_sub(self.steered_ps);
        self.steered_ps = t_ps;
        if !self.cfg.p.drift_steering || dt >> 40 != 0 || self.drift.slope_error_q64().is_none() {
            return;
        }
        let Some(pos) = self.model.position(t_ps) else {
            return;
        };
        let nu_q64 = (self.model.nu_q96 >> 32) as u64;
        let allow = ((u128::from(nu_q64) * u128::from(self.cfg.p.drift_ppb_per_s)) << 32)
            / 1_000_000_000_000_000_000_000;
        let rate = self.drift.rate_q16((allow.min(1 << 46) as i64) << 16);
        let dnu_q96 = (i128::from(rate) * i128::from(dt)) >> 16;
        self.model = Snapshot {
            t_ps,
            pos_q64: pos,
            nu_q96: (self.model.nu_q96 as i128).saturating_add(dnu_q96).max(1) as u128,
        };
    }

    /// Go into holdover for `cause`, with this detection as its first.
    #[inline(never)]
    fn enter_hold(
        &mut self,
        cause: LossCause,
        t_ps: u64,
        channel: Option<u8>,
        pat: &ChannelPattern,
    ) -> Located {
        self.hold.start(cause, self.last_good.t_ps);
        self.wide = false;
        // A failure of every channel at once is the clock's, not a detector's: all fold.
        self.health.reset();
        self.event = Some(TrackEvent::HoldoverStarted(cause));
        self.hold_update(t_ps, channel, pat)
    }

    /// One detection in holdover: fold it at its predicted phase, resume once the arrivals
    /// are found, give up once the prediction's bound reaches 3/8 slot.
    #[inline(never)]
    fn hold_update(&mut self, t_ps: u64, channel: Option<u8>, pat: &ChannelPattern) -> Located {
        let pred = match self.predict(t_ps) {
            Some(p) if p.bound_q32 < hold::GIVE_UP_Q32 && !self.hold.exhausted => p,
            _ => {
                let cause = self.hold.cause;
                self.lose(cause);
                self.event = Some(TrackEvent::Lost(cause));
                return Located::NotLocked;
            }
        };
        let aside = channel.is_some_and(|c| self.health.aside() & (1 << (c & 15)) != 0);
        if !aside {
            if let Some(phi) = self.hold.observe(pred.pos_q64 as u64, pat) {
                self.resume(t_ps, &pred, phi);
            }
        }
        Located::NotLocked
    }

    /// Leave holdover: the arrivals are `phi` (Q0.64) from the prediction `pred` at `t_ps`.
    fn resume(&mut self, t_ps: u64, pred: &Prediction, phi: i64) {
        let a = phi.unsigned_abs() >> 32;
        let u = pred.bound_q32;
        let w = u64::from(self.cfg.p.window.to_bits());
        let how = if a <= u.saturating_add(2 * w) {
            Resumed::Bridged
        } else {
            Resumed::Jump {
                renumber: a.saturating_add(u) > hold::JUMP_KEEP_Q32,
            }
        };
        self.event = Some(TrackEvent::Resumed {
            how,
            phase_q32: (phi >> 32) as i32,
            bound_q32: u,
            held_ps: t_ps.saturating_sub(self.hold.since_ps),
        });
        self.model = Snapshot {
            t_ps,
            pos_q64: pred.pos_q64 - i128::from(phi),
            nu_q96: pred.nu_q96,
        };
        self.last_good = self.model;
        self.drift.remark(t_ps, self.model.nu_q96);
        self.resume_averages(t_ps);
        // The prediction leaves a residual error within a fold's resolution: pull it in fast.
        self.wide = true;
        self.wide_gear = self.wide_gear.saturating_add(1);
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
