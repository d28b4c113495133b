//! The transmitter side: per-slot state choices, and a classical link that answers the receiver.
//!
//! Choices come from a counter-based generator keyed by (seed, slot), so any slot's state can be
//! answered long after it was sent without storing anything.

use super::rng::{splitmix_at, stream_key, unit_f64};
use crate::scenario::{Protocol, Scenario};
use crate::txrecord::TxRecord;
use slotwise::frame::{MarkerSpec, MarkerState};
use slotwise::{Announcement, Answer, Basis, Transmitter};
use std::collections::VecDeque;
use std::rc::Rc;

/// Stream number of the transmitter's choices.
pub const STREAM_TX: u64 = 1;

pub use crate::txrecord::{TxChoice, MARKER_VACUUM};

/// The transmitter's random choices for every slot, computed on demand.
#[derive(Clone, Debug, PartialEq)]
pub struct TxChoices {
    marker: Option<MarkerSpec>,
    key: u64,
    protocol: Protocol,
    p_z: f64,
    /// Cumulative intensity probabilities; the last entry is treated as 1.
    cum: Vec<f64>,
}

impl TxChoices {
    /// The choices of a scenario (seed, protocol, p_z, intensity probabilities).
    pub fn new(s: &Scenario) -> Self {
        let mut acc = 0.0;
        let cum = s
            .intensity_probs
            .iter()
            .map(|p| {
                acc += p;
                acc
            })
            .collect();
        Self {
            marker: s.marker.then(MarkerSpec::standard),
            key: stream_key(s.seed, STREAM_TX),
            protocol: s.protocol,
            p_z: s.p_z,
            cum,
        }
    }

    /// The state sent in slot `slot`.
    pub fn choice(&self, slot: u64) -> TxChoice {
        match self.marker.and_then(|m| m.state(slot)) {
            Some(MarkerState::Vacuum) => {
                return TxChoice {
                    basis: Basis::Z,
                    bit: 0,
                    intensity: MARKER_VACUUM,
                }
            }
            Some(MarkerState::Pulse { z_bit: bit }) => {
                return TxChoice {
                    basis: Basis::Z,
                    bit,
                    intensity: 0,
                }
            }
            None => {}
        }
        let h = splitmix_at(self.key, slot);
        let u_basis = unit_f64(splitmix_at(h, 0));
        let bit = (splitmix_at(h, 1) >> 63) as u8;
        let u_int = unit_f64(splitmix_at(h, 2));
        let last = self.cum.len().saturating_sub(1);
        let intensity = self.cum.iter().position(|&c| u_int < c).unwrap_or(last) as u8;
        let (basis, bit) = match self.protocol {
            Protocol::ThreeState => {
                if u_basis < 0.5 * self.p_z {
                    (Basis::Z, 0)
                } else if u_basis < self.p_z {
                    (Basis::Z, 1)
                } else {
                    (Basis::X, 0)
                }
            }
            Protocol::Bb84 | Protocol::EfficientBb84 => {
                let basis = if u_basis < self.p_z {
                    Basis::Z
                } else {
                    Basis::X
                };
                (basis, bit)
            }
        };
        TxChoice {
            basis,
            bit,
            intensity,
        }
    }

    /// Whether `slot` is a marker slot (never announced, never counted as sent key material).
    pub fn is_marker_slot(&self, slot: u64) -> bool {
        self.marker.is_some_and(|m| m.is_marker_slot(slot))
    }

    /// Number of slots of each intensity class among `slots` (index = class; unused classes 0).
    pub fn count_sent(&self, slots: std::ops::Range<u64>) -> [u64; 3] {
        let mut n = [0u64; 3];
        for k in slots {
            if self.is_marker_slot(k) {
                continue;
            }
            if let Some(c) = n.get_mut(usize::from(self.choice(k).intensity)) {
                *c += 1;
            }
        }
        n
    }
}

/// Where a transmitter takes its answers from: the scenario's seeded generator, or the record of
/// what a transmitter really sent (which may not hold every slot).
#[derive(Clone, Debug)]
pub enum TxSource {
    /// Every slot's choice computed from the scenario's seed.
    Seeded(TxChoices),
    /// The slots a transmitter record holds; the others have no answer.
    Record(Rc<TxRecord>),
}

impl TxSource {
    /// The scenario's seeded choices.
    pub fn seeded(s: &Scenario) -> Self {
        Self::Seeded(TxChoices::new(s))
    }

    /// What was sent in `slot`; `None` when the source does not hold that slot.
    pub fn choice(&self, slot: u64) -> Option<TxChoice> {
        match self {
            Self::Seeded(c) => Some(c.choice(slot)),
            Self::Record(r) => r.choice(slot),
        }
    }

    /// Whether `slot` is a marker slot (never announced, never counted as sent key material).
    pub fn is_marker_slot(&self, slot: u64) -> bool {
        match self {
            Self::Seeded(c) => c.is_marker_slot(slot),
            Self::Record(r) => r.is_marker_slot(slot),
        }
    }

