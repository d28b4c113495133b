//! `slotwise bench import`: throughput of `slotwise import text` and `slotwise import binary`.
//!
//! An importer is only useful if converting an export costs less than recording it, so its speed
//! is measured here against two floors on the same bytes: the read floor (the least any importer
//! must do: read the input in [`READ_BLOCK_BYTES`] blocks and look at every byte or word once)
//! and the capture writer alone (the same events pushed into [`CaptureWriter`], which every
//! import ends in). The importers run exactly as the command line runs them
//! ([`TextImport::run`], [`BinaryImport::run`]); only the file is replaced by memory: the input is
//! a byte slice, the capture goes to a `Cursor<Vec<u8>>`.
//!
//! The inputs are generated deterministically: a text export of `t_ns;detector` lines (three
//! decimal places, about 1e6 detections per second of link time, four detectors mapped to
//! channels 0..=3, one header line) and 32-bit little-endian records with a 22-bit time field, a
//! 4-bit channel field, a 2-bit kind field and a rollover record whenever the time field wraps.
//! Every figure is the best of `reps` runs (the least disturbed by other work on the machine).
//! The capture each importer writes must be byte for byte the one the writer alone writes from
//! the generated events; the report says whether it is.

use crate::capture::{CaptureHeader, CaptureWriter};
use crate::import::{
    BinaryImport, CaptureTdc, ChannelMap, Column, Delimiter, TextImport, TimeUnit, READ_BLOCK_BYTES,
};
use crate::sim::rng::Stream;
use serde::Serialize;
use slotwise::words::{BitField, Endian, KindField, WordLayout};
use slotwise::TdcEvent;
use std::error::Error;
use std::fmt;
use std::hint::black_box;
use std::io::{BufRead, Cursor, Read, Write};
use std::time::Instant;

type AnyErr = Box<dyn Error>;

/// Text import target: lines per second on one core.
pub const TEXT_TARGET_LINES_PER_S: f64 = 20e6;
/// Binary import target: at most this many times the read floor's time per record
/// ("memory speed").
pub const BINARY_TARGET_X_FLOOR: f64 = 2.0;

/// Tick of the binary records, in ps.
const BINARY_TICK_PS: u32 = 8;
/// Width of the binary records' time field, in bits.
const BINARY_TIME_BITS: u8 = 22;
/// Kind values of the binary records.
const KIND_EVENT: u32 = 1;
const KIND_ROLLOVER: u32 = 2;

/// Options of `slotwise bench import`.
#[derive(clap::Args, Debug, Clone, Default)]
pub struct BenchImportArgs {
    /// Print the report as JSON instead of tables.
    #[arg(long)]
    pub json: bool,
    /// Smaller inputs and fewer repetitions (well under a second instead of several).
    #[arg(long)]
    pub quick: bool,
    /// Timed repetitions of every figure; the best is reported [default: 5; 3 with --quick].
    #[arg(long)]
    pub reps: Option<usize>,
}

/// One timed figure: the best of the repetitions, per line or record.
#[derive(Clone, Copy, Debug, Serialize, PartialEq)]
pub struct Rate {
    /// Nanoseconds per line or record.
    pub ns_per_item: f64,
    /// Millions of lines or records per second.
    pub m_items_per_s: f64,
    /// Input megabytes (10^6 bytes) per second.
    pub mb_per_s: f64,
}

impl Rate {
    fn of(seconds: f64, items: usize, bytes: usize) -> Self {
        let s = seconds.max(1e-12);
        Self {
            ns_per_item: s * 1e9 / items.max(1) as f64,
            m_items_per_s: items as f64 / s / 1e6,
            mb_per_s: bytes as f64 / s / 1e6,
        }
    }
}

/// One input kind's figures.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct ImportRow {
    /// `text` or `binary`.
    pub input: &'static str,
    /// `line` or `record`: what the rates count.
    pub unit: &'static str,
    /// Lines or records in the input.
    pub items: usize,
    /// Events the import writes to the capture.
    pub events: usize,
    /// Input size, bytes.
    pub input_bytes: usize,
    /// The importer, as the command line runs it.
    pub import: Rate,
    /// The read floor: what it does is in `floor_method`.
    pub read_floor: Rate,
    /// How the read floor reads its input.
    pub floor_method: &'static str,
    /// The capture writer alone, fed the same events (its rate is per input line or record).
    pub writer_alone: Rate,
    /// Import time over read-floor time.
    pub import_x_floor: f64,
    /// Share of the import's time the capture writer alone takes.
    pub writer_share: f64,
    /// The target, in words.
    pub target: String,
    /// Whether the import meets it.
    pub target_met: bool,
    /// Whether the imported capture equals, byte for byte, the writer's from the generated events.
    pub capture_identical: bool,
}

