//! A summary of a capture file without keeping its events: header, block and event statistics,
//! channel histogram, counter wraps and every damaged stretch.

use std::fmt;
use std::fs::File;
use std::path::Path;

use serde::Serialize;
use slotwise::{TdcEvent, Unwrapper};

use super::error::CaptureError;
use super::header::CaptureHeader;
use super::reader::{BlockOutcome, CaptureReader};

/// Damaged stretches listed in full in a report; later ones are only counted.
pub const MAX_LISTED_DAMAGE: usize = 16;

/// Smallest, mean and largest event count of the good blocks.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct EventsPerBlock {
    /// Fewest events in one block.
    pub min: u32,
    /// Mean events per block.
    pub mean: f64,
    /// Most events in one block.
    pub max: u32,
}

/// One damaged stretch as listed in a report.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Damage {
    /// Index of the first block lost.
    pub index: u64,
    /// Byte offset where the damage starts.
    pub offset: u64,
    /// Bytes skipped.
    pub bytes: u64,
    /// Block indices lost.
    pub blocks: u64,
    /// The fault found, as text naming offset and field.
    pub reason: String,
}

/// The one-word judgement of an [`InspectReport`], which `slotwise inspect` turns into its exit
/// status so that a script can tell a damaged capture from a good one.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Verdict {
    /// Every block verified and a verified end record closed the file.
    Good,
    /// The end record verified but blocks were lost, or the end checks failed.
    Damaged,
    /// No verified end record: the file was cut short or its end record is damaged, so how
    /// much is missing is not known (blocks may also have been lost before).
    Incomplete,
}

impl Verdict {
    /// The verdict's name as it appears in the report.
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Good => "good",
            Verdict::Damaged => "damaged",
            Verdict::Incomplete => "incomplete",
        }
    }

    /// `None` when good; otherwise what is wrong, for a one-line problem report.
    pub fn problem(self) -> Option<&'static str> {
        match self {
            Verdict::Good => None,
            Verdict::Damaged => Some("damaged"),
            Verdict::Incomplete => Some("incomplete (no verified end record)"),
        }
    }
}

/// What [`inspect`] found in a capture.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct InspectReport {
    /// File name as given.
    pub source: String,
    /// Size of the file in bytes.
    pub total_bytes: u64,
    /// The header as read.
    pub header: CaptureHeader,
    /// Header length in bytes.
    pub header_bytes: u64,
    /// Blocks whose CRC and contents verified.
    pub good_blocks: u64,
    /// Events in the good blocks.
    pub events: u64,
    /// Events per good block, if there was any.
    pub events_per_block: Option<EventsPerBlock>,
    /// Events per channel, indexed by channel (length = the header's channel count).
    pub channels: Vec<u64>,
    /// First event's raw counter value in ticks.
    pub first_count: Option<u64>,
    /// Last event's raw counter value in ticks.
    pub last_count: Option<u64>,
    /// Times the counter wrapped, as seen by the core's unwrapper.
    pub wraps: u64,
    /// Events the core's unwrapper refused (before the time base's start, or overflow).
    pub unwrap_errors: u64,
    /// Number of damaged stretches.
    pub damaged_stretches: u64,
    /// Block indices lost in damaged stretches.
    pub blocks_lost: u64,
    /// Bytes skipped over in damaged stretches.
    pub bytes_skipped: u64,
    /// The first [`MAX_LISTED_DAMAGE`] damaged stretches.
    pub damage: Vec<Damage>,
    /// Whether a verified end record closed the capture.
    pub end_record_ok: bool,
    /// A fault found at the end (header block count disagreeing, data after the end record).
    pub end_error: Option<String>,
    /// Good, damaged or incomplete, from the fields above.
    pub verdict: Verdict,
}

impl InspectReport {
    /// `None` for a good capture; otherwise one line saying why not, naming the file.
    pub fn problem(&self) -> Option<String> {
        let why = self.verdict.problem()?;
        Some(format!(
            "{}: capture {why}: {} damaged stretches, {} blocks lost",
            self.source, self.damaged_stretches, self.blocks_lost
        ))
    }

    /// The verdict the damage and end-record fields imply.
    fn judge(&self) -> Verdict {
        if !self.end_record_ok {
            Verdict::Incomplete
        } else if self.damaged_stretches > 0 || self.end_error.is_some() {
            Verdict::Damaged
        } else {
            Verdict::Good
        }
    }
}

