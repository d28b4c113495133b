//! A faulty classical link on the in-process answer path: wraps any [`Transmitter`] and loses,
//! duplicates, reorders or corrupts its answers before the receiver takes them.
//!
//! Corruption here changes a field so that the receiver can see it is wrong (a slot that was
//! never announced, an intensity class or a bit out of range). Corruption that yields another
//! valid answer cannot be seen by the receiver at all; catching it is the job of the wire frame's
//! CRC, which turns it into a lost answer.

use super::rng::Stream;
use slotwise::{Announcement, Answer, Transmitter};
use std::collections::VecDeque;

/// Stream number of the answer faults' draws.
const STREAM_ANSWERS: u64 = 140;

/// Probability of each fault per answer; at most one fault hits an answer (the sum stays below 1).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct AnswerFaultRates {
    /// Answer never delivered.
    pub lost: f64,
    /// Answer delivered twice.
    pub duplicated: f64,
    /// Answer held back and delivered after the next one.
    pub reordered: f64,
    /// One field damaged.
    pub corrupted: f64,
}

/// What the faulty link did, per kind.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct AnswerFaultCounts {
    /// Answers from the wrapped transmitter.
    pub answers: u64,
    /// Answers dropped.
    pub lost: u64,
    /// Extra copies delivered.
    pub duplicated: u64,
    /// Answers delivered after a later one.
    pub reordered: u64,
    /// Answers whose slot was changed to one never announced.
    pub corrupted_slot: u64,
    /// Answers whose intensity class or bit was put out of range.
    pub corrupted_field: u64,
}

/// A transmitter whose answers pass through a faulty link.
#[derive(Clone, Debug)]
pub struct FaultyAnswers<T> {
    inner: T,
    rates: AnswerFaultRates,
    rng: Stream,
    out: VecDeque<Answer>,
    held: Option<Answer>,
    counts: AnswerFaultCounts,
}

impl<T: Transmitter> FaultyAnswers<T> {
    /// Wrap `inner`; `seed` seeds the fault draws.
    pub fn new(inner: T, rates: AnswerFaultRates, seed: u64) -> Self {
        Self {
            inner,
            rates,
            rng: Stream::new(seed, STREAM_ANSWERS),
            out: VecDeque::new(),
            held: None,
            counts: AnswerFaultCounts::default(),
        }
    }

    /// What was done so far.
    pub fn counts(&self) -> AnswerFaultCounts {
        self.counts
    }

    /// Answers still held back for reordering (1 at most; delivered after the next answer, so
    /// the last one of a run may never be).
    pub fn withheld(&self) -> u64 {
        u64::from(self.held.is_some())
    }

    /// The wrapped transmitter.
    pub fn inner(&self) -> &T {
        &self.inner
    }

    fn corrupt(&mut self, mut a: Answer) -> Answer {
        match self.rng.next_u64() % 3 {
            0 => {
                // Far above any slot of a run: matches no announcement.
                a.slot ^= 1 << 62;
                self.counts.corrupted_slot += 1;
            }
            1 => {
                a.intensity |= 0xF0;
                self.counts.corrupted_field += 1;
            }
            _ => {
                a.bit = Some(2 + a.bit.unwrap_or(0));
                self.counts.corrupted_field += 1;
            }
        }
        a
    }

    fn take_inner(&mut self) {
        while let Some(a) = self.inner.poll_answer() {
            self.counts.answers += 1;
            let r = self.rates;
            let u = self.rng.uniform();
            if u < r.lost {
                self.counts.lost += 1;
            } else if u < r.lost + r.duplicated {
                self.counts.duplicated += 1;
                self.deliver(a);
                self.deliver(a);
            } else if u < r.lost + r.duplicated + r.reordered && self.held.is_none() {
                self.held = Some(a);
            } else if u < r.lost + r.duplicated + r.reordered + r.corrupted {
                let bad = self.corrupt(a);
                self.deliver(bad);
            } else {
                self.deliver(a);
            }
        }
    }
}

impl<T> FaultyAnswers<T> {
    /// Queue one answer for the receiver, then the held-back one behind it.
    fn deliver(&mut self, a: Answer) {
        self.out.push_back(a);
        if let Some(h) = self.held.take() {
            self.counts.reordered += 1;
            self.out.push_back(h);
        }
    }
}

impl<T: Transmitter> Transmitter for FaultyAnswers<T> {
    fn announce(&mut self, a: Announcement) {
        self.inner.announce(a);
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        if self.out.is_empty() {
            self.take_inner();
        }
        self.out.pop_front()
    }
}
