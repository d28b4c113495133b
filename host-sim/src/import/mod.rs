//! Import: a time tagger's export (fixed-width binary records or delimited text) becomes a capture.
//!
//! Captures from hardware other than our own board arrive in whatever form the time tagger writes.
//! Converting them once into the capture format (`docs/capture-format.md`, section "Importing an
//! export") lets `replay`, `inspect` and every test read them like any other run. Binary records
//! are decoded by the core's [`slotwise::words`] decoder, the same one a board runs on its FIFO, so
//! counter widening at rollover records (common practice for narrow TDC counters) happens exactly
//! once, in one place. Text times are decimal numbers converted to ticks in integer arithmetic and
//! rounded to the nearest tick, halves up, so no float rounding enters the counter.
//!
//! Both importers stream: the input is read in blocks (text lines are split in place, a line cut
//! by a block's end is carried over) and the capture is written block by block, so memory stays
//! constant whatever the input's size. Every input record or line ends in exactly one row of the
//! [`ImportSummary`]. `slotwise bench import` measures both against the read floor.
#![warn(missing_docs)]

mod binary;
pub mod checks;
mod decimal;
mod text;
mod text_fast;

use std::fmt;
use std::fs::File;
use std::io::{self, BufWriter, Seek, Write};
use std::path::Path;

pub use binary::BinaryImport;
pub use decimal::{parse_decimal, Decimal, DecimalError, TimeUnit};
pub use text::{ChannelMap, Column, Delimiter, TextImport};

use crate::capture::{CaptureHeader, CaptureWriter, FLAG_IMPORTED};
use slotwise::UnwrapConfig;

/// Input bytes read per block by the importers, in bytes.
pub const READ_BLOCK_BYTES: usize = 64 * 1024;
/// Events decoded per batch before they go to the capture writer, in events.
pub const EVENT_BATCH: usize = 4096;
/// Longest text line accepted, in bytes; bounds the importer's memory.
pub const MAX_LINE_BYTES: usize = 1 << 20;
/// Highest channel a capture can hold (its channel count is at most 255).
pub const MAX_CAPTURE_CHANNEL: u8 = 254;

/// What the written capture's header says about the TDC.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CaptureTdc {
    /// Counter width in bits (32..=64); counters are stored modulo 2^counter_bits.
    pub counter_bits: u8,
    /// Length of one counter tick, in ps.
    pub tick_ps: u32,
    /// Highest channel; the capture's channel count is one more.
    pub max_channel: u8,
}

impl CaptureTdc {
    /// Check the values against the capture format's limits.
    pub fn validate(&self) -> Result<UnwrapConfig, ImportError> {
        let tdc = UnwrapConfig::new(self.counter_bits, self.tick_ps).map_err(|e| {
            ImportError::Options(format!(
                "--counter-bits {} / --tick-ps {}: {e}",
                self.counter_bits, self.tick_ps
            ))
        })?;
        if self.max_channel > MAX_CAPTURE_CHANNEL {
            return Err(ImportError::Options(format!(
                "highest channel {} is above {MAX_CAPTURE_CHANNEL}, the most a capture holds",
                self.max_channel
            )));
        }
        Ok(tdc)
    }

    /// The header of the capture: this TDC, [`FLAG_IMPORTED`], no metadata.
    pub fn header(&self) -> Result<CaptureHeader, ImportError> {
        let tdc = self.validate()?;
        Ok(CaptureHeader::new(tdc, self.max_channel + 1).with_flags(FLAG_IMPORTED))
    }

    /// Mask of the capture's counter bits.
    pub fn counter_mask(&self) -> u64 {
        u64::MAX >> (64 - u32::from(self.counter_bits.clamp(1, 64)))
    }
}

/// Why an import stopped; the input or output file is named in every case.
#[derive(Debug)]
pub enum ImportError {
    /// The options do not describe a usable import.
    Options(String),
    /// A text line could not be read.
    Line {
        /// The input file's name.
        source: String,
        /// Line number, from 1.
        line: u64,
        /// The column (its header name, or `column N`) or `line` for the whole line.
        field: String,
        /// The offending text.
        text: String,
        /// What was wrong.
        reason: String,
    },
    /// A binary file ends inside a record (the decoder's `finish` error).
    PartialRecord {
        /// The input file's name.
        source: String,
        /// Index of the partial record, from 0.
        record: u64,
        /// The decoder's error, with the record's byte offset.
        error: slotwise::words::WordError,
    },
    /// Reading the input or writing the capture failed.
    Io {
        /// The file's name.
        file: String,
        /// The I/O error.
        error: io::Error,
    },
}

impl ImportError {
    fn io(file: &str, error: io::Error) -> Self {
        Self::Io {
            file: file.to_owned(),
            error,
        }
    }
}

impl fmt::Display for ImportError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Options(m) => f.write_str(m),
            Self::Line {
                source,
                line,
                field,
                text,
                reason,
            } => write!(
                f,
                "{source}: line {line}, field '{field}': {reason} (text \"{text}\")"
            ),
            Self::PartialRecord {
                source,
                record,
                error,
            } => write!(
                f,
                "{source}: record {record}, field 'record': {error} (the file is not a whole \
                 number of records)"
            ),
            Self::Io { file, error } => write!(f, "{file}: {error}"),
        }
    }
}

