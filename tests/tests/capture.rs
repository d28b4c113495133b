//! The capture format and CSV exchange: round trips, damage reports naming file, offset and
//! field, skipping damaged blocks, and a reader that never panics on arbitrary bytes.

use std::io::{Cursor, Read};

use proptest::prelude::*;
use slotwise::{TdcEvent, UnwrapConfig};
use slotwise_sim::capture::{
    self, crc32c, CaptureError, CaptureHeader, CaptureReader, CaptureWriter, CAPTURE_CRC,
};
use slotwise_sim::csv_io::{
    capture_to_csv, csv_header, csv_to_capture, read_csv, write_csv, CsvReader, CsvTime,
};

// ---------------------------------------------------------------- helpers

fn header(bits: u8, res_ps: u32, channels: u8, block_events: u32) -> CaptureHeader {
    CaptureHeader::new(UnwrapConfig::new(bits, res_ps).unwrap(), channels)
        .with_block_events(block_events)
}

/// A capture in memory, block count patched in.
fn encode(h: &CaptureHeader, events: &[TdcEvent]) -> Vec<u8> {
    let mut w = CaptureWriter::new(Cursor::new(Vec::new()), h.clone()).unwrap();
    w.push_all(events).unwrap();
    w.finish_seek().unwrap().into_inner()
}

/// Every event of a capture, strictly.
fn decode(bytes: &[u8]) -> Result<Vec<TdcEvent>, CaptureError> {
    let mut r = CaptureReader::new(bytes, "mem.swc")?;
    let mut all = Vec::new();
    let mut block = Vec::new();
    while r.next_block(&mut block)?.is_some() {
        all.extend_from_slice(&block);
    }
    Ok(all)
}

/// Byte offsets of every block (from a clean read) and the end record's offset.
fn block_offsets(bytes: &[u8]) -> (Vec<u64>, u64) {
    let mut r = CaptureReader::new(bytes, "mem.swc").unwrap();
    let mut offsets = Vec::new();
    let mut block = Vec::new();
    loop {
        let at = r.offset();
        match r.next_block(&mut block).unwrap() {
            Some(info) => {
                assert_eq!(info.byte_offset, at);
                offsets.push(at);
            }
            None => return (offsets, at),
        }
    }
}

/// A steady 48-bit stream over two channels with a wrap and a few swapped neighbours.
fn stream(n: usize) -> Vec<TdcEvent> {
    let mask = (1u64 << 48) - 1;
    let mut t = mask - 5_000_000;
    let mut events: Vec<TdcEvent> = (0..n as u64)
        .map(|i| {
            t = (t + 9_973 + (i * 7_919) % 50_000) & mask;
            TdcEvent {
                count: t,
                channel: (i % 2) as u8,
            }
        })
        .collect();
    for i in (10..n.saturating_sub(1)).step_by(37) {
        events.swap(i, i + 1);
    }
    events
}

fn strict_error(bytes: &[u8]) -> CaptureError {
    match decode(bytes) {
        Err(e) => e,
        Ok(ev) => panic!("expected an error, read {} events", ev.len()),
    }
}

fn put_u32(b: &mut [u8], at: usize, v: u32) {
    b[at..at + 4].copy_from_slice(&v.to_le_bytes());
}

fn put_u64(b: &mut [u8], at: usize, v: u64) {
    b[at..at + 8].copy_from_slice(&v.to_le_bytes());
}

/// Recompute the header CRC after patching header fields (layout: docs/capture-format.md §3).
fn fix_header_crc(b: &mut [u8]) {
    let len = u32::from_le_bytes(b[32..36].try_into().unwrap()) as usize;
    let crc = crc32c(&b[..len - 4]);
    put_u32(b, len - 4, crc);
}

/// A block built by hand from the documented layout (§4), CRC included.
fn raw_block(index: u64, events: u32, first_count: u64, payload: &[u8]) -> Vec<u8> {
    let mut b = b"SWBK".to_vec();
    b.extend_from_slice(&index.to_le_bytes());
    b.extend_from_slice(&events.to_le_bytes());
    b.extend_from_slice(&(payload.len() as u32).to_le_bytes());
    b.extend_from_slice(&first_count.to_le_bytes());
    b.extend_from_slice(payload);
    let crc = crc32c(&b);
    b.extend_from_slice(&crc.to_le_bytes());
    b
}

/// An end record built by hand (§5).
fn raw_end(blocks: u64, events: u64) -> Vec<u8> {
    let mut b = b"SWEN".to_vec();
    b.extend_from_slice(&blocks.to_le_bytes());
    b.extend_from_slice(&events.to_le_bytes());
    let crc = crc32c(&b);
    b.extend_from_slice(&crc.to_le_bytes());
    b
}

/// Header bytes of a capture with no blocks: everything before its end record.
fn bare_header(h: &CaptureHeader) -> Vec<u8> {
    let mut b = encode(h, &[]);
    b.truncate(b.len() - 24);
    b
}

