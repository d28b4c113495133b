//! The receiver pipeline: every stage in data-flow order behind one streaming entry point.
//!
//! [`Receiver::push_block`] takes TDC events in blocks of any size; results never depend on how the
//! stream is cut into blocks. Slots are closed when a later slot's gated detection arrives (or at
//! [`Receiver::finish`]), announced to the [`Transmitter`], and resolved when answered.

use crate::accounting::{Accounting, AnswerErrors, MultiClickEvents};
use crate::clock::{Clock, Located, Numbered, SlotPos};
use crate::formats::Summary;
use crate::gates::{Basis, GateTable, MAX_INTENSITIES};
use crate::sift::{
    click_bit, squash, Announcement, Answer, ClickMask, KeySink, Outcome, OverflowPolicy, Pending,
    PendingQueue, SiftedBit, SquashRng, Transmitter,
};
use crate::tally::{MultiPhoton, Tally};
use crate::timestamps::{TdcEvent, UnwrapConfig, Unwrapper};
use core::fmt;
use fixed::types::U0F32;

/// Why a receiver configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ConfigError {
    /// Number of intensity classes outside 1..=3.
    Intensities(u8),
    /// Answer timeout of zero slots.
    ZeroTimeout,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Intensities(n) => {
                write!(f, "{n} intensity classes; expected 1..={MAX_INTENSITIES}")
            }
            Self::ZeroTimeout => write!(f, "answer timeout must be at least one slot"),
        }
    }
}

impl core::error::Error for ConfigError {}

/// Validated receiver configuration.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ReceiverConfig {
    tdc: UnwrapConfig,
    gates: GateTable,
    intensities: u8,
    answer_timeout_slots: u64,
    overflow: OverflowPolicy,
    squash_seed: u64,
}

impl ReceiverConfig {
    /// Check and bundle the receiver's settings.
    pub fn new(
        tdc: UnwrapConfig,
        gates: GateTable,
        intensities: u8,
        answer_timeout_slots: u64,
        overflow: OverflowPolicy,
        squash_seed: u64,
    ) -> Result<Self, ConfigError> {
        if intensities == 0 || usize::from(intensities) > MAX_INTENSITIES {
            return Err(ConfigError::Intensities(intensities));
        }
        if answer_timeout_slots == 0 {
            return Err(ConfigError::ZeroTimeout);
        }
        Ok(Self {
            tdc,
            gates,
            intensities,
            answer_timeout_slots,
            overflow,
            squash_seed,
        })
    }

    /// The TDC description.
    pub const fn tdc(&self) -> &UnwrapConfig {
        &self.tdc
    }

    /// The gate table.
    pub const fn gates(&self) -> &GateTable {
        &self.gates
    }

    /// Number of intensity classes.
    pub const fn intensities(&self) -> u8 {
        self.intensities
    }

    /// Slots after which an unanswered entry expires.
    pub const fn answer_timeout_slots(&self) -> u64 {
        self.answer_timeout_slots
    }
}

/// What the pipeline decided for one detection at the moment it arrived.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Stage {
    /// Refused by the time base.
    RejectedTime,
    /// Channel unknown to the gate table.
    RejectedChannel,
    /// No clock for this time.
    NoClock,
    /// Outside every gate.
    OutsideGates,
    /// Its slot was already closed.
    Late,
    /// Gated, but the absolute slot numbering is not yet established.
    Unaligned,
    /// In a marker slot.
    Marker,
    /// In a gate; the slot's outcome follows when it is resolved.
    Gated,
}

/// Per-detection record for debugging traces.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Trace {
    /// Unwrapped time in ps (before the channel delay), when the time base accepted it.
    pub t_ps: Option<u64>,
    /// Detector channel (the channel byte without its photon-number level).
    pub channel: u8,
    /// Slot and position, when the clock gave them.
    pub slot: Option<(u64, U0F32)>,
    /// Gate index, when inside a gate.
    pub gate: Option<u8>,
    /// The decision taken.
    pub stage: Stage,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct OpenSlot {
    slot: u64,
    mask: ClickMask,
    basis: Basis,
    bit: u8,
    clicks: u32,
    photons: u8,
}

