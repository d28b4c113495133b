//! Ingest counters by hand on the 32-bit layout of the `words` module doc (kind in bits 30..32:
//! 0 an event, 1 a rollover; channel in bits 24..30; time in bits 0..24), and random bytes that
//! must never panic nor lose a record.

use super::*;
use crate::words::{BitField, Endian, KindField, WordLayout};
use proptest::prelude::*;

pub(crate) fn format() -> WordFormat {
    let layout = WordLayout {
        record_bytes: 4,
        endian: Endian::Little,
        time: BitField::new(0, 24),
        channel: BitField::new(24, 6),
        kind: Some(KindField {
            field: BitField::new(30, 2),
            event: 0,
            rollover: 1,
            rollover_count: BitField::new(0, 0),
        }),
        max_channel: 7,
    };
    match WordFormat::new(layout) {
        Ok(f) => f,
        Err(e) => panic!("test layout refused: {e}"),
    }
}

/// An event word of the test layout: `channel` in bits 24..30, `time` in bits 0..24.
pub(crate) fn event(channel: u32, time: u32) -> u32 {
    (channel << 24) | (time & 0xFF_FFFF)
}

/// A rollover word of the test layout: kind 1 in bits 30..32.
pub(crate) const ROLLOVER: u32 = 1 << 30;

pub(crate) fn bytes(words: &[u32]) -> Vec<u8> {
    words.iter().flat_map(|w| w.to_le_bytes()).collect()
}

fn ingest_all(ingest: &mut Ingest, words: &[u32]) -> Vec<TdcEvent> {
    let b = bytes(words);
    let mut out = vec![
        TdcEvent {
            count: 0,
            channel: 0
        };
        words.len() + 1
    ];
    let done = ingest.push(&b, &mut out);
    assert_eq!(done.consumed, b.len());
    out.truncate(done.events);
    out
}

#[test]
fn a_counter_falling_by_more_than_half_its_range_is_a_rollover_gap() {
    // 2^24-tick field: half range 2^23 (half-range rule, common practice).
    let mut ingest = Ingest::new(format());
    let evs = ingest_all(&mut ingest, &[event(1, 0xF0_0000), event(2, 0x00_0010)]);
    assert_eq!(evs.len(), 2);
    assert_eq!(ingest.counts().rollover_gaps, 1);
    // Handed out unchanged: the counter flags it, it does not correct it.
    assert_eq!(evs[1].count, 0x10);
}

#[test]
fn a_rollover_record_or_a_small_reorder_is_no_gap() {
    let mut ingest = Ingest::new(format());
    ingest_all(
        &mut ingest,
        &[
            event(1, 0xF0_0000),
            ROLLOVER,
            event(2, 0x10),
            event(3, 0x08),
        ],
    );
    assert_eq!(ingest.counts().rollover_gaps, 0);
    // Exactly half the range is still a reorder; one tick more is a gap.
    let mut ingest = Ingest::new(format());
    ingest_all(&mut ingest, &[event(1, 0x80_0000), event(1, 0)]);
    assert_eq!(ingest.counts().rollover_gaps, 0);
    let mut ingest = Ingest::new(format());
    ingest_all(&mut ingest, &[event(1, 0x80_0001), event(1, 0)]);
    assert_eq!(ingest.counts().rollover_gaps, 1);
}

#[test]
fn a_gap_is_seen_across_blocks() {
    let mut ingest = Ingest::new(format());
    ingest_all(&mut ingest, &[event(0, 0xFF_FFF0)]);
    ingest_all(&mut ingest, &[event(0, 0x20)]);
    assert_eq!(ingest.counts().rollover_gaps, 1);
    assert_eq!(ingest.counts().blocks, 2);
}

#[test]
fn a_format_without_rollover_records_counts_no_gaps() {
    // A 32-bit counter with no rollover records wraps by design: no record was lost.
    let layout = WordLayout {
        record_bytes: 8,
        endian: Endian::Little,
        time: BitField::new(0, 32),
        channel: BitField::new(32, 8),
        kind: None,
        max_channel: 7,
    };
    let mut ingest = Ingest::new(WordFormat::new(layout).unwrap());
    let b: Vec<u8> = [0xFFFF_FF00u64, 0x10]
        .iter()
        .flat_map(|w| w.to_le_bytes())
        .collect();
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 3];
    assert_eq!(ingest.push(&b, &mut out).events, 2);
    assert_eq!(ingest.counts().rollover_gaps, 0);
}

#[test]
fn counts_list_their_fault_counters_once() {
    let c = IngestCounts {
        overrun_words: 1,
        fifo_full_flags: 2,
        rollover_gaps: 3,
        malformed_words: 4,
        blocks: 5,
    };
    assert_eq!(IngestCounts::from_words(&c.to_words()), c);
    for (k, fault) in IngestFault::ALL.into_iter().enumerate() {
        assert_eq!(c.fields()[k], (fault.name(), c.get(fault)));
        assert_eq!(IngestFault::from_code(fault.code()), Some(fault));
    }
    assert_eq!(c.fields()[4], ("blocks", 5));
    assert_eq!(IngestFault::from_code(4), None);
    assert!(c.any_fault());
    let quiet = IngestCounts {
        blocks: 9,
        ..IngestCounts::ZERO
    };
    assert!(!quiet.any_fault());
}

#[test]
fn each_fault_ends_in_its_own_counter() {
    let mut ingest = Ingest::new(format());
    // Kind 2 is unknown; channel 9 is above the maximum 7: both malformed.
    ingest_all(&mut ingest, &[2 << 30, event(9, 5), event(3, 6)]);
    ingest.report_overrun(12);
    ingest.report_fifo_full();
    let c = ingest.counts();
    assert_eq!(
        c,
        IngestCounts {
            overrun_words: 12,
            fifo_full_flags: 1,
            rollover_gaps: 0,
            malformed_words: 2,
            blocks: 1,
        }
    );
    let w = ingest.word_counts();
    assert_eq!((w.records, w.get(RecordFate::Event)), (3, 1));
}

#[test]
fn a_trailing_partial_record_is_reported_at_the_end() {
    let mut ingest = Ingest::new(format());
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 2];
    let done = ingest.push(&[1, 2, 3], &mut out);
    assert_eq!((done.events, done.consumed), (0, 3));
    assert_eq!(
        ingest.finish(),
        Err(WordError::PartialRecord {
            offset: 0,
            have: 3,
            need: 4
        })
    );
}

proptest! {
    #[test]
    fn random_bytes_never_panic_and_every_record_is_counted(
        data in proptest::collection::vec(any::<u8>(), 0..600),
        cuts in proptest::collection::vec(0usize..64, 0..12),
    ) {
        let mut ingest = Ingest::new(format());
        let mut out = vec![TdcEvent { count: 0, channel: 0 }; data.len() / 4 + 1];
        let (mut at, mut events) = (0usize, 0u64);
        for cut in cuts.iter().copied().chain([usize::MAX]) {
            let end = at.saturating_add(cut).min(data.len());
            let done = ingest.push(&data[at..end], &mut out);
            prop_assert_eq!(done.consumed, end - at);
            events += done.events as u64;
            at = end;
        }
        let w = *ingest.word_counts();
        let c = ingest.counts();
        prop_assert_eq!(w.records, (data.len() / 4) as u64);
        prop_assert_eq!(w.settled(), w.records);
        prop_assert_eq!(w.get(RecordFate::Event), events);
        prop_assert!(c.malformed_words <= w.records);
        prop_assert!(c.rollover_gaps < events.max(1));
        prop_assert_eq!(ingest.finish().is_ok(), data.len() % 4 == 0);
    }
}