impl std::error::Error for ImportError {}

/// Where every input line or record went, and what was written.
#[derive(Clone, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct ImportSummary {
    /// The input file's name.
    pub source: String,
    /// `line` or `record`: what the input is counted in.
    pub unit: &'static str,
    /// Lines or records read.
    pub total: u64,
    /// Lines or records that became an event of the capture.
    pub imported: u64,
    /// Lines or records that carry no event by design (header, comment, blank, rollover), by kind.
    pub other: Vec<(&'static str, u64)>,
    /// Lines or records with an event that was dropped, by reason.
    pub dropped: Vec<(&'static str, u64)>,
    /// Data blocks written to the capture.
    pub blocks: u64,
    /// Header of the written capture.
    pub counter_bits: u8,
    /// Tick of the written capture, in ps.
    pub tick_ps: u32,
    /// Channel count of the written capture.
    pub channel_count: u8,
    /// The core's ingest counters for a binary import (`overrun_words`, `fifo_full_flags`,
    /// `rollover_gaps`, `malformed_words`, `blocks`), in that order; empty for text. They
    /// describe records already settled in the rows above (a malformed word is also a dropped
    /// row; a rollover gap is an imported event whose counter fell), so [`Self::settled`]
    /// leaves them out.
    pub ingest: Vec<(&'static str, u64)>,
}

impl ImportSummary {
    /// Sum of every row, in lines or records; equals [`Self::total`].
    pub fn settled(&self) -> u64 {
        let rows = self.other.iter().chain(&self.dropped).map(|(_, n)| *n);
        rows.fold(self.imported, u64::saturating_add)
    }

    /// Count in the `other` or `dropped` row called `name` (0 if there is none).
    pub fn row(&self, name: &str) -> u64 {
        let rows = self.other.iter().chain(&self.dropped);
        rows.filter(|(k, _)| *k == name).map(|(_, n)| *n).sum()
    }
}

impl fmt::Display for ImportSummary {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "{}: {} {}s read", self.source, self.total, self.unit)?;
        writeln!(f, "  {:<30} {:>12}", "imported", self.imported)?;
        for (k, n) in &self.other {
            writeln!(f, "  {k:<30} {n:>12}")?;
        }
        for (k, n) in &self.dropped {
            writeln!(f, "  {:<30} {n:>12}", format!("dropped: {k}"))?;
        }
        if !self.ingest.is_empty() {
            let rows: Vec<String> = self
                .ingest
                .iter()
                .map(|(k, n)| format!("{k} {n}"))
                .collect();
            writeln!(f, "ingest: {}", rows.join(", "))?;
        }
        writeln!(
            f,
            "capture: {} events in {} block(s), {}-bit counter at {} ps, {} channels",
            self.imported, self.blocks, self.counter_bits, self.tick_ps, self.channel_count
        )
    }
}

/// Create `out`, run `body` on a buffered writer into it, patch the block count; on any error
/// the half-written file is removed so no truncated capture is left behind.
/// Open `input` and create `out`, then run `body` on (input file, its name, output, its name);
/// the output is removed when `body` fails.
pub(crate) fn file_to_file<T>(
    input: &Path,
    out: &Path,
    body: impl FnOnce(File, &str, BufWriter<File>, &str) -> Result<(T, BufWriter<File>), ImportError>,
) -> Result<T, ImportError> {
    let name = input.display().to_string();
    let file = File::open(input).map_err(|e| ImportError::io(&name, e))?;
    let out_name = out.display().to_string();
    with_output(out, |w| body(file, &name, w, &out_name))
}

pub(crate) fn with_output<T>(
    out: &Path,
    body: impl FnOnce(BufWriter<File>) -> Result<(T, BufWriter<File>), ImportError>,
) -> Result<T, ImportError> {
    let name = out.display().to_string();
    let file = File::create(out).map_err(|e| ImportError::io(&name, e))?;
    let result = body(BufWriter::new(file)).and_then(|(t, w)| {
        w.into_inner()
            .map_err(|e| ImportError::io(&name, e.into_error()))?
            .sync_all()
            .map_err(|e| ImportError::io(&name, e))?;
        Ok(t)
    });
    if result.is_err() {
        let _ = std::fs::remove_file(out);
    }
    result
}

/// Start a capture on `w` for `tdc`.
pub(crate) fn open_capture<W: Write>(
    w: W,
    tdc: &CaptureTdc,
    out_name: &str,
) -> Result<CaptureWriter<W>, ImportError> {
    CaptureWriter::new(w, tdc.header()?).map_err(|e| ImportError::io(out_name, e))
}

/// Finish a capture: last block, end record, block count patched.
pub(crate) fn close_capture<W: Write + Seek>(
    w: CaptureWriter<W>,
    out_name: &str,
) -> Result<(u64, W), ImportError> {
    let blocks = w.blocks();
    let events = w.events();
    let block_events = u64::from(w.header().max_block_events);
    let sink = w.finish_seek().map_err(|e| ImportError::io(out_name, e))?;
    // The writer flushes a partial last block at finish; count it too.
    let blocks = blocks + u64::from(events > blocks * block_events);
    Ok((blocks, sink))
}
