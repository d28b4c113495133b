//! `slotwise import` end to end: text and binary exports become captures, read back with the
//! capture reader; bad input is reported with file, line or record offset, and field.

mod common;
use common::{fails, ok, tmp as tmp_in};

use std::path::Path;

use slotwise::TdcEvent;
use slotwise_sim::capture::{self, FLAG_IMPORTED};

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// `import KIND INPUT -o OUT` followed by the options in `opts` (split at spaces).
fn import<'a>(kind: &'a str, input: &'a Path, out: &'a Path, opts: &'a str) -> Vec<&'a str> {
    let mut v = vec!["import", kind, s(input), "-o", s(out)];
    v.extend(opts.split_whitespace());
    v
}

/// The number in the summary row `name` (the row's last field).
fn row(summary: &str, name: &str) -> u64 {
    let line = summary
        .lines()
        .find(|l| l.trim_start().starts_with(name))
        .unwrap_or_else(|| panic!("no row {name:?} in\n{summary}"));
    line.split_whitespace().last().unwrap().parse().unwrap()
}

fn ev(count: u64, channel: u8) -> TdcEvent {
    TdcEvent { count, channel }
}

#[test]
fn text_in_ns_with_fractions_and_a_channel_map() {
    let d = tmp("text");
    let input = d.join("export.txt");
    let out = d.join("export.swcap");
    std::fs::write(
        &input,
        "# invented bench export\n\
         t_ns;detector;flags\n\
         12.345678;1;x\n\
         \n\
         100;5;x\n\
         0.0025;2;x\n\
         # a comment in the middle\n\
         1.5e3;2;x\n\
         200.1;7;x\n\
         18446744073709551.615;1;x\n",
    )
    .unwrap();
    let opts = "--delimiter ; --time-column t_ns --channel-column detector --time-unit ns \
                --channel-map 1=0,2=1,5=2";
    let text = ok(&import("text", &input, &out, opts));
    let (header, events) = capture::read_all(&out).unwrap();
    assert_eq!(
        (
            header.counter_bits,
            header.resolution_ps,
            header.channel_count
        ),
        (64, 1, 3)
    );
    assert_ne!(header.flags & FLAG_IMPORTED, 0);
    // 1 ns = 1000 ps (SI prefix, common practice); values worked by hand, halves round up:
    // 12.345678 ns = 12345.678 ps -> 12346; 0.0025 ns = 2.5 ps -> 3; 1.5e3 ns = 1 500 000 ps;
    // 18446744073709551.615 ns = 2^64 - 1 ps exactly.
    assert_eq!(
        events,
        vec![
            ev(12_346, 0),
            ev(100_000, 2),
            ev(3, 1),
            ev(1_500_000, 1),
            ev(u64::MAX, 0),
        ]
    );
    // 10 lines: 5 imported, 1 header, 2 comments, 1 blank, 1 unmapped (detector 7).
    assert_eq!(row(&text, "imported"), 5);
    assert_eq!(row(&text, "header"), 1);
    assert_eq!(row(&text, "comment"), 2);
    assert_eq!(row(&text, "blank"), 1);
    assert_eq!(row(&text, "dropped: channel not in map"), 1);
    assert!(text.contains("10 lines read"), "{text}");
}

#[test]
fn text_ticks_without_header_round_to_the_capture_tick() {
    let d = tmp("ticks");
    let input = d.join("export.csv");
    let out = d.join("export.swcap");
    std::fs::write(&input, "3, 10.5\n0, 7.49\n9, 1\n").unwrap();
    let opts = "--no-header --time-column 2 --channel-column 1 --time-unit ps --tick-ps 5 \
                --max-channel 3 --counter-bits 32";
    let text = ok(&import("text", &input, &out, opts));
    let (header, events) = capture::read_all(&out).unwrap();
    assert_eq!(
        (
            header.counter_bits,
            header.resolution_ps,
            header.channel_count
        ),
        (32, 5, 4)
    );
    // 10.5 ps / 5 ps = 2.1 -> 2 ticks; 7.49 / 5 = 1.498 -> 1 tick (worked by hand).
    assert_eq!(events, vec![ev(2, 3), ev(1, 0)]);
    assert_eq!(row(&text, "dropped: channel out of range"), 1);
}

#[test]
fn bad_text_line_names_file_line_and_field() {
    let d = tmp("badtext");
    let input = d.join("bad.txt");
    let out = d.join("bad.swcap");
    std::fs::write(&input, "time_ps,ch\n10,0\n# fine\n12.3x,1\n").unwrap();
    let opts = "--time-column time_ps --channel-column ch --max-channel 1";
    let err = fails(&import("text", &input, &out, opts));
    assert!(err.contains("bad.txt: line 4, field 'time_ps'"), "{err}");
    assert!(err.contains("12.3x"), "{err}");
    assert!(!out.exists(), "a failed import leaves no capture behind");

    std::fs::write(&input, "time_ps,ch\n10,zero\n").unwrap();
    let err = fails(&import("text", &input, &out, opts));
    assert!(err.contains("line 2, field 'ch'"), "{err}");
}

