//! Stage 2b — the recovered clock: acquisition and tracking behind the [`SlotClock`] seam.
//!
//! [`RecoveredClock`] replaces [`crate::FixedClock`] when the link has no distributed reference:
//! every delay-corrected detection goes through [`SlotClock::observe`]. While acquiring it stores the detection, spends a
//! bounded amount of search work ([`crate::acquire`]) and answers [`Located::NotLocked`]; once
//! locked it answers slots from the tracking loop ([`crate::track`]) and updates it.
//!
//! Lock states: Acquiring (cold prior) → Locked ⇄ Holdover (the lock's averages failed: the
//! model is extrapolated, no slot given, see [`crate::track::hold`]) → Lost (the prediction's
//! bound reached 3/8 slot, or the arrivals were not found) → Reacquiring (prior
//! ±`reacquire_ppm` around the last good frequency; the cold prior after [`NARROW_ATTEMPTS`]
//! failed attempts) → Locked.
//!
//! ## Slot numbering across a holdover and a loss
//! A cold lock numbers slots from the time origin (slot ≈ t·f) and opens numbering epoch 1. A
//! holdover that ends with the arrivals where predicted, or on a phase jump taken the short way
//! round, keeps the numbers. A jump within 1/16 slot of half a slot is ambiguous: the epoch
//! increments with the new numbers within ±1 slot of the old
//! ([`SlotClock::renumbered_within`]). After a relock, the last good model is extrapolated with
//! the drift estimate to the new lock's anchor ([`Tracker::predict`]): if the prediction's bound
//! U stays below 3/8 slot and the new phase agrees with it within U + 1/8 slot, the gap is
//! bridged and numbering continues. Otherwise the slot after the predicted one is used (numbers
//! never go back), the epoch increments with the new numbers within ±(⌈U⌉ + 2) slots of the old,
//! and [`RecoveredClock::slot_numbering_valid`] turns false until frame alignment calls
//! [`RecoveredClock::align_numbering`]. A numbering stage that knows the old offset then tests
//! only those few offsets ([`crate::MarkerNumbering`]).

//! ## Memory
//! `RecoveredClock<2048, 8, 2>` (the host's and the HIL's capacities) takes 17,136 bytes on
//! x86_64 (where `i128` aligns to 16; the HIL's size report gives thumbv7em's): the acquisition buffer 10.2 KB
//! (2048 entries of 5 bytes, see [`crate::acquire`]), the arrival patterns 2.4 KB (17 channel
//! patterns with 16 positions each), the tracker 2.5 KB (mostly its calibration histograms,
//! 16 channels × 32 bins), the rest of the acquirer 1.1 KB (candidates, the search step and the
//! chirp lattice; the drift search added 320 bytes on thumbv7em) and the settings and lock
//! evidence 0.3 KB, and the holdover's state, drift estimate and channel health (added with
//! them) 0.35 KB. Storing each detection as a 64-bit time and a channel
//! byte took 24,976 bytes; the `size_report` test prints every part.
//!
//! ## Work per detection
//! Acquiring: one store (the zigzagged time step into one buffer entry, two after a gap over
//! 17 ms; during confirmation also one fold: n harmonics) plus at most
//! `work_per_call` search units (see [`crate::acquire`]); [`RecoveredClock::work`] spends more in
//! idle time. Locked: one loop update — one residual per expected position of the channel
//! (≤ [`crate::gates::MAX_GATES`]), a few 128-bit multiplies, one histogram increment, the
//! channel's health average and the gear's fast average; every 4.3 ms one drift sample (a
//! division). A lock clears the calibration histograms once (MAX_CHANNELS × 32 counters). In
//! holdover: the prediction (a few 128-bit products) and one fold of n harmonics per detection,
//! and a matched-filter search over 1024 offsets once when the fold passes its test.

use crate::acquire::fold::ArrivalPattern;
use crate::acquire::{AcquireConfig, AcquireConfigError, AcquireStats, AcquiredLock, Acquirer};
use crate::clock::{Located, SlotClock, SlotPos};
use crate::gates::MAX_CHANNELS;
use crate::track::{LockState, LossCause, Resumed, TrackConfig, TrackEvent, Tracker};
use core::fmt;
use fixed::types::{U0F32, U32F32};

