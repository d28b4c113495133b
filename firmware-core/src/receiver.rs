//! The receiver: every stage in data-flow order behind one streaming entry point.
//!
//! A detection goes through the front end (time base, channel delay, the [`SlotClock`], the gate
//! table, the [`Numbering`] stage), and a gated one goes on to the [`Sifter`] (slot grouping,
//! pending queue, squashing, answers, tallies). Each decision is one [`Fate`]; the receiver's
//! [`Accounting`] counts every detection under exactly one of them at every moment.
//!
//! [`Receiver::push_block`] takes TDC events in blocks of any size; results never depend on how the
//! stream is cut into blocks.
//!
//! # Examples
//!
//! A board with a distributed reference clock (10 ns slots), one time-bin detector and a
//! transmitter link that answers at once:
//!
//! ```
//! use slotwise::fixed::types::{U0F32, U32F32};
//! use slotwise::{
//!     Answer, Announcement, Basis, Fate, FixedClock, Gate, GateTable, NullSink, OverflowPolicy,
//!     Receiver, ReceiverConfig, TdcEvent, Transmitter, UnwrapConfig,
//! };
//!
//! /// Answers every announcement with the Z basis, signal class, bit kept secret (on a board,
//! /// this is the link to the transmitter, e.g. `slotwise::ReceiverLink`).
//! struct Echo(std::collections::VecDeque<Answer>);
//! impl Transmitter for Echo {
//!     fn announce(&mut self, a: Announcement) {
//!         self.0.push_back(Answer { slot: a.slot, basis: Basis::Z, intensity: 0, bit: None });
//!     }
//!     fn poll_answer(&mut self) -> Option<Answer> {
//!         self.0.pop_front()
//!     }
//! }
//!
//! let gate = |start: f64, end: f64, bit| Gate {
//!     channel: 0,
//!     start: U0F32::from_num(start),
//!     end: U0F32::from_num(end),
//!     basis: Basis::Z,
//!     bit,
//! };
//! // One channel with no delay; early bin 0.15-0.35 of the slot, late bin 0.65-0.85.
//! let gates = GateTable::new(&[0], &[gate(0.15, 0.35, 0), gate(0.65, 0.85, 1)]).unwrap();
//! let tdc = UnwrapConfig::new(48, 1).unwrap();
//! let cfg = ReceiverConfig::new(tdc, gates, 1, 1_000, OverflowPolicy::DropNewest, 7).unwrap();
//! let clock = FixedClock::new(U32F32::from_num(10_000), 0).unwrap();
//! let mut rx: Receiver<FixedClock, 64> = Receiver::new(cfg, clock);
//!
//! // Slot 3 early bin, slot 9 late bin, and one detection between the gates.
//! let events = [
//!     TdcEvent { count: 32_500, channel: 0 },
//!     TdcEvent { count: 95_000, channel: 0 },
//!     TdcEvent { count: 97_500, channel: 0 },
//! ];
//! let mut tx = Echo(Default::default());
//! rx.push_block(&events, &mut tx, &mut NullSink);
//! rx.finish(&mut tx, &mut NullSink);
//! assert_eq!(rx.accounting()[Fate::Sifted], 2);
//! assert_eq!(rx.accounting()[Fate::OutsideGates], 1);
//! assert_eq!(rx.accounting().total(), rx.detections_in());
//! ```

use crate::accounting::{Accounting, AnswerErrors, Fate, MultiClickEvents};
use crate::clock::SlotClock;
use crate::formats::Summary;
use crate::front::FrontEnd;
use crate::gates::GateTable;
use crate::numbering::{Absolute, Numbering};
use crate::sift::{
    Answer, KeySink, OverflowPolicy, SiftConfig, SiftConfigError, Sifter, Transmitter,
};
use crate::tally::{MultiPhoton, Tally};
use crate::timestamps::{TdcEvent, UnwrapConfig, Unwrapper};
use fixed::types::U0F32;

/// Why a receiver configuration was refused (the sifting settings' errors).
pub type ConfigError = SiftConfigError;

/// Validated receiver configuration.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ReceiverConfig {
    tdc: UnwrapConfig,
    gates: GateTable,
    sift: SiftConfig,
}