/// The test's record layout (invented): 32-bit little-endian words with
/// time in bits 0..20, channel in bits 20..24, wrap count in bits 24..30, kind in bits 30..32
/// (1 = event, 2 = rollover, 0 = a status word the import drops).
fn word(kind: u32, count_or_channel: u32, time: u32) -> [u8; 4] {
    let w = match kind {
        2 => (2 << 30) | (count_or_channel << 24),
        k => (k << 30) | (count_or_channel << 20) | time,
    };
    w.to_le_bytes()
}

const LAYOUT: &str = "--record-bytes 4 --endian little --time 0:20 --channel 20:4 --kind 30:2 \
                      --event-kind 1 --rollover-kind 2 --rollover-count 24:6 --tick-ps 8";

#[test]
fn binary_rollover_records_widen_the_counter() {
    let d = tmp("binary");
    let input = d.join("export.bin");
    let out = d.join("export.swcap");
    let records = [
        word(1, 0, 0xF_FFFF),
        word(2, 1, 0), // one wrap of the 20-bit time field
        word(1, 3, 5),
        word(0, 0, 0), // unknown kind: dropped
        word(2, 3, 0), // three wraps at once: 4 in total
        word(1, 2, 0x1_0000),
        word(1, 9, 1), // channel 9 above --max-channel 3: dropped
    ];
    std::fs::write(&input, records.concat()).unwrap();
    let opts = format!("{LAYOUT} --max-channel 3");
    let text = ok(&import("binary", &input, &out, &opts));
    let (header, events) = capture::read_all(&out).unwrap();
    assert_eq!(
        (
            header.counter_bits,
            header.resolution_ps,
            header.channel_count
        ),
        (64, 8, 4)
    );
    // After R wraps of a W-bit time field the counter is (R << W) | time (common practice for
    // rollover records; the rule of slotwise::words).
    assert_eq!(
        events,
        vec![
            ev(0xF_FFFF, 0),
            ev((1 << 20) | 5, 3),
            ev((4 << 20) | 0x1_0000, 2)
        ]
    );
    assert!(text.contains("7 records read"), "{text}");
    assert_eq!(row(&text, "imported"), 3);
    assert_eq!(row(&text, "rollover"), 2);
    assert_eq!(row(&text, "dropped: unknown kind"), 1);
    assert_eq!(row(&text, "dropped: channel above max"), 1);
    // The core's ingest counters: the two dropped records are malformed words; no gap.
    assert_eq!(
        ingest_line(&text),
        "ingest: overrun_words 0, fifo_full_flags 0, rollover_gaps 0, malformed_words 2, blocks 1"
    );

    // A 32-bit capture stores the same counters modulo 2^32.
    let opts = format!("{LAYOUT} --counter-bits 32");
    ok(&import("binary", &input, &out, &opts));
    let (header, events) = capture::read_all(&out).unwrap();
    assert_eq!((header.counter_bits, header.channel_count), (32, 16));
    assert_eq!(
        events.len(),
        4,
        "channel 9 fits the 4-bit field's default maximum"
    );
}

/// The import report's `ingest:` line.
fn ingest_line(summary: &str) -> &str {
    summary
        .lines()
        .find(|l| l.starts_with("ingest:"))
        .unwrap_or_else(|| panic!("no ingest line in\n{summary}"))
}

#[test]
fn binary_lost_rollover_record_is_counted_as_a_gap() {
    let d = tmp("gap");
    let input = d.join("gap.bin");
    let out = d.join("gap.swcap");
    // The 20-bit time falls from 0xFFFFF to 5 with no rollover record between: more than half
    // the field's range (2^19), so a rollover record was lost (half-range rule, common practice).
    let records = [word(1, 0, 0xF_FFFF), word(1, 1, 5), word(1, 1, 6)];
    std::fs::write(&input, records.concat()).unwrap();
    let text = ok(&import("binary", &input, &out, LAYOUT));
    assert_eq!(row(&text, "imported"), 3);
    assert!(
        ingest_line(&text).contains("rollover_gaps 1, malformed_words 0"),
        "{text}"
    );
    // The events are imported unchanged: the counter flags the gap, it does not correct it.
    let (_, events) = capture::read_all(&out).unwrap();
    assert_eq!(events, vec![ev(0xF_FFFF, 0), ev(5, 1), ev(6, 1)]);
}

