//! Hand-built streams with known fates for every counter of the receiver.

use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::Fate;
use slotwise::{
    Announcement, Answer, Basis, FixedClock, Gate, GateTable, KeySink, OverflowPolicy, Receiver,
    ReceiverConfig, SiftedBit, TdcEvent, Transmitter, UnwrapConfig,
};
use std::collections::VecDeque;

/// Answers with a fixed basis per slot parity; holds answers until released by the test.
#[derive(Default)]
struct ManualTx {
    announced: Vec<Announcement>,
    ready: VecDeque<Answer>,
    auto: bool,
}

impl Transmitter for ManualTx {
    fn announce(&mut self, a: Announcement) {
        self.announced.push(a);
        if self.auto {
            self.ready.push_back(Answer {
                slot: a.slot,
                basis: if a.slot.is_multiple_of(2) {
                    Basis::Z
                } else {
                    Basis::X
                },
                intensity: 0,
                bit: Some(0),
            });
        }
    }
    fn poll_answer(&mut self) -> Option<Answer> {
        self.ready.pop_front()
    }
}

#[derive(Default)]
struct Bits(Vec<SiftedBit>);
impl KeySink for Bits {
    fn sifted(&mut self, b: SiftedBit) {
        self.0.push(b);
    }
}

fn f(x: f64) -> U0F32 {
    U0F32::from_num(x)
}

/// 1000 ps slots; channel 0: Z0 in [0.1, 0.3), Z1 in [0.5, 0.7); channel 1: X0 in [0.1, 0.3).
fn receiver<const N: usize>(policy: OverflowPolicy) -> Receiver<FixedClock, N> {
    let g = |channel, a, b, basis, bit| Gate {
        channel,
        start: f(a),
        end: f(b),
        basis,
        bit,
    };
    let table = GateTable::new(
        &[0, 0],
        &[
            g(0, 0.1, 0.3, Basis::Z, 0),
            g(0, 0.5, 0.7, Basis::Z, 1),
            g(1, 0.1, 0.3, Basis::X, 0),
        ],
    )
    .unwrap();
    let cfg =
        ReceiverConfig::new(UnwrapConfig::new(48, 1).unwrap(), table, 2, 100, policy, 3).unwrap();
    Receiver::new(cfg, FixedClock::new(U32F32::from_num(1000), 0).unwrap())
}

fn ev(t: u64, channel: u8) -> TdcEvent {
    TdcEvent { count: t, channel }
}

#[test]
fn every_counter_gets_its_detections() {
    let mut rx = receiver::<16>(OverflowPolicy::DropNewest);
    let mut tx = ManualTx {
        auto: true,
        ..Default::default()
    };
    let mut bits = Bits::default();
    let events = [
        ev(2_200, 0),   // slot 2, Z0, answered Z: sifted
        ev(3_600, 0),   // slot 3, Z1, answered X: basis mismatch
        ev(4_400, 0),   // slot 4, outside gates
        ev(5_150, 0),   // slot 5: Z0 ...
        ev(5_160, 1),   // ... and X0 in the same slot: multi-click (2 detections)
        ev(6_200, 9),   // unknown channel
        ev(7_200, 0),   // slot 7
        ev(5_250, 0),   // slot 5 again after slot 7 opened: late
        ev(1 << 48, 0), // wider than the 48-bit counter
    ];
    rx.push_block(&events, &mut tx, &mut bits);
    rx.finish(&mut tx, &mut bits);
    let a = rx.accounting();
    assert_eq!(a[Fate::Sifted], 1);
    assert_eq!(a[Fate::BasisMismatch], 2); // slots 3 and 7
    assert_eq!(a[Fate::OutsideGates], 1);
    assert_eq!(a[Fate::MultiClick], 2);
    assert_eq!(a[Fate::RejectedChannel], 1);
    assert_eq!(a[Fate::Late], 1);
    assert_eq!(a[Fate::RejectedTime], 1);
    assert_eq!(a[Fate::InFlight], 0);
    assert_eq!(a.total(), events.len() as u64);
    let m = rx.multi_click_events();
    assert_eq!(m.cross_basis, 1);
    assert_eq!(m.sifted + m.basis_mismatch, 1);
    assert_eq!(bits.0.first().map(|b| (b.slot, b.bit)), Some((2, 0)));
}

