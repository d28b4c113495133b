//! The channel merger fault: events let out late by a bounded random delay, some twice.

use super::rng::Stream;
use super::SimEvent;
use std::cmp::Ordering;
use std::collections::BinaryHeap;

/// An event held back by the channel merger, ordered by the time it is let out.
#[derive(Clone, Copy, Debug)]
pub(super) struct Held {
    pub(super) out_ps: f64,
    pub(super) seq: u64,
    pub(super) event: SimEvent,
}

impl PartialEq for Held {
    fn eq(&self, other: &Self) -> bool {
        self.cmp(other) == Ordering::Equal
    }
}
impl Eq for Held {}
impl PartialOrd for Held {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}
impl Ord for Held {
    /// Reversed, so that `BinaryHeap` pops the earliest release first.
    fn cmp(&self, other: &Self) -> Ordering {
        other
            .out_ps
            .total_cmp(&self.out_ps)
            .then(other.seq.cmp(&self.seq))
    }
}

/// The channel merger's state (faults): events held back, the next one from the detectors.
#[derive(Clone, Debug)]
pub(super) struct Merger {
    pub(super) reorder_ps: f64,
    pub(super) duplicate_prob: f64,
    pub(super) rng: Stream,
    pub(super) held: BinaryHeap<Held>,
    pub(super) next: Option<SimEvent>,
    pub(super) done: bool,
    pub(super) seq: u64,
    pub(super) newest_out_ps: f64,
}
