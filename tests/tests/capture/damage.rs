//! Damaged captures: each case names file, byte offset and field; skipping recovers the rest.

use super::*;
use slotwise_sim::capture::{inspect, BlockOutcome, ErrorKind, Verdict};

// ---------------------------------------------------------------- damage in one block

#[test]
fn flipped_payload_bit_names_block_offset_and_crc() {
    let events = stream(1000);
    let mut bytes = encode(&header(48, 1, 2, 100), &events);
    let (offsets, _) = block_offsets(&bytes);
    let k = 4;
    let start = offsets[k] as usize;
    let next = offsets[k + 1] as usize;
    bytes[start + 40] ^= 0x10;
    let e = strict_error(&bytes);
    assert_eq!(e.source, "mem.swc");
    assert_eq!(e.block, Some(k as u64));
    assert_eq!(e.field, "block_crc");
    assert_eq!(e.offset, (next - 4) as u64, "offset of the CRC field");
    match e.kind {
        ErrorKind::CrcMismatch {
            stored,
            computed,
            covered_from,
        } => {
            assert_eq!(covered_from, start as u64);
            assert_ne!(stored, computed);
            assert_eq!(
                stored,
                u32::from_le_bytes(bytes[next - 4..next].try_into().unwrap())
            );
        }
        other => panic!("{other:?}"),
    }
    let text = e.to_string();
    assert!(
        text.starts_with(&format!(
            "mem.swc: byte {} (block 4), field 'block_crc': CRC mismatch (stored 0x",
            next - 4
        )),
        "{text}"
    );
}

/// Read with skipping: the events of good blocks in order, and the skipped stretches.
fn read_skipping(bytes: &[u8]) -> (Vec<Vec<TdcEvent>>, Vec<capture::SkippedBlock>) {
    let mut r = CaptureReader::new(bytes, "mem.swc").unwrap();
    let mut good = Vec::new();
    let mut skipped = Vec::new();
    let mut block = Vec::new();
    while let Some(outcome) = r.next_block_skipping(&mut block).unwrap() {
        match outcome {
            BlockOutcome::Block(_) => good.push(block.clone()),
            BlockOutcome::Skipped(s) => {
                assert!(block.is_empty());
                skipped.push(s);
            }
        }
    }
    (good, skipped)
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(200))]

    /// A single flipped bit anywhere in block k: the strict reader blames block k at or after
    /// its start; the skipping reader recovers every other block and reports exactly block k.
    #[test]
    fn flipped_bit_in_block_k_is_located_and_skipped(k in 0usize..10, pos in any::<prop::sample::Index>(), bit in 0u8..8) {
        let events = stream(1000);
        let clean = encode(&header(48, 1, 2, 100), &events);
        let (offsets, end) = block_offsets(&clean);
        let start = offsets[k] as usize;
        let stop = offsets.get(k + 1).copied().unwrap_or(end) as usize;
        let at = start + pos.index(stop - start);
        let mut bytes = clean.clone();
        bytes[at] ^= 1 << bit;

        let e = strict_error(&bytes);
        prop_assert_eq!(e.block, Some(k as u64), "{}", e);
        prop_assert!(e.offset >= start as u64, "{}", e);
        // A flip in the length fields moves where the CRC is read from, so a CRC mismatch may be
        // reported past the block's true end; it is still blamed on block k.
        prop_assert!(
            e.offset < stop as u64 || e.field == "payload" || e.field == "block_crc",
            "{}",
            e
        );

        let (good, skipped) = read_skipping(&bytes);
        prop_assert_eq!(skipped.len(), 1);
        let s = &skipped[0];
        prop_assert_eq!((s.index, s.offset, s.bytes, s.blocks), (k as u64, start as u64, (stop - start) as u64, 1));
        prop_assert_eq!(s.reason.block, Some(k as u64));
        let expected: Vec<Vec<TdcEvent>> = events
            .chunks(100)
            .enumerate()
            .filter(|(i, _)| *i != k)
            .map(|(_, c)| c.to_vec())
            .collect();
        prop_assert_eq!(good, expected);
    }
}