/// The whole receiver pipeline with a pending queue of `PENDING` detected slots.
#[derive(Clone, Debug)]
pub struct Receiver<C: Clock, const PENDING: usize> {
    cfg: ReceiverConfig,
    unwrapper: Unwrapper,
    clock: C,
    open: Option<OpenSlot>,
    /// Slots below this were closed; a gated detection there is late.
    next_open_slot: u64,
    pending: PendingQueue<PENDING>,
    rng: SquashRng,
    detections_in: u64,
    accounting: Accounting,
    multi: MultiClickEvents,
    answer_errors: AnswerErrors,
    tally: Tally,
    multi_tally: Tally,
    multi_photon: MultiPhoton,
    sifted_bits: u64,
}

impl<C: Clock, const PENDING: usize> Receiver<C, PENDING> {
    /// A receiver in its initial state.
    pub const fn new(cfg: ReceiverConfig, clock: C) -> Self {
        Self {
            unwrapper: Unwrapper::new(cfg.tdc),
            clock,
            open: None,
            next_open_slot: 0,
            pending: PendingQueue::new(),
            rng: SquashRng::new(cfg.squash_seed),
            detections_in: 0,
            accounting: Accounting::new(),
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

    /// Return to the state [`Self::new`] gives with the same configuration and `clock` (a fresh
    /// clock stage): counters, tallies, pending queue and time base all start over, and what was
    /// pending is dropped uncounted. Assigns in place, so a receiver in a `static` stays there.
    pub fn reset(&mut self, clock: C) {
        // Rebuilt from the configuration, so a field added later cannot be left out.
        *self = Self::new(self.cfg, clock);
    }

    /// The configuration in use.
    pub const fn config(&self) -> &ReceiverConfig {
        &self.cfg
    }

    /// The time base (counter unwrapping state).
    pub const fn unwrapper(&self) -> &Unwrapper {
        &self.unwrapper
    }

    /// The clock stage.
    pub const fn clock(&self) -> &C {
        &self.clock
    }

    /// Detections taken in so far.
    pub const fn detections_in(&self) -> u64 {
        self.detections_in
    }

    /// Where every detection went; sums to [`Self::detections_in`].
    pub const fn accounting(&self) -> &Accounting {
        &self.accounting
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

    /// Pass a coarse hint from the classical channel to the clock: at receiver time `t_ps` (on
    /// this receiver's time base) the transmitter's slot counter read about `tx_slot`.
    pub fn hint(&mut self, t_ps: u64, tx_slot: u64) {
        self.clock.hint(t_ps, tx_slot);
    }

    /// Process a block of TDC events, then take any answers that have arrived.
    pub fn push_block(
        &mut self,
        events: &[TdcEvent],
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) {
        for &ev in events {
            self.push(ev, tx, key);
        }
        self.service(tx, key);
    }

    /// Take every answer that has arrived.
    pub fn service(&mut self, tx: &mut impl Transmitter, key: &mut impl KeySink) {
        while let Some(a) = tx.poll_answer() {
            self.answer(a, key);
        }
        if let Some(below) = tx.answers_final_below() {
            self.expire_below(below, key);
        }
    }

    /// Expire every waiting entry below `below` (the link will not answer it any more).
    fn expire_below(&mut self, below: u64, key: &mut impl KeySink) {
        while let Some(&p) = self.pending.oldest() {
            if !p.done && p.slot >= below {
                break;
            }
            self.pending.pop_oldest();
            if !p.done {
                self.count_outcome(p.multi_click, Outcome::Unanswered);
                key.resolved(p.slot, Outcome::Unanswered);
            }
        }
    }

    /// Process one TDC event and say what was decided for it.
    #[inline]
    pub fn push(
        &mut self,
        ev: TdcEvent,
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) -> Trace {
        self.detections_in += 1;
        let channel = self.cfg.gates.split_channel(ev.channel).0;
        let mut trace = Trace {
            t_ps: None,
            channel,
            slot: None,
            gate: None,
            stage: Stage::RejectedTime,
        };
        let Ok(det) = self.unwrapper.unwrap(ev) else {
            self.accounting.rejected_time += 1;
            return trace;
        };
        trace.t_ps = Some(det.t_ps);
        let Some(delay) = self.cfg.gates.delay_ps(channel) else {
            self.accounting.rejected_channel += 1;
            trace.stage = Stage::RejectedChannel;
            return trace;
        };
        let Some(t) = det.t_ps.checked_add_signed(delay.wrapping_neg()) else {
            self.accounting.rejected_time += 1;
            return trace;
        };
        let pos = match self.clock.locate_on(channel, t) {
            Located::At(p) => p,
            Located::BeforeOrigin | Located::NotLocked => {
                self.accounting.no_clock += 1;
                trace.stage = Stage::NoClock;
                return trace;
            }
        };
        trace.slot = Some((pos.slot, pos.phase));
        let Some((gate, &g)) = self.cfg.gates.find(channel, pos.phase) else {
            self.accounting.outside_gates += 1;
            trace.stage = Stage::OutsideGates;
            return trace;
        };
        trace.gate = Some(gate);
        let z_bit = (g.basis == Basis::Z).then_some(g.bit);
        let slot = match self.clock.number(pos, z_bit) {
            Numbered::Slot(s) => s,
            Numbered::Marker => {
                self.accounting.marker += 1;
                trace.stage = Stage::Marker;
                return trace;
            }
            Numbered::Unaligned => {
                self.accounting.unaligned += 1;
                trace.stage = Stage::Unaligned;
                return trace;
            }
        };
        let pos = SlotPos { slot, ..pos };
        trace.slot = Some((pos.slot, pos.phase));
        // A reordered neighbour from a slot before the open one cannot reopen it: the queue and
        // the announcements stay in slot order.
        if pos.slot < self.next_open_slot || self.open.is_some_and(|o| pos.slot < o.slot) {
            self.accounting.late += 1;
            trace.stage = Stage::Late;
            return trace;
        }
        trace.stage = Stage::Gated;
        self.accounting.in_flight += 1;
        // Only gated detections need their photon-number level.
        let level = self.cfg.gates.split_channel(ev.channel).1;
        match &mut self.open {
            Some(o) if o.slot == pos.slot => {
                o.mask |= click_bit(g.basis, g.bit);
                o.clicks += 1;
                o.photons = o.photons.saturating_add(level);
            }
            _ => {
                // Free what timed out before the closing slot takes a place in the queue (with
                // answers coming at once the queue is usually empty: skip the call then).
                if !self.pending.is_empty() {
                    self.expire(pos.slot, key);
                }
                self.close_open(tx, key);
                self.open = Some(OpenSlot {
                    slot: pos.slot,
                    mask: click_bit(g.basis, g.bit),
                    basis: g.basis,
                    bit: g.bit,
                    clicks: 1,
                    photons: level,
                });
            }
        }
        trace
    }

    /// Close the open slot, answer what can be answered, and expire everything still waiting.
    pub fn finish(&mut self, tx: &mut impl Transmitter, key: &mut impl KeySink) {
        self.close_open(tx, key);
        self.service(tx, key);
        self.expire(u64::MAX, key);
    }

    /// Handle one answer from the transmitter.
    pub fn answer(&mut self, a: Answer, key: &mut impl KeySink) {
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
        self.count_outcome(p.multi_click, outcome);
        key.resolved(p.slot, outcome);
        while self.pending.oldest().is_some_and(|p| p.done) {
            self.pending.pop_oldest();
        }
    }

    fn count_outcome(&mut self, multi_click: bool, outcome: Outcome) {
        if multi_click {
            let c = match outcome {
                Outcome::Sifted => &mut self.multi.sifted,
                Outcome::BasisMismatch => &mut self.multi.basis_mismatch,
                Outcome::QueueOverflow => &mut self.multi.queue_overflow,
                Outcome::Unanswered => &mut self.multi.unanswered,
            };
            *c += 1;
        } else {
            self.accounting.in_flight = self.accounting.in_flight.saturating_sub(1);
            let c = match outcome {
                Outcome::Sifted => &mut self.accounting.sifted,
                Outcome::BasisMismatch => &mut self.accounting.basis_mismatch,
                Outcome::QueueOverflow => &mut self.accounting.queue_overflow,
                Outcome::Unanswered => &mut self.accounting.unanswered,
            };
            *c += 1;
        }
    }

    /// Expire entries older than the timeout relative to `now_slot`.
    fn expire(&mut self, now_slot: u64, key: &mut impl KeySink) {
        let timeout = self.cfg.answer_timeout_slots;
        while let Some(&p) = self.pending.oldest() {
            if !p.done && p.slot.saturating_add(timeout) >= now_slot {
                break;
            }
            self.pending.pop_oldest();
            if !p.done {
                self.count_outcome(p.multi_click, Outcome::Unanswered);
                key.resolved(p.slot, Outcome::Unanswered);
            }
        }
    }

    fn close_open(&mut self, tx: &mut impl Transmitter, key: &mut impl KeySink) {
        let Some(o) = self.open.take() else {
            return;
        };
        self.next_open_slot = o.slot.saturating_add(1);
        let multi_click = o.clicks > 1;
        let (basis, bit) = if multi_click {
            self.accounting.in_flight = self
                .accounting
                .in_flight
                .saturating_sub(u64::from(o.clicks));
            self.accounting.multi_click += u64::from(o.clicks);
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
            self.expire(o.slot, key);
        }
        if self.pending.is_full() {
            self.pending.compact();
        }
        if self.pending.is_full() {
            match self.cfg.overflow {
                OverflowPolicy::DropNewest => {
                    self.count_outcome(multi_click, Outcome::QueueOverflow);
                    key.resolved(o.slot, Outcome::QueueOverflow);
                    return;
                }
                OverflowPolicy::DropOldest => {
                    if let Some(old) = self.pending.pop_oldest() {
                        if !old.done {
                            self.count_outcome(old.multi_click, Outcome::QueueOverflow);
                            key.resolved(old.slot, Outcome::QueueOverflow);
                        }
                    }
                }
            }
        }
        if self.pending.push(entry).is_err() {
            self.count_outcome(multi_click, Outcome::QueueOverflow);
            key.resolved(o.slot, Outcome::QueueOverflow);
            return;
        }
        tx.announce(Announcement {
            slot: o.slot,
            basis,
        });
        self.service(tx, key);
    }
}
impl Summary {
    /// The counters of `rx` (frame counters left at zero; [`crate::FrameOut::finish`] fills them).
    pub fn of<C: Clock, const P: usize>(rx: &Receiver<C, P>) -> Self {
        Self {
            detections_in: rx.detections_in(),
            sifted_bits: rx.sifted_bits(),
            accounting: *rx.accounting(),
            multi: *rx.multi_click_events(),
            answer_errors: *rx.answer_errors(),
            tally: *rx.tally(),
            multi_tally: *rx.multi_click_tally(),
            key_blocks: 0,
            frame_errors: 0,
        }
    }
}

#[cfg(feature = "defmt")]
impl defmt::Format for Trace {
    fn format(&self, f: defmt::Formatter<'_>) {
        let (slot, phase) = self.slot.map(|(s, p)| (s, p.to_bits())).unzip();
        defmt::write!(
            f,
            "Trace {{ t_ps: {}, channel: {=u8}, slot: {}, phase_q0_32: {}, gate: {}, stage: {} }}",
            self.t_ps,
            self.channel,
            slot,
            phase,
            self.gate,
            self.stage
        );
    }
}
