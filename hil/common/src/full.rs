//! The whole receiver as a board runs it, the same code on the host and on every target: the
//! recovered clock from a cold start with marker numbering and the classical channel's hint, the
//! link endpoint as the transmitter, and the live-statistics monitor with its alarms, fed as the
//! simulator's host session feeds it (each detection's trace, each sifted bit through the tap,
//! alarm and statistics records into the frame stream after every detection and every service).
//!
//! The core's types appear here and in [`build_clock`] only, so a change of the core's API is
//! adapted in one file.

use crate::board::{BoardError, BoardSettings};
use crate::link::{AnnounceOut, AnswersIn};
use crate::probe::{Part, Probe};
use crate::run::{BoardFrameOut, BLOCK, KEY_BITS};
use crate::transport::EventSource;
use crate::Setup;
use embedded_io::{Read, Write};
use slotwise::acquire::fold::ArrivalPattern;
use slotwise::formats::round::{RoundVerdict, VERDICT_LEN};
use slotwise::formats::{alarm, statistics};
use slotwise::ingest::IngestCounts;
use slotwise::{
    Announcement, Answer, Fate, FrameConfig, FrameSink, Located, MarkerNumbering, Monitor,
    Numbered, Numbering, Receiver, ReceiverLink, RecordType, RecoveredClock, SlotClock, Summary,
    TdcEvent, Transmitter,
};

/// The recovered clock with the host replay's capacities: 2048 stored detections, 8 candidates,
/// Z²_2.
pub type FullRecovered = RecoveredClock<2048, 8, 2>;
/// The board's slot clock: the recovered clock.
pub type FullClock = FullRecovered;
/// The board's numbering: the public marker and the classical channel's hint. A hint window of 512
/// candidate offsets (hellos timestamped within ±255 slots) keeps the RAM down; this board's
/// hello is not that precise, so the full marker search decides, as before.
pub type FullNumbering = MarkerNumbering<512>;
/// The whole receiver's pipeline.
pub type FullReceiver = Receiver<FullClock, FULL_PENDING, FullNumbering>;
/// Detected slots waiting for answers on the board: one batch being filled
/// ([`slotwise::sift::ANNOUNCE_BATCH`]) and the announce frames in flight (the answers to frame
/// k arrive after frame k + 2 is sent: three frames of [`LINK_BATCH`]), with a batch to spare.
pub const FULL_PENDING: usize = 5 * slotwise::sift::ANNOUNCE_BATCH;
/// Announcements per announce frame.
pub const LINK_BATCH: usize = slotwise::sift::ANNOUNCE_BATCH;
/// Announced slots the endpoint keeps until their answers arrive or expire.
pub const LINK_OUT: usize = FULL_PENDING;
/// The link endpoint over the HIL's shim.
pub type FullLink<'a, R, W> =
    ReceiverLink<AnswersIn<'a, R>, AnnounceOut<'a, W>, LINK_BATCH, LINK_OUT>;
/// The live-statistics monitor (the host session's window).
pub type FullMonitor = Monitor<MONITOR_BLOCKS>;
/// Blocks in the monitor's sliding window on the board (the host keeps
/// [`slotwise::stats::DEFAULT_BLOCKS`]).
pub const MONITOR_BLOCKS: usize = 4;

/// Bytes of everything the board holds for the whole receiver: receiver with its clock, link
/// endpoint with its buffers, monitor, frame writer and the event block.
pub fn ram_total_bytes<R: Read, W: Write, S: FrameSink>() -> usize {
    core::mem::size_of::<FullReceiver>()
        + core::mem::size_of::<FullLink<'static, R, W>>()
        + core::mem::size_of::<FullMonitor>()
        + core::mem::size_of::<BoardFrameOut<S>>()
        + BLOCK * core::mem::size_of::<TdcEvent>()
}

/// The board's clock from the setup and the board file: cold, no lock yet.
pub fn build_clock(setup: &Setup, board: &BoardSettings) -> Result<FullClock, BoardError> {
    let cfg = setup.receiver_config()?;
    let pattern = ArrivalPattern::from_gates(cfg.gates());
    FullRecovered::new(board.recovered_config()?, pattern).map_err(BoardError::Acquire)
}