#[test]
fn overflow_policies_and_timeouts() {
    for policy in [OverflowPolicy::DropNewest, OverflowPolicy::DropOldest] {
        let mut rx = receiver::<2>(policy);
        let mut tx = ManualTx::default();
        let mut bits = Bits::default();
        // Slots 1..=4 detected, no answers: queue of 2 overflows twice.
        let events: Vec<_> = (1..=5).map(|s| ev(s * 1000 + 200, 0)).collect();
        rx.push_block(&events, &mut tx, &mut bits);
        // Serve the transmitter before reading what it was told.
        rx.service(&mut tx, &mut bits);
        assert_eq!(rx.accounting()[Fate::QueueOverflow], 2);
        let kept: Vec<u64> = tx.announced.iter().map(|a| a.slot).collect();
        match policy {
            OverflowPolicy::DropNewest => assert_eq!(kept, vec![1, 2]),
            OverflowPolicy::DropOldest => assert_eq!(kept, vec![1, 2, 3, 4]),
        }
        // A detection far beyond the timeout expires what waits.
        rx.push_block(&[ev(1_000_200, 0)], &mut tx, &mut bits);
        assert_eq!(rx.accounting()[Fate::Unanswered], 2);
        rx.finish(&mut tx, &mut bits);
        assert_eq!(rx.accounting()[Fate::Unanswered], 4);
        assert_eq!(rx.accounting().total(), 6);
    }
}

#[test]
fn answers_in_any_order_and_bad_answers_are_counted() {
    let mut rx = receiver::<8>(OverflowPolicy::DropNewest);
    let mut tx = ManualTx::default();
    let mut bits = Bits::default();
    let events: Vec<_> = (1..=4).map(|s| ev(s * 1000 + 200, 0)).collect();
    rx.push_block(&events, &mut tx, &mut bits);
    rx.finish(&mut ManualTx::default(), &mut bits);
    let mut rx = receiver::<8>(OverflowPolicy::DropNewest);
    rx.push_block(&events, &mut tx, &mut bits);
    let ans = |slot| Answer {
        slot,
        basis: Basis::Z,
        intensity: 1,
        bit: Some(1),
    };
    rx.answer(ans(3), &mut bits);
    rx.answer(ans(1), &mut bits);
    rx.answer(ans(1), &mut bits); // duplicate
    rx.answer(ans(77), &mut bits); // never announced
    rx.answer(
        Answer {
            intensity: 2,
            ..ans(2)
        },
        &mut bits,
    ); // only 2 classes configured
    assert_eq!(rx.accounting()[Fate::Sifted], 2);
    assert_eq!(rx.answer_errors().unmatched, 2);
    assert_eq!(rx.answer_errors().malformed, 1);
    // Z0 detected, Z1 sent: both are errors in the Z basis, intensity 1.
    assert_eq!(rx.tally().qber_ppm(Basis::Z, Some(1)), Some(1_000_000));
}

#[test]
fn reordered_neighbour_before_the_open_slot_is_late_not_reopened() {
    let mut rx = receiver::<8>(OverflowPolicy::DropNewest);
    let mut tx = ManualTx::default();
    let mut bits = Bits::default();
    // Slots 5, 7, then 6 (arrived after 7), then 9.
    let events = [ev(5_150, 0), ev(7_150, 0), ev(6_150, 0), ev(9_150, 0)];
    rx.push_block(&events, &mut tx, &mut bits);
    rx.service(&mut tx, &mut bits);
    let slots: Vec<u64> = tx.announced.iter().map(|a| a.slot).collect();
    assert_eq!(slots, vec![5, 7]);
    assert_eq!(rx.accounting()[Fate::Late], 1);
    for s in [5, 7] {
        rx.answer(
            Answer {
                slot: s,
                basis: Basis::Z,
                intensity: 0,
                bit: Some(0),
            },
            &mut bits,
        );
    }
    assert_eq!(rx.answer_errors().unmatched, 0);
    assert_eq!(rx.accounting()[Fate::Sifted], 2);
}