#[test]
fn binary_channels_go_through_the_channel_map() {
    let d = tmp("binarymap");
    let input = d.join("export.bin");
    let out = d.join("export.swcap");
    // Detector inputs 1, 2, 5, 7 become channels 0..=3; input 3 is not in the map.
    let records = [
        word(1, 1, 10),
        word(1, 2, 20),
        word(1, 3, 30),
        word(1, 5, 40),
        word(1, 7, 50),
    ];
    std::fs::write(&input, records.concat()).unwrap();
    let opts = format!("{LAYOUT} --channel-map 1=0,2=1,5=2,7=3");
    let text = ok(&import("binary", &input, &out, &opts));
    let (header, events) = capture::read_all(&out).unwrap();
    assert_eq!(header.channel_count, 4);
    assert_eq!(events, vec![ev(10, 0), ev(20, 1), ev(40, 2), ev(50, 3)]);
    assert_eq!(row(&text, "imported"), 4);
    assert_eq!(row(&text, "dropped: channel not in map"), 1);
}

#[test]
fn truncated_binary_reports_the_partial_record_offset() {
    let d = tmp("truncated");
    let input = d.join("cut.bin");
    let out = d.join("cut.swcap");
    let mut bytes = [word(1, 0, 1), word(2, 1, 0), word(1, 1, 2)].concat();
    bytes.extend_from_slice(&[0xAB, 0xCD]);
    std::fs::write(&input, &bytes).unwrap();
    let err = fails(&import("binary", &input, &out, LAYOUT));
    assert!(err.contains("cut.bin: record 3"), "{err}");
    assert!(err.contains("byte offset 12: 2 of 4 bytes"), "{err}");
    assert!(!out.exists(), "a failed import leaves no capture behind");
}

#[test]
fn binary_without_rollovers_needs_a_wide_enough_time_field() {
    let d = tmp("norollover");
    let input = d.join("plain.bin");
    let out = d.join("plain.swcap");
    std::fs::write(&input, [0u8; 16]).unwrap();
    let plain = "--record-bytes 8 --endian big --channel 56:8 --tick-ps 1";
    let err = fails(&import(
        "binary",
        &input,
        &out,
        &format!("{plain} --time 0:24"),
    ));
    assert!(err.contains("--kind"), "{err}");
    let words: Vec<u8> = [(2u64 << 56) | 0xFF_FFFF_FFFF, 7u64]
        .iter()
        .flat_map(|w| w.to_be_bytes())
        .collect();
    std::fs::write(&input, words).unwrap();
    let opts = format!("{plain} --time 0:40 --max-channel 2");
    let text = ok(&import("binary", &input, &out, &opts));
    // Without rollover records the counter wraps by design: no gap is counted.
    assert!(ingest_line(&text).contains("rollover_gaps 0"), "{text}");
    let (header, events) = capture::read_all(&out).unwrap();
    assert_eq!((header.counter_bits, header.channel_count), (40, 3));
    assert_eq!(events, vec![ev(0xFF_FFFF_FFFF, 2), ev(7, 0)]);
}

#[test]
fn every_line_and_record_ends_in_one_summary_row() {
    use slotwise::words::{BitField, Endian, KindField, WordLayout};
    use slotwise_sim::import::{BinaryImport, CaptureTdc, Column, Delimiter, TextImport, TimeUnit};
    use std::io::Cursor;

    let text = "# c\nt,c\n1,0\n\n2,9\n3,-1\n# end\n";
    let import = TextImport {
        delimiter: Delimiter::Char(','),
        header: true,
        time: Column::Name("t".into()),
        channel: Column::Number(2),
        unit: TimeUnit::Ps,
        channel_map: None,
        comment: "#".into(),
        tdc: CaptureTdc {
            counter_bits: 64,
            tick_ps: 1,
            max_channel: 1,
        },
    };
    let sink = Cursor::new(Vec::new());
    let (sum, _) = import
        .run(text.as_bytes(), "mem.txt", sink, "mem.swcap", |_| {})
        .unwrap();
    assert_eq!((sum.total, sum.imported), (7, 1));
    assert_eq!(sum.row("channel out of range"), 2);
    assert_eq!(sum.settled(), sum.total);

    let layout = WordLayout {
        record_bytes: 4,
        endian: Endian::Little,
        time: BitField::new(0, 20),
        channel: BitField::new(20, 4),
        kind: Some(KindField {
            field: BitField::new(30, 2),
            event: 1,
            rollover: 2,
            rollover_count: BitField::new(24, 6),
        }),
        max_channel: 3,
    };
    let bytes = [word(1, 0, 1), word(2, 1, 0), word(0, 0, 0), word(1, 9, 0)].concat();
    let import = BinaryImport::new(layout, None, 8).unwrap();
    let sink = Cursor::new(Vec::new());
    let (sum, _) = import
        .run(&bytes[..], "mem.bin", sink, "mem.swcap", |_| {})
        .unwrap();
    assert_eq!((sum.total, sum.imported, sum.row("rollover")), (4, 1, 1));
    assert_eq!(sum.settled(), sum.total);
}

fn tmp(name: &str) -> std::path::PathBuf {
    tmp_in("import", name)
}