/// The board's numbering: unaligned, no hint yet.
pub fn build_numbering() -> Result<FullNumbering, BoardError> {
    MarkerNumbering::new(FrameConfig::standard()).map_err(BoardError::Frame)
}

/// The whole receiver in its initial state, from the setup and the board file.
pub fn build_receiver(setup: &Setup, board: &BoardSettings) -> Result<FullReceiver, BoardError> {
    Ok(Receiver::with_numbering(
        setup.receiver_config()?,
        build_clock(setup, board)?,
        build_numbering()?,
    ))
}

/// A slot clock as the monitor sees it (whether it gives slots now).
pub trait BoardClock: SlotClock {
    /// Whether the clock is locked.
    fn locked(&self) -> bool {
        self.is_locked()
    }
}

impl BoardClock for FullClock {}

/// The link endpoint's life cycle beside the [`Transmitter`] calls.
pub trait LinkEnd: Transmitter {
    /// End of input: send the batch and let every answers frame in flight arrive.
    fn end_of_input(&mut self);
    /// After the receiver finished: expire what waits and send the final report.
    fn close(&mut self);
    /// Round mode: the next round verdict for the post-processing host (none on a link without
    /// rounds).
    fn poll_verdict(&mut self) -> Option<RoundVerdict> {
        None
    }
}

impl<R: Read, W: Write> LinkEnd for FullLink<'_, R, W> {
    fn end_of_input(&mut self) {
        self.flush();
        self.reader_mut().end_of_input();
    }

    fn close(&mut self) {
        ReceiverLink::close(self);
    }

    fn poll_verdict(&mut self) -> Option<RoundVerdict> {
        ReceiverLink::poll_verdict(self)
    }
}

/// What the whole run took in and gave out.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FullTotals {
    /// Events pushed through the receiver.
    pub detections: u64,
    /// Blocks pushed.
    pub blocks: u64,
    /// Alarm records written.
    pub alarm_frames: u64,
    /// Statistics records written.
    pub stats_frames: u64,
    /// Round-verdict records written (round-authenticated links only).
    pub verdict_frames: u64,
    /// Detections taken in before the steady state (the first detection that reached the sifter:
    /// clock locked, slots numbered); `None` if it was never reached.
    pub steady_from: Option<u64>,
}

/// The board's state for one run, borrowed.
pub struct FullRun<'r, C: BoardClock, N: Numbering, T: LinkEnd, S: FrameSink> {
    /// The receiver.
    pub rx: &'r mut Receiver<C, FULL_PENDING, N>,
    /// The transmitter: the link endpoint.
    pub link: &'r mut T,
    /// The monitor.
    pub monitor: &'r mut FullMonitor,
    /// Key blocks, alarms, statistics and the summary out.
    pub out: &'r mut BoardFrameOut<S>,
    /// Marks the parts of the work.
    pub probe: Probe,
}