/// Why a recovered-clock configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RecoveredConfigError {
    /// The acquisition fit window and the tracking window differ (the lock-loss threshold is
    /// measured in one and used in the other).
    WindowMismatch,
    /// Reacquisition prior outside 1..=1000 ppm.
    Reacquire,
}

impl fmt::Display for RecoveredConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::WindowMismatch => {
                write!(f, "acquire fit_half_window must equal track window")
            }
            Self::Reacquire => write!(f, "reacquire_ppm must lie in 1..=1000"),
        }
    }
}

impl core::error::Error for RecoveredConfigError {}

/// Validated settings of a recovered clock.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
// No defmt::Format: the fixed-point fields have none.
pub struct RecoveredConfig {
    acquire: AcquireConfig,
    track: TrackConfig,
    reacquire_ppm: u32,
}

impl RecoveredConfig {
    /// Combine acquisition and tracking settings; `reacquire_ppm` is the prior after a loss.
    pub fn new(
        acquire: AcquireConfig,
        track: TrackConfig,
        reacquire_ppm: u32,
    ) -> Result<Self, RecoveredConfigError> {
        if acquire.params().fit_half_window != track.params().window {
            return Err(RecoveredConfigError::WindowMismatch);
        }
        if reacquire_ppm == 0 || reacquire_ppm > 1000 {
            return Err(RecoveredConfigError::Reacquire);
        }
        Ok(Self {
            acquire,
            track,
            reacquire_ppm,
        })
    }
}

/// Lock counters.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LockCounters {
    /// Cold locks.
    pub locks: u32,
    /// Losses of lock.
    pub losses: u32,
    /// Locks regained after a loss.
    pub relocks: u32,
    /// Relocks whose gap was bridged (numbering continued).
    pub bridged: u32,
    /// Numbering epoch: increments whenever slot numbers restart without continuity.
    pub epoch: u32,
    /// Holdovers entered (the lock's averages failed; see [`crate::track::hold`]).
    pub holdovers: u32,
    /// Holdovers that ended with the arrivals where the prediction put them.
    pub holdovers_bridged: u32,
    /// Holdovers that ended on a phase jump of the arrivals, the lock kept.
    pub jumps: u32,
}

/// A clock recovered from the detections: buffer `N`, `K` candidates, Z²_`H`.
#[derive(Clone, Debug)]
pub struct RecoveredClock<const N: usize, const K: usize, const H: usize> {
    cfg: RecoveredConfig,
    pattern: ArrivalPattern,
    acq: Acquirer<N, K, H>,
    trk: Tracker,
    state: LockState,
    counters: LockCounters,
    numbering_valid: bool,
    last_lock: Option<AcquiredLock>,
    /// Acquisition attempts when the narrow reacquisition started (`None` once widened).
    reacquire_from: Option<u32>,
    /// After the latest epoch change: the new numbers differ from the old by at most ± this
    /// many slots (`None`: unknown).
    renumbered_within: Option<u64>,
    /// The lock event of the latest detection.
    last_event: Option<TrackEvent>,
}

// The host's and the HIL's capacities: 16,784 bytes on x86_64, 16,728 on thumbv7em (see the
// size report, `size_report` in the tests); the acquisition's drift search added 304 / 320 bytes.
const _: () = assert!(core::mem::size_of::<RecoveredClock<2048, 8, 2>>() <= 17_300);

/// Failed narrow reacquisition attempts before the search widens to the cold prior.
pub const NARROW_ATTEMPTS: u32 = 4;

impl<const N: usize, const K: usize, const H: usize> RecoveredClock<N, K, H> {
    /// A cold clock expecting detections at `pattern`'s positions.
    pub fn new(cfg: RecoveredConfig, pattern: ArrivalPattern) -> Result<Self, AcquireConfigError> {
        Ok(Self {
            acq: Acquirer::new(cfg.acquire)?,
            trk: Tracker::new(cfg.track),
            cfg,
            pattern,
            state: LockState::Acquiring,
            counters: LockCounters::default(),
            numbering_valid: false,
            last_lock: None,
            reacquire_from: None,
            renumbered_within: None,
            last_event: None,
        })
    }

