//! The live-statistics monitor over random streams: its since-start counts equal the receiver's
//! own counters, and its window never holds more than its capacity.

use proptest::prelude::*;
use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::Fate;
use slotwise::{
    AlarmConfig, Announcement, Answer, Basis, FixedClock, Gate, GateTable, Monitor, NullSink,
    OverflowPolicy, Receiver, ReceiverConfig, StatsConfig, TdcEvent, Transmitter, UnwrapConfig,
};
use std::collections::VecDeque;

/// Answers every `skip`-th announcement never; the others after `lag` further announcements.
/// Basis, intensity and the revealed bit come from the slot's bits.
struct HashTx {
    lag: usize,
    skip: u64,
    waiting: VecDeque<Answer>,
}

impl Transmitter for HashTx {
    fn announce(&mut self, a: Announcement) {
        let h = a.slot.wrapping_mul(0x9E37_79B9_7F4A_7C15) >> 32;
        if !h.is_multiple_of(self.skip) {
            self.waiting.push_back(Answer {
                slot: a.slot,
                basis: if h & 1 == 0 { a.basis } else { Basis::X },
                intensity: ((h >> 3) % 3) as u8,
                bit: (h & 4 == 0).then_some(((h >> 5) & 1) as u8),
            });
        }
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        if self.waiting.len() > self.lag {
            self.waiting.pop_front()
        } else {
            None
        }
    }
}

fn table(widths: &[(u32, u32)]) -> GateTable {
    let gates: Vec<Gate> = widths
        .iter()
        .enumerate()
        .map(|(i, &(a, b))| {
            // Two non-overlapping windows per channel: one in each half of the slot.
            let (lo, hi) = (a >> 2, (b >> 2).max((a >> 2) + 1));
            let half = if i % 2 == 0 { 0 } else { 1 << 31 };
            Gate {
                channel: (i / 2) as u8,
                start: U0F32::from_bits(half | lo),
                end: U0F32::from_bits(half | hi),
                basis: if i % 3 == 0 { Basis::X } else { Basis::Z },
                bit: (i % 2) as u8,
            }
        })
        .collect();
    let channels = widths.len().div_ceil(2);
    GateTable::new(&vec![0; channels], &gates).unwrap()
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(128))]
    #[test]
    fn since_start_equals_receiver_and_window_is_bounded(
        widths in prop::collection::vec((any::<u32>(), any::<u32>()), 1..6),
        steps in prop::collection::vec((0u64..4000, 0u8..4), 0..600),
        period_ps in 100u64..3000,
        block_ps in 2_000u64..200_000,
        lag in 0usize..6,
        skip in 2u64..9,
        timeout in 1u64..200,
    ) {
        let gates = table(&widths);
        let tdc = UnwrapConfig::new(48, 1).unwrap();
        let cfg = ReceiverConfig::new(tdc, gates, 3, timeout, OverflowPolicy::DropOldest, 3)
            .unwrap();
        let clock = FixedClock::new(U32F32::from_num(period_ps), 0).unwrap();
        let mut rx: Receiver<FixedClock, 16> = Receiver::new(cfg, clock);
        let mut tx = HashTx { lag, skip, waiting: VecDeque::new() };
        let stats = StatsConfig::new(block_ps, 1_000, &gates).unwrap();
        let mut mon = Monitor::<4>::new(stats, AlarmConfig::DEFAULT);
        let mut inner = NullSink;
        let mut t = 0u64;
        for (step, channel) in steps {
            t += step;
            let tr = rx.push(TdcEvent { count: t, channel }, &mut tx, &mut mon.tap(&mut inner));
            mon.observe(&tr, true);
            prop_assert!(mon.window_blocks() <= 4);
            let w = mon.window();
            prop_assert!(w.detections_in <= mon.since_start().detections_in);
            prop_assert!(w.span_ps <= 4 * block_ps);
        }
        rx.finish(&mut tx, &mut mon.tap(&mut inner));
        let s = mon.since_start();
        prop_assert_eq!(s.detections_in, rx.detections_in());
        prop_assert_eq!(s.detections.iter().sum::<u64>(), rx.detections_in());
        prop_assert_eq!(s.off_gate.iter().sum::<u64>(), rx.accounting()[Fate::OutsideGates]);
        prop_assert_eq!(s.sifted, rx.sifted_bits());
        prop_assert_eq!(s.multi_click_detections, rx.accounting()[Fate::MultiClick]);
        let m = rx.multi_click_events();
        prop_assert_eq!(
            s.multi_click_slots,
            m.sifted + m.basis_mismatch + m.queue_overflow + m.unanswered
        );
        for b in Basis::ALL {
            for i in 0..3u8 {
                let (e1, n1) = rx.tally().errors(b, Some(i));
                let (e2, n2) = rx.multi_click_tally().errors(b, Some(i));
                prop_assert_eq!(s.errors(b, Some(i)), (e1 + e2, n1 + n2));
                let un = |t: &slotwise::Tally| t.untested[usize::from(i)][b.index()];
                prop_assert_eq!(
                    s.tally.untested[usize::from(i)][b.index()],
                    un(rx.tally()) + un(rx.multi_click_tally())
                );
            }
        }
    }
}