#[test]
fn skipping_recovers_after_several_damaged_blocks_and_garbage() {
    let events = stream(1000);
    let clean = encode(&header(48, 1, 2, 100), &events);
    let (offsets, _) = block_offsets(&clean);
    // Blocks 2 and 3 overwritten with garbage that contains a fake sync word.
    let mut bytes = clean.clone();
    let (a, b) = (offsets[2] as usize, offsets[4] as usize);
    for (i, byte) in bytes[a + 3..b].iter_mut().enumerate() {
        *byte = (i * 31 % 251) as u8;
    }
    bytes[a + 50..a + 54].copy_from_slice(b"SWBK");
    let (good, skipped) = read_skipping(&bytes);
    assert_eq!(good.len(), 8);
    assert_eq!(skipped.len(), 1);
    let s = &skipped[0];
    assert_eq!(
        (s.index, s.offset, s.bytes, s.blocks),
        (2, a as u64, (b - a) as u64, 2)
    );
    assert_eq!(good[2], events[400..500]);
}

#[test]
fn inspect_reports_statistics_wraps_and_damage() {
    // 32-bit counter, each step 2^28 + 5 ticks: 1000 events cover 999 steps.
    let step = (1u64 << 28) + 5;
    let events: Vec<TdcEvent> = (0..1000u64)
        .map(|i| TdcEvent {
            count: (i * step) & 0xFFFF_FFFF,
            channel: if i % 4 == 0 { 1 } else { 0 },
        })
        .collect();
    let expected_wraps = (999 * step) >> 32;
    let path = tmp_path("inspect.swc");
    capture::write_all(&path, header(32, 10, 3, 300), &events).unwrap();
    let report = inspect(&path).unwrap();
    assert_eq!(report.good_blocks, 4);
    assert_eq!(report.header.block_count, 4);
    assert_eq!(report.events, 1000);
    let epb = report.events_per_block.clone().unwrap();
    assert_eq!((epb.min, epb.max), (100, 300));
    assert!((epb.mean - 250.0).abs() < 1e-12);
    assert_eq!(report.channels, [750, 250, 0]);
    assert_eq!(report.first_count, Some(0));
    assert_eq!(report.last_count, Some((999 * step) & 0xFFFF_FFFF));
    assert_eq!(report.wraps, expected_wraps);
    assert!(report.end_record_ok);
    assert_eq!(report.damaged_stretches, 0);
    assert_eq!((report.verdict, report.problem()), (Verdict::Good, None));
    assert_eq!(report.total_bytes, std::fs::metadata(&path).unwrap().len());

    // Damage block 1 and inspect again.
    let mut bytes = std::fs::read(&path).unwrap();
    let (offsets, _) = block_offsets(&bytes);
    bytes[offsets[1] as usize + 100] ^= 1;
    std::fs::write(&path, &bytes).unwrap();
    let report = inspect(&path).unwrap();
    std::fs::remove_file(&path).unwrap();
    assert_eq!(report.good_blocks, 3);
    assert_eq!(report.damage.len(), 1);
    assert_eq!(
        (report.damage[0].index, report.damage[0].offset),
        (1, offsets[1])
    );
    assert!(report.damage[0].reason.contains("'block_crc'"));
    assert_eq!(report.verdict, Verdict::Damaged);
    assert!(report.problem().is_some_and(|p| p.contains("damaged")));
    let json = serde_json::to_value(&report).unwrap();
    assert_eq!(json["good_blocks"], 3);
    assert_eq!(json["verdict"], "damaged");
    assert_eq!(json["header"]["counter_bits"], 32);
    let table = report.to_string();
    assert!(table.contains("counter wraps"), "{table}");
}

// ---------------------------------------------------------------- each damaged-file case

fn small_capture() -> (Vec<u8>, Vec<u64>, u64) {
    let bytes = encode(&header(48, 1, 2, 100), &stream(300));
    let (offsets, end) = block_offsets(&bytes);
    (bytes, offsets, end)
}

#[test]
fn empty_file() {
    let e = CaptureReader::new(&[][..], "empty.swc").unwrap_err();
    assert_eq!(
        (e.source.as_str(), e.offset, e.field, e.block),
        ("empty.swc", 0, "magic", None)
    );
    assert_eq!(e.kind, ErrorKind::Empty);
}

#[test]
fn wrong_magic() {
    let (mut bytes, ..) = small_capture();
    bytes[3] = b'X';
    let e = CaptureReader::new(&bytes[..], "x.swc").unwrap_err();
    assert_eq!((e.offset, e.field), (0, "magic"));
    assert!(matches!(e.kind, ErrorKind::BadMagic { .. }));
}

