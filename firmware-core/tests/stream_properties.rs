//! Whole-stream properties of the receiver pipeline, over random streams and random gate tables:
//! every detection ends in exactly one counter, the results do not depend on how the stream is
//! cut into blocks, slot numbers never decrease while the clock is locked (a fixed clock always
//! is), and `reset` returns the receiver to its exact initial state.

use proptest::prelude::*;
use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::Fate;
use slotwise::{
    Accounting, Announcement, Answer, Basis, FixedClock, Gate, GateTable, KeySink, OverflowPolicy,
    Receiver, ReceiverConfig, SiftedBit, TdcEvent, Transmitter, UnwrapConfig,
};
use std::collections::VecDeque;

/// A transmitter whose answers lag `lag` announcements behind, and which never answers slots
/// whose hash says so: deterministic in the announcement sequence, whatever the block sizes.
struct LagTx {
    lag: usize,
    announced: usize,
    /// Slot of the latest announcement, and whether every one was above the one before.
    last_slot: Option<u64>,
    increasing: bool,
    waiting: VecDeque<Answer>,
    ready: VecDeque<Answer>,
}

fn mix(x: u64) -> u64 {
    // SplitMix64 finaliser (Steele, Lea, Flood, OOPSLA 2014).
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

impl Transmitter for LagTx {
    fn announce(&mut self, a: Announcement) {
        self.announced += 1;
        self.increasing &= self.last_slot.is_none_or(|l| a.slot > l);
        self.last_slot = Some(a.slot);
        let h = mix(a.slot);
        if !h.is_multiple_of(11) {
            self.waiting.push_back(Answer {
                slot: a.slot,
                basis: if h & 2 == 0 { Basis::Z } else { Basis::X },
                intensity: ((h >> 8) % 3) as u8,
                bit: if h & 4 == 0 {
                    Some(((h >> 4) & 1) as u8)
                } else {
                    None
                },
            });
        }
        while self.waiting.len() > self.lag {
            if let Some(a) = self.waiting.pop_front() {
                self.ready.push_back(a);
            }
        }
    }
    fn poll_answer(&mut self) -> Option<Answer> {
        self.ready.pop_front()
    }
}

fn lag_tx(lag: usize) -> LagTx {
    LagTx {
        lag,
        announced: 0,
        last_slot: None,
        increasing: true,
        waiting: VecDeque::new(),
        ready: VecDeque::new(),
    }
}

#[derive(Default)]
struct Collect(Vec<SiftedBit>);

impl KeySink for Collect {
    fn sifted(&mut self, bit: SiftedBit) {
        self.0.push(bit);
    }
}

fn gate_table(channels: u8, cuts: &[Vec<u32>], tags: &[u8]) -> GateTable {
    let mut gates = Vec::new();
    let mut t = tags.iter().cycle();
    for c in 0..channels {
        let mut pts = cuts[usize::from(c)].clone();
        pts.sort_unstable();
        pts.dedup();
        for pair in pts.chunks_exact(2) {
            if gates.len() == 16 {
                break;
            }
            let tag = *t.next().unwrap_or(&0);
            gates.push(Gate {
                channel: c,
                start: U0F32::from_bits(pair[0]),
                end: U0F32::from_bits(pair[1]),
                basis: if tag & 1 == 0 { Basis::Z } else { Basis::X },
                bit: (tag >> 1) & 1,
            });
        }
    }
    if gates.is_empty() {
        gates.push(Gate {
            channel: 0,
            start: U0F32::ZERO,
            end: U0F32::MAX,
            basis: Basis::Z,
            bit: 0,
        });
    }
    let delays: Vec<i64> = (0..channels).map(|c| i64::from(c) * 37 - 20).collect();
    GateTable::new(&delays, &gates).unwrap()
}

#[derive(Debug, PartialEq)]
struct Outcome {
    accounting: Accounting,
    tally: slotwise::Tally,
    multi: slotwise::Tally,
    bits: Vec<SiftedBit>,
    announced: usize,
}

/// The counters of `rx` after a run, with the bits `key` collected and the announcements `tx` saw.
fn outcome(rx: &Receiver<FixedClock, 8>, tx: &LagTx, key: Collect) -> Outcome {
    Outcome {
        accounting: *rx.accounting(),
        tally: *rx.tally(),
        multi: *rx.multi_click_tally(),
        bits: key.0,
        announced: tx.announced,
    }
}

fn run(
    cfg: ReceiverConfig,
    clock: FixedClock,
    events: &[TdcEvent],
    cuts: &[usize],
    lag: usize,
) -> Outcome {
    let mut rx: Receiver<FixedClock, 8> = Receiver::new(cfg, clock);
    let mut tx = lag_tx(lag);
    let mut key = Collect::default();
    let mut rest = events;
    let mut i = 0;
    while !rest.is_empty() {
        let n = cuts
            .get(i)
            .copied()
            .unwrap_or(rest.len())
            .clamp(1, rest.len());
        let (block, tail) = rest.split_at(n);
        rx.push_block(block, &mut tx, &mut key);
        // The invariant holds at every block boundary, not only at the end.
        assert_eq!(rx.accounting().total(), rx.detections_in());
        rest = tail;
        i += 1;
    }
    rx.finish(&mut tx, &mut key);
    assert_eq!(rx.accounting()[Fate::InFlight], 0);
    // Slots are announced once each, in increasing order, however the input was reordered.
    assert!(tx.increasing, "announcements out of slot order");
    outcome(&rx, &tx, key)
}

prop_compose! {
    fn stream()(bits in 32u8..=64, start_back in 0u64..5000, resolution in 1u32..=20,
                steps in prop::collection::vec((0u64..3000, 0u8..5, any::<bool>()), 0..400))
        -> (u8, u32, Vec<TdcEvent>) {
        let mask = if bits == 64 { u64::MAX } else { (1u64 << bits) - 1 };
        // Start just below the wrap so most streams cross it.
        let mut count = mask.wrapping_sub(start_back) & mask;
        let mut out = Vec::new();
        for (step, channel, back) in steps {
            // Occasional small backward steps mimic merged-channel reordering.
            let c = if back && step < 50 { count.wrapping_sub(step) & mask } else {
                count = count.wrapping_add(step) & mask;
                count
            };
            out.push(TdcEvent { count: c, channel });
        }
        // A few out-of-range counter values too.
        if bits < 64 && out.len() > 3 {
            out[1].count |= 1u64 << bits;
        }
        (bits, resolution, out)
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]
    #[test]
    fn accounting_and_chunking(
        (bits, resolution, events) in stream(),
        channels in 1u8..=4,
        cuts in prop::collection::vec(prop::collection::vec(any::<u32>(), 0..6), 4),
        tags in prop::collection::vec(0u8..4, 1..8),
        period_ps in 50u64..5000,
        period_frac in any::<u32>(),
        origin_ps in 0u64..2000,
        lag in 0usize..12,
        timeout in 1u64..400,
        drop_oldest in any::<bool>(),
        chunks_a in prop::collection::vec(1usize..50, 0..20),
        chunks_b in prop::collection::vec(1usize..50, 0..20),
    ) {
        let table = gate_table(channels, &cuts, &tags);
        let tdc = UnwrapConfig::new(bits, resolution).unwrap();
        let policy = if drop_oldest { OverflowPolicy::DropOldest } else { OverflowPolicy::DropNewest };
        let cfg = ReceiverConfig::new(tdc, table, 3, timeout, policy, 7).unwrap();
        let period = U32F32::from_bits((period_ps << 32) | u64::from(period_frac));
        let clock = FixedClock::new(period, origin_ps).unwrap();
        let a = run(cfg, clock, &events, &chunks_a, lag);
        let b = run(cfg, clock, &events, &chunks_b, lag);
        let whole = run(cfg, clock, &events, &[], lag);
        prop_assert_eq!(a.accounting.total(), events.len() as u64);
        prop_assert_eq!(&a, &b);
        prop_assert_eq!(&a, &whole);
    }
}

/// Push `events` one by one and check that gated detections never go back in slot number: a
/// detection of a slot before the open one is counted `late`, never gated.
fn gated_slots_never_decrease(rx: &mut Receiver<FixedClock, 8>, events: &[TdcEvent], lag: usize) {
    let mut tx = lag_tx(lag);
    let mut key = Collect::default();
    let mut last = None;
    for &ev in events {
        let tr = rx.push(ev, &mut tx, &mut key);
        if tr.fate == Fate::InFlight {
            let (slot, _) = tr.slot.unwrap();
            assert!(last.is_none_or(|l| slot >= l), "slot {slot} after {last:?}");
            last = Some(slot);
        }
    }
    rx.finish(&mut tx, &mut key);
}

/// Feed `events` to an existing receiver (whole stream, one block) and collect the outcome.
fn feed(rx: &mut Receiver<FixedClock, 8>, events: &[TdcEvent], lag: usize) -> Outcome {
    let mut tx = lag_tx(lag);
    let mut key = Collect::default();
    rx.push_block(events, &mut tx, &mut key);
    rx.finish(&mut tx, &mut key);
    outcome(rx, &tx, key)
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(128))]
    #[test]
    fn slots_monotonic_and_reset_is_exact(
        (bits, resolution, events) in stream(),
        (_, _, other) in stream(),
        channels in 1u8..=4,
        cuts in prop::collection::vec(prop::collection::vec(any::<u32>(), 0..6), 4),
        tags in prop::collection::vec(0u8..4, 1..8),
        period_ps in 50u64..5000,
        origin_ps in 0u64..2000,
        lag in 0usize..12,
        timeout in 1u64..400,
    ) {
        let table = gate_table(channels, &cuts, &tags);
        let tdc = UnwrapConfig::new(bits, resolution).unwrap();
        let cfg = ReceiverConfig::new(tdc, table, 3, timeout, OverflowPolicy::DropNewest, 7).unwrap();
        let clock = FixedClock::new(U32F32::from_bits(period_ps << 32), origin_ps).unwrap();
        let mut rx: Receiver<FixedClock, 8> = Receiver::new(cfg, clock);
        gated_slots_never_decrease(&mut rx, &events, lag);
        // Reset after a whole stream: the state prints exactly as a new receiver's, and the next
        // stream gives exactly what it gives on a new receiver.
        rx.reset(clock, slotwise::Absolute::new());
        let fresh: Receiver<FixedClock, 8> = Receiver::new(cfg, clock);
        prop_assert_eq!(format!("{rx:?}"), format!("{fresh:?}"));
        let mut fresh = fresh;
        prop_assert_eq!(feed(&mut rx, &other, lag), feed(&mut fresh, &other, lag));
        // Reset in the middle of a stream, with a slot open and entries pending.
        let mut mid: Receiver<FixedClock, 8> = Receiver::new(cfg, clock);
        let mut tx = lag_tx(lag);
        mid.push_block(&events[..events.len() / 2], &mut tx, &mut Collect::default());
        mid.reset(clock, slotwise::Absolute::new());
        let new: Receiver<FixedClock, 8> = Receiver::new(cfg, clock);
        prop_assert_eq!(format!("{mid:?}"), format!("{new:?}"));
    }
}