    /// Current lock state.
    pub const fn state(&self) -> LockState {
        self.state
    }

    /// Lock counters.
    pub const fn counters(&self) -> &LockCounters {
        &self.counters
    }

    /// Whether slot numbers are tied to the transmitter's (set by [`Self::align_numbering`],
    /// kept across bridged gaps, cleared by a cold lock or an unbridged relock).
    pub const fn slot_numbering_valid(&self) -> bool {
        self.numbering_valid
    }

    /// Frame alignment's hook: add `offset_slots` to every slot number and mark them valid.
    pub fn align_numbering(&mut self, offset_slots: i64) {
        self.trk.shift_slots(offset_slots);
        self.numbering_valid = true;
    }

    /// The lock event of the latest detection that had one (holdover started or ended).
    pub const fn last_event(&self) -> Option<&TrackEvent> {
        self.last_event.as_ref()
    }

    /// Why the last lock was lost.
    pub const fn loss_cause(&self) -> Option<LossCause> {
        self.trk.loss()
    }

    /// Period estimate in ps (Q32.32) while locked.
    pub fn period_ps(&self) -> Option<U32F32> {
        (self.state == LockState::Locked).then(|| self.trk.model().period_ps())
    }

    /// The evidence of the latest (re)lock.
    pub const fn last_lock(&self) -> Option<&AcquiredLock> {
        self.last_lock.as_ref()
    }

    /// Acquisition counters.
    pub const fn acquire_stats(&self) -> &AcquireStats {
        self.acq.stats()
    }

    /// Trial count of the latest acquisition search (frequency × chirp lattice points).
    pub fn acquire_trials(&self) -> u64 {
        self.acq.search_trials()
    }

    /// The tracking loop.
    pub const fn tracker(&self) -> &Tracker {
        &self.trk
    }

    /// Per-channel delay corrections in ps since the latest lock (see [`Tracker`]).
    pub fn delay_corrections_ps(&self) -> [Option<i64>; MAX_CHANNELS] {
        self.trk.delay_corrections_ps()
    }

    /// Spend up to `budget` units of search work without a detection (idle time).
    pub fn work(&mut self, budget: u32) {
        if matches!(self.state, LockState::Acquiring | LockState::Reacquiring) {
            self.acq.work(budget, &self.pattern);
            self.take_lock();
        }
    }

    fn take_lock(&mut self) {
        let Some(lock) = self.acq.take_lock() else {
            return;
        };
        let cold = self.state == LockState::Acquiring;
        let slot = if cold {
            self.counters.locks += 1;
            self.renumber(None);
            ((u128::from(lock.anchor_t_ps) * u128::from(lock.nu_q64)) >> 64) as u64
        } else {
            self.counters.relocks += 1;
            self.continue_numbering(&lock)
        };
        self.trk.start(&lock, slot, cold);
        self.last_lock = Some(lock);
        self.state = LockState::Locked;
    }

    /// Start a new numbering epoch whose numbers differ from the old by at most ±`within`.
    fn renumber(&mut self, within: Option<u64>) {
        self.counters.epoch += 1;
        self.numbering_valid = false;
        self.renumbered_within = within;
    }

    /// Slot number for the relock's anchor slot, from the last good model extrapolated with
    /// the drift estimate ([`Tracker::predict`]): the gap is bridged when the prediction's bound
    /// stays below 3/8 slot and the new lock's phase agrees with it within that bound plus 1/8
    /// slot. Otherwise the slot after the predicted one is used (numbers never go back) and a
    /// new epoch starts, its numbers within the bound (plus one slot) of the old ones.
    fn continue_numbering(&mut self, lock: &AcquiredLock) -> u64 {
        let frac = i128::from(lock.anchor_phase_q64);
        let Some(pred) = self.trk.predict(lock.anchor_t_ps) else {
            self.renumber(None);
            return ((u128::from(lock.anchor_t_ps) * u128::from(lock.nu_q64)) >> 64) as u64;
        };
        let mismatch = (pred.pos_q64 as u64).wrapping_sub(lock.anchor_phase_q64) as i64;
        let slot = ((pred.pos_q64 - frac + (1 << 63)) >> 64).max(0) as u64;
        let u = pred.bound_q32;
        if u < crate::track::hold::GIVE_UP_Q32
            && mismatch.unsigned_abs() >> 32 <= u.saturating_add(1 << 29)
        {
            self.counters.bridged += 1;
            slot
        } else {
            // Within ⌈U⌉ + 1 slots; beyond a window's reach the numbering searches anyway.
            let k = (u >> 32).saturating_add(2);
            self.renumber((k <= 1 << 20).then_some(k));
            slot + 1
        }
    }

