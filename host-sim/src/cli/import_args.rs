//! `slotwise import`: options of the two input kinds and the command that runs them.

use std::io::Write;
use std::path::PathBuf;

use clap::{Args, Subcommand, ValueEnum};
use slotwise::words::{BitField, Endian, KindField, WordLayout};

use crate::import::{
    BinaryImport, CaptureTdc, ChannelMap, Column, Delimiter, TextImport, TimeUnit,
};

/// Long help of `slotwise import`.
pub const LONG_ABOUT: &str = "\
Convert a time tagger's export into a capture (docs/capture-format.md, \"Importing an export\"),
so that `replay` and `inspect` read it like any other run. Two input kinds:

  binary  fixed-width records of 4 or 8 bytes; you describe the bit fields (time, channel, and
          optionally a kind field telling events from rollover records) and the core's record
          decoder widens the counter at every rollover record.
  text    delimited lines with a time column and a channel column; decimal times in ps, ns, us,
          s or ticks are converted exactly (integer arithmetic) and rounded to the nearest tick.

Every record or line is counted: imported, header/comment/blank/rollover, or dropped with the
reason; the summary is printed at the end. Errors name the file, the line (text) or record and
byte offset (binary), and the field, and leave no output file behind.

Examples:

  # 32-bit little-endian words: time in bits 0..20, channel in 20..24, kind in 30..32
  # (1 = event, 2 = rollover), a rollover record counts the wraps in bits 24..30; 1 tick = 8 ps
  slotwise import binary run.bin -o run.swcap --record-bytes 4 --endian little \\
      --time 0:20 --channel 20:4 --kind 30:2 --event-kind 1 --rollover-kind 2 \\
      --rollover-count 24:6 --max-channel 3 --tick-ps 8

  # \"t_ns;detector\" lines with fractional nanoseconds; detectors 1, 2, 5 become channels 0, 1, 2
  slotwise import text run.txt -o run.swcap --delimiter ';' --time-column t_ns \\
      --channel-column detector --time-unit ns --channel-map 1=0,2=1,5=2

`slotwise import binary --help` and `slotwise import text --help` explain every option.";

/// `slotwise import`: which kind of export.
#[derive(Args, Debug)]
#[command(
    about = "Convert a time tagger's export (binary records or text lines) into a capture.",
    long_about = LONG_ABOUT
)]
pub struct ImportArgs {
    /// The input kind.
    #[command(subcommand)]
    pub kind: ImportKind,
}

/// The two kinds of export.
#[derive(Subcommand, Debug)]
pub enum ImportKind {
    /// Fixed-width binary records (4 or 8 bytes) with time, channel and optional kind bit fields.
    #[command(long_about = "\
Fixed-width binary records (4 or 8 bytes), decoded by the core's record decoder. Each record is
read as one unsigned integer in the given byte order; bit 0 is its least significant bit. A field
OFFSET:WIDTH is bits OFFSET..OFFSET+WIDTH. Without --kind every record is an event and the counter
wraps at the time field's width (which must then be 32..=64 bits, the capture's counter width).
With --kind, rollover records widen the counter: after R wraps an event's counter is
(R << time width) | time, stored modulo 2^--counter-bits (default 64).

Example (32-bit words, kind 2 = rollover carrying its wrap count in bits 24..30):
  slotwise import binary run.bin -o run.swcap --record-bytes 4 --endian little \\
      --time 0:20 --channel 20:4 --kind 30:2 --event-kind 1 --rollover-kind 2 \\
      --rollover-count 24:6 --max-channel 3 --tick-ps 8

A file that is not a whole number of records stops with the byte offset of the partial record.")]
    Binary(BinaryArgs),
    /// Delimited text lines with a time column and a channel column.
    #[command(long_about = "\
Delimited text lines with a time column and a channel column. Columns are picked by their header
name or by number (from 1). Times are non-negative decimals (`12.345678`, `1.5e3`) in
--time-unit, converted to ticks of --tick-ps exactly and rounded to the nearest tick (halves up).
Channels are integers; --channel-map renames them (unmapped channels are dropped and counted),
otherwise a channel above --max-channel is dropped and counted.