#[test]
fn newer_major_version_is_refused_with_the_supported_one_named() {
    let (mut bytes, ..) = small_capture();
    bytes[8..10].copy_from_slice(&0x0200u16.to_le_bytes());
    let e = CaptureReader::new(&bytes[..], "new.swc").unwrap_err();
    assert_eq!((e.offset, e.field), (8, "version"));
    assert_eq!(e.kind, ErrorKind::UnsupportedVersion { found: 0x0200 });
    assert!(e.to_string().contains("version 2.0"));
    assert!(e.to_string().contains("supports major version 1"));
    // A newer minor version reads.
    bytes[8..10].copy_from_slice(&0x0107u16.to_le_bytes());
    fix_header_crc(&mut bytes);
    assert_eq!(decode(&bytes).unwrap().len(), 300);
}

#[test]
fn truncated_header() {
    let (bytes, ..) = small_capture();
    let e = CaptureReader::new(&bytes[..22], "t.swc").unwrap_err();
    assert_eq!((e.offset, e.field), (22, "max_block_events"));
    assert_eq!(e.kind, ErrorKind::Truncated { missing: 22 });
    let e = CaptureReader::new(&bytes[..5], "t.swc").unwrap_err();
    assert_eq!((e.offset, e.field), (5, "magic"));
    let e = CaptureReader::new(&bytes[..42], "t.swc").unwrap_err();
    assert_eq!((e.offset, e.field), (42, "header_crc"));
}

#[test]
fn header_crc_mismatch() {
    let (mut bytes, ..) = small_capture();
    bytes[12] ^= 0x01; // resolution_ps
    let e = CaptureReader::new(&bytes[..], "h.swc").unwrap_err();
    assert_eq!((e.offset, e.field, e.block), (40, "header_crc", None));
}

#[test]
fn header_field_out_of_range() {
    let (mut bytes, ..) = small_capture();
    bytes[10] = 70; // counter_bits
    fix_header_crc(&mut bytes);
    let e = CaptureReader::new(&bytes[..], "h.swc").unwrap_err();
    assert_eq!((e.offset, e.field), (10, "counter_bits"));
    assert_eq!(
        e.kind,
        ErrorKind::OutOfRange {
            value: 70,
            min: 32,
            max: 64
        }
    );
}

#[test]
fn truncated_mid_block() {
    let (bytes, offsets, _) = small_capture();
    let cut = offsets[1] as usize + 50;
    let e = strict_error(&bytes[..cut]);
    assert_eq!(
        (e.offset, e.field, e.block),
        (cut as u64, "payload", Some(1))
    );
    let cut = offsets[2] as usize + 14;
    let e = strict_error(&bytes[..cut]);
    assert_eq!(
        (e.offset, e.field, e.block),
        (cut as u64, "event_count", Some(2))
    );
    assert_eq!(e.kind, ErrorKind::Truncated { missing: 14 });
}

#[test]
fn truncated_at_a_block_boundary_lacks_the_end_record() {
    let (bytes, _, end) = small_capture();
    let e = strict_error(&bytes[..end as usize]);
    assert_eq!((e.offset, e.field, e.block), (end, "end_record", None));
    assert_eq!(e.kind, ErrorKind::MissingEndRecord { blocks: 3 });
    let e = strict_error(&bytes[..end as usize + 10]);
    assert_eq!((e.offset, e.field), (end + 10, "end_block_count"));
    let e = strict_error(&bytes[..end as usize + 14]);
    assert_eq!((e.offset, e.field), (end + 14, "end_event_total"));
    assert_eq!(e.kind, ErrorKind::Truncated { missing: 10 });
}

#[test]
fn header_that_lies_about_its_block_count() {
    let (mut bytes, _, end) = small_capture();
    put_u64(&mut bytes, 24, 7);
    fix_header_crc(&mut bytes);
    let mut r = CaptureReader::new(&bytes[..], "lie.swc").unwrap();
    let mut block = Vec::new();
    for _ in 0..3 {
        assert!(r.next_block(&mut block).unwrap().is_some());
    }
    let e = r.next_block(&mut block).unwrap_err();
    assert_eq!((e.offset, e.field), (24, "block_count"));
    assert_eq!(
        e.kind,
        ErrorKind::CountMismatch {
            what: "blocks",
            declared: 7,
            found: 3,
            end_offset: end
        }
    );
}