impl<C: BoardClock, N: Numbering, T: LinkEnd, S: FrameSink> FullRun<'_, C, N, T, S> {
    /// Alarm events and the latest block snapshot into the frame stream.
    fn drain(&mut self, totals: &mut FullTotals) {
        let _m = self.probe.part(Part::Monitor);
        self.drain_events(totals);
    }

    fn drain_events(&mut self, totals: &mut FullTotals) {
        // A verdict goes out as soon as the link decided it, so the host can release or discard
        // the round's key blocks in stream order.
        while let Some(v) = self.link.poll_verdict() {
            let mut p = [0u8; VERDICT_LEN];
            if let Ok(n) = v.emit(&mut p) {
                self.out
                    .record(RecordType::RoundVerdict, p.get(..n).unwrap_or(&[]));
                totals.verdict_frames += 1;
            }
        }
        while let Some(ev) = self.monitor.pop_event() {
            let mut p = [0u8; alarm::LEN];
            if let Ok(n) = ev.emit(&mut p) {
                self.out
                    .record(RecordType::Alarm, p.get(..n).unwrap_or(&[]));
                totals.alarm_frames += 1;
            }
        }
        if let Some(snap) = self.monitor.take_snapshot() {
            let mut p = [0u8; statistics::LEN];
            if let Ok(n) = snap.emit(&mut p) {
                self.out
                    .record(RecordType::Stats, p.get(..n).unwrap_or(&[]));
                totals.stats_frames += 1;
            }
        }
    }

    fn service(&mut self, totals: &mut FullTotals) {
        {
            let _r = self.probe.part(Part::Receiver);
            self.rx
                .service(&mut *self.link, &mut self.monitor.tap(&mut *self.out));
        }
        self.drain(totals);
    }

    /// Give the numbering the classical channel's hint (before the first block).
    pub fn begin(&mut self, hint_t_ps: u64, hint_tx_slot: u64) {
        let _r = self.probe.part(Part::Receiver);
        self.rx.hint(hint_t_ps, hint_tx_slot);
    }

    /// Push one block of events (one detection at a time, the monitor after each), then let the
    /// receiver take the answers that arrived.
    pub fn push_block(&mut self, events: &[TdcEvent], totals: &mut FullTotals) {
        for (seen, &ev) in events.iter().enumerate() {
            let (tr, locked) = {
                let _r = self.probe.part(Part::Receiver);
                let tr = self
                    .rx
                    .push(ev, &mut *self.link, &mut self.monitor.tap(&mut *self.out));
                (tr, self.rx.clock().locked())
            };
            if totals.steady_from.is_none() && tr.fate == Fate::InFlight {
                totals.steady_from = Some(totals.detections + seen as u64);
                self.probe.steady();
            }
            let _m = self.probe.part(Part::Monitor);
            self.monitor.observe(&tr, locked);
            self.drain_events(totals);
        }
        self.service(totals);
        totals.detections += events.len() as u64;
        totals.blocks += 1;
    }

    /// Read the ingest stage's counters: the monitor raises or clears its ingest-fault alarm
    /// (stamped with the latest detection's time) and the event goes into the frame stream.
    pub fn observe_ingest(&mut self, counts: &IngestCounts, totals: &mut FullTotals) {
        let _m = self.probe.part(Part::Monitor);
        let t_ps = self.monitor.last_t_ps().unwrap_or(0);
        self.monitor.observe_ingest(counts, t_ps);
        self.drain_events(totals);
    }

    /// End of input: the link sends its last batch (the answers in flight may still arrive
    /// before [`Self::finish`]).
    pub fn end_input(&mut self) {
        let _l = self.probe.part(Part::Link);
        self.link.end_of_input();
    }

    /// Take the last answers, finish the receiver, close the link and write `summary`'s record
    /// (the receiver's [`Summary`], with whatever the caller adds to it).
    pub fn finish(&mut self, totals: &mut FullTotals, summary: impl FnOnce(Summary) -> Summary) {
        self.close(totals);
        self.write_summary(summary);
    }

    /// The first half of [`Self::finish`]: take the last answers, finish the receiver and close
    /// the link (its final report sent); the summary is not written yet.
    pub fn close(&mut self, totals: &mut FullTotals) {
        self.service(totals);
        {
            let _r = self.probe.part(Part::Receiver);
            self.rx
                .finish(&mut *self.link, &mut self.monitor.tap(&mut *self.out));
        }
        self.drain(totals);
        let _l = self.probe.part(Part::Link);
        self.link.close();
    }

    /// Write `summary`'s record: the last of the run.
    pub fn write_summary(&mut self, summary: impl FnOnce(Summary) -> Summary) {
        let _r = self.probe.part(Part::Receiver);
        self.out.finish(&summary(Summary::of(self.rx)));
    }

    /// Alarm events, verdicts and the latest snapshot into the frame stream (after the link
    /// took input outside [`Self::push_block`]).
    pub fn drain_records(&mut self, totals: &mut FullTotals) {
        self.drain(totals);
    }

    /// Give the clock the hint, push every event in blocks of [`BLOCK`] (one detection at a time,
    /// the monitor after each), take the answers after each block; at the end let the link
    /// settle, finish the receiver, close the link and write the summary.
    pub fn run<E: EventSource>(
        &mut self,
        events: &mut E,
        hint_t_ps: u64,
        hint_tx_slot: u64,
    ) -> Result<FullTotals, E::Error> {
        const { assert!(KEY_BITS > 0) };
        let mut totals = FullTotals::default();
        self.begin(hint_t_ps, hint_tx_slot);
        let mut buf = [TdcEvent {
            count: 0,
            channel: 0,
        }; BLOCK];
        loop {
            let n = events.read_events(&mut buf)?;
            if n == 0 {
                break;
            }
            self.push_block(buf.get(..n).unwrap_or(&[]), &mut totals);
        }
        self.end_input();
        self.finish(&mut totals, |s| s);
        Ok(totals)
    }
}