/// Read a capture file with the skipping reader and summarise it. Only header faults and I/O
/// errors are returned as errors; block damage is listed in the report.
pub fn inspect(path: impl AsRef<Path>) -> Result<InspectReport, CaptureError> {
    let path = path.as_ref();
    let name = path.display().to_string();
    let file = File::open(path).map_err(|e| CaptureError::io(&name, 0, &e))?;
    let total_bytes = file
        .metadata()
        .map_err(|e| CaptureError::io(&name, 0, &e))?
        .len();
    let mut reader = CaptureReader::new(file, &name)?;
    let header = reader.header().clone();
    let mut unwrapper = header.unwrap_config().map(Unwrapper::new);
    let mut report = InspectReport {
        source: name,
        total_bytes,
        header_bytes: reader.header_len(),
        channels: vec![0; usize::from(header.channel_count)],
        header,
        good_blocks: 0,
        events: 0,
        events_per_block: None,
        first_count: None,
        last_count: None,
        wraps: 0,
        unwrap_errors: 0,
        damaged_stretches: 0,
        blocks_lost: 0,
        bytes_skipped: 0,
        damage: Vec::new(),
        end_record_ok: false,
        end_error: None,
        verdict: Verdict::Incomplete,
    };
    let mut newest_ticks: u64 = 0;
    let mut block: Vec<TdcEvent> = Vec::new();
    loop {
        match reader.next_block_skipping(&mut block) {
            Ok(Some(BlockOutcome::Block(info))) => {
                report.good_blocks += 1;
                report.events += u64::from(info.events);
                report.events_per_block = Some(match report.events_per_block.take() {
                    None => EventsPerBlock {
                        min: info.events,
                        mean: 0.0,
                        max: info.events,
                    },
                    Some(e) => EventsPerBlock {
                        min: e.min.min(info.events),
                        mean: 0.0,
                        max: e.max.max(info.events),
                    },
                });
                for &ev in &block {
                    if let Some(c) = report.channels.get_mut(usize::from(ev.channel)) {
                        *c += 1;
                    }
                    report.first_count.get_or_insert(ev.count);
                    report.last_count = Some(ev.count);
                    if let Some(u) = unwrapper.as_mut() {
                        match u.unwrap(ev) {
                            Ok(d) => {
                                let ticks = d.t_ps / u64::from(u.config().resolution_ps());
                                newest_ticks = newest_ticks.max(ticks);
                            }
                            Err(_) => report.unwrap_errors += 1,
                        }
                    }
                }
            }
            Ok(Some(BlockOutcome::Skipped(s))) => {
                report.damaged_stretches += 1;
                report.blocks_lost += s.blocks;
                report.bytes_skipped += s.bytes;
                if report.damage.len() < MAX_LISTED_DAMAGE {
                    report.damage.push(Damage {
                        index: s.index,
                        offset: s.offset,
                        bytes: s.bytes,
                        blocks: s.blocks,
                        reason: s.reason.to_string(),
                    });
                }
            }
            Ok(None) => {
                report.end_record_ok = reader.end_verified();
                break;
            }
            Err(e) if reader.end_verified() => {
                // The end record verified; the fault is in what it is checked against.
                report.end_record_ok = true;
                report.end_error = Some(e.to_string());
                break;
            }
            Err(e) => return Err(e),
        }
    }
    if let Some(e) = report.events_per_block.as_mut() {
        e.mean = report.events as f64 / report.good_blocks as f64;
    }
    if report.header.counter_bits < 64 {
        report.wraps = newest_ticks >> report.header.counter_bits;
    }
    report.verdict = report.judge();
    Ok(report)
}

impl fmt::Display for InspectReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let h = &self.header;
        let row = |f: &mut fmt::Formatter<'_>, k: &str, v: String| writeln!(f, "{k:<20} {v}");
        row(
            f,
            "capture",
            format!("{} ({} bytes)", self.source, self.total_bytes),
        )?;
        row(
            f,
            "format version",
            format!("{}.{}", h.version >> 8, h.version & 0xFF),
        )?;
        row(
            f,
            "counter",
            format!("{} bits, {} ps per tick", h.counter_bits, h.resolution_ps),
        )?;
        row(f, "channels", h.channel_count.to_string())?;
        row(f, "flags", format!("0x{:08X}", h.flags))?;
        row(f, "block size", format!("{} events", h.max_block_events))?;
        let declared = if h.block_count == 0 {
            "unknown (0)".to_owned()
        } else {
            h.block_count.to_string()
        };
        row(f, "declared blocks", declared)?;
        row(
            f,
            "header",
            format!(
                "{} bytes ({} of metadata)",
                self.header_bytes,
                h.metadata.len()
            ),
        )?;
        row(f, "good blocks", self.good_blocks.to_string())?;
        let per_block = match &self.events_per_block {
            Some(e) => format!(
                "{} (per block min {} / mean {:.1} / max {})",
                self.events, e.min, e.mean, e.max
            ),
            None => self.events.to_string(),
        };
        row(f, "events", per_block)?;
        let hist: Vec<String> = self
            .channels
            .iter()
            .enumerate()
            .map(|(c, n)| format!("ch{c} {n}"))
            .collect();
        row(f, "events by channel", hist.join(", "))?;
        let hex = |v: Option<u64>| v.map_or("-".to_owned(), |c| format!("0x{c:X}"));
        row(f, "first raw counter", hex(self.first_count))?;
        row(f, "last raw counter", hex(self.last_count))?;
        row(f, "counter wraps", self.wraps.to_string())?;
        row(f, "unwrap refusals", self.unwrap_errors.to_string())?;
        row(
            f,
            "damage",
            format!(
                "{} stretches, {} blocks lost, {} bytes skipped",
                self.damaged_stretches, self.blocks_lost, self.bytes_skipped
            ),
        )?;
        for d in &self.damage {
            row(
                f,
                "",
                format!(
                    "block {} at byte {}: {} bytes, {} blocks: {}",
                    d.index, d.offset, d.bytes, d.blocks, d.reason
                ),
            )?;
        }
        if self.damaged_stretches as usize > self.damage.len() {
            row(
                f,
                "",
                format!(
                    "... {} more not listed",
                    self.damaged_stretches as usize - self.damage.len()
                ),
            )?;
        }
        row(
            f,
            "end record",
            if self.end_record_ok {
                "verified"
            } else {
                "missing or damaged"
            }
            .to_owned(),
        )?;
        if let Some(e) = &self.end_error {
            row(f, "end check", e.clone())?;
        }
        row(f, "verdict", self.verdict.as_str().to_owned())?;
        Ok(())
    }
}