#[test]
fn payload_length_over_the_limit() {
    let (mut bytes, offsets, _) = small_capture();
    let b1 = offsets[1] as usize;
    put_u32(&mut bytes, b1 + 16, 0xFFFF_FFF0);
    let e = strict_error(&bytes);
    assert_eq!(
        (e.offset, e.field, e.block),
        (b1 as u64 + 16, "payload_length", Some(1))
    );
    assert!(
        matches!(e.kind, ErrorKind::OutOfRange { max: 1090, .. }),
        "{:?}",
        e.kind
    );
}

#[test]
fn event_count_over_the_limit() {
    let (mut bytes, offsets, _) = small_capture();
    let b0 = offsets[0] as usize;
    put_u32(&mut bytes, b0 + 12, 101);
    let e = strict_error(&bytes);
    assert_eq!(
        (e.offset, e.field, e.block),
        (b0 as u64 + 12, "event_count", Some(0))
    );
}

#[test]
fn bad_block_sync() {
    let (mut bytes, offsets, _) = small_capture();
    let b2 = offsets[2] as usize;
    bytes[b2] = b'Q';
    let e = strict_error(&bytes);
    assert_eq!(
        (e.offset, e.field, e.block),
        (b2 as u64, "block_sync", Some(2))
    );
}

/// Blocks with valid CRCs but contents a correct writer never produces.
#[test]
fn semantic_faults_inside_verified_blocks() {
    let h = header(32, 1, 2, 100);
    let head = bare_header(&h);
    let p0 = head.len() as u64 + 28;
    let case = |block: Vec<u8>| {
        let mut b = head.clone();
        b.extend(block);
        b.extend(raw_end(1, 2));
        strict_error(&b)
    };
    // Varint continuing past the payload's end.
    let e = case(raw_block(0, 2, 5, &[0, 0x80, 0x80]));
    assert_eq!((e.offset, e.field, e.block), (p0 + 1, "varint", Some(0)));
    assert_eq!(e.kind, ErrorKind::VarintOverrun);
    // Varint longer than 10 bytes.
    let e = case(raw_block(
        0,
        2,
        5,
        &[
            0, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0x7F, 0,
        ],
    ));
    assert_eq!((e.offset, e.field), (p0 + 1, "varint"));
    assert_eq!(e.kind, ErrorKind::VarintTooLong);
    // First counter value wider than 32 bits.
    let e = case(raw_block(0, 2, 1 << 40, &[0, 2, 1]));
    assert_eq!((e.offset, e.field), (p0 - 8, "first_count"));
    assert_eq!(
        e.kind,
        ErrorKind::TooWide {
            value: 1 << 40,
            bits: 32
        }
    );
    // Step wider than the counter: zigzag 2^33 = 80 80 80 80 20.
    let e = case(raw_block(0, 2, 5, &[0, 0x80, 0x80, 0x80, 0x80, 0x20, 1]));
    assert_eq!((e.offset, e.field), (p0 + 1, "delta"));
    // Channel beyond the header's channel count.
    let e = case(raw_block(0, 2, 5, &[0, 2, 2]));
    assert_eq!((e.offset, e.field), (p0 + 2, "channel"));
    assert_eq!(
        e.kind,
        ErrorKind::ChannelOutOfRange {
            channel: 2,
            channel_count: 2
        }
    );
    // Bytes left over after the last event.
    let e = case(raw_block(0, 2, 5, &[0, 2, 1, 9]));
    assert_eq!((e.offset, e.field), (p0 + 3, "payload_length"));
    assert_eq!(e.kind, ErrorKind::TrailingPayload { unused: 1 });
    // Wrong block index.
    let e = case(raw_block(3, 2, 5, &[0, 2, 1]));
    assert_eq!((e.offset, e.field), (p0 - 24, "block_index"));
    // Sanity: the same hand-built block with good contents reads.
    let mut ok = head.clone();
    ok.extend(raw_block(0, 2, 0xFFFF_FFFF, &[0, 4, 1]));
    ok.extend(raw_end(1, 2));
    assert_eq!(
        decode(&ok).unwrap(),
        [
            TdcEvent {
                count: 0xFFFF_FFFF,
                channel: 0
            },
            TdcEvent {
                count: 1,
                channel: 1
            }
        ]
    );
}

