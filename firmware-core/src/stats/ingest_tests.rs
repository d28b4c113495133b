//! The ingest-fault alarm through [`Monitor::observe_ingest`]: raised on growth, cleared after a
//! quiet reading, and, over random counter sequences, never a panic and raise/clear alternating.

use super::*;
use crate::alarms::{AlarmKind, EVENT_QUEUE};
use crate::formats::alarm;
use crate::gates::{Gate, GateTable};
use crate::ingest::IngestFault;
use fixed::types::U0F32;
use proptest::prelude::*;

fn monitor() -> Monitor<2> {
    let gates = GateTable::new(
        &[0],
        &[Gate {
            channel: 0,
            start: U0F32::ZERO,
            end: U0F32::from_bits(1 << 31),
            basis: Basis::Z,
            bit: 0,
        }],
    )
    .unwrap();
    let cfg = StatsConfig::new(1_000_000_000, 40_000, &gates).unwrap();
    Monitor::new(cfg, AlarmConfig::DEFAULT)
}

fn counts(overrun: u64, fifo: u64, gaps: u64, malformed: u64) -> IngestCounts {
    IngestCounts {
        overrun_words: overrun,
        fifo_full_flags: fifo,
        rollover_gaps: gaps,
        malformed_words: malformed,
        blocks: 0,
    }
}

fn events(m: &mut Monitor<2>) -> Vec<AlarmEvent> {
    core::iter::from_fn(|| m.pop_event()).collect()
}

#[test]
fn raised_on_growth_and_cleared_after_a_quiet_reading() {
    let mut m = monitor();
    m.observe_ingest(&IngestCounts::ZERO, 10);
    assert_eq!(events(&mut m), []);
    // Rollover gaps grew by 3, malformed words by 1: the larger growth is named.
    m.observe_ingest(&counts(0, 0, 3, 1), 20);
    let kind = AlarmKind::IngestFault {
        counter: IngestFault::RolloverGaps,
    };
    let ev = events(&mut m);
    assert_eq!(
        ev,
        [AlarmEvent {
            t_ps: 20,
            kind,
            raised: true,
            value_ppm: 3,
            threshold_ppm: 0,
        }]
    );
    assert_eq!(m.alarms().active(), kind.bit());
    // Still growing (another counter): stays raised, no second raise.
    m.observe_ingest(&counts(5, 0, 3, 1), 30);
    assert_eq!(events(&mut m), []);
    // Blocks alone are no fault; a quiet reading clears, naming the counter the raise named.
    let mut quiet = counts(5, 0, 3, 1);
    quiet.blocks = 9;
    m.observe_ingest(&quiet, 40);
    let ev = events(&mut m);
    assert_eq!(ev.len(), 1);
    assert_eq!((ev[0].kind, ev[0].raised, ev[0].t_ps), (kind, false, 40));
    assert_eq!(m.alarms().active(), 0);
    assert_eq!(m.alarms().raised_counts(), [0, 0, 0, 0, 1]);
    // The event is a valid alarm record.
    let mut buf = [0u8; alarm::LEN];
    assert_eq!(ev[0].emit(&mut buf), Ok(alarm::LEN));
    assert_eq!(AlarmEvent::parse(&buf), Ok(ev[0]));
}

#[test]
fn a_restarted_ingest_stage_is_no_growth_and_a_full_queue_counts_the_overflow() {
    let mut m = monitor();
    m.observe_ingest(&counts(0, 7, 0, 0), 1);
    m.observe_ingest(&IngestCounts::ZERO, 2);
    let ev = events(&mut m);
    assert_eq!(
        ev.iter().map(|e| e.raised).collect::<Vec<_>>(),
        [true, false]
    );
    assert_eq!(
        ev[0].kind,
        AlarmKind::IngestFault {
            counter: IngestFault::FifoFullFlags
        }
    );
    // Nothing taken: past EVENT_QUEUE events, each one more is counted as dropped.
    for k in 1..=(EVENT_QUEUE as u64 + 4) {
        m.observe_ingest(&counts(k, 0, 0, 0), 10 + 2 * k);
        m.observe_ingest(&counts(k, 0, 0, 0), 11 + 2 * k);
    }
    let ev = events(&mut m);
    assert_eq!(ev.len(), EVENT_QUEUE);
    assert_eq!(
        m.alarms().dropped(),
        2 * (EVENT_QUEUE as u64 + 4) - EVENT_QUEUE as u64
    );
}

proptest! {
    #[test]
    fn random_counter_sequences_never_panic_and_events_alternate(
        readings in proptest::collection::vec(
            (any::<u64>(), 0u64..3, 0u64..3, any::<bool>(), any::<u64>()),
            0..64,
        ),
    ) {
        let mut m = monitor();
        let mut prev = IngestCounts::ZERO;
        let mut active = false;
        for (k, (overrun, fifo, gaps, malformed_big, blocks)) in readings.into_iter().enumerate() {
            // Mostly small steps (so quiet readings happen), sometimes extreme values.
            let now = IngestCounts {
                overrun_words: if overrun % 4 == 0 { overrun } else { prev.overrun_words },
                fifo_full_flags: prev.fifo_full_flags.saturating_add(fifo / 2),
                rollover_gaps: prev.rollover_gaps.saturating_add(gaps / 2),
                malformed_words: if malformed_big { u64::MAX } else { prev.malformed_words },
                blocks,
            };
            let grew = IngestFault::ALL.iter().any(|&f| now.get(f) > prev.get(f));
            m.observe_ingest(&now, k as u64);
            let ev = events(&mut m);
            prop_assert!(ev.len() <= 1);
            if let Some(e) = ev.first() {
                // A raise only when inactive, a clear only when active: they alternate.
                prop_assert_eq!(e.raised, !active);
                prop_assert_eq!(e.raised, grew);
                let is_ingest = matches!(e.kind, AlarmKind::IngestFault { .. });
                prop_assert!(is_ingest, "kind {:?}", e.kind);
                active = e.raised;
            } else {
                prop_assert_eq!(grew, active);
            }
            prop_assert_eq!(m.alarms().active() != 0, active);
            prev = now;
        }
        prop_assert_eq!(m.alarms().dropped(), 0);
    }
}
