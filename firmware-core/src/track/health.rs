//! Channel health: a detector that stops seeing the transmitter's pattern is set aside.
//!
//! Each channel keeps its own fraction of detections inside the tracking window, averaged over
//! about 2^[`SHIFT`] of its detections. A blinded or saturated detector clicks at random times,
//! so its fraction falls to the uniform-noise level while the others keep theirs. A channel
//! whose fraction falls below the loss threshold is set aside, as long as another channel is
//! still healthy: its detections no longer move the loop or the lock's averages, and are given
//! no slot (the receiver counts them `no_clock`). It comes back once its fraction, still
//! computed against the model, rises past the midpoint between the threshold and the value at
//! lock. When every channel fails together (a fibre cut), none is set aside: the lock's own
//! averages fall and the clock goes into holdover.

use crate::gates::MAX_CHANNELS;

/// A channel's average runs over about 2^SHIFT of its detections.
pub(super) const SHIFT: u32 = 6;
/// Detections of a channel since lock before it may be set aside.
const WARM: u8 = 64;

/// Per-channel in-window fractions and the set-aside mask.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(super) struct Health {
    /// In-window fraction per channel, Q0.16.
    frac_q16: [u16; MAX_CHANNELS],
    /// Detections per channel since lock (saturating).
    seen: [u8; MAX_CHANNELS],
    /// Bit c set: channel c is set aside.
    aside: u16,
    /// Times a channel was set aside.
    pub(super) set_asides: u32,
    /// Detections given no slot because their channel was set aside.
    pub(super) aside_detections: u64,
}

impl Health {
    pub(super) const fn new() -> Self {
        Self {
            frac_q16: [0; MAX_CHANNELS],
            seen: [0; MAX_CHANNELS],
            aside: 0,
            set_asides: 0,
            aside_detections: 0,
        }
    }

    /// Every channel healthy, at the lock's in-window fraction.
    pub(super) fn reset(&mut self, lock_q16: u16) {
        self.frac_q16 = [lock_q16; MAX_CHANNELS];
        self.seen = [0; MAX_CHANNELS];
        self.aside = 0;
    }

    /// Channels set aside now (bit c: channel c).
    pub(super) const fn aside(&self) -> u16 {
        self.aside
    }

    /// Count one located detection of channel `c`; false when the channel is set aside.
    /// `low_q16` is the loss threshold, `high_q16` the level that brings a channel back.
    #[inline]
    pub(super) fn observe(&mut self, c: usize, inside: bool, low_q16: u16, high_q16: u16) -> bool {
        let (Some(f), Some(seen)) = (self.frac_q16.get_mut(c), self.seen.get_mut(c)) else {
            return true;
        };
        let ind = if inside { 0xFFFF } else { 0 };
        *f = (i32::from(*f) + ((ind - i32::from(*f)) >> SHIFT)) as u16;
        *seen = seen.saturating_add(1);
        let bit = 1u16 << c;
        if self.aside & bit != 0 {
            if *f < high_q16 {
                self.aside_detections += 1;
                return false;
            }
            self.aside &= !bit;
        } else if *f < low_q16 && *seen >= WARM && self.others_healthy(c, low_q16) {
            self.aside |= bit;
            self.set_asides += 1;
            self.aside_detections += 1;
            return false;
        }
        true
    }

    /// Whether a channel other than `c` is warm, not set aside, and above the threshold.
    #[inline(never)]
    fn others_healthy(&self, c: usize, low_q16: u16) -> bool {
        self.frac_q16
            .iter()
            .zip(self.seen.iter())
            .enumerate()
            .any(|(i, (f, s))| i != c && self.aside & (1 << i) == 0 && *s >= WARM && *f >= low_q16)
    }
}