/// The whole report.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct ImportBenchReport {
    /// Repetitions per figure (the best is kept).
    pub reps: usize,
    /// Whether --quick was given.
    pub quick: bool,
    /// The machine's CPU model (from /proc/cpuinfo, when readable).
    pub cpu: String,
    /// Text, then binary.
    pub rows: Vec<ImportRow>,
    /// Wall time of the whole benchmark, s.
    pub wall_s: f64,
}

/// Gap to the next detection: uniform 1..=2_000_000 ps, a mean of 1 µs (1e6 per second).
fn gap_ps(rng: &mut Stream) -> u64 {
    1 + rng.next_u64() % 2_000_000
}

/// A text export of `lines` lines (one header, then `t_ns;detector`) and the events it holds.
pub fn text_input(lines: usize) -> (Vec<u8>, Vec<TdcEvent>) {
    let mut rng = Stream::from_state(0x5107_0001);
    let mut text = Vec::with_capacity(lines * 20);
    let mut events = Vec::with_capacity(lines);
    text.extend_from_slice(b"t_ns;detector\n");
    let mut t_ps = 0u64;
    for _ in 1..lines {
        t_ps += gap_ps(&mut rng);
        let detector = 1 + (rng.next_u64() % 4) as u8;
        let _ = writeln!(text, "{}.{:03};{detector}", t_ps / 1000, t_ps % 1000);
        events.push(TdcEvent {
            count: t_ps,
            channel: detector - 1,
        });
    }
    (text, events)
}

/// The text importer of the benchmark: `--delimiter ';' --time-column t_ns --channel-column
/// detector --time-unit ns --channel-map 1=0,2=1,3=2,4=3`, 1 ps ticks, 64-bit counter.
pub fn text_import() -> TextImport {
    TextImport {
        delimiter: Delimiter::Char(';'),
        header: true,
        time: Column::Name("t_ns".into()),
        channel: Column::Name("detector".into()),
        unit: TimeUnit::Ns,
        channel_map: Some(ChannelMap(vec![(1, 0), (2, 1), (3, 2), (4, 3)])),
        comment: "#".into(),
        tdc: CaptureTdc {
            counter_bits: 64,
            tick_ps: 1,
            max_channel: 3,
        },
    }
}

/// `records` 32-bit little-endian records (events and rollovers) and the events they hold.
pub fn binary_input(records: usize) -> (Vec<u8>, Vec<TdcEvent>) {
    let mut rng = Stream::from_state(0x5107_0002);
    let mut bytes = Vec::with_capacity(records * 4);
    let mut events = Vec::with_capacity(records);
    let mut t_ps = 0u64;
    let mut wraps = 0u64;
    let mut n = 0;
    let time_mask = (1u64 << BINARY_TIME_BITS) - 1;
    while n < records {
        t_ps += gap_ps(&mut rng);
        let ticks = t_ps / u64::from(BINARY_TICK_PS);
        let channel = (rng.next_u64() % 4) as u8;
        while wraps < ticks >> BINARY_TIME_BITS && n < records {
            bytes.extend_from_slice(&(KIND_ROLLOVER << 30).to_le_bytes());
            wraps += 1;
            n += 1;
        }
        if n == records {
            break;
        }
        let word = (KIND_EVENT << 30) | (u32::from(channel) << 22) | (ticks & time_mask) as u32;
        bytes.extend_from_slice(&word.to_le_bytes());
        events.push(TdcEvent {
            count: ticks,
            channel,
        });
        n += 1;
    }
    (bytes, events)
}

/// The binary importer of the benchmark: `--record-bytes 4 --endian little --time 0:22
/// --channel 22:4 --kind 30:2 --event-kind 1 --rollover-kind 2 --max-channel 3 --tick-ps 8`.
pub fn binary_import() -> Result<BinaryImport, AnyErr> {
    let layout = WordLayout {
        record_bytes: 4,
        endian: Endian::Little,
        time: BitField::new(0, BINARY_TIME_BITS),
        channel: BitField::new(22, 4),
        kind: Some(KindField {
            field: BitField::new(30, 2),
            event: KIND_EVENT as u8,
            rollover: KIND_ROLLOVER as u8,
            rollover_count: BitField::new(0, 0),
        }),
        max_channel: 3,
    };
    Ok(BinaryImport::new(layout, None, BINARY_TICK_PS)?)
}

/// Room for the capture, so that no run measures the output's reallocation: a varint step and a
/// channel byte per event stay well under 6 bytes at these rates.
const CAPTURE_BYTES_PER_EVENT: usize = 6;

/// The best (shortest) of `reps` runs of `f` (at least one), in seconds, and the last result.
fn best_of<T>(reps: usize, mut f: impl FnMut() -> T) -> (f64, T) {
    let mut timed = || {
        let t0 = Instant::now();
        let out = black_box(f());
        (t0.elapsed().as_secs_f64(), out)
    };
    let (mut best, mut last) = timed();
    for _ in 1..reps {
        let (s, out) = timed();
        best = best.min(s);
        last = out;
    }
    (best, last)
}