fn tmp_path(name: &str) -> std::path::PathBuf {
    std::env::temp_dir().join(format!("slotwise-capture-{}-{name}", std::process::id()))
}

// ---------------------------------------------------------------- CRC and layout

// Check value for ASCII "123456789" from Cook's Catalogue of parametrised CRC algorithms
// (reveng.sourceforge.io/crc-catalogue): CRC-32/ISCSI = 0xE3069283. The ISO-HDLC value
// 0xCBF43926 is checked next to the format's CRC in host-sim's unit tests.
#[test]
fn format_crc_is_crc32_iscsi() {
    assert_eq!(CAPTURE_CRC.checksum(b"123456789"), 0xE306_9283);
    assert_eq!(crc32c(b"123456789"), 0xE306_9283);
}

/// The worked example of docs/capture-format.md §8, byte for byte.
#[test]
fn writer_matches_the_documented_example() {
    let doc = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../docs/capture-format.md"
    ))
    .unwrap();
    let start = doc.find("```hex capture-example").unwrap();
    let body = &doc[start..].lines().skip(1).collect::<Vec<_>>();
    let mut expected = Vec::new();
    for line in body.iter().take_while(|l| !l.starts_with("```")) {
        for byte in line.split_whitespace().skip(1) {
            expected.push(u8::from_str_radix(byte, 16).unwrap());
        }
    }
    assert_eq!(expected.len(), 158);
    let h = header(40, 4, 2, 3).with_metadata("name = \"doc-example\"");
    let events = [(0xFF_FFFF_FFF0, 0), (0x10, 1), (0x0C, 0), (0x1000, 1)]
        .map(|(count, channel)| TdcEvent { count, channel });
    assert_eq!(encode(&h, &events), expected);
    assert_eq!(decode(&expected).unwrap(), events);
}

// ---------------------------------------------------------------- round trips

#[test]
fn file_round_trip_patches_the_block_count() {
    let path = tmp_path("roundtrip.swc");
    let events = stream(10_000);
    let h = header(48, 1, 2, 4096).with_metadata("name = \"bench-100mhz-30km\"\n");
    capture::write_all(&path, h.clone(), &events).unwrap();
    let (got_h, got) = capture::read_all(&path).unwrap();
    std::fs::remove_file(&path).unwrap();
    assert_eq!(got, events);
    assert_eq!(got_h.block_count, 3);
    assert_eq!(got_h.metadata, h.metadata);
}

#[test]
fn plain_sink_leaves_the_block_count_unknown() {
    let events = stream(9000);
    let mut w = CaptureWriter::new(Vec::new(), header(48, 1, 2, 4096)).unwrap();
    w.push_all(&events).unwrap();
    let bytes = w.finish().unwrap();
    let r = CaptureReader::new(&bytes[..], "s").unwrap();
    assert_eq!(r.header().block_count, 0);
    assert_eq!(decode(&bytes).unwrap(), events);
}

#[test]
fn csv_round_trip_through_capture() {
    let events = stream(3000);
    let csv = write_csv(Vec::new(), &events, CsvTime::Raw { resolution_ps: 1 }).unwrap();
    let mut reader = CsvReader::new(&csv[..], "in.csv").unwrap();
    let mut w = CaptureWriter::new(Cursor::new(Vec::new()), csv_header(2)).unwrap();
    assert_eq!(csv_to_capture(&mut reader, &mut w).unwrap(), 3000);
    let bytes = w.finish_seek().unwrap().into_inner();
    assert_eq!(decode(&bytes).unwrap(), events);
    let mut r = CaptureReader::new(&bytes[..], "c.swc").unwrap();
    let (csv2, n) = capture_to_csv(&mut r, Vec::new(), false).unwrap();
    assert_eq!(n, 3000);
    assert_eq!(csv2, csv);
}

#[test]
fn csv_channel_beyond_the_header_names_its_line() {
    let text = "t_ps,channel\n5,0\n# note\n9,3\n";
    let mut reader = CsvReader::new(text.as_bytes(), "in.csv").unwrap();
    let mut w = CaptureWriter::new(Vec::new(), csv_header(2)).unwrap();
    match csv_to_capture(&mut reader, &mut w) {
        Err(slotwise_sim::csv_io::ConvertError::Csv(e)) => {
            assert_eq!((e.line, e.field, e.text.as_str()), (4, "channel", "3"));
        }
        other => panic!("expected a CSV error, got {other:?}"),
    }
}

/// A reader that hands out at most `chunk` bytes per call.
struct Trickle<'a> {
    data: &'a [u8],
    chunk: usize,
}

impl Read for Trickle<'_> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.chunk.min(buf.len()).min(self.data.len());
        buf[..n].copy_from_slice(&self.data[..n]);
        self.data = &self.data[n..];
        Ok(n)
    }
}

