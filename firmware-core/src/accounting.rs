//! Where every detection went: one list of fates, one counter per fate, summing to the
//! detections taken in.
//!
//! [`Fate`] is the single list of what can become of a detection. Everything that names or counts
//! fates reads it: the receiver's [`crate::Trace`] (the fate decided on arrival), the
//! [`Accounting`] counters (an array indexed by fate), the summary record's words, and the host's
//! reports (through [`Fate::name`]). Adding a fate means adding one variant here and one entry to
//! [`Fate::ALL`]; the compiler points at the rest.
//!
//! A detection lands in exactly one counter at every moment: [`Fate::InFlight`] holds those whose
//! slot is still open or whose announcement awaits the transmitter's answer, and they move to their
//! final counter when resolved. [`Accounting::total`] therefore equals the number of detections
//! taken in, always.

use core::ops::Index;

/// What became of one detection. The order is the order of the counters in reports and records.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[repr(u8)]
pub enum Fate {
    /// Counter value wider than the TDC, before the time base, or overflowing it.
    RejectedTime,
    /// Channel not described by the gate table.
    RejectedChannel,
    /// Before the clock's origin or while the clock was not locked.
    NoClock,
    /// Arrived after its slot had been closed (out of order beyond the slot).
    Late,
    /// On a known channel, outside every gate window.
    OutsideGates,
    /// Gated while the clock was locked but the absolute numbering not yet established.
    Unaligned,
    /// In a marker slot (public, never sifted).
    Marker,
    /// Part of a slot with two or more gated detections (resolved by the squashing rule).
    MultiClick,
    /// Single click whose basis matched the transmitter's: a sifted bit.
    Sifted,
    /// Single click whose basis differed from the transmitter's.
    BasisMismatch,
    /// Single click dropped because the pending queue was full.
    QueueOverflow,
    /// Single click whose answer never came within the timeout (or before the end of the stream).
    Unanswered,
    /// Waiting: slot still open, or announced and awaiting an answer. A gated detection starts
    /// here.
    InFlight,
}

impl Fate {
    /// Number of fates.
    pub const COUNT: usize = 13;

    /// Every fate, in counter order.
    pub const ALL: [Self; Self::COUNT] = [
        Self::RejectedTime,
        Self::RejectedChannel,
        Self::NoClock,
        Self::Late,
        Self::OutsideGates,
        Self::Unaligned,
        Self::Marker,
        Self::MultiClick,
        Self::Sifted,
        Self::BasisMismatch,
        Self::QueueOverflow,
        Self::Unanswered,
        Self::InFlight,
    ];

    /// The fate's name in reports, traces and JSON (snake case).
    pub const fn name(self) -> &'static str {
        match self {
            Self::RejectedTime => "rejected_time",
            Self::RejectedChannel => "rejected_channel",
            Self::NoClock => "no_clock",
            Self::Late => "late",
            Self::OutsideGates => "outside_gates",
            Self::Unaligned => "unaligned",
            Self::Marker => "marker",
            Self::MultiClick => "multi_click",
            Self::Sifted => "sifted",
            Self::BasisMismatch => "basis_mismatch",
            Self::QueueOverflow => "queue_overflow",
            Self::Unanswered => "unanswered",
            Self::InFlight => "in_flight",
        }
    }

    /// Position of the fate's counter.
    pub const fn index(self) -> usize {
        self as usize
    }

    /// The fate with this name, if any.
    pub fn from_name(name: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|f| f.name() == name)
    }
}

// `ALL` lists every variant once, in declaration order, so `index` addresses it. Compile time
// only: an out-of-range index here stops the build, never a running board.
#[allow(clippy::indexing_slicing)]
const _: () = {
    let mut i = 0;
    while i < Fate::COUNT {
        assert!(Fate::ALL[i] as usize == i);
        i += 1;
    }
};

/// One counter per [`Fate`].
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Accounting {
    counts: [u64; Fate::COUNT],
}

impl Accounting {
    /// All counters at zero.
    pub const fn new() -> Self {
        Self {
            counts: [0; Fate::COUNT],
        }
    }

    /// Counters from their values in [`Fate::ALL`] order.
    pub const fn from_counts(counts: [u64; Fate::COUNT]) -> Self {
        Self { counts }
    }

    /// The counters in [`Fate::ALL`] order.
    pub const fn counts(&self) -> &[u64; Fate::COUNT] {
        &self.counts
    }

    /// Detections with this fate.
    pub fn get(&self, fate: Fate) -> u64 {
        self.counts.get(fate.index()).copied().unwrap_or(0)
    }

    /// Count `n` more detections with `fate`.
    #[inline]
    pub fn add(&mut self, fate: Fate, n: u64) {
        if let Some(c) = self.counts.get_mut(fate.index()) {
            *c = c.wrapping_add(n);
        }
    }

    /// Move `n` detections from [`Fate::InFlight`] to their final `fate`.
    #[inline]
    pub fn resolve(&mut self, n: u64, fate: Fate) {
        if let Some(c) = self.counts.get_mut(Fate::InFlight.index()) {
            *c = c.saturating_sub(n);
        }
        self.add(fate, n);
    }

    /// Sum of every counter: the number of detections taken in.
    pub fn total(&self) -> u64 {
        self.counts.iter().fold(0u64, |a, &n| a.wrapping_add(n))
    }

    /// Counters as (name, value) pairs, in [`Fate::ALL`] order, for reports.
    pub fn fields(&self) -> [(&'static str, u64); Fate::COUNT] {
        Fate::ALL.map(|f| (f.name(), self.get(f)))
    }

    /// Words of [`Self::to_words`]: one per fate.
    pub const WORDS: usize = Fate::COUNT;

    /// The counters as words, in [`Fate::ALL`] order (the summary record's layout).
    pub fn to_words(&self) -> [u64; Self::WORDS] {
        self.counts
    }

    /// Counters from words in the order of [`Self::to_words`].
    pub fn from_words(w: &[u64; Self::WORDS]) -> Self {
        Self::from_counts(*w)
    }
}

impl Index<Fate> for Accounting {
    type Output = u64;

    fn index(&self, fate: Fate) -> &u64 {
        // `Fate::index` is below `COUNT` for every variant (checked at compile time above).
        self.counts.get(fate.index()).unwrap_or(&0)
    }
}

/// Counts of multi-click slot events by outcome (their detections are in [`Fate::MultiClick`]).
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_unique_and_round_trip() {
        for (i, f) in Fate::ALL.into_iter().enumerate() {
            assert_eq!(f.index(), i);
            assert_eq!(Fate::from_name(f.name()), Some(f));
            assert!(Fate::ALL[..i].iter().all(|g| g.name() != f.name()));
        }
        assert_eq!(Fate::from_name("gated"), None);
    }

    #[test]
    fn resolve_moves_from_in_flight() {
        let mut a = Accounting::new();
        a.add(Fate::InFlight, 3);
        a.resolve(2, Fate::MultiClick);
        assert_eq!(a[Fate::InFlight], 1);
        assert_eq!(a[Fate::MultiClick], 2);
        assert_eq!(a.total(), 3);
    }
}