#[test]
fn end_record_faults() {
    let (bytes, _, end) = small_capture();
    let mut extra = bytes.clone();
    extra.push(0);
    let e = strict_error(&extra);
    assert_eq!((e.offset, e.field), (bytes.len() as u64, "trailing_data"));
    let mut bad = bytes.clone();
    bad[end as usize + 5] ^= 4;
    let e = strict_error(&bad);
    assert_eq!((e.offset, e.field), (end + 20, "end_crc"));
    let mut miscount = bytes[..end as usize].to_vec();
    miscount.extend(raw_end(3, 299));
    let e = strict_error(&miscount);
    assert_eq!((e.offset, e.field), (end + 12, "end_event_total"));
}

#[test]
fn errors_repeat_after_the_first() {
    let (bytes, _, end) = small_capture();
    let mut r = CaptureReader::new(&bytes[..end as usize], "t").unwrap();
    let mut block = Vec::new();
    let first = loop {
        match r.next_block(&mut block) {
            Ok(Some(_)) => continue,
            Ok(None) => panic!("a capture without end record read as complete"),
            Err(e) => break e,
        }
    };
    assert_eq!(r.next_block(&mut block).unwrap_err(), first);
    assert!(block.is_empty());
}

// ---------------------------------------------------------------- gaps and tails in skip mode

#[test]
fn a_cleanly_missing_block_is_a_gap() {
    let (bytes, offsets, _) = small_capture();
    let (b1, b2) = (offsets[1] as usize, offsets[2] as usize);
    let mut cut = bytes[..b1].to_vec();
    cut.extend_from_slice(&bytes[b2..]);
    let e = strict_error(&cut);
    assert_eq!(
        (e.offset, e.field, e.block),
        (b1 as u64 + 4, "block_index", Some(1))
    );
    assert_eq!(
        e.kind,
        ErrorKind::IndexMismatch {
            expected: 1,
            found: 2
        }
    );
    let (good, skipped) = read_skipping(&cut);
    assert_eq!(good.len(), 2);
    assert_eq!(skipped.len(), 1);
    let s = &skipped[0];
    assert_eq!((s.index, s.offset, s.bytes, s.blocks), (1, b1 as u64, 0, 1));
}

#[test]
fn skipping_reports_a_truncated_tail_and_a_missing_end_record() {
    let (bytes, offsets, end) = small_capture();
    let b2 = offsets[2] as usize;
    let (good, skipped) = read_skipping(&bytes[..b2 + 60]);
    assert_eq!(good.len(), 2);
    assert_eq!(skipped.len(), 1);
    let s = &skipped[0];
    // The header (patched at finish) says 3 blocks, so one is known lost.
    assert_eq!(
        (s.index, s.offset, s.bytes, s.blocks),
        (2, b2 as u64, 60, 1)
    );
    assert_eq!(
        (s.reason.field, s.reason.offset),
        ("payload", b2 as u64 + 60)
    );

    let (good, skipped) = read_skipping(&bytes[..end as usize]);
    assert_eq!(good.len(), 3);
    assert_eq!(skipped.len(), 1);
    assert_eq!((skipped[0].bytes, skipped[0].blocks), (0, 0));
    assert_eq!(
        skipped[0].reason.kind,
        ErrorKind::MissingEndRecord { blocks: 3 }
    );
}

#[test]
fn the_reserved_last_block_index_is_refused() {
    let h = header(32, 1, 2, 100);
    let mut b = bare_header(&h);
    let first = b.len() as u64;
    b.extend(raw_block(u64::MAX - 1, 1, 7, &[0]));
    b.extend(raw_block(u64::MAX, 1, 8, &[1]));
    b.extend(raw_end(u64::MAX, 2));
    let e = strict_error(&b);
    assert_eq!(
        (e.offset, e.field, e.block),
        (first + 4, "block_index", Some(0))
    );
    // Skipping: a gap up to index 2^64-2, that block, then the reserved index is damage and the
    // end record (counting 2^64-1 blocks) closes the capture.
    let (good, skipped) = read_skipping(&b);
    assert_eq!(
        good,
        [vec![TdcEvent {
            count: 7,
            channel: 0
        }]]
    );
    assert_eq!(skipped.len(), 2);
    assert_eq!((skipped[0].index, skipped[0].blocks), (0, u64::MAX - 1));
    assert_eq!(skipped[1].reason.field, "block_index");
    assert_eq!(
        skipped[1].reason.kind,
        ErrorKind::OutOfRange {
            value: u64::MAX,
            min: 0,
            max: u64::MAX - 1
        }
    );
}