/// Text read floor: block reads through [`BufRead::fill_buf`], counting `\n` bytes by plain
/// iteration (no line is split out or parsed).
fn text_floor(input: &[u8]) -> usize {
    let mut r = std::io::BufReader::with_capacity(READ_BLOCK_BYTES, input);
    let mut lines = 0;
    loop {
        let n = match r.fill_buf() {
            Ok([]) | Err(_) => break,
            Ok(buf) => {
                lines += buf.iter().filter(|&&b| b == b'\n').count();
                buf.len()
            }
        };
        r.consume(n);
    }
    lines
}

/// Binary read floor: block reads of [`READ_BLOCK_BYTES`], summing the little-endian words.
fn binary_floor(mut input: &[u8]) -> u32 {
    let mut buf = vec![0u8; READ_BLOCK_BYTES];
    let mut sum = 0u32;
    while let Ok(n @ 1..) = input.read(&mut buf) {
        for w in buf.get(..n).unwrap_or_default().chunks_exact(4) {
            sum = sum.wrapping_add(u32::from_le_bytes([w[0], w[1], w[2], w[3]]));
        }
    }
    sum
}

/// The capture of `events` written by the capture writer alone, as the importers write it.
fn write_alone(tdc: &CaptureTdc, events: &[TdcEvent], capacity: usize) -> Result<Vec<u8>, AnyErr> {
    let header: CaptureHeader = tdc.header()?;
    let mut w = CaptureWriter::new(Cursor::new(Vec::with_capacity(capacity)), header)?;
    w.push_all(events)?;
    Ok(w.finish_seek()?.into_inner())
}

fn row(
    input: &'static str,
    unit: &'static str,
    (items, bytes, events): (usize, usize, usize),
    (import_s, floor_s, writer_s): (f64, f64, f64),
    floor_method: &'static str,
    capture_identical: bool,
) -> ImportRow {
    let import = Rate::of(import_s, items, bytes);
    let x_floor = import_s / floor_s.max(1e-12);
    let (target, target_met) = match input {
        "text" => (
            format!(
                "≥ {:.0} M lines/s on one core",
                TEXT_TARGET_LINES_PER_S / 1e6
            ),
            import.m_items_per_s * 1e6 >= TEXT_TARGET_LINES_PER_S,
        ),
        _ => (
            format!("memory speed: ≤ {BINARY_TARGET_X_FLOOR:.0}× the read floor's time"),
            x_floor <= BINARY_TARGET_X_FLOOR,
        ),
    };
    ImportRow {
        input,
        unit,
        items,
        events,
        input_bytes: bytes,
        import,
        read_floor: Rate::of(floor_s, items, bytes),
        floor_method,
        writer_alone: Rate::of(writer_s, items, bytes),
        import_x_floor: x_floor,
        writer_share: writer_s / import_s.max(1e-12),
        target,
        target_met,
        capture_identical,
    }
}

fn text_row(lines: usize, reps: usize) -> Result<ImportRow, AnyErr> {
    let (input, events) = text_input(lines);
    let imp = text_import();
    let cap = events.len() * CAPTURE_BYTES_PER_EVENT + 4096;
    let (import_s, out) = best_of(reps, || {
        imp.run(
            input.as_slice(),
            "bench.txt",
            Cursor::new(Vec::with_capacity(cap)),
            "bench.swcap",
            |_| {},
        )
    });
    let (summary, out) = out?;
    if summary.imported != events.len() as u64 || summary.total != lines as u64 {
        return Err(format!("text bench: unexpected import summary\n{summary}").into());
    }
    let (floor_s, counted) = best_of(reps, || text_floor(&input));
    if counted != lines {
        return Err(format!("text bench: read floor counted {counted} lines, not {lines}").into());
    }
    let (writer_s, alone) = best_of(reps, || write_alone(&imp.tdc, &events, cap));
    let identical = alone? == out.into_inner();
    Ok(row(
        "text",
        "line",
        (lines, input.len(), events.len()),
        (import_s, floor_s, writer_s),
        "BufReader::fill_buf in 64 KiB blocks, count '\\n' bytes by plain iteration",
        identical,
    ))
}

