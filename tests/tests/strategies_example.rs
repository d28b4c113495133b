//! How a board team drives its own streaming code with `slotwise_sim::strategies` (feature
//! `proptest-strategies`): here the "own code" is the firmware core with the recovered clock,
//! configured from the scenario as the host does, and the properties are the ones a board's
//! pipeline should keep on any stream a link can deliver:
//! - every detection ends in exactly one counter, at every block boundary;
//! - the output does not depend on how the stream is cut into blocks;
//! - gated slot numbers never decrease while the clock stays locked;
//! - hostile streams (wraps, backward steps, duplicates, too-wide counters, stray channels)
//!   are all accounted for and never panic.

use proptest::prelude::*;
use slotwise::Fate;
use slotwise::{KeySink, Receiver, SiftedBit, TdcEvent};
use slotwise_sim::cli::{receiver_setup, ClockArgs};
use slotwise_sim::clocks::{ClockMode, HostClock, HostNumbering};
use slotwise_sim::scenario::Scenario;
use slotwise_sim::sim::SimTransmitter;
use slotwise_sim::strategies::{chunking, detection_stream, hostile_events};

const PENDING: usize = 1024;

#[derive(Default)]
struct Bits(Vec<SiftedBit>);

impl KeySink for Bits {
    fn sifted(&mut self, b: SiftedBit) {
        self.0.push(b);
    }
}

fn receiver(s: &Scenario) -> Box<Receiver<HostClock, PENDING, HostNumbering>> {
    let clock = ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(500),
    };
    let (cfg, c) = receiver_setup(s, &clock).unwrap();
    c.receiver(cfg)
}

/// Run `events` cut at `cuts`; returns (accounting fields, sifted bits).
fn run(s: &Scenario, events: &[TdcEvent], cuts: &[usize]) -> (String, Vec<SiftedBit>) {
    let mut rx = receiver(s);
    let mut tx = SimTransmitter::new(s);
    let mut key = Bits::default();
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
        assert_eq!(rx.accounting().total(), rx.detections_in());
        rest = tail;
        i += 1;
    }
    rx.finish(&mut tx, &mut key);
    assert_eq!(rx.accounting().total(), events.len() as u64);
    assert_eq!(rx.accounting()[Fate::InFlight], 0);
    (format!("{:?}", rx.accounting()), key.0)
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(8))]

    #[test]
    fn realistic_streams_are_accounted_and_chunking_free(
        (s, events) in detection_stream(60_000),
        a in chunking(5000),
        b in chunking(300),
    ) {
        let whole = run(&s, &events, &[]);
        prop_assert_eq!(&run(&s, &events, &a), &whole);
        prop_assert_eq!(&run(&s, &events, &b), &whole);
    }

    #[test]
    fn gated_slots_never_decrease_while_locked((s, events) in detection_stream(60_000)) {
        let mut rx = receiver(&s);
        let mut tx = SimTransmitter::new(&s);
        let mut key = Bits::default();
        let mut last: Option<u64> = None;
        let mut locked = false;
        for &ev in &events {
            let tr = rx.push(ev, &mut tx, &mut key);
            let now = rx.clock().locked();
            if now != locked {
                last = None;
                locked = now;
            }
            if tr.fate == Fate::InFlight {
                let slot = tr.slot.map(|(k, _)| k).unwrap();
                prop_assert!(last.is_none_or(|l| slot >= l), "slot {} after {:?}", slot, last);
                last = Some(slot);
            }
        }
    }

    #[test]
    fn hostile_streams_are_accounted(events in hostile_events(32, 3000), cuts in chunking(100)) {
        let mut s = Scenario::default_bench();
        s.tdc_bits = 32;
        let whole = run(&s, &events, &[]);
        prop_assert_eq!(&run(&s, &events, &cuts), &whole);
    }
}
