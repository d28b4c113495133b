//! Sequence numbers of incoming frames: gaps, duplicates and late arrivals.
//!
//! Sequence numbers are u16 and wrap; "ahead" means less than 2^15 ahead (serial-number
//! arithmetic as in RFC 1982). The window remembers the last 64 numbers, as IPsec's anti-replay
//! window does (RFC 4303, §3.4.3).

/// Numbers remembered behind the highest one seen.
pub const WINDOW: u16 = 64;

/// What one incoming sequence number means.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SeqClass {
    /// The first frame seen.
    First,
    /// Ahead of every earlier frame; `missing` numbers were skipped (0 when in order).
    Ahead {
        /// Numbers skipped over.
        missing: u16,
    },
    /// Behind the highest but not seen before: a reordered (late) frame filling a gap.
    Late,
    /// Seen before within the window.
    Duplicate,
    /// Further behind than the window remembers.
    TooOld,
}

/// The last 64 sequence numbers seen (16 bytes).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SeqWindow {
    highest: u16,
    /// Bit `i`: number `highest − i` seen.
    map: u64,
    any: bool,
}

impl SeqWindow {
    /// Nothing seen yet.
    pub const fn new() -> Self {
        Self {
            highest: 0,
            map: 0,
            any: false,
        }
    }

    /// Highest number seen, if any.
    pub const fn highest(&self) -> Option<u16> {
        if self.any {
            Some(self.highest)
        } else {
            None
        }
    }

    /// Classify `seq` and remember it.
    pub fn observe(&mut self, seq: u16) -> SeqClass {
        if !self.any {
            self.any = true;
            self.highest = seq;
            self.map = 1;
            return SeqClass::First;
        }
        let ahead = seq.wrapping_sub(self.highest);
        if ahead == 0 {
            return SeqClass::Duplicate;
        }
        if ahead < 0x8000 {
            self.map = if ahead >= WINDOW {
                1
            } else {
                (self.map << ahead) | 1
            };
            self.highest = seq;
            return SeqClass::Ahead { missing: ahead - 1 };
        }
        let back = self.highest.wrapping_sub(seq);
        if back >= WINDOW {
            return SeqClass::TooOld;
        }
        let bit = 1u64 << back;
        if self.map & bit != 0 {
            SeqClass::Duplicate
        } else {
            self.map |= bit;
            SeqClass::Late
        }
    }
}