/// Counter widths 32..=64, wraps, small backward steps, random block sizes and channels.
fn event_stream() -> impl Strategy<Value = (u8, u32, u8, Vec<TdcEvent>)> {
    (32u8..=64, 1u32..=40, 1u8..=8).prop_flat_map(|(bits, block, channels)| {
        let mask = if bits == 64 {
            u64::MAX
        } else {
            (1 << bits) - 1
        };
        let step = prop_oneof![
            4 => 0u64..100_000,
            2 => 0u64..=mask >> 2,
            2 => (1u64..2_000).prop_map(move |b| (mask - b) + 1),
            1 => any::<u64>().prop_map(move |v| v & mask),
        ];
        let events = (
            any::<u64>(),
            prop::collection::vec((step, 0..channels), 0..300),
        )
            .prop_map(move |(start, steps)| {
                let mut t = start & mask;
                steps
                    .into_iter()
                    .map(|(s, channel)| {
                        t = t.wrapping_add(s) & mask;
                        TdcEvent { count: t, channel }
                    })
                    .collect::<Vec<_>>()
            });
        (Just(bits), Just(block), Just(channels), events)
    })
}

proptest! {
    #[test]
    fn binary_round_trip_is_lossless((bits, block, channels, events) in event_stream()) {
        let bytes = encode(&header(bits, 3, channels, block), &events);
        prop_assert_eq!(decode(&bytes).unwrap(), events.clone());
        // The result does not depend on how the source hands out its bytes.
        for chunk in [1usize, 7, 4096] {
            let mut r = CaptureReader::new(Trickle { data: &bytes, chunk }, "t").unwrap();
            let mut all = Vec::new();
            let mut b = Vec::new();
            while let Some(info) = r.next_block(&mut b).unwrap() {
                prop_assert!(info.events <= block);
                all.extend_from_slice(&b);
            }
            prop_assert_eq!(&all, &events);
        }
    }

    #[test]
    fn csv_round_trip_is_lossless_for_64_bit_1_ps(
        (_, block, channels, events) in event_stream(),
    ) {
        let events: Vec<TdcEvent> = events; // any counts: 64-bit counter
        let csv = write_csv(Vec::new(), &events, CsvTime::Raw { resolution_ps: 1 }).unwrap();
        prop_assert_eq!(read_csv(&csv[..], "p.csv").unwrap(), events.clone());
        let mut reader = CsvReader::new(&csv[..], "p.csv").unwrap();
        let mut w = CaptureWriter::new(
            Cursor::new(Vec::new()),
            csv_header(channels).with_block_events(block),
        )
        .unwrap();
        csv_to_capture(&mut reader, &mut w).unwrap();
        let bytes = w.finish_seek().unwrap().into_inner();
        let mut r = CaptureReader::new(&bytes[..], "p.swc").unwrap();
        let (csv2, _) = capture_to_csv(&mut r, Vec::new(), false).unwrap();
        prop_assert_eq!(csv2, csv);
    }
}

// ---------------------------------------------------------------- never panics

/// Drive both readers over `bytes` to the end; each must stop within a bounded number of calls.
fn read_everything(bytes: &[u8]) {
    if let Ok(mut r) = CaptureReader::new(bytes, "fuzz") {
        let mut block = Vec::new();
        for _ in 0..=bytes.len() {
            match r.next_block(&mut block) {
                Ok(Some(_)) => {
                    assert!(block.len() as u64 <= u64::from(r.header().max_block_events))
                }
                _ => break,
            }
        }
    }
    if let Ok(mut r) = CaptureReader::new(bytes, "fuzz") {
        let mut block = Vec::new();
        let mut calls = 0;
        while let Ok(Some(_)) = r.next_block_skipping(&mut block) {
            calls += 1;
            assert!(
                calls <= 2 * bytes.len() + 4,
                "skipping reader does not advance"
            );
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(500))]

    #[test]
    fn arbitrary_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..2000)) {
        read_everything(&bytes);
    }

    #[test]
    fn arbitrary_bytes_after_a_valid_header_never_panic(tail in prop::collection::vec(any::<u8>(), 0..2000)) {
        let mut bytes = bare_header(&header(33, 1, 3, 50));
        bytes.extend(tail);
        read_everything(&bytes);
    }

    #[test]
    fn mutated_captures_never_panic(
        (bits, block, channels, events) in event_stream(),
        edits in prop::collection::vec((any::<prop::sample::Index>(), any::<u8>(), 0u8..4), 1..8),
    ) {
        let mut bytes = encode(&header(bits, 1, channels, block), &events);
        for (at, value, op) in edits {
            if bytes.is_empty() {
                break;
            }
            let i = at.index(bytes.len());
            match op {
                0 => bytes[i] ^= value | 1,
                1 => bytes.truncate(i),
                2 => bytes.insert(i, value),
                _ => { bytes.remove(i); }
            }
        }
        read_everything(&bytes);
    }
}

#[path = "capture/damage.rs"]
mod damage;

#[path = "capture/skip_replay.rs"]
mod skip_replay;