impl ReceiverConfig {
    /// Check and bundle the receiver's settings: TDC, gate table, and the sifting settings
    /// ([`SiftConfig::new`]: intensity classes, answer timeout in slots, overflow policy, seed
    /// of the squashing rule).
    pub fn new(
        tdc: UnwrapConfig,
        gates: GateTable,
        intensities: u8,
        answer_timeout_slots: u64,
        overflow: OverflowPolicy,
        squash_seed: u64,
    ) -> Result<Self, ConfigError> {
        Ok(Self {
            tdc,
            gates,
            sift: SiftConfig::new(intensities, answer_timeout_slots, overflow, squash_seed)?,
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

    /// The sifting settings.
    pub const fn sift(&self) -> &SiftConfig {
        &self.sift
    }

    /// Number of intensity classes.
    pub const fn intensities(&self) -> u8 {
        self.sift.intensities()
    }

    /// Slots after which an unanswered entry expires.
    pub const fn answer_timeout_slots(&self) -> u64 {
        self.sift.answer_timeout_slots()
    }
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
    /// The fate decided on arrival; a gated detection is [`Fate::InFlight`] until its slot is
    /// resolved ([`KeySink::resolved`] tells the outcome).
    pub fate: Fate,
}

/// The whole receiver: slot clock `C`, numbering `N`, a pending queue of `PENDING` slots.
#[derive(Clone, Debug)]
pub struct Receiver<C: SlotClock, const PENDING: usize, N: Numbering = Absolute> {
    cfg: ReceiverConfig,
    front: FrontEnd<C, N>,
    sifter: Sifter<PENDING>,
    detections_in: u64,
    accounting: Accounting,
}

impl<C: SlotClock, const PENDING: usize> Receiver<C, PENDING, Absolute> {
    /// A receiver in its initial state whose clock numbers slots as the transmitter does.
    pub const fn new(cfg: ReceiverConfig, clock: C) -> Self {
        Self::with_numbering(cfg, clock, Absolute::new())
    }
}

impl<C: SlotClock, const PENDING: usize, N: Numbering> Receiver<C, PENDING, N> {
    /// A receiver in its initial state with its own numbering stage.
    pub const fn with_numbering(cfg: ReceiverConfig, clock: C, numbering: N) -> Self {
        Self {
            front: FrontEnd::new(cfg.tdc, cfg.gates, clock, numbering),
            sifter: Sifter::new(cfg.sift),
            detections_in: 0,
            accounting: Accounting::new(),
            cfg,
        }
    }

    /// Return to the state [`Self::with_numbering`] gives with the same configuration and fresh
    /// `clock` and `numbering` stages: counters, tallies, pending queue and time base all start
    /// over, and what was pending is dropped uncounted. Assigns in place, so a receiver in a
    /// `static` stays there.
    pub fn reset(&mut self, clock: C, numbering: N) {
        // Rebuilt from the configuration, so a field added later cannot be left out.
        *self = Self::with_numbering(self.cfg, clock, numbering);
    }

    /// The configuration in use.
    pub const fn config(&self) -> &ReceiverConfig {
        &self.cfg
    }

    /// The front end (time base, clock, gates, numbering).
    pub const fn front_end(&self) -> &FrontEnd<C, N> {
        &self.front
    }

    /// The time base (counter unwrapping state).
    pub const fn unwrapper(&self) -> &Unwrapper {
        self.front.unwrapper()
    }

    /// The slot clock.
    pub const fn clock(&self) -> &C {
        self.front.clock()
    }

    /// The numbering stage.
    pub const fn numbering(&self) -> &N {
        self.front.numbering()
    }

    /// The sifter (pending queue, tallies).
    pub const fn sifter(&self) -> &Sifter<PENDING> {
        &self.sifter
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
        self.sifter.multi_click_events()
    }

    /// Problems with the transmitter's answers.
    pub const fn answer_errors(&self) -> &AnswerErrors {
        self.sifter.answer_errors()
    }

    /// Tally of single-click slots.
    pub const fn tally(&self) -> &Tally {
        self.sifter.tally()
    }

    /// Tally of squashed multi-click slots.
    pub const fn multi_click_tally(&self) -> &Tally {
        self.sifter.multi_click_tally()
    }

    /// Answered slots with two or more photons detected, per intensity class.
    pub const fn multi_photon(&self) -> &MultiPhoton {
        self.sifter.multi_photon()
    }

    /// Sifted bits produced (single and squashed multi-click).
    pub const fn sifted_bits(&self) -> u64 {
        self.sifter.sifted_bits()
    }

    /// Entries waiting in the pending queue.
    pub fn pending_len(&self) -> usize {
        self.sifter.pending_len()
    }

    /// Pass a coarse hint from the classical channel to the numbering stage: at receiver time
    /// `t_ps` (on this receiver's time base) the transmitter's slot counter read about `tx_slot`.
    pub fn hint(&mut self, t_ps: u64, tx_slot: u64) {
        self.front.hint(t_ps, tx_slot);
    }

    /// Process a block of TDC events. The transmitter is served in batches of
    /// [`crate::sift::ANNOUNCE_BATCH`] detected slots and at points fixed by the stream (see
    /// [`Sifter`]), never at the caller's block boundaries, so the results do not depend on how
    /// the stream is cut into blocks.
    pub fn push_block(
        &mut self,
        events: &[TdcEvent],
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) {
        for &ev in events {
            self.push(ev, tx, key);
        }
    }

    /// Serve the transmitter now: announce what waits to be announced, take every answer that
    /// has arrived, expire what the link will never answer. For idle time or the end of a
    /// link; calling it at points the stream does not fix (e.g. every block) ties the results
    /// to those points.
    pub fn service(&mut self, tx: &mut impl Transmitter, key: &mut impl KeySink) {
        self.sifter.flush(&mut self.accounting, tx, key);
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
        let split = self.front.split_channel(ev.channel);
        let mut trace = Trace {
            t_ps: None,
            channel: split.0,
            slot: None,
            gate: None,
            fate: Fate::InFlight,
        };
        if let Err(fate) = self.stages(ev, split, &mut trace, tx, key) {
            trace.fate = fate;
            self.accounting.add(fate, 1);
        }
        trace
    }

    /// The front end's steps, then the sifter; `Err` carries the fate of a detection that ends
    /// before the sifter.
    #[inline(always)]
    fn stages(
        &mut self,
        ev: TdcEvent,
        split: (u8, u8),
        trace: &mut Trace,
        tx: &mut impl Transmitter,
        key: &mut impl KeySink,
    ) -> Result<(), Fate> {
        let d = self.front.time(ev, split, &mut trace.t_ps)?;
        let pos = self.front.slot(&d)?;
        trace.slot = Some((pos.slot, pos.phase));
        let (i, g) = self.front.gate(&d, &pos)?;
        trace.gate = Some(i);
        let slot = self.front.number(&pos, &g)?;
        trace.slot = Some((slot, pos.phase));
        if self.sifter.is_late(slot) {
            return Err(Fate::Late);
        }
        self.accounting.add(Fate::InFlight, 1);
        self.sifter
            .click(slot, &g, d.level, &mut self.accounting, tx, key);
        Ok(())
    }

    /// Close the open slot, answer what can be answered, and expire everything still waiting.
    pub fn finish(&mut self, tx: &mut impl Transmitter, key: &mut impl KeySink) {
        self.sifter.finish(&mut self.accounting, tx, key);
    }

    /// Handle one answer from the transmitter.
    pub fn answer(&mut self, a: Answer, key: &mut impl KeySink) {
        self.sifter.answer(a, &mut self.accounting, key);
    }
}

impl Summary {
    /// The counters of `rx` (frame counters left at zero; [`crate::FrameOut::finish`] fills them;
    /// ingest counters zero: a board that ingests raw words adds them with
    /// [`Summary::with_ingest`]).
    pub fn of<C: SlotClock, const P: usize, N: Numbering>(rx: &Receiver<C, P, N>) -> Self {
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
            ingest: crate::ingest::IngestCounts::ZERO,
        }
    }
}

#[cfg(feature = "defmt")]
impl defmt::Format for Trace {
    fn format(&self, f: defmt::Formatter<'_>) {
        let (slot, phase) = self.slot.map(|(s, p)| (s, p.to_bits())).unzip();
        defmt::write!(
            f,
            "Trace {{ t_ps: {}, channel: {=u8}, slot: {}, phase_q0_32: {}, gate: {}, fate: {} }}",
            self.t_ps,
            self.channel,
            slot,
            phase,
            self.gate,
            self.fate
        );
    }
}
