//! The sifter: slot grouping, the pending queue, squashing, expiry, answer matching and tallies.
//!
//! Gated detections arrive in slot order (the receiver refuses late ones, [`Sifter::is_late`]).
//! Detections of one slot are merged into an open slot; a later slot closes it. A closed slot
//! with one click keeps its (basis, bit); one with several follows the squashing rule. It is
//! queued, announced to the transmitter, and resolved by the answer (sifted or basis mismatch),
//! by the timeout or the link's final word (unanswered), or by a full queue (overflow). Every
//! resolution moves the slot's detections out of [`Fate::InFlight`] in the caller's
//! [`Accounting`], so the receiver's invariant (every detection in exactly one counter) holds at
//! every moment.
//!
//! ## Serving the transmitter in batches
//! Talking to the transmitter is per-batch work, not per-slot work. Queued slots are announced
//! together and answers are drained together:
//! - when [`ANNOUNCE_BATCH`] slots wait to be announced ([`Sifter::flush`]): announce, drain the
//!   answers, and expire what the link says it will never answer
//!   ([`Transmitter::answers_final_below`]);
//! - when a slot opens past the deadline of the oldest waiting entry (its slot plus the answer
//!   timeout): the same, then expire by the timeout what is still unanswered — the only place,
//!   with a full queue and [`Sifter::finish`], where the receiver decides anything itself;
//! - when the queue is full: the same flush, drop answered entries, then the overflow policy.
//!
//! The block is the batch of [`ANNOUNCE_BATCH`] closed slots, fixed by the detection stream, not
//! the caller's chunk of events: every exchange with the transmitter happens at a point fixed by
//! the stream (a full batch, a slot opening past a deadline, a full queue, the end), after every
//! closed slot was announced and every arrived answer taken. So for a transmitter whose answers
//! depend only on what was announced, the results do not depend on how the stream is cut into
//! blocks, and with a transmitter that answers at once they equal those of answering slot by
//! slot. [`Sifter::flush`] may also be called at any time (idle time, end of a link), at the
//! price of tying the results to those calls.

use super::{
    click_bit, squash, Announcement, Answer, ClickMask, KeySink, Outcome, OverflowPolicy, Pending,
    PendingQueue, SiftedBit, SquashRng, Transmitter,
};
use crate::accounting::{Accounting, AnswerErrors, Fate, MultiClickEvents};
use crate::gates::{Basis, Gate, MAX_INTENSITIES};
use crate::tally::{MultiPhoton, Tally};
use core::fmt;

/// Why sifting settings were refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SiftConfigError {
    /// Number of intensity classes outside 1..=3.
    Intensities(u8),
    /// Answer timeout of zero slots.
    ZeroTimeout,
}

impl fmt::Display for SiftConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Intensities(n) => {
                write!(f, "{n} intensity classes; expected 1..={MAX_INTENSITIES}")
            }
            Self::ZeroTimeout => write!(f, "answer timeout must be at least one slot"),
        }
    }
}

impl core::error::Error for SiftConfigError {}

/// Validated sifting settings.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SiftConfig {
    intensities: u8,
    answer_timeout_slots: u64,
    overflow: OverflowPolicy,
    squash_seed: u64,
}

impl SiftConfig {
    /// `intensities` classes (1..=3), entries expire `answer_timeout_slots` (≥ 1) after their
    /// slot, a full queue follows `overflow`, the squashing rule draws from `squash_seed`.
    pub const fn new(
        intensities: u8,
        answer_timeout_slots: u64,
        overflow: OverflowPolicy,
        squash_seed: u64,
    ) -> Result<Self, SiftConfigError> {
        if intensities == 0 || intensities as usize > MAX_INTENSITIES {
            return Err(SiftConfigError::Intensities(intensities));
        }
        if answer_timeout_slots == 0 {
            return Err(SiftConfigError::ZeroTimeout);
        }
        Ok(Self {
            intensities,
            answer_timeout_slots,
            overflow,
            squash_seed,
        })
    }

    /// Number of intensity classes.
    pub const fn intensities(&self) -> u8 {
        self.intensities
    }

    /// Slots after which an unanswered entry expires.
    pub const fn answer_timeout_slots(&self) -> u64 {
        self.answer_timeout_slots
    }

    /// What a full queue does.
    pub const fn overflow(&self) -> OverflowPolicy {
        self.overflow
    }
}

/// Queued slots announced together (the batch is read from the pending queue's tail).
pub const ANNOUNCE_BATCH: usize = 32;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct OpenSlot {
    slot: u64,
    mask: ClickMask,
    basis: Basis,
    bit: u8,
    clicks: u32,
    photons: u8,
}

/// Slot grouping and sifting with a pending queue of `PENDING` detected slots.
#[derive(Clone, Debug)]
pub struct Sifter<const PENDING: usize> {
    cfg: SiftConfig,
    open: Option<OpenSlot>,
    /// Slots below this were closed; a gated detection there is late.
    next_open_slot: u64,
    pending: PendingQueue<PENDING>,
    /// Newest entries of the queue not yet announced.
    unannounced: usize,
    rng: SquashRng,
    multi: MultiClickEvents,
    answer_errors: AnswerErrors,
    tally: Tally,
    multi_tally: Tally,
    multi_photon: MultiPhoton,
    sifted_bits: u64,
}

