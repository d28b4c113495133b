//! Board ingest: DMA-sized blocks of raw TDC words become [`TdcEvent`]s, and every way the
//! hardware path loses or garbles data is counted.
//!
//! A board does not start from [`TdcEvent`]s but from a TDC chip or an FPGA FIFO read into DMA
//! buffers of raw words. Between the chip and the decoder, data goes wrong in a few known ways
//! (common practice): the FIFO fills and drops words (overrun), a rollover record is lost so the
//! narrow counter appears to run backwards (rollover gap), and electrical noise produces words
//! that are no valid record (malformed). [`Ingest`] wraps the [`words`](crate::words) decoder —
//! it parses nothing itself — and keeps one counter for each of those, so a board can see them
//! instead of silently handing out a wrong time base.
//!
//! Decoding borrows the caller's byte buffer: a DMA buffer is decoded where it lies, no copy.
//!
//! # Rollover gaps
//!
//! Without a rollover record between them, a later event's widened counter should not fall far
//! below an earlier one's. A fall of more than half the time field's range (`2^(w-1)` ticks for
//! a `w`-bit field) cannot be the slight reordering that [`timestamps`](crate::timestamps)
//! absorbs, so it is counted as a lost rollover record (the usual half-range rule for wrapping
//! counters, common practice). The event is still handed out unchanged: the counter tells the
//! board its time base is suspect; it does not guess a correction. A format without rollover
//! records has none to lose: its counter wraps by design and the downstream unwrapping stage
//! handles that, so such a stream counts no gaps.
//!
//! The counters leave the board in the summary record (`formats::summary`) and, as they grow, as
//! an ingest-fault alarm (`alarms`); both read them from here.
//!
//! With the `embedded-hal` feature, `spi` reads such blocks from a FIFO behind an
//! `embedded-hal` 1.0 `SpiDevice` when a data-ready pin is high.

use crate::timestamps::TdcEvent;
use crate::words::{Decoded, RecordFate, WordCounts, WordDecoder, WordError, WordFormat};

#[cfg(feature = "embedded-hal")]
pub mod spi;

#[cfg(test)]
mod tests;

/// What the ingest path has counted besides the decoder's per-record fates.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct IngestCounts {
    /// Words the FIFO dropped before the board read them, as reported by the source, in words.
    pub overrun_words: u64,
    /// FIFO-full flags the source reported, in flags (one per status read that showed it).
    pub fifo_full_flags: u64,
    /// Lost rollover records inferred from a counter falling by more than half its range, in gaps.
    pub rollover_gaps: u64,
    /// Records that are no valid event or rollover (unknown kind, channel above the maximum),
    /// in records.
    pub malformed_words: u64,
    /// Blocks pushed, in blocks.
    pub blocks: u64,
}

impl IngestCounts {
    /// Number of counters, in words of the summary record.
    pub const WORDS: usize = 5;

    /// All zero: nothing ingested (a receiver fed events directly).
    pub const ZERO: Self = Self {
        overrun_words: 0,
        fifo_full_flags: 0,
        rollover_gaps: 0,
        malformed_words: 0,
        blocks: 0,
    };

    /// The counters in wire order: the four fault counters ([`IngestFault::ALL`]), then blocks.
    pub const fn to_words(&self) -> [u64; Self::WORDS] {
        [
            self.overrun_words,
            self.fifo_full_flags,
            self.rollover_gaps,
            self.malformed_words,
            self.blocks,
        ]
    }

    /// The counters from `words` in the order of [`Self::to_words`].
    pub const fn from_words(w: &[u64; Self::WORDS]) -> Self {
        let [overrun_words, fifo_full_flags, rollover_gaps, malformed_words, blocks] = *w;
        Self {
            overrun_words,
            fifo_full_flags,
            rollover_gaps,
            malformed_words,
            blocks,
        }
    }

    /// Snake-case name of each word of [`Self::to_words`], in that order.
    pub const NAMES: [&'static str; Self::WORDS] = [
        IngestFault::OverrunWords.name(),
        IngestFault::FifoFullFlags.name(),
        IngestFault::RolloverGaps.name(),
        IngestFault::MalformedWords.name(),
        "blocks",
    ];

    /// (name, value) of every counter, in wire order, for reports.
    pub const fn fields(&self) -> [(&'static str, u64); Self::WORDS] {
        let [w0, w1, w2, w3, w4] = self.to_words();
        let [n0, n1, n2, n3, n4] = Self::NAMES;
        [(n0, w0), (n1, w1), (n2, w2), (n3, w3), (n4, w4)]
    }

    /// The value of one fault counter, in its unit.
    pub const fn get(&self, fault: IngestFault) -> u64 {
        match fault {
            IngestFault::OverrunWords => self.overrun_words,
            IngestFault::FifoFullFlags => self.fifo_full_flags,
            IngestFault::RolloverGaps => self.rollover_gaps,
            IngestFault::MalformedWords => self.malformed_words,
        }
    }

    /// Whether any fault counter is above zero (blocks do not count: they are no fault).
    pub const fn any_fault(&self) -> bool {
        self.overrun_words | self.fifo_full_flags | self.rollover_gaps | self.malformed_words != 0
    }
}

/// One of the ingest counters that means data was lost or garbled: the one list the alarm, the
/// summary and the host read.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum IngestFault {
    /// [`IngestCounts::overrun_words`] grew.
    OverrunWords = 0,
    /// [`IngestCounts::fifo_full_flags`] grew.
    FifoFullFlags = 1,
    /// [`IngestCounts::rollover_gaps`] grew.
    RolloverGaps = 2,
    /// [`IngestCounts::malformed_words`] grew.
    MalformedWords = 3,
}

