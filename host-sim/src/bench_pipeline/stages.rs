//! The timed loops of the pipeline benchmark: the read floor, the truncated pipelines behind the
//! stage shares, and the whole receiver. Each loop returns a checksum that goes through
//! [`black_box`], so the compiler cannot drop the work it measures.
//!
//! The truncated pipelines call the core's own front-end steps ([`FrontEnd`]) in the order
//! `Receiver::push` does: [`FrontEnd::time`] (unwrapping, channel split and delay); then also
//! [`FrontEnd::slot`] (slot location, which for the recovered clock is also the tracking loop's
//! update); then also [`FrontEnd::gate`]; then also [`FrontEnd::number`] (the marker
//! alignment). The whole pipeline is [`Receiver::push_block`]: the above plus the sifter (slot
//! grouping, announcements, the pending queue, answers, tallies) and the key sink. A stage's cost
//! is the difference between two successive truncated pipelines.

use crate::clocks::{HostClock, HostNumbering};
use crate::replay::HostReceiver;
use slotwise::{
    Announcement, Answer, FrontEnd, KeySink, Receiver, SiftedBit, TdcEvent, Transmitter,
};
use std::collections::VecDeque;
use std::hint::black_box;

/// How far a truncated pipeline goes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Depth {
    /// Counter unwrapping only.
    Unwrap,
    /// + channel delay and slot location (tracking for the recovered clock).
    Locate,
    /// + gate lookup.
    Gate,
    /// + absolute numbering (marker alignment).
    Number,
}

impl Depth {
    /// Every depth, shallowest first.
    pub const ALL: [Depth; 4] = [Depth::Unwrap, Depth::Locate, Depth::Gate, Depth::Number];

    /// Name of the stage this depth adds.
    pub fn stage(self) -> &'static str {
        match self {
            Depth::Unwrap => "unwrap",
            Depth::Locate => "delay+locate",
            Depth::Gate => "gate lookup",
            Depth::Number => "numbering",
        }
    }
}

/// State of a truncated pipeline: the receiver's front end, cloned out of a warmed-up receiver.
#[derive(Clone, Debug)]
pub struct StageState {
    /// The front end (time base, clock, gates, numbering).
    pub front: FrontEnd<HostClock, HostNumbering>,
}

impl StageState {
    /// The stages of `rx` as they stand now.
    pub fn of(rx: &HostReceiver) -> Self {
        Self {
            front: rx.front_end().clone(),
        }
    }
}

/// The read floor: a checksum over the detection buffer, nothing else.
#[inline(never)]
pub fn read_floor(events: &[TdcEvent]) -> u64 {
    black_box(events)
        .iter()
        .fold(0u64, |a, e| a.wrapping_add(e.count ^ u64::from(e.channel)))
}

/// Run the stages up to `depth` over `events`; returns a checksum of what they produced.
#[inline(never)]
pub fn truncated(st: &mut StageState, events: &[TdcEvent], depth: Depth) -> u64 {
    let mut acc = 0u64;
    let f = &mut st.front;
    for &ev in black_box(events) {
        let mut t_raw = None;
        let Ok(d) = f.time(ev, f.split_channel(ev.channel), &mut t_raw) else {
            continue;
        };
        if depth == Depth::Unwrap {
            acc = acc.wrapping_add(d.t_ps);
            continue;
        }
        let Ok(pos) = f.slot(&d) else {
            continue;
        };
        if depth == Depth::Locate {
            acc = acc.wrapping_add(pos.slot ^ u64::from(pos.phase.to_bits()));
            continue;
        }
        let Ok((i, g)) = f.gate(&d, &pos) else {
            continue;
        };
        if depth == Depth::Gate {
            acc = acc.wrapping_add(pos.slot ^ u64::from(i));
            continue;
        }
        if let Ok(s) = f.number(&pos, &g) {
            acc = acc.wrapping_add(s);
        }
    }
    acc
}

/// The whole receiver: `events` in blocks of `block` through [`Receiver::push_block`]. This is
/// the function the instruction-count script points callgrind at.
#[inline(never)]
pub fn measured_pipeline<const P: usize>(
    rx: &mut Receiver<HostClock, P, HostNumbering>,
    tx: &mut ReplayAnswers<'_>,
    key: &mut CountSink,
    events: &[TdcEvent],
    block: usize,
) -> u64 {
    for b in black_box(events).chunks(block.max(1)) {
        rx.push_block(b, tx, key);
    }
    key.sifted
}

/// A key sink that only counts (the bench measures the core, not a consumer).
#[derive(Clone, Copy, Debug, Default)]
pub struct CountSink {
    /// Sifted bits seen.
    pub sifted: u64,
    /// Slots resolved (any outcome).
    pub resolved: u64,
}

impl KeySink for CountSink {
    fn sifted(&mut self, _bit: SiftedBit) {
        self.sifted += 1;
    }

    fn resolved(&mut self, _slot: u64, _outcome: slotwise::Outcome) {
        self.resolved += 1;
    }
}

/// Records the answers a transmitter gives, in announcement order, for [`ReplayAnswers`].
pub struct Recording<T: Transmitter> {
    /// The transmitter that answers.
    pub inner: T,
    /// Every answer given, in order.
    pub log: Vec<Answer>,
}

impl<T: Transmitter> Transmitter for Recording<T> {
    fn announce(&mut self, a: Announcement) {
        self.inner.announce(a);
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        let a = self.inner.poll_answer()?;
        self.log.push(a);
        Some(a)
    }
}

/// Replays recorded answers: each announcement takes the next record (which must be for the
/// announced slot), released once `latency` later announcements have been made.
#[derive(Clone, Debug)]
pub struct ReplayAnswers<'a> {
    answers: &'a [Answer],
    next: usize,
    ready: VecDeque<Answer>,
    latency: usize,
    /// Announcements whose record was for another slot (answer withheld).
    pub mismatched: u64,
}

impl<'a> ReplayAnswers<'a> {
    /// Replay `answers`, each held back for `latency` announcements.
    pub fn new(answers: &'a [Answer], latency: usize) -> Self {
        Self {
            answers,
            next: 0,
            ready: VecDeque::with_capacity(latency + 2),
            latency,
            mismatched: 0,
        }
    }
}

impl Transmitter for ReplayAnswers<'_> {
    fn announce(&mut self, a: Announcement) {
        match self.answers.get(self.next) {
            Some(r) if r.slot == a.slot => self.ready.push_back(*r),
            _ => self.mismatched += 1,
        }
        self.next += 1;
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        if self.ready.len() > self.latency {
            self.ready.pop_front()
        } else {
            None
        }
    }
}
