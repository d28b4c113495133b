//! The hint-window test: the absolute offset among the few that a bounded hint leaves open.
//!
//! A [`super::SlotHint`] with a stated error bound of ±H slots leaves 2H + 1 candidate offsets
//! `o = absolute − local`. Under a candidate, a detection in local slot ℓ lies on a marker slot
//! when `(ℓ + o) mod D == 0`; the marker then predicts vacuum or a pulse with a known Z bit, and
//! the detection *contradicts* the candidate when it falls in a predicted vacuum slot or carries
//! the other Z bit. The true offset is contradicted only by dark counts and marker bit errors; a
//! wrong one by about three quarters of the detections it puts on marker slots. One counter per
//! candidate (W of them, fixed by a const parameter) holds its contradictions; each detection
//! touches only the (2H + 1)/D candidates that put it on a marker slot.
//!
//! Every [`CHECK_EVERY`] detections the candidate with the fewest contradictions `c₁` is tested
//! against the runner-up `c₂` by the pairwise likelihood ratio of `docs/marker.md` §5 with the
//! weights of a noise-ratio bound ρ = 2e (e the configured `noise_share`): each contradiction
//! of the rival is worth log2(1/ρ) bits and each of the claim's costs as much, so the claim is
//! accepted when `log2(1/ρ) · (c₂ − c₁) ≥ window_bits + ⌈log2(2H + 1)⌉`. If the true offset
//! lies in the window, accepting a wrong one needs its ratio against the true one to reach that
//! level; by Ville's inequality (Ville 1939, from memory) and the union bound over the 2H wrong
//! candidates that has probability at most 2^−window_bits. `docs/marker.md` §7 has the
//! derivation and its assumption (the true offset's contradictions are at most ρ times a wrong
//! one's). A guard asks the claim itself to look like the marker (its supporting Z bits against
//! its contradictions, [`GUARD_BITS`] bits against a contradiction share of 1/2), so that a hint
//! outside its bound, whose window holds no true offset, is refused in practice; the test gives
//! up after [`GIVE_UP_AFTER`] detections and the full search of [`super::FrameAligner`] decides.

use super::evidence::{ceil_log2, log2_ratio_q16, ONE_BIT_Q16};
use super::{FrameConfig, MarkerSpec};

/// Detections between two tests of the window (the test's sampling times).
pub const CHECK_EVERY: u32 = 32;
/// Bits the claimed offset's own supports must gain over its contradictions (share 1/2 against
/// the configured noise share) before it is accepted.
pub const GUARD_BITS: i64 = 6;
/// Detections after which the window test gives up (counters near saturation; the full search
/// then decides).
pub const GIVE_UP_AFTER: u32 = 16_384;

/// Where the window test stands.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum WindowState {
    /// No bounded hint yet (or no bound configured).
    Idle,
    /// Counting contradictions of the offsets `low ..= low + width − 1`.
    Open {
        /// Lowest candidate offset (absolute − local), slots.
        low: i64,
        /// Number of candidates (2H + 1).
        width: u32,
    },
    /// The window test accepted this offset (absolute − local), slots.
    Accepted {
        /// Absolute minus local slot number.
        offset: i64,
    },
    /// Given up (no decision within [`GIVE_UP_AFTER`] detections) or refused (window wider
    /// than the capacity W); the full search decides.
    Closed,
}

/// Counters of the window test.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct WindowStats {
    /// Detections counted into the window.
    pub observed: u32,
    /// Windows refused because 2H + 1 exceeded the capacity W.
    pub too_wide: u32,
    /// Windows given up without a decision.
    pub gave_up: u32,
    /// Checks where the gap test passed but the guard did not.
    pub guard_refusals: u32,
}

/// Contradiction and support counters for up to `W` candidate offsets of one bounded hint.
#[derive(Clone, Debug)]
pub struct HintWindow<const W: usize> {
    /// Per candidate: detections that contradict it (saturating).
    contra: [u8; W],
    /// Per candidate: Z bits on its predicted pulses that agree with the marker (saturating).
    support: [u8; W],
    state: WindowState,
    since_check: u32,
    /// Detections counted since the window opened.
    since_open: u32,
    stats: WindowStats,
}

/// The window sized for ±1023 slots: 4 KiB of counters.
pub type StandardWindow = HintWindow<2048>;

// The counters dominate; the whole window stays within 4 KiB plus a few words.
const _: () = assert!(core::mem::size_of::<StandardWindow>() <= 4096 + 64);

impl<const W: usize> Default for HintWindow<W> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const W: usize> HintWindow<W> {
    /// An idle window.
    pub const fn new() -> Self {
        Self {
            contra: [0; W],
            support: [0; W],
            state: WindowState::Idle,
            since_check: 0,
            since_open: 0,
            stats: WindowStats {
                observed: 0,
                too_wide: 0,
                gave_up: 0,
                guard_refusals: 0,
            },
        }
    }

    /// Where the test stands.
    pub const fn state(&self) -> WindowState {
        self.state
    }

    /// The test's counters.
    pub const fn stats(&self) -> &WindowStats {
        &self.stats
    }

    /// Largest hint error (slots) the capacity W can serve: (W − 1) / 2.
    pub const fn max_error_slots() -> u64 {
        (W.saturating_sub(1) / 2) as u64
    }

    /// Back to idle (new local numbering); the statistics are kept.
    pub fn reset(&mut self) {
        self.state = WindowState::Idle;
    }

