//! Where every detection went: one counter per fate, summing to the detections taken in.
//!
//! A detection lands in exactly one counter at every moment: `in_flight` holds those whose slot is
//! still open or whose announcement awaits the transmitter's answer, and they move to their final
//! counter when resolved. `total()` therefore equals the number of detections taken in, always.

/// Per-detection fates.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Accounting {
    /// Counter value wider than the TDC, before the time base, or overflowing it.
    pub rejected_time: u64,
    /// Channel not described by the gate table.
    pub rejected_channel: u64,
    /// Before the clock's origin or while the clock was not locked.
    pub no_clock: u64,
    /// Arrived after its slot had been closed (out of order beyond the slot).
    pub late: u64,
    /// On a known channel, outside every gate window.
    pub outside_gates: u64,
    /// Gated while the clock was locked but the absolute numbering not yet established.
    pub unaligned: u64,
    /// In a marker slot (public, never sifted).
    pub marker: u64,
    /// Part of a slot with two or more gated detections (resolved by the squashing rule).
    pub multi_click: u64,
    /// Single click whose basis matched the transmitter's: a sifted bit.
    pub sifted: u64,
    /// Single click whose basis differed from the transmitter's.
    pub basis_mismatch: u64,
    /// Single click dropped because the pending queue was full.
    pub queue_overflow: u64,
    /// Single click whose answer never came within the timeout (or before the end of the stream).
    pub unanswered: u64,
    /// Waiting: slot still open, or announced and awaiting an answer.
    pub in_flight: u64,
}

impl Accounting {
    /// All counters at zero.
    pub const fn new() -> Self {
        Self {
            rejected_time: 0,
            rejected_channel: 0,
            no_clock: 0,
            late: 0,
            outside_gates: 0,
            unaligned: 0,
            marker: 0,
            multi_click: 0,
            sifted: 0,
            basis_mismatch: 0,
            queue_overflow: 0,
            unanswered: 0,
            in_flight: 0,
        }
    }

    /// Sum of every counter: the number of detections taken in.
    pub const fn total(&self) -> u64 {
        self.rejected_time
            + self.rejected_channel
            + self.no_clock
            + self.late
            + self.outside_gates
            + self.unaligned
            + self.marker
            + self.multi_click
            + self.sifted
            + self.basis_mismatch
            + self.queue_overflow
            + self.unanswered
            + self.in_flight
    }

    /// Counters as (name, value) pairs, in a fixed order, for reports.
    pub const fn fields(&self) -> [(&'static str, u64); 13] {
        [
            ("rejected_time", self.rejected_time),
            ("rejected_channel", self.rejected_channel),
            ("no_clock", self.no_clock),
            ("late", self.late),
            ("outside_gates", self.outside_gates),
            ("unaligned", self.unaligned),
            ("marker", self.marker),
            ("multi_click", self.multi_click),
            ("sifted", self.sifted),
            ("basis_mismatch", self.basis_mismatch),
            ("queue_overflow", self.queue_overflow),
            ("unanswered", self.unanswered),
            ("in_flight", self.in_flight),
        ]
    }

    /// Words of [`Self::to_words`]: one per counter.
    pub const WORDS: usize = 13;

    /// The counters as words, in the order of [`Self::fields`] (the summary record's layout).
    pub fn to_words(&self) -> [u64; Self::WORDS] {
        [
            self.rejected_time,
            self.rejected_channel,
            self.no_clock,
            self.late,
            self.outside_gates,
            self.unaligned,
            self.marker,
            self.multi_click,
            self.sifted,
            self.basis_mismatch,
            self.queue_overflow,
            self.unanswered,
            self.in_flight,
        ]
    }

    /// Counters from words in the order of [`Self::to_words`].
    pub fn from_words(w: &[u64; Self::WORDS]) -> Self {
        let [rejected_time, rejected_channel, no_clock, late, outside_gates, unaligned, marker, multi_click, sifted, basis_mismatch, queue_overflow, unanswered, in_flight] =
            *w;
        Self {
            rejected_time,
            rejected_channel,
            no_clock,
            late,
            outside_gates,
            unaligned,
            marker,
            multi_click,
            sifted,
            basis_mismatch,
            queue_overflow,
            unanswered,
            in_flight,
        }
    }
}

/// Counts of multi-click slot events by outcome (their detections are in `multi_click`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MultiClickEvents {
    /// Squashed events whose basis matched: they yield a sifted bit.
    pub sifted: u64,
    /// Squashed events whose basis differed.
    pub basis_mismatch: u64,
    /// Dropped because the pending queue was full.
    pub queue_overflow: u64,
    /// No answer within the timeout.
    pub unanswered: u64,
    /// Clicks in both bases (the squashing rule picked the basis at random).
    pub cross_basis: u64,
}

/// Problems with the transmitter's answers (these are not detections).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AnswerErrors {
    /// Answers for a slot that is not pending (never announced, already resolved or expired).
    pub unmatched: u64,
    /// Answers with an intensity class or bit outside the configured range.
    pub malformed: u64,
}