impl IngestFault {
    /// Every fault counter, in code order.
    pub const ALL: [IngestFault; 4] = [
        Self::OverrunWords,
        Self::FifoFullFlags,
        Self::RolloverGaps,
        Self::MalformedWords,
    ];

    /// Snake-case name, the field's name in [`IngestCounts`].
    pub const fn name(self) -> &'static str {
        match self {
            Self::OverrunWords => "overrun_words",
            Self::FifoFullFlags => "fifo_full_flags",
            Self::RolloverGaps => "rollover_gaps",
            Self::MalformedWords => "malformed_words",
        }
    }

    /// Code on the wire (the alarm record's detail byte).
    pub const fn code(self) -> u8 {
        self as u8
    }

    /// The fault counter for a wire code, if known.
    pub const fn from_code(code: u8) -> Option<Self> {
        match code {
            0 => Some(Self::OverrunWords),
            1 => Some(Self::FifoFullFlags),
            2 => Some(Self::RolloverGaps),
            3 => Some(Self::MalformedWords),
            _ => None,
        }
    }
}

/// The ingest stage: a [`WordDecoder`] plus overrun, FIFO-full, rollover-gap and malformed
/// counters.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Ingest {
    decoder: WordDecoder,
    overrun_words: u64,
    fifo_full_flags: u64,
    rollover_gaps: u64,
    blocks: u64,
    /// Widened counter of the last event handed out, in ticks.
    last_count: Option<u64>,
    /// Half the time field's range, in ticks: a larger fall is a rollover gap; `None` for a
    /// format without rollover records, whose counter wraps by design.
    half_range_ticks: Option<u64>,
}

impl Ingest {
    /// An ingest stage at the start of a stream of records in `format`.
    pub const fn new(format: WordFormat) -> Self {
        // A validated time field is 1..=63 bits wide, so the shift is in range.
        let half_range_ticks = match format.layout().kind {
            Some(_) => Some(1u64 << ((format.layout().time.width as u32).saturating_sub(1) % 64)),
            None => None,
        };
        Self {
            decoder: WordDecoder::new(format),
            overrun_words: 0,
            fifo_full_flags: 0,
            rollover_gaps: 0,
            blocks: 0,
            last_count: None,
            half_range_ticks,
        }
    }

    /// The record format in use.
    pub const fn format(&self) -> &WordFormat {
        self.decoder.format()
    }

    /// Decode one block of raw bytes into `out`; the block may cut records anywhere.
    ///
    /// Same contract as [`WordDecoder::decode`]: stops before an event that finds `out` full, so
    /// call again with the bytes after `consumed`. `out` with room for
    /// `bytes.len() / record_bytes + 1` events always takes the whole block.
    pub fn push(&mut self, bytes: &[u8], out: &mut [TdcEvent]) -> Decoded {
        self.blocks = self.blocks.saturating_add(1);
        let done = self.decoder.decode(bytes, out);
        for ev in out.iter().take(done.events) {
            if let (Some(last), Some(half)) = (self.last_count, self.half_range_ticks) {
                if last.saturating_sub(ev.count) > half {
                    self.rollover_gaps = self.rollover_gaps.saturating_add(1);
                }
            }
            self.last_count = Some(ev.count);
        }
        done
    }

    /// Record that the FIFO dropped `words` words before they were read (overrun), in words.
    pub fn report_overrun(&mut self, words: u64) {
        self.overrun_words = self.overrun_words.saturating_add(words);
    }

    /// Record one FIFO-full flag seen in the source's status.
    pub fn report_fifo_full(&mut self) {
        self.fifo_full_flags = self.fifo_full_flags.saturating_add(1);
    }

    /// The ingest counters so far.
    pub fn counts(&self) -> IngestCounts {
        let w = self.decoder.counts();
        IngestCounts {
            overrun_words: self.overrun_words,
            fifo_full_flags: self.fifo_full_flags,
            rollover_gaps: self.rollover_gaps,
            malformed_words: w
                .get(RecordFate::UnknownKind)
                .saturating_add(w.get(RecordFate::ChannelAboveMax)),
            blocks: self.blocks,
        }
    }

    /// The decoder's per-record counters so far (every complete record in exactly one fate).
    pub const fn word_counts(&self) -> &WordCounts {
        self.decoder.counts()
    }

    /// End of the stream: the decoder's counters, or the partial record left over.
    pub fn finish(&self) -> Result<WordCounts, WordError> {
        self.decoder.finish()
    }
}