impl<const PENDING: usize> Sifter<PENDING> {
    /// A sifter with nothing open or pending.
    pub const fn new(cfg: SiftConfig) -> Self {
        Self {
            open: None,
            next_open_slot: 0,
            pending: PendingQueue::new(),
            unannounced: 0,
            rng: SquashRng::new(cfg.squash_seed),
            multi: MultiClickEvents {
                sifted: 0,
                basis_mismatch: 0,
                queue_overflow: 0,
                unanswered: 0,
                cross_basis: 0,
            },
            answer_errors: AnswerErrors {
                unmatched: 0,
                malformed: 0,
            },
            tally: Tally::new(),
            multi_tally: Tally::new(),
            multi_photon: MultiPhoton::new(),
            sifted_bits: 0,
            cfg,
        }
    }

    /// The settings in use.
    pub const fn config(&self) -> &SiftConfig {
        &self.cfg
    }

    /// Multi-click slot events by outcome.
    pub const fn multi_click_events(&self) -> &MultiClickEvents {
        &self.multi
    }

    /// Problems with the transmitter's answers.
    pub const fn answer_errors(&self) -> &AnswerErrors {
        &self.answer_errors
    }

    /// Tally of single-click slots.
    pub const fn tally(&self) -> &Tally {
        &self.tally
    }

    /// Tally of squashed multi-click slots.
    pub const fn multi_click_tally(&self) -> &Tally {
        &self.multi_tally
    }

    /// Answered slots with two or more photons detected, per intensity class.
    pub const fn multi_photon(&self) -> &MultiPhoton {
        &self.multi_photon
    }

    /// Sifted bits produced (single and squashed multi-click).
    pub const fn sifted_bits(&self) -> u64 {
        self.sifted_bits
    }

    /// Entries waiting in the pending queue.
    pub fn pending_len(&self) -> usize {
        self.pending.len()
    }

    /// Whether a gated detection in `slot` comes too late: its slot, or a later one, was already
    /// opened. A reordered neighbour cannot reopen a slot, so announcements stay in slot order.
    #[inline]
    pub fn is_late(&self, slot: u64) -> bool {
        slot < self.next_open_slot || self.open.is_some_and(|o| slot < o.slot)
    }

    /// Take one gated detection (counted [`Fate::InFlight`] by the caller) in `slot`, at `gate`,
    /// with photon-number `level`; a later slot than the open one closes and announces that one.
    #[inline]
    pub fn click(
        &mut self,
        slot: u64,
        gate: &Gate,
        level: u8,
        acc: &mut Accounting,
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) {
        match &mut self.open {
            Some(o) if o.slot == slot => {
                o.mask |= click_bit(gate.basis, gate.bit);
                o.clicks += 1;
                o.photons = o.photons.saturating_add(level);
            }
            _ => {
                // Past the oldest waiting entry's deadline: take the answers, then expire what
                // is still unanswered, before the closing slot takes a place in the queue.
                if self
                    .pending
                    .oldest()
                    .is_some_and(|p| p.slot.saturating_add(self.cfg.answer_timeout_slots) < slot)
                {
                    self.flush(acc, tx, key);
                    self.expire(slot, acc, key);
                }
                self.close_open(acc, tx, key);
                self.open = Some(OpenSlot {
                    slot,
                    mask: click_bit(gate.basis, gate.bit),
                    basis: gate.basis,
                    bit: gate.bit,
                    clicks: 1,
                    photons: level,
                });
            }
        }
    }

    /// Serve the transmitter: announce what waits to be announced, take every answer that has
    /// arrived, and expire what the link says it will never answer. The receiver's own timeout
    /// is not applied here: that is decided only at points fixed by the stream.
    pub fn flush(
        &mut self,
        acc: &mut Accounting,
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) {
        self.announce(tx);
        while let Some(a) = tx.poll_answer() {
            self.answer(a, acc, key);
        }
        // The link's final word: whatever it will not answer any more stays unanswered whenever
        // it is expired, so expiring it now changes no fate.
        if let Some(below) = tx.answers_final_below() {
            self.expire_below(below, acc, key);
        }
    }

    /// Announce the unannounced tail of the queue, oldest first.
    #[inline]
    fn announce(&mut self, tx: &mut impl Transmitter) {
        if self.unannounced == 0 {
            return;
        }
        let from = self.pending.len().saturating_sub(self.unannounced);
        for p in self.pending.tail(from) {
            tx.announce(Announcement {
                slot: p.slot,
                basis: p.basis,
            });
        }
        self.unannounced = 0;
    }