/// A clock whose calls are marked as [`Part::Clock`] (the profile's breakdown).
pub struct ProbedClock<C: BoardClock> {
    /// The clock.
    pub inner: C,
    /// The probe.
    pub probe: Probe,
}

impl<C: BoardClock> SlotClock for ProbedClock<C> {
    fn locate(&self, t_ps: u64) -> Located {
        let _c = self.probe.part(Part::Clock);
        self.inner.locate(t_ps)
    }

    fn observe(&mut self, channel: u8, t_ps: u64) -> Located {
        let _c = self.probe.part(Part::Clock);
        self.inner.observe(channel, t_ps)
    }

    fn is_locked(&self) -> bool {
        self.inner.is_locked()
    }

    fn epoch(&self) -> u32 {
        self.inner.epoch()
    }

    fn renumbered_within(&self) -> Option<u64> {
        self.inner.renumbered_within()
    }

    fn slot_at(&self, t_ps: u64) -> Option<u64> {
        self.inner.slot_at(t_ps)
    }
}

impl<C: BoardClock> BoardClock for ProbedClock<C> {}

/// A numbering stage whose calls are marked as [`Part::Clock`] too (the profile charges clock
/// and numbering together).
pub struct ProbedNumbering<N: Numbering> {
    /// The numbering stage.
    pub inner: N,
    /// The probe.
    pub probe: Probe,
}

impl<N: Numbering> Numbering for ProbedNumbering<N> {
    fn number<C: SlotClock + ?Sized>(
        &mut self,
        clock: &C,
        slot: u64,
        z_bit: Option<u8>,
    ) -> Numbered {
        let _c = self.probe.part(Part::Clock);
        self.inner.number(clock, slot, z_bit)
    }

    fn hint<C: SlotClock + ?Sized>(&mut self, clock: &C, t_ps: u64, tx_slot: u64) {
        let _c = self.probe.part(Part::Clock);
        self.inner.hint(clock, t_ps, tx_slot);
    }
}

/// A link endpoint whose calls are marked as [`Part::Link`] (the profile's breakdown).
pub struct ProbedLink<T: LinkEnd> {
    /// The endpoint.
    pub inner: T,
    /// The probe.
    pub probe: Probe,
}

impl<T: LinkEnd> Transmitter for ProbedLink<T> {
    fn announce(&mut self, a: Announcement) {
        let _l = self.probe.part(Part::Link);
        self.inner.announce(a);
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        let _l = self.probe.part(Part::Link);
        self.inner.poll_answer()
    }

    fn answers_final_below(&self) -> Option<u64> {
        let _l = self.probe.part(Part::Link);
        self.inner.answers_final_below()
    }
}

impl<T: LinkEnd> LinkEnd for ProbedLink<T> {
    fn end_of_input(&mut self) {
        self.inner.end_of_input();
    }

    fn close(&mut self) {
        self.inner.close();
    }

    fn poll_verdict(&mut self) -> Option<RoundVerdict> {
        self.inner.poll_verdict()
    }
}