Example (semicolon-separated, fractional ns, detectors 1, 2, 5 as channels 0, 1, 2):
  # t_ns;detector
  # 12.345678;1
  slotwise import text run.txt -o run.swcap --delimiter ';' --time-column t_ns \\
      --channel-column detector --time-unit ns --channel-map 1=0,2=1,5=2")]
    Text(TextArgs),
}

/// Byte order of a binary record.
#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum EndianArg {
    /// The first byte holds bits 0..8.
    Little,
    /// The first byte holds the top 8 bits.
    Big,
}

/// Options every import has: the output file.
#[derive(Args, Debug)]
pub struct OutputArgs {
    /// The capture to write.
    #[arg(short = 'o', long = "out", value_name = "OUT.swcap")]
    pub out: PathBuf,
}

/// `slotwise import binary`.
#[derive(Args, Debug)]
pub struct BinaryArgs {
    /// The export to read.
    pub input: PathBuf,
    #[command(flatten)]
    pub output: OutputArgs,
    /// Record size in bytes: 4 or 8.
    #[arg(long, value_name = "4|8")]
    pub record_bytes: u8,
    /// Byte order of a record.
    #[arg(long, value_enum, value_name = "little|big")]
    pub endian: EndianArg,
    /// The time field (narrow counter in ticks), width 1..=63 bits.
    #[arg(long, value_name = "OFFSET:WIDTH", value_parser = parse_field)]
    pub time: BitField,
    /// The channel field, width 0..=8 bits (0: every event on channel 0).
    #[arg(long, value_name = "OFFSET:WIDTH", value_parser = parse_field)]
    pub channel: BitField,
    /// The kind field, width 1..=8 bits; needs --event-kind and --rollover-kind.
    #[arg(long, value_name = "OFFSET:WIDTH", value_parser = parse_field,
          requires_all = ["event_kind", "rollover_kind"])]
    pub kind: Option<BitField>,
    /// Kind value of an event record.
    #[arg(long, value_name = "V", requires = "kind")]
    pub event_kind: Option<u8>,
    /// Kind value of a rollover record; records of any other kind are dropped and counted.
    #[arg(long, value_name = "V", requires = "kind")]
    pub rollover_kind: Option<u8>,
    /// Wraps a rollover record stands for, width 0..=32 (default: one wrap per record).
    #[arg(long, value_name = "OFFSET:WIDTH", value_parser = parse_field, requires = "kind")]
    pub rollover_count: Option<BitField>,
    /// Highest channel kept (events above it are dropped and counted); the capture holds
    /// channels 0..=N. Default: the largest the channel field holds, at most 254.
    #[arg(long, value_name = "N")]
    pub max_channel: Option<u8>,
    /// Decoded channels to capture channels, `IN=OUT,...` (e.g. `1=0,2=1,5=2`); events on
    /// other channels are dropped and counted, and the capture holds 0..=the highest OUT.
    #[arg(long, value_name = "MAP")]
    pub channel_map: Option<ChannelMap>,
    /// Length of one counter tick in picoseconds.
    #[arg(long, value_name = "T")]
    pub tick_ps: u32,
    /// The capture's counter width, 32..=64 bits. Default: 64 with --kind, else the time width.
    #[arg(long, value_name = "BITS")]
    pub counter_bits: Option<u8>,
}

