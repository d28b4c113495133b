//! Channel health: a detector that stops seeing the transmitter's pattern is set aside.
//!
//! Each channel keeps its own fraction of detections inside the tracking window: a fast average
//! over about 2^[`SHIFT`] of its detections (equal weights over the first ones after a lock), and
//! a slow reference over about 2^[`REF_SHIFT`], frozen while the channel is set aside. Channels
//! differ (a detector behind an interferometer sees more noise per signal click, a channel's
//! pattern has its own number of positions), so each is judged against its own reference and its
//! own uniform-noise level (2w per expected position). A blinded or saturated detector clicks at
//! random times, so its fast fraction falls to its noise level: below the midpoint between
//! noise and reference, it is set aside, provided its reference stands clear of the noise
//! (the channel carries timing at all) and another channel is still healthy. Its detections no
//! longer move the loop or the lock's averages, and are given no slot (the receiver counts them
//! `no_clock`). It comes back once its fraction passes three quarters of the way from noise to
//! reference. When every channel fails together (a fibre cut), none is set aside: the lock's own
//! averages fall and the clock goes into holdover.

use crate::gates::MAX_CHANNELS;

/// A channel's fast average runs over about 2^SHIFT of its detections.
pub(super) const SHIFT: u32 = 6;
/// Its reference runs over about 2^REF_SHIFT.
pub(super) const REF_SHIFT: u32 = 10;
/// Detections of a channel since lock before it may be set aside (its averages start here).
const WARM: u16 = 1 << SHIFT;
/// A channel whose reference is within this of its noise level (Q0.16, 1/8) carries too little
/// timing to judge.
const INFORMATIVE_Q16: u16 = 1 << 13;

/// Per-channel in-window fractions and the set-aside mask.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(super) struct Health {
    /// Fast in-window fraction per channel, Q0.16.
    frac_q16: [u16; MAX_CHANNELS],
    /// Slow reference fraction per channel, Q0.16.
    ref_q16: [u16; MAX_CHANNELS],
    /// Set-aside threshold per channel (midpoint of noise and reference), Q0.16.
    low_q16: [u16; MAX_CHANNELS],
    /// Detections per channel since lock (saturating at [`WARM`]).
    seen: [u16; MAX_CHANNELS],
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
            ref_q16: [0; MAX_CHANNELS],
            low_q16: [0; MAX_CHANNELS],
            seen: [0; MAX_CHANNELS],
            aside: 0,
            set_asides: 0,
            aside_detections: 0,
        }
    }

    /// Every channel healthy and learning its level again.
    pub(super) fn reset(&mut self) {
        self.seen = [0; MAX_CHANNELS];
        self.low_q16 = [0; MAX_CHANNELS];
        self.aside = 0;
    }

    /// Channels set aside now (bit c: channel c).
    pub(super) const fn aside(&self) -> u16 {
        self.aside
    }

    /// Count one located detection of channel `c`, inside the window or not, with the
    /// channel's uniform-noise fraction `null_q16`; false when the channel is set aside.
    #[inline]
    pub(super) fn observe(&mut self, c: usize, inside: bool, null_q16: u16) -> bool {
        let (Some(f), Some(r), Some(low), Some(seen)) = (
            self.frac_q16.get_mut(c),
            self.ref_q16.get_mut(c),
            self.low_q16.get_mut(c),
            self.seen.get_mut(c),
        ) else {
            return true;
        };
        let ind = if inside { 0xFFFF } else { 0 };
        let bit = 1u16 << c;
        if *seen < WARM {
            // Equal weights while learning: the first detections set both averages.
            *seen += 1;
            *f = (i32::from(*f) + (ind - i32::from(*f)) / i32::from(*seen)) as u16;
            *r = *f;
            return true;
        }
        *f = (i32::from(*f) + ((ind - i32::from(*f)) >> SHIFT)) as u16;
        let aside = self.aside & bit != 0;
        if !aside {
            // An average of the fast average, over about 2^REF_SHIFT detections (to within its
            // 2^(REF_SHIFT − 16) resolution).
            *r = (i32::from(*r) + ((i32::from(*f) - i32::from(*r)) >> REF_SHIFT)) as u16;
        }
        let informative = r.saturating_sub(null_q16) >= INFORMATIVE_Q16;
        *low = if informative {
            ((u32::from(*r) + u32::from(null_q16)) / 2) as u16
        } else {
            0
        };
        if aside {
            let back = ((u32::from(*low) + u32::from(*r)) / 2) as u16;
            if *f < back {
                self.aside_detections += 1;
                return false;
            }
            self.aside &= !bit;
        } else if *f < *low && self.others_healthy(c) {
            self.aside |= bit;
            self.set_asides += 1;
            self.aside_detections += 1;
            return false;
        }
        true
    }

    /// Whether a channel other than `c` has learnt its level, is not set aside and stands above
    /// its threshold.
    #[inline(never)]
    fn others_healthy(&self, c: usize) -> bool {
        (0..MAX_CHANNELS).any(|i| {
            let get = |a: &[u16; MAX_CHANNELS]| a.get(i).copied().unwrap_or(0);
            i != c
                && self.aside & (1 << i) == 0
                && get(&self.seen) >= WARM
                && get(&self.frac_q16) >= get(&self.low_q16)
        })
    }
}