    /// Number of known non-marker slots of each intensity class among `slots` (index = class).
    pub fn count_sent(&self, slots: std::ops::Range<u64>) -> [u64; 3] {
        match self {
            Self::Seeded(c) => c.count_sent(slots),
            Self::Record(r) => r.count_sent(slots),
        }
    }
}

/// A transmitter for replays: answers every announcement at once, revealing basis, intensity and
/// the bit (every detected slot is a test slot). A slot its source does not hold gets no answer,
/// so the receiver expires it as unanswered.
#[derive(Clone, Debug)]
pub struct SimTransmitter {
    source: TxSource,
    answers: VecDeque<Answer>,
    announcements: u64,
    unrecorded: u64,
    announced: Option<(u64, u64)>,
}

impl SimTransmitter {
    /// A transmitter that knows the scenario's choices.
    pub fn new(s: &Scenario) -> Self {
        Self::with_source(TxSource::seeded(s))
    }

    /// A transmitter answering from `source`.
    pub fn with_source(source: TxSource) -> Self {
        Self {
            source,
            answers: VecDeque::new(),
            announcements: 0,
            unrecorded: 0,
            announced: None,
        }
    }

    /// Announcements of slots its source does not hold (left unanswered).
    pub fn unrecorded(&self) -> u64 {
        self.unrecorded
    }

    /// Lowest and highest slot announced so far.
    pub fn announced_range(&self) -> Option<(u64, u64)> {
        self.announced
    }

    /// Announcements received so far.
    pub fn announcements(&self) -> u64 {
        self.announcements
    }

    /// The seeded choices it answers from, when its source is the scenario's generator.
    pub fn choices(&self) -> Option<&TxChoices> {
        match &self.source {
            TxSource::Seeded(c) => Some(c),
            TxSource::Record(_) => None,
        }
    }

    /// The source it answers from.
    pub fn source(&self) -> &TxSource {
        &self.source
    }
}

impl Transmitter for SimTransmitter {
    fn announce(&mut self, a: Announcement) {
        self.announcements += 1;
        let (lo, hi) = self.announced.unwrap_or((a.slot, a.slot));
        self.announced = Some((lo.min(a.slot), hi.max(a.slot)));
        let Some(c) = self.source.choice(a.slot) else {
            self.unrecorded += 1;
            return;
        };
        self.answers.push_back(Answer {
            slot: a.slot,
            basis: c.basis,
            intensity: c.intensity,
            bit: Some(c.bit),
        });
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        self.answers.pop_front()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn three_state_frequencies() {
        // Key slots only: marker slots follow the public marker, not the protocol's choices.
        let s = Scenario {
            marker: false,
            ..Scenario::default_bench()
        };
        let c = TxChoices::new(&s);
        let n = 200_000u64;
        let (mut z0, mut z1, mut x0, mut x1, mut sig) = (0u64, 0u64, 0u64, 0u64, 0u64);
        for k in 0..n {
            let ch = c.choice(k);
            match (ch.basis, ch.bit) {
                (Basis::Z, 0) => z0 += 1,
                (Basis::Z, _) => z1 += 1,
                (Basis::X, 0) => x0 += 1,
                (Basis::X, _) => x1 += 1,
            }
            sig += u64::from(ch.intensity == 0);
            assert_eq!(ch, c.choice(k), "answerable again");
        }
        assert_eq!(x1, 0, "three-state X is always +");
        // p_z = 0.9: Z0 and Z1 0.45 each, X+ 0.1; signal 0.7. Binomial 4σ.
        let near = |k: u64, p: f64| {
            let sd = (p * (1.0 - p) * n as f64).sqrt();
            (k as f64 - p * n as f64).abs() < 4.0 * sd
        };
        assert!(
            near(z0, 0.45) && near(z1, 0.45) && near(x0, 0.1),
            "{z0} {z1} {x0}"
        );
        assert!(near(sig, 0.7), "{sig}");
        assert_eq!(c.count_sent(0..n)[0], sig);
    }

    #[test]
    fn marker_slots_follow_the_public_marker() {
        let s = Scenario::default_bench();
        let c = TxChoices::new(&s);
        let spec = MarkerSpec::standard();
        for k in (0..200_000u64).step_by(64) {
            let ch = c.choice(k);
            match spec.state(k) {
                Some(MarkerState::Vacuum) => assert_eq!(ch.intensity, MARKER_VACUUM),
                Some(MarkerState::Pulse { z_bit }) => {
                    assert_eq!((ch.basis, ch.bit, ch.intensity), (Basis::Z, z_bit, 0))
                }
                None => panic!("slot {k} should be a marker slot"),
            }
        }
        assert_eq!(c.count_sent(0..64), c.count_sent(1..64));
    }

    #[test]
    fn transmitter_answers_with_the_choice() {
        let s = Scenario::default_bench();
        let mut t = SimTransmitter::new(&s);
        t.announce(Announcement {
            slot: 17,
            basis: Basis::X,
        });
        let a = t.poll_answer().unwrap();
        let c = t.choices().unwrap().choice(17);
        assert_eq!(
            (a.slot, a.basis, a.intensity, a.bit),
            (17, c.basis, c.intensity, Some(c.bit))
        );
        assert_eq!(t.poll_answer(), None);
        assert_eq!(t.announcements(), 1);
    }
}
