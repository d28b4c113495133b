//! The run loop both sides execute: events in blocks through the receiver, answers at each
//! announcement, frames out, the summary at the end.

use crate::transport::{AnswerRecord, AnswerSource, EventSource};
use heapless::Deque;
use slotwise::sift::ANNOUNCE_BATCH;
use slotwise::Summary;
use slotwise::{
    Announcement, Answer, FixedClock, FrameOut, FrameSink, Receiver, TdcEvent, Transmitter,
};

/// Pending-queue capacity of the board build (detected slots awaiting an answer).
pub const PENDING: usize = 512;
/// Sifted bits per key-block frame.
pub const KEY_BITS: usize = 256;
/// Events per block handed to the receiver.
pub const BLOCK: usize = 128;

/// The receiver as the board builds it.
pub type BoardReceiver = Receiver<FixedClock, PENDING>;
/// The frame writer as the board builds it.
pub type BoardFrameOut<S> = FrameOut<S, KEY_BITS>;

/// Counts work around the receiver calls (instructions on the firmware, nothing on the host).
pub trait Meter {
    /// Start counting.
    fn start(&mut self);
    /// Stop counting.
    fn stop(&mut self);
}

/// A meter that counts nothing.
#[derive(Clone, Copy, Debug, Default)]
pub struct NoMeter;

impl Meter for NoMeter {
    fn start(&mut self) {}
    fn stop(&mut self) {}
}

/// Replay of recorded answers: each announcement takes the next record, which must be for the
/// announced slot.
pub struct ReplayTx<A: AnswerSource> {
    answers: A,
    queue: Deque<Answer, ANNOUNCE_BATCH>,
    stats: ReplayStats,
}

/// What the replay transmitter saw.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ReplayStats {
    /// Announcements made.
    pub announced: u64,
    /// Announcements whose recorded answer was for another slot (answer withheld).
    pub mismatched: u64,
    /// Announcements after the answer stream ended.
    pub missing: u64,
    /// Records with a basis byte other than 0 or 1 (answer withheld).
    pub bad_records: u64,
    /// Answers that found the answer queue full (answer withheld).
    pub queue_full: u64,
    /// Transport errors on the answer stream.
    pub io_errors: u64,
}

impl<A: AnswerSource> ReplayTx<A> {
    /// Replay the records of `answers`.
    pub const fn new(answers: A) -> Self {
        Self {
            answers,
            queue: Deque::new(),
            stats: ReplayStats {
                announced: 0,
                mismatched: 0,
                missing: 0,
                bad_records: 0,
                queue_full: 0,
                io_errors: 0,
            },
        }
    }

    /// Counters so far.
    pub const fn stats(&self) -> &ReplayStats {
        &self.stats
    }

    /// Count the records nobody asked for (call after the run).
    pub fn drain_unused(&mut self) -> u64 {
        let mut n = 0;
        while let Ok(Some(_)) = self.answers.next_answer() {
            n += 1;
        }
        n
    }
}

impl<A: AnswerSource> Transmitter for ReplayTx<A> {
    fn announce(&mut self, a: Announcement) {
        self.stats.announced += 1;
        let rec = match self.answers.next_answer() {
            Ok(Some(r)) => r,
            Ok(None) => {
                self.stats.missing += 1;
                return;
            }
            Err(_) => {
                self.stats.io_errors += 1;
                return;
            }
        };
        if rec.slot != a.slot {
            self.stats.mismatched += 1;
            return;
        }
        let Some(answer) = rec.answer() else {
            self.stats.bad_records += 1;
            return;
        };
        if self.queue.push_back(answer).is_err() {
            self.stats.queue_full += 1;
        }
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        self.queue.pop_front()
    }
}

/// The transmitter of a host replay: answers at once from a function of the slot and records
/// every answer given, in order, for the firmware's [`ReplayTx`].
pub struct RecordingTx<F: FnMut(Announcement) -> Answer, R: FnMut(AnswerRecord)> {
    answer: F,
    record: R,
    pending: Deque<Answer, ANNOUNCE_BATCH>,
}

impl<F: FnMut(Announcement) -> Answer, R: FnMut(AnswerRecord)> RecordingTx<F, R> {
    /// Answer with `answer`, hand each answer's record to `record`.
    pub const fn new(answer: F, record: R) -> Self {
        Self {
            answer,
            record,
            pending: Deque::new(),
        }
    }
}

impl<F: FnMut(Announcement) -> Answer, R: FnMut(AnswerRecord)> Transmitter for RecordingTx<F, R> {
    fn announce(&mut self, a: Announcement) {
        let ans = (self.answer)(a);
        (self.record)(AnswerRecord::of(&ans));
        // The receiver announces at most one batch before it polls.
        let _ = self.pending.push_back(ans);
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        self.pending.pop_front()
    }
}

/// Totals of one run.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RunTotals {
    /// Events pushed through the receiver.
    pub detections: u64,
    /// Blocks pushed.
    pub blocks: u64,
}

/// Push every event through `rx` in blocks of [`BLOCK`], then finish and write the summary.
/// The meter runs around the receiver calls only (not around reading events).
pub fn run<E, X, S, M>(
    rx: &mut BoardReceiver,
    events: &mut E,
    tx: &mut X,
    out: &mut BoardFrameOut<S>,
    meter: &mut M,
) -> Result<RunTotals, E::Error>
where
    E: EventSource,
    X: Transmitter,
    S: FrameSink,
    M: Meter,
{
    let mut buf = [TdcEvent {
        count: 0,
        channel: 0,
    }; BLOCK];
    let mut totals = RunTotals::default();
    loop {
        let n = events.read_events(&mut buf)?;
        if n == 0 {
            break;
        }
        let block = buf.get(..n).unwrap_or(&[]);
        meter.start();
        rx.push_block(block, tx, out);
        meter.stop();
        totals.detections += n as u64;
        totals.blocks += 1;
    }
    rx.finish(tx, out);
    out.finish(&Summary::of(rx));
    Ok(totals)
}
