//! Channel health: a detector that stops seeing the transmitter's pattern is set aside.
//!
//! Each channel keeps its own fraction of detections inside the tracking window: a fast average
//! over about 2^[`SHIFT`] of its detections (equal weights over the first ones after a lock), and
//! a slow reference over about 2^[`REF_SHIFT`], frozen while the channel is set aside. Channels
//! differ (a detector behind an interferometer sees more noise per signal click, a channel's
//! pattern has its own number of positions), so each is judged against its own reference and its
//! own uniform-noise level (2w per expected position). A blinded or saturated detector clicks at
//! random times, so its fast fraction falls to its noise level: three quarters of the way down
//! from reference to noise, it is set aside, provided its reference stands clear of the noise
//! (the channel carries timing at all) and another channel is still healthy. Its detections no
//! longer move the loop or the lock's averages, and are given no slot (the receiver counts them
//! `no_clock`). It comes back once its fraction passes five eighths of the way from noise to
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

/// One channel's averages.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Channel {
    /// Fast in-window fraction, Q0.16.
    frac_q16: u16,
    /// Slow reference fraction, Q0.16.
    ref_q16: u16,
    /// Set-aside threshold (three quarters of the way from reference to noise; 0: not
    /// informative), Q0.16.
    low_q16: u16,
    /// Detections since lock, counting on past [`WARM`] (wrapping): the reference and the
    /// threshold move once every [`REF_EVERY`] of them.
    seen: u16,
}

/// The reference and threshold are updated once per this many detections of the channel.
const REF_EVERY: u16 = 16;

/// Per-channel in-window fractions and the set-aside mask.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(super) struct Health {
    channels: [Channel; MAX_CHANNELS],
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
            channels: [Channel {
                frac_q16: 0,
                ref_q16: 0,
                low_q16: 0,
                seen: 0,
            }; MAX_CHANNELS],
            aside: 0,
            set_asides: 0,
            aside_detections: 0,
        }
    }

    /// Every channel healthy and learning its level again.
    pub(super) fn reset(&mut self) {
        for ch in &mut self.channels {
            ch.seen = 0;
            ch.low_q16 = 0;
        }
        self.aside = 0;
    }

    /// Channels set aside now (bit c: channel c).
    pub(super) const fn aside(&self) -> u16 {
        self.aside
    }

    /// Count one located detection of channel `c`, inside the window or not; `null_q16` gives
    /// the channel's uniform-noise fraction when the threshold is due. False when the channel is
    /// set aside.
    #[inline(always)]
    pub(super) fn observe(
        &mut self,
        c: usize,
        inside: bool,
        null_q16: impl FnOnce() -> u16,
    ) -> bool {
        let Some(ch) = self.channels.get_mut(c) else {
            return true;
        };
        let ind = if inside { 0xFFFF } else { 0 };
        let f = i32::from(ch.frac_q16);
        if ch.seen < WARM {
            // Equal weights while learning: the first detections set both averages.
            ch.seen += 1;
            ch.frac_q16 = (f + (ind - f) / i32::from(ch.seen)) as u16;
            ch.ref_q16 = ch.frac_q16;
            return true;
        }
        ch.frac_q16 = (f + ((ind - f) >> SHIFT)) as u16;
        ch.seen = ch.seen.wrapping_add(1) | WARM;
        let bit = 1u16 << c;
        let aside = self.aside & bit != 0;
        if ch.seen % REF_EVERY == 0 {
            if !aside {
                // An average of the fast average over about 2^REF_SHIFT detections, stepped
                // once per REF_EVERY of them.
                let (f, r) = (i32::from(ch.frac_q16), i32::from(ch.ref_q16));
                ch.ref_q16 = (r + (((f - r) * i32::from(REF_EVERY)) >> REF_SHIFT)) as u16;
            }
            let null = null_q16();
            ch.low_q16 = if ch.ref_q16.saturating_sub(null) >= INFORMATIVE_Q16 {
                ((u32::from(ch.ref_q16) + 3 * u32::from(null)) / 4) as u16
            } else {
                0
            };
        }
        if aside {
            let back = ((u32::from(ch.low_q16) + u32::from(ch.ref_q16)) / 2) as u16;
            if ch.frac_q16 < back {
                self.aside_detections += 1;
                return false;
            }
            self.aside &= !bit;
        } else if ch.frac_q16 < ch.low_q16 && self.others_healthy(c) {
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
        self.channels.iter().enumerate().any(|(i, ch)| {
            i != c && self.aside & (1 << i) == 0 && ch.seen >= WARM && ch.frac_q16 >= ch.low_q16
        })
    }
}