/// The table of [`receiver`] with photon levels in the channel byte.
fn pnr_receiver() -> Receiver<FixedClock, 16> {
    let rx = receiver::<16>(OverflowPolicy::DropNewest);
    let cfg = *rx.config();
    let table = cfg.gates().with_photon_levels();
    let cfg =
        ReceiverConfig::new(*cfg.tdc(), table, 2, 100, OverflowPolicy::DropNewest, 3).unwrap();
    Receiver::new(cfg, FixedClock::new(U32F32::from_num(1000), 0).unwrap())
}

#[test]
fn photon_levels_ride_in_the_channel_byte_and_are_tallied_per_intensity() {
    use slotwise::gates::level_channel;
    let mut rx = pnr_receiver();
    let mut tx = ManualTx::default();
    let mut bits = Bits::default();
    let events = [
        ev(2_200, level_channel(0, 1)), // slot 2: Z0, one photon
        ev(3_200, level_channel(0, 3)), // slot 3: Z0, three photons in one click
        ev(4_150, level_channel(1, 1)), // slot 4: X0 with one photon ...
        ev(4_600, level_channel(0, 2)), // ... and Z1 with two: multi-click, three photons
        ev(5_200, level_channel(2, 2)), // slot 5: channel 2 is unknown to the table
        ev(7_200, level_channel(0, 1)), // slot 7 closes slot 4
    ];
    let traces: Vec<_> = events
        .iter()
        .map(|&e| rx.push(e, &mut tx, &mut bits))
        .collect();
    assert_eq!(
        traces.iter().map(|t| t.channel).collect::<Vec<_>>(),
        [0, 0, 1, 0, 2, 0]
    );
    // Pushed one by one: the transmitter is served when the caller ends the block.
    rx.service(&mut tx, &mut bits);
    assert_eq!(tx.announced.len(), 3);
    for (a, intensity) in tx.announced.clone().into_iter().zip([0u8, 1, 1]) {
        rx.answer(
            Answer {
                slot: a.slot,
                basis: Basis::Z,
                intensity,
                bit: Some(0),
            },
            &mut bits,
        );
    }
    rx.finish(&mut tx, &mut bits);
    let m = rx.multi_photon();
    assert_eq!(m.slots, [0, 2, 0]);
    assert_eq!(m.one_outcome, [0, 1, 0]);
    // Slot 3 keeps its outcome (Z0): one click names one outcome. Slot 4 is squashed.
    assert!(bits
        .0
        .iter()
        .any(|b| b.slot == 3 && b.bit == 0 && !b.multi_click));
    let a = rx.accounting();
    assert_eq!(a[Fate::RejectedChannel], 1);
    assert_eq!(a[Fate::MultiClick], 2);
    assert_eq!(a[Fate::Unanswered], 1);
    // Slot 3 matched Z; slot 4's squash picked a basis at random.
    assert!(m.sifted[1] >= 1);
    assert_eq!(a.total(), events.len() as u64);
}

#[test]
fn without_photon_levels_upper_channel_bits_are_unknown_channels() {
    let mut rx = receiver::<16>(OverflowPolicy::DropNewest);
    let mut tx = ManualTx::default();
    let mut bits = Bits::default();
    let t = rx.push(
        ev(2_200, slotwise::gates::level_channel(0, 2)),
        &mut tx,
        &mut bits,
    );
    assert_eq!(t.channel, 32);
    assert_eq!(rx.accounting()[Fate::RejectedChannel], 1);
}