/// `slotwise import text`.
#[derive(Args, Debug)]
pub struct TextArgs {
    /// The export to read.
    pub input: PathBuf,
    #[command(flatten)]
    pub output: OutputArgs,
    /// Field separator: one character, `tab`, or `whitespace` (any run of spaces and tabs).
    #[arg(long, default_value = ",", value_name = "C")]
    pub delimiter: Delimiter,
    /// The first line that is neither blank nor a comment names the columns (the default).
    #[arg(long, overrides_with = "no_header")]
    pub header: bool,
    /// There is no header line; give columns by number.
    #[arg(long, overrides_with = "header")]
    pub no_header: bool,
    /// The time column: a header name, or a number counted from 1.
    #[arg(long, value_name = "NAME|N")]
    pub time_column: Column,
    /// The channel column: a header name, or a number counted from 1.
    #[arg(long, value_name = "NAME|N")]
    pub channel_column: Column,
    /// Unit of the times; `ticks` means ticks of --tick-ps.
    #[arg(long, value_enum, default_value_t = TimeUnit::Ps)]
    pub time_unit: TimeUnit,
    /// Input channels to capture channels, `IN=OUT,...` (e.g. `1=0,2=1,5=2`); other input
    /// channels are dropped and counted.
    #[arg(long, value_name = "MAP")]
    pub channel_map: Option<ChannelMap>,
    /// Highest capture channel; the capture holds channels 0..=N. Default: the map's highest.
    #[arg(long, value_name = "N")]
    pub max_channel: Option<u8>,
    /// Lines starting with this text (after spaces) are comments; '' for none.
    #[arg(long, default_value = "#", value_name = "TEXT")]
    pub comment: String,
    /// Length of one tick of the capture's counter in picoseconds; times round to it.
    #[arg(long, default_value_t = 1, value_name = "T")]
    pub tick_ps: u32,
    /// The capture's counter width, 32..=64 bits; times are stored modulo 2^BITS ticks.
    #[arg(long, default_value_t = 64, value_name = "BITS")]
    pub counter_bits: u8,
}

fn parse_field(s: &str) -> Result<BitField, String> {
    let (o, w) = s
        .split_once(':')
        .ok_or_else(|| format!("expected OFFSET:WIDTH in bits, got {s:?}"))?;
    let num = |t: &str, what: &str| {
        t.trim()
            .parse::<u8>()
            .map_err(|_| format!("{what} {t:?} is not a number of bits 0..=255"))
    };
    Ok(BitField::new(num(o, "offset")?, num(w, "width")?))
}

fn binary_import(a: &BinaryArgs) -> Result<BinaryImport, crate::import::ImportError> {
    let endian = match a.endian {
        EndianArg::Little => Endian::Little,
        EndianArg::Big => Endian::Big,
    };
    let kind = a.kind.map(|field| KindField {
        field,
        event: a.event_kind.unwrap_or(0),
        rollover: a.rollover_kind.unwrap_or(0),
        rollover_count: a.rollover_count.unwrap_or(BitField::new(0, 0)),
    });
    let widest = (1u16 << a.channel.width.min(8)) - 1;
    let max_channel = a
        .max_channel
        .unwrap_or(widest.min(u16::from(crate::import::MAX_CAPTURE_CHANNEL)) as u8);
    let layout = WordLayout {
        record_bytes: a.record_bytes,
        endian,
        time: a.time,
        channel: a.channel,
        kind,
        max_channel,
    };
    let import = BinaryImport::new(layout, a.counter_bits, a.tick_ps)?;
    match &a.channel_map {
        Some(m) => import.with_channel_map(m),
        None => Ok(import),
    }
}

fn text_import(a: &TextArgs) -> Result<TextImport, crate::import::ImportError> {
    let max_channel = TextImport::max_channel(a.max_channel, a.channel_map.as_ref())?;
    Ok(TextImport {
        delimiter: a.delimiter,
        header: !a.no_header,
        time: a.time_column.clone(),
        channel: a.channel_column.clone(),
        unit: a.time_unit,
        channel_map: a.channel_map.clone(),
        comment: a.comment.clone(),
        tdc: CaptureTdc {
            counter_bits: a.counter_bits,
            tick_ps: a.tick_ps,
            max_channel,
        },
    })
}

/// Run `slotwise import`: convert, then print where every line or record went.
pub fn run(a: &ImportArgs) -> Result<(), super::AnyErr> {
    let (input, out) = match &a.kind {
        ImportKind::Binary(b) => (&b.input, &b.output.out),
        ImportKind::Text(t) => (&t.input, &t.output.out),
    };
    let size = std::fs::metadata(input).map(|m| m.len()).unwrap_or(0);
    let pb = super::progress(size, "importing");
    let tick = |n: u64| pb.set_position(n);
    let summary = match &a.kind {
        ImportKind::Binary(b) => binary_import(b)?.run_file(input, out, tick)?,
        ImportKind::Text(t) => text_import(t)?.run_file(input, out, tick)?,
    };
    pb.finish_and_clear();
    let mut o = super::stdout();
    write!(o, "{summary}")?;
    writeln!(o, "wrote {}", out.display())?;
    o.flush()?;
    Ok(())
}