    /// Follow the tracker's lock events.
    fn follow(&mut self, event: TrackEvent) {
        match event {
            TrackEvent::HoldoverStarted(_) => {
                self.state = LockState::Holdover;
                self.counters.holdovers += 1;
            }
            TrackEvent::Resumed { how, .. } => {
                self.state = LockState::Locked;
                match how {
                    Resumed::Bridged => self.counters.holdovers_bridged += 1,
                    Resumed::Jump { renumber } => {
                        self.counters.jumps += 1;
                        if renumber {
                            self.renumber(Some(1));
                        }
                    }
                }
            }
            // Entered and given up on one detection (the first after a long dark gap): still a
            // holdover.
            TrackEvent::Lost(_) if self.state == LockState::Locked => self.counters.holdovers += 1,
            TrackEvent::Lost(_) => {}
        }
        self.last_event = Some(event);
    }

    fn handle(&mut self, channel: Option<u8>, t_ps: u64) -> Located {
        if self.state == LockState::Lost {
            let nu = (self.trk.last_good().nu_q96 >> 32) as u64;
            self.acq.restart(nu, self.cfg.reacquire_ppm);
            self.reacquire_from = Some(self.acq.stats().attempts);
            self.state = LockState::Reacquiring;
        } else if self.state == LockState::Reacquiring
            && self
                .reacquire_from
                .is_some_and(|a| self.acq.stats().attempts >= a.saturating_add(NARROW_ATTEMPTS))
            && self.acq.is_collecting()
        {
            // The narrow prior keeps failing: the frequency may have moved further away.
            let cold = self.cfg.acquire;
            self.acq
                .restart(cold.nominal_nu_q64(), cold.params().prior_ppm);
            self.reacquire_from = None;
        }
        if !matches!(self.state, LockState::Locked | LockState::Holdover) {
            self.acq.push(t_ps, channel, &self.pattern);
            self.work(self.cfg.acquire.params().work_per_call);
            return Located::NotLocked;
        }
        let r = self
            .trk
            .update(t_ps, channel, self.pattern.channel(channel));
        if let Some(e) = self.trk.take_event() {
            self.follow(e);
        }
        if !self.trk.is_locked() {
            self.state = LockState::Lost;
            self.counters.losses += 1;
        }
        r
    }
}

impl<const N: usize, const K: usize, const H: usize> SlotClock for RecoveredClock<N, K, H> {
    fn locate(&self, t_ps: u64) -> Located {
        if self.state != LockState::Locked {
            return Located::NotLocked;
        }
        match self.trk.model().position(t_ps) {
            None => Located::NotLocked,
            Some(pos) if pos < 0 => Located::BeforeOrigin,
            Some(pos) => Located::At(SlotPos {
                slot: (pos >> 64) as u64,
                phase: U0F32::from_bits(((pos as u64) >> 32) as u32),
            }),
        }
    }

    #[inline]
    fn observe(&mut self, channel: u8, t_ps: u64) -> Located {
        self.handle(Some(channel), t_ps)
    }

    fn is_locked(&self) -> bool {
        self.state == LockState::Locked
    }

    fn epoch(&self) -> u32 {
        self.counters.epoch
    }

    fn renumbered_within(&self) -> Option<u64> {
        self.renumbered_within
    }

    /// The recovered clock numbers slots from the time origin (slot ≈ t / T).
    fn slot_at(&self, t_ps: u64) -> Option<u64> {
        let period = self.period_ps()?.to_bits();
        if period == 0 {
            return None;
        }
        u64::try_from((u128::from(t_ps) << 32) / u128::from(period)).ok()
    }
}

#[cfg(test)]
mod tests;