    /// Open the window around `centre` (absolute − local, slots, from the hint) with the error
    /// bound of `cfg`; with no bound, or one wider than the capacity, the window closes.
    pub fn open(&mut self, cfg: &FrameConfig, centre: i64) {
        let Some(h) = cfg.hint_error_slots() else {
            self.state = WindowState::Closed;
            return;
        };
        self.open_bounded(centre, h);
    }

    /// Open the window around `centre` with an error bound of ±`h` slots (a hint, or the old
    /// offset after a clock renumbered within ±`h`); a bound wider than the capacity closes it.
    pub fn open_bounded(&mut self, centre: i64, h: u64) {
        if h > Self::max_error_slots() {
            self.stats.too_wide += 1;
            self.state = WindowState::Closed;
            return;
        }
        let width = 2 * h as u32 + 1;
        self.contra.iter_mut().for_each(|c| *c = 0);
        self.support.iter_mut().for_each(|c| *c = 0);
        self.since_check = 0;
        self.since_open = 0;
        self.state = WindowState::Open {
            low: centre.saturating_sub(h as i64),
            width,
        };
    }

    /// Count one gated detection (local slot, Z bit when measured in Z; bits other than 0 and
    /// 1 count as none). Returns the offset when the test accepts it.
    // Kept out of line: the receiver's hot loop calls it from several places.
    #[inline(never)]
    pub fn observe(
        &mut self,
        cfg: &FrameConfig,
        local_slot: u64,
        z_bit: Option<u8>,
    ) -> Option<i64> {
        let WindowState::Open { low, width } = self.state else {
            return None;
        };
        self.stats.observed = self.stats.observed.saturating_add(1);
        self.since_open = self.since_open.saturating_add(1);
        let bit = z_bit.filter(|b| *b <= 1);
        self.count(cfg.spec(), local_slot, bit, low, width);
        self.since_check += 1;
        if self.since_check < CHECK_EVERY {
            return None;
        }
        self.since_check = 0;
        if let Some(offset) = self.check(cfg, low, width) {
            self.state = WindowState::Accepted { offset };
            return Some(offset);
        }
        if self.since_open >= GIVE_UP_AFTER {
            self.stats.gave_up += 1;
            self.state = WindowState::Closed;
        }
        None
    }

    /// Close the window without a decision (the full search locked first).
    pub fn close(&mut self) {
        if matches!(self.state, WindowState::Open { .. }) {
            self.state = WindowState::Closed;
        }
    }

    /// Update the candidates that put `local_slot` on a marker slot: i ≡ −(local + low) mod D.
    fn count(&mut self, spec: &MarkerSpec, local_slot: u64, bit: Option<u8>, low: i64, width: u32) {
        let d = spec.spacing();
        let base = i128::from(local_slot) + i128::from(low);
        // D is a power of two: −base mod D from the low bits of the two's complement.
        let first = (base as u64).wrapping_neg() & (d - 1);
        let start = base + i128::from(first);
        let Ok(start) = u64::try_from(start) else {
            // Candidates that would make this slot negative (or past 2^64) are impossible.
            return;
        };
        let j0 = start >> spec.spacing_log2;
        let (n1, n2) = (spec.inner_period(), spec.outer_period());
        let (mut j1, mut j2) = ((j0 % n1) as usize, (j0 % n2) as usize);
        let step = d as usize;
        let mut i = first as usize;
        while i < width as usize {
            let pulse = spec.inner.bit(j1) == 1;
            let agree = match (&spec.outer, bit) {
                (_, None) => None,
                (Some(t), Some(b)) => Some(t.bit(j2) == b),
                (None, Some(b)) => Some(b == 0),
            };
            match (pulse, agree) {
                (false, _) | (true, Some(false)) => {
                    if let Some(c) = self.contra.get_mut(i) {
                        *c = c.saturating_add(1);
                    }
                }
                (true, Some(true)) => {
                    if let Some(c) = self.support.get_mut(i) {
                        *c = c.saturating_add(1);
                    }
                }
                (true, None) => {}
            }
            i += step;
            j1 += 1;
            if j1 as u64 >= n1 {
                j1 = 0;
            }
            j2 += 1;
            if j2 as u64 >= n2 {
                j2 = 0;
            }
        }
    }

    /// The gap test of the fewest-contradiction candidate against the runner-up, and its guard.
    fn check(&mut self, cfg: &FrameConfig, low: i64, width: u32) -> Option<i64> {
        let (mut best, mut at, mut second) = (u8::MAX, 0usize, u8::MAX);
        for (i, &c) in self.contra.iter().take(width as usize).enumerate() {
            if c < best {
                second = best;
                best = c;
                at = i;
            } else if c < second {
                second = c;
            }
        }
        let gap = i64::from(second - best);
        if cfg.window_weight_q16() * gap < cfg.window_threshold_q16(u64::from(width)) {
            return None;
        }
        let w = cfg.weights();
        let s = i64::from(self.support.get(at).copied().unwrap_or(0));
        if w.gain_q16 * s - w.loss_q16 * i64::from(best) < GUARD_BITS * ONE_BIT_Q16 {
            self.stats.guard_refusals += 1;
            return None;
        }
        low.checked_add(at as i64)
    }
}

/// log2(1/(2e)) in Q16, rounded down: the pairwise weight for a noise share `e` (Q0.16 bits).
pub(super) const fn window_weight_q16(share_q16: u32) -> i64 {
    log2_ratio_q16(65_536, 2 * share_q16 as u64, false)
}

/// Acceptance threshold of a window of `width` candidates for `bits` bits, in Q16.
pub(super) const fn window_threshold_q16(bits: u8, width: u64) -> i64 {
    (bits as i64 + ceil_log2(width) as i64) * ONE_BIT_Q16
}