    /// Close the open slot, answer what can be answered, and expire everything still waiting.
    pub fn finish(
        &mut self,
        acc: &mut Accounting,
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) {
        self.close_open(acc, tx, key);
        self.flush(acc, tx, key);
        self.expire(u64::MAX, acc, key);
    }

    /// Handle one answer from the transmitter.
    pub fn answer(&mut self, a: Answer, acc: &mut Accounting, key: &mut impl KeySink) {
        if a.intensity >= self.cfg.intensities || a.bit.is_some_and(|b| b > 1) {
            self.answer_errors.malformed += 1;
            return;
        }
        let Some(p) = self.pending.take(a.slot) else {
            self.answer_errors.unmatched += 1;
            return;
        };
        let tally = if p.multi_click {
            &mut self.multi_tally
        } else {
            &mut self.tally
        };
        tally.add(a.basis, a.bit, a.intensity, p.basis, p.bit);
        if p.photons > 1 {
            self.multi_photon
                .add(a.intensity, p.multi_click, a.basis == p.basis);
        }
        let outcome = if a.basis == p.basis {
            self.sifted_bits += 1;
            key.sifted(SiftedBit {
                slot: p.slot,
                basis: p.basis,
                bit: p.bit,
                intensity: a.intensity,
                multi_click: p.multi_click,
                tx_bit: a.bit,
            });
            Outcome::Sifted
        } else {
            Outcome::BasisMismatch
        };
        self.count_outcome(p.multi_click, outcome, acc);
        key.resolved(p.slot, outcome);
        while self.pending.oldest().is_some_and(|p| p.done) {
            self.pending.pop_oldest();
        }
    }

    fn count_outcome(&mut self, multi_click: bool, outcome: Outcome, acc: &mut Accounting) {
        if multi_click {
            let c = match outcome {
                Outcome::Sifted => &mut self.multi.sifted,
                Outcome::BasisMismatch => &mut self.multi.basis_mismatch,
                Outcome::QueueOverflow => &mut self.multi.queue_overflow,
                Outcome::Unanswered => &mut self.multi.unanswered,
            };
            *c += 1;
        } else {
            acc.resolve(1, outcome.fate());
        }
    }

    /// Drop waiting entries from the front while `keep` is false for them; count the unanswered.
    fn expire_while(
        &mut self,
        expired: impl Fn(&Pending) -> bool,
        acc: &mut Accounting,
        key: &mut impl KeySink,
    ) {
        while let Some(&p) = self.pending.oldest() {
            if !p.done && !expired(&p) {
                break;
            }
            self.pending.pop_oldest();
            if !p.done {
                self.count_outcome(p.multi_click, Outcome::Unanswered, acc);
                key.resolved(p.slot, Outcome::Unanswered);
            }
        }
    }

    /// Expire every waiting entry below `below` (the link will not answer it any more).
    fn expire_below(&mut self, below: u64, acc: &mut Accounting, key: &mut impl KeySink) {
        self.expire_while(|p| p.slot < below, acc, key);
    }

    /// Expire entries older than the timeout relative to `now_slot`.
    fn expire(&mut self, now_slot: u64, acc: &mut Accounting, key: &mut impl KeySink) {
        let timeout = self.cfg.answer_timeout_slots;
        self.expire_while(|p| p.slot.saturating_add(timeout) < now_slot, acc, key);
    }

    fn close_open(
        &mut self,
        acc: &mut Accounting,
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) {
        let Some(o) = self.open.take() else {
            return;
        };
        self.next_open_slot = o.slot.saturating_add(1);
        let multi_click = o.clicks > 1;
        let (basis, bit) = if multi_click {
            acc.resolve(u64::from(o.clicks), Fate::MultiClick);
            let (basis, bit, cross) = squash(o.mask, &mut self.rng);
            if cross {
                self.multi.cross_basis += 1;
            }
            (basis, bit)
        } else {
            (o.basis, o.bit)
        };
        let entry = Pending {
            slot: o.slot,
            basis,
            bit,
            multi_click,
            photons: o.photons,
            done: false,
        };
        if self.pending.is_full() {
            self.flush(acc, tx, key);
            self.pending.compact();
        }
        if self.pending.is_full() {
            match self.cfg.overflow {
                OverflowPolicy::DropNewest => {
                    self.count_outcome(multi_click, Outcome::QueueOverflow, acc);
                    key.resolved(o.slot, Outcome::QueueOverflow);
                    return;
                }
                OverflowPolicy::DropOldest => {
                    if let Some(old) = self.pending.pop_oldest() {
                        if !old.done {
                            self.count_outcome(old.multi_click, Outcome::QueueOverflow, acc);
                            key.resolved(old.slot, Outcome::QueueOverflow);
                        }
                    }
                }
            }
        }
        if self.pending.push(entry).is_err() {
            self.count_outcome(multi_click, Outcome::QueueOverflow, acc);
            key.resolved(o.slot, Outcome::QueueOverflow);
            return;
        }
        self.unannounced += 1;
        if self.unannounced >= ANNOUNCE_BATCH {
            self.flush(acc, tx, key);
        }
    }
}