fn binary_row(records: usize, reps: usize) -> Result<ImportRow, AnyErr> {
    let (input, events) = binary_input(records);
    let imp = binary_import()?;
    let cap = events.len() * CAPTURE_BYTES_PER_EVENT + 4096;
    let (import_s, out) = best_of(reps, || {
        imp.run(
            input.as_slice(),
            "bench.bin",
            Cursor::new(Vec::with_capacity(cap)),
            "bench.swcap",
            |_| {},
        )
    });
    let (summary, out) = out?;
    if summary.imported != events.len() as u64 || summary.total != records as u64 {
        return Err(format!("binary bench: unexpected import summary\n{summary}").into());
    }
    let (floor_s, _) = best_of(reps, || binary_floor(&input));
    let (writer_s, alone) = best_of(reps, || write_alone(imp.tdc(), &events, cap));
    let identical = alone? == out.into_inner();
    Ok(row(
        "binary",
        "record",
        (records, input.len(), events.len()),
        (import_s, floor_s, writer_s),
        "Read::read in 64 KiB blocks, sum the 32-bit little-endian words",
        identical,
    ))
}

/// The machine's CPU model, from /proc/cpuinfo.
fn cpu_model() -> String {
    std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, m)| m.trim().to_owned())
        })
        .unwrap_or_else(|| "unknown".into())
}

/// Run the benchmark.
pub fn run(args: &BenchImportArgs) -> Result<ImportBenchReport, AnyErr> {
    let started = Instant::now();
    let reps = args.reps.unwrap_or(if args.quick { 3 } else { 5 }).max(1);
    let (lines, records) = match args.quick {
        true => (200_000, 1_000_000),
        false => (4_000_000, 16_000_000),
    };
    let rows = vec![text_row(lines, reps)?, binary_row(records, reps)?];
    Ok(ImportBenchReport {
        reps,
        quick: args.quick,
        cpu: cpu_model(),
        rows,
        wall_s: started.elapsed().as_secs_f64(),
    })
}

impl fmt::Display for ImportBenchReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "Import throughput, one core, in memory (best of {} runs){}; {}",
            self.reps,
            if self.quick { " (quick)" } else { "" },
            self.cpu
        )?;
        writeln!(
            f,
            "{:<7} {:<20} {:>10} {:>12} {:>9}",
            "input", "figure", "ns/item", "M items/s", "MB/s"
        )?;
        for r in &self.rows {
            for (name, rate) in [
                ("import", &r.import),
                ("read floor", &r.read_floor),
                ("capture writer alone", &r.writer_alone),
            ] {
                writeln!(
                    f,
                    "{:<7} {:<20} {:>10.2} {:>12.1} {:>9.0}",
                    r.input, name, rate.ns_per_item, rate.m_items_per_s, rate.mb_per_s
                )?;
            }
        }
        writeln!(f)?;
        for r in &self.rows {
            writeln!(
                f,
                "{}: {} {}s ({} events, {:.1} MB); import {:.1}× the read floor, the writer alone \
                 {:.0} % of the import; target {}: {}; capture identical to the writer's: {}",
                r.input,
                r.items,
                r.unit,
                r.events,
                r.input_bytes as f64 / 1e6,
                r.import_x_floor,
                r.writer_share * 100.0,
                r.target,
                if r.target_met { "met" } else { "MISSED" },
                if r.capture_identical { "yes" } else { "NO" },
            )?;
            writeln!(f, "  read floor: {}", r.floor_method)?;
        }
        writeln!(
            f,
            "items are input lines (text) or records (binary), the rollover records included; \
             read floor and writer alone are timed on the same input and events\nwall time {:.1} s",
            self.wall_s
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn generated_binary_records_decode_to_the_generated_events() {
        let (bytes, events) = binary_input(5_000);
        assert_eq!(bytes.len(), 5_000 * 4);
        let rollovers = 5_000 - events.len();
        // A 22-bit field of 8 ps ticks wraps every 2^22 * 8 ps = 33.55 µs; at a mean gap of 1 µs
        // that is about one rollover per 33 events (worked by hand).
        assert!((100..200).contains(&rollovers), "{rollovers}");
        let imp = binary_import().unwrap();
        let (summary, out) = imp
            .run(bytes.as_slice(), "b", Cursor::new(Vec::new()), "o", |_| {})
            .unwrap();
        assert_eq!(summary.imported, events.len() as u64);
        assert_eq!(summary.row("rollover"), rollovers as u64);
        let alone = write_alone(imp.tdc(), &events, 0).unwrap();
        assert_eq!(alone, out.into_inner());
    }

    #[test]
    fn generated_text_imports_to_the_generated_events() {
        let (text, events) = text_input(3_000);
        assert!(text.starts_with(b"t_ns;detector\n1"));
        let imp = text_import();
        let (summary, out) = imp
            .run(text.as_slice(), "t", Cursor::new(Vec::new()), "o", |_| {})
            .unwrap();
        assert_eq!((summary.total, summary.imported), (3_000, 2_999));
        assert_eq!(text_floor(&text), 3_000);
        let alone = write_alone(&imp.tdc, &events, 0).unwrap();
        assert_eq!(alone, out.into_inner());
    }
}
