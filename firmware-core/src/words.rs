//! Stage 0 — raw words in: fixed-width binary TDC records become [`TdcEvent`]s.
//!
//! Time taggers and TDC chips keep a narrow hardware counter (often 16–32 bits) and hand out
//! fixed-width words with bit fields: the counter's value and the input channel for an event, and
//! from time to time a rollover record saying the narrow counter wrapped, so the reader can widen
//! it (common practice). A board reading raw words from a FIFO and the host importing a file of
//! them both need that widening done the same way, so both use this decoder; what it hands out goes
//! to [`timestamps`](crate::timestamps) as a wide counter.
//!
//! # Bit layout
//!
//! A record is 4 or 8 bytes ([`WordLayout::record_bytes`]). Its bytes are read as one unsigned
//! integer in the configured byte order ([`Endian`]): little endian puts the first byte in bits
//! 0..8, big endian puts it in the top byte. Bit 0 is the least significant bit of that integer. A
//! field ([`BitField`]) of `offset` and `width` is bits `offset..offset + width`, read as an
//! unsigned number; bits outside every field are ignored. The fields are
//! - time: the narrow counter value in ticks, width 1..=63;
//! - channel: the TDC input, width 0..=8 (width 0: every event is on channel 0);
//! - kind (optional, width 1..=8): which record this is, the value [`KindField::event`] for an
//!   event and [`KindField::rollover`] for a rollover record; any other value is an unknown kind;
//!   without a kind field every record is an event;
//! - rollover count (only read in rollover records, width 0..=32): how many wraps of the time
//!   field the record stands for; width 0 means one wrap per record.
//!
//! Every field must lie inside the record and no two fields may share a bit
//! ([`WordFormat::new`] checks this once). After `R` wraps in total, an event's counter is
//! `(R << time_width) | time` ticks.
//!
//! # Where every record goes
//!
//! Each complete record ends in exactly one [`RecordFate`]: an event handed out, a rollover, an
//! unknown kind, a channel above [`WordLayout::max_channel`] (event dropped), or a counter that
//! would no longer fit 64 bits (event dropped). [`WordCounts::records`] always equals the sum of
//! the fates. A partial record at the end of the stream is not a record: [`WordDecoder::finish`]
//! reports it as [`WordError::PartialRecord`] with its byte offset.
//!
//! # Examples
//!
//! A 32-bit little-endian word: kind in bits 30..32 (0 an event, 1 a rollover), channel in bits
//! 24..30, time in bits 0..24; a rollover record stands for one wrap of 2^24 ticks.
//!
//! ```
//! use slotwise::words::{BitField, Endian, KindField, WordDecoder, WordFormat, WordLayout};
//! use slotwise::TdcEvent;
//!
//! let format = WordFormat::new(WordLayout {
//!     record_bytes: 4,
//!     endian: Endian::Little,
//!     time: BitField::new(0, 24),
//!     channel: BitField::new(24, 6),
//!     kind: Some(KindField {
//!         field: BitField::new(30, 2),
//!         event: 0,
//!         rollover: 1,
//!         rollover_count: BitField::new(0, 0),
//!     }),
//!     max_channel: 7,
//! })?;
//! let words: [u32; 3] = [
//!     (3 << 24) | 0x00_0010, // event: channel 3, time 16
//!     1 << 30,               // rollover: the 24-bit time field wrapped once
//!     (5 << 24) | 0x00_0004, // event: channel 5, time 4
//! ];
//! let mut bytes = [0u8; 12];
//! for (chunk, w) in bytes.chunks_exact_mut(4).zip(words) {
//!     chunk.copy_from_slice(&w.to_le_bytes());
//! }
//!
//! let mut decoder = WordDecoder::new(format);
//! let mut out = [TdcEvent { count: 0, channel: 0 }; 4];
//! // Blocks may cut a record anywhere: the first 6 bytes, then the rest.
//! let first = decoder.decode(&bytes[..6], &mut out);
//! assert_eq!((first.events, first.consumed), (1, 6));
//! assert_eq!(out[0], TdcEvent { count: 16, channel: 3 });
//! let rest = decoder.decode(&bytes[6..], &mut out);
//! assert_eq!((rest.events, rest.consumed), (1, 6));
//! assert_eq!(out[0], TdcEvent { count: (1 << 24) | 4, channel: 5 });
//!
//! let counts = decoder.finish()?;
//! assert_eq!((counts.records, counts.rollovers), (3, 1));
//! # Ok::<(), Box<dyn core::error::Error>>(())
//! ```

use core::fmt;

use crate::timestamps::TdcEvent;

#[cfg(test)]
mod tests;

/// Byte order of a record: which byte holds bit 0.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Endian {
    /// The first byte holds bits 0..8.
    Little,
    /// The first byte holds the most significant 8 bits.
    Big,
}

/// A bit field of a record: `width` bits starting at bit `offset` (bit 0 the least significant).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct BitField {
    /// Lowest bit of the field, in bits from the record's least significant bit.
    pub offset: u8,
    /// Width of the field in bits (0: the field is absent and reads as 0).
    pub width: u8,
}

impl BitField {
    /// A field of `width` bits at bit `offset`.
    pub const fn new(offset: u8, width: u8) -> Self {
        Self { offset, width }
    }

    /// One past the highest bit of the field, in bits.
    const fn end(self) -> u16 {
        self.offset as u16 + self.width as u16
    }
}

/// The kind field and what its values mean.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct KindField {
    /// Where the kind is (width 1..=8 bits).
    pub field: BitField,
    /// Kind value of an event record.
    pub event: u8,
    /// Kind value of a rollover record.
    pub rollover: u8,
    /// In a rollover record, the number of time-field wraps it stands for (width 0..=32 bits;
    /// width 0: one wrap per record).
    pub rollover_count: BitField,
}

/// A record layout as plain values, checked by [`WordFormat::new`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct WordLayout {
    /// Record size in bytes: 4 or 8.
    pub record_bytes: u8,
    /// Byte order of a record.
    pub endian: Endian,
    /// The narrow counter in ticks (width 1..=63 bits).
    pub time: BitField,
    /// The TDC input channel (width 0..=8 bits).
    pub channel: BitField,
    /// The kind field; `None`: every record is an event.
    pub kind: Option<KindField>,
    /// Highest channel handed out; an event on a higher channel is counted and dropped.
    pub max_channel: u8,
}

/// One field of a record, for errors and reports.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum WordField {
    /// The time field.
    Time,
    /// The channel field.
    Channel,
    /// The kind field.
    Kind,
    /// The rollover-count field.
    RolloverCount,
}

impl WordField {
    /// Every field, in declaration order.
    pub const ALL: [Self; 4] = [Self::Time, Self::Channel, Self::Kind, Self::RolloverCount];

    /// The field's name in messages.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Time => "time",
            Self::Channel => "channel",
            Self::Kind => "kind",
            Self::RolloverCount => "rollover count",
        }
    }

    /// Allowed widths in bits, `(min, max)` inclusive.
    pub const fn widths(self) -> (u8, u8) {
        match self {
            Self::Time => (1, 63),
            Self::Channel => (0, 8),
            Self::Kind => (1, 8),
            Self::RolloverCount => (0, 32),
        }
    }
}

impl fmt::Display for WordField {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Why a record layout was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum WordFormatError {
    /// Record size in bytes other than 4 or 8.
    RecordBytes(u8),
    /// A field's width in bits is outside its range ([`WordField::widths`]).
    Width {
        /// The field.
        field: WordField,
        /// Its width in bits.
        width: u8,
    },
    /// A field reaches past the record's last bit.
    OutsideRecord {
        /// The field.
        field: WordField,
        /// Its bit range.
        bits: BitField,
        /// The record size in bits.
        record_bits: u8,
    },
    /// Two fields share at least one bit.
    Overlap {
        /// The earlier field in [`WordField::ALL`].
        first: WordField,
        /// The later one.
        second: WordField,
    },
    /// A kind value does not fit the kind field.
    KindValue {
        /// The value.
        value: u8,
        /// The kind field's width in bits.
        width: u8,
    },
    /// Events and rollovers have the same kind value.
    SameKind(u8),
}

impl fmt::Display for WordFormatError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Self::RecordBytes(n) => write!(f, "record size {n} bytes is neither 4 nor 8"),
            Self::Width { field, width } => {
                let (lo, hi) = field.widths();
                write!(f, "{field} field width {width} bits is outside {lo}..={hi}")
            }
            Self::OutsideRecord {
                field,
                bits,
                record_bits,
            } => write!(
                f,
                "{field} field (bits {}..{}) does not fit the {record_bits}-bit record (0..{record_bits})",
                bits.offset,
                bits.end()
            ),
            Self::Overlap { first, second } => {
                write!(f, "{first} and {second} fields share bits")
            }
            Self::KindValue { value, width } => write!(
                f,
                "kind value {value} does not fit the {width}-bit kind field (0..{})",
                1u16 << width
            ),
            Self::SameKind(v) => write!(f, "event and rollover kinds are both {v}"),
        }
    }
}

impl core::error::Error for WordFormatError {}

/// Shift and mask of one field, computed once.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Extract {
    shift: u8,
    mask: u64,
}

impl Extract {
    const fn of(f: BitField) -> Self {
        let mask = if f.width == 0 {
            0
        } else {
            u64::MAX >> (64u32.saturating_sub(f.width as u32))
        };
        Self {
            shift: f.offset,
            mask,
        }
    }

    #[inline]
    const fn get(self, word: u64) -> u64 {
        // shift < 64 for a validated field (offset < record bits ≤ 64); 0 for an absent one.
        (word >> (self.shift as u32 % 64)) & self.mask
    }
}

/// Kind field, its values and the rollover count, ready for the hot path.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
struct Kinds {
    kind: Extract,
    event: u64,
    rollover: u64,
    count: Extract,
    count_present: bool,
}

/// A validated record layout with its shifts and masks computed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct WordFormat {
    layout: WordLayout,
    time: Extract,
    channel: Extract,
    kinds: Option<Kinds>,
    /// Largest wrap total whose widened counter still fits 64 bits (`u64::MAX >> time_width`).
    max_rollovers: u64,
}

impl WordFormat {
    /// Check a layout: record size, every field's width and place, no shared bits, kind values.
    pub const fn new(layout: WordLayout) -> Result<Self, WordFormatError> {
        if layout.record_bytes != 4 && layout.record_bytes != 8 {
            return Err(WordFormatError::RecordBytes(layout.record_bytes));
        }
        let record_bits = layout.record_bytes * 8;
        let absent = BitField::new(0, 0);
        let (kind, count) = match layout.kind {
            Some(k) => (k.field, k.rollover_count),
            None => (absent, absent),
        };
        let fields = [
            (WordField::Time, layout.time),
            (WordField::Channel, layout.channel),
            (WordField::Kind, kind),
            (WordField::RolloverCount, count),
        ];
        // Slice patterns rather than indices: the walk cannot go out of bounds.
        let mut rest: &[(WordField, BitField)] = &fields;
        while let [(field, bits), tail @ ..] = rest {
            let (field, bits) = (*field, *bits);
            let (lo, hi) = field.widths();
            let present = !matches!(field, WordField::Kind) || layout.kind.is_some();
            if present && (bits.width < lo || bits.width > hi) {
                return Err(WordFormatError::Width {
                    field,
                    width: bits.width,
                });
            }
            if bits.width > 0 && bits.end() > record_bits as u16 {
                return Err(WordFormatError::OutsideRecord {
                    field,
                    bits,
                    record_bits,
                });
            }
            rest = tail;
        }
        let mut rest: &[(WordField, BitField)] = &fields;
        while let [(first, a), tail @ ..] = rest {
            let mut others = tail;
            while let [(second, b), more @ ..] = others {
                let disjoint = a.width == 0
                    || b.width == 0
                    || a.end() <= b.offset as u16
                    || b.end() <= a.offset as u16;
                if !disjoint {
                    return Err(WordFormatError::Overlap {
                        first: *first,
                        second: *second,
                    });
                }
                others = more;
            }
            rest = tail;
        }
        let kinds = match layout.kind {
            None => None,
            Some(k) => {
                let limit = 1u16 << k.field.width;
                if k.event as u16 >= limit {
                    return Err(WordFormatError::KindValue {
                        value: k.event,
                        width: k.field.width,
                    });
                }
                if k.rollover as u16 >= limit {
                    return Err(WordFormatError::KindValue {
                        value: k.rollover,
                        width: k.field.width,
                    });
                }
                if k.event == k.rollover {
                    return Err(WordFormatError::SameKind(k.event));
                }
                Some(Kinds {
                    kind: Extract::of(k.field),
                    event: k.event as u64,
                    rollover: k.rollover as u64,
                    count: Extract::of(k.rollover_count),
                    count_present: k.rollover_count.width > 0,
                })
            }
        };
        Ok(Self {
            layout,
            time: Extract::of(layout.time),
            channel: Extract::of(layout.channel),
            kinds,
            max_rollovers: u64::MAX >> (layout.time.width as u32 % 64),
        })
    }

    /// The layout as given.
    pub const fn layout(&self) -> &WordLayout {
        &self.layout
    }

    /// Record size in bytes (4 or 8).
    pub const fn record_bytes(&self) -> usize {
        self.layout.record_bytes as usize
    }

    /// One record's bytes as an integer in the configured byte order.
    #[inline]
    fn word(&self, rec: &[u8]) -> u64 {
        let push = |w: u64, b: &u8| (w << 8) | u64::from(*b);
        match self.layout.endian {
            Endian::Little => rec.iter().rev().fold(0, push),
            Endian::Big => rec.iter().fold(0, push),
        }
    }
}

/// Where one complete record went; every record ends in exactly one.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RecordFate {
    /// An event, handed out as a [`TdcEvent`].
    Event,
    /// A rollover record, added to the wrap total.
    Rollover,
    /// A kind value that is neither the event's nor the rollover's.
    UnknownKind,
    /// An event on a channel above the configured maximum, dropped.
    ChannelAboveMax,
    /// An event whose widened counter would exceed 64 bits, dropped.
    CounterOverflow,
}

impl RecordFate {
    /// How many fates there are.
    pub const COUNT: usize = 5;

    /// Every fate, in declaration order (the order of [`WordCounts::by_fate`]).
    pub const ALL: [Self; Self::COUNT] = [
        Self::Event,
        Self::Rollover,
        Self::UnknownKind,
        Self::ChannelAboveMax,
        Self::CounterOverflow,
    ];

    /// The fate's name in reports.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Event => "event",
            Self::Rollover => "rollover",
            Self::UnknownKind => "unknown kind",
            Self::ChannelAboveMax => "channel above max",
            Self::CounterOverflow => "counter overflow",
        }
    }
}

// `ALL` lists every fate once, in declaration order, so `fate as usize` indexes `by_fate`.
// Compile time only: an out-of-range index here stops the build, never a running board.
#[allow(clippy::indexing_slicing)]
const _: () = {
    let mut i = 0;
    while i < RecordFate::COUNT {
        assert!(RecordFate::ALL[i] as usize == i);
        i += 1;
    }
};

/// What a [`WordDecoder`] has seen, in records.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct WordCounts {
    /// Complete records read.
    pub records: u64,
    /// Records per fate, in [`RecordFate::ALL`] order.
    pub by_fate: [u64; RecordFate::COUNT],
    /// Time-field wraps in total, from every rollover record (saturates at `u64::MAX`).
    pub rollovers: u64,
}

impl WordCounts {
    /// Records that ended in `fate`.
    pub fn get(&self, fate: RecordFate) -> u64 {
        self.by_fate.get(fate as usize).copied().unwrap_or(0)
    }

    /// Sum over all fates, in records; equals [`Self::records`].
    pub fn settled(&self) -> u64 {
        self.by_fate.iter().fold(0, |s, n| s.saturating_add(*n))
    }

    fn count(&mut self, fate: RecordFate) {
        if let Some(n) = self.by_fate.get_mut(fate as usize) {
            *n = n.saturating_add(1);
        }
    }
}

/// Why the stream did not end on a record boundary.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum WordError {
    /// The stream ends inside a record.
    PartialRecord {
        /// Byte offset of the partial record's first byte in the stream.
        offset: u64,
        /// Bytes of it received.
        have: u8,
        /// Bytes a record takes.
        need: u8,
    },
}

impl fmt::Display for WordError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::PartialRecord { offset, have, need } => write!(
                f,
                "partial record at byte offset {offset}: {have} of {need} bytes"
            ),
        }
    }
}

impl core::error::Error for WordError {}

/// Progress of one [`WordDecoder::decode`] call.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Decoded {
    /// Events written to the front of the output, in events.
    pub events: usize,
    /// Input bytes used (records decoded plus a carried partial record), in bytes.
    pub consumed: usize,
}

/// What one record does, decided before anything changes.
enum Step {
    Emit(TdcEvent),
    Drop(RecordFate),
    Rollover(u64),
}

/// Streaming decoder: a validated format, the wrap total, a partial record carried between blocks.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct WordDecoder {
    fmt: WordFormat,
    /// The bytes of a record cut by a block end.
    carry: [u8; 8],
    /// Bytes in `carry`, below the record size.
    carry_len: u8,
    /// Bytes consumed since the start, for the offset of a trailing partial record.
    bytes_in: u64,
    counts: WordCounts,
}

impl WordDecoder {
    /// A decoder at the start of a stream.
    pub const fn new(fmt: WordFormat) -> Self {
        Self {
            fmt,
            carry: [0; 8],
            carry_len: 0,
            bytes_in: 0,
            counts: WordCounts {
                records: 0,
                by_fate: [0; RecordFate::COUNT],
                rollovers: 0,
            },
        }
    }

    /// Back to the start of a stream with the same format.
    pub fn reset(&mut self) {
        *self = Self::new(self.fmt);
    }

    /// The format in use.
    pub const fn format(&self) -> &WordFormat {
        &self.fmt
    }

    /// Counters so far.
    pub const fn counts(&self) -> &WordCounts {
        &self.counts
    }

    /// Decode the next block of the stream into `out`; the block may cut records anywhere.
    ///
    /// Stops before an event record that finds `out` full (rollovers and dropped records need no
    /// room); call again with the bytes after `consumed`. A partial record at the block's end is
    /// kept and completed by the next block.
    pub fn decode(&mut self, bytes: &[u8], out: &mut [TdcEvent]) -> Decoded {
        let size = self.fmt.record_bytes();
        let mut at = 0usize;
        let mut n = 0usize;
        if self.carry_len > 0 {
            let have = usize::from(self.carry_len);
            let need = size.saturating_sub(have);
            let mut rec = self.carry;
            let (Some(dst), Some(src)) = (rec.get_mut(have..size), bytes.get(..need)) else {
                return self.keep_tail(bytes);
            };
            dst.copy_from_slice(src);
            let word = self.fmt.word(rec.get(..size).unwrap_or(&[]));
            if !self.take(word, out, &mut n) {
                return Decoded {
                    events: 0,
                    consumed: 0,
                };
            }
            self.carry_len = 0;
            at = need;
        }
        while let Some(rec) = bytes.get(at..at.saturating_add(size)) {
            let word = self.fmt.word(rec);
            if !self.take(word, out, &mut n) {
                self.bytes_in = self.bytes_in.saturating_add(at as u64);
                return Decoded {
                    events: n,
                    consumed: at,
                };
            }
            at += size;
        }
        self.bytes_in = self.bytes_in.saturating_add(at as u64);
        let tail = self.keep_tail(bytes.get(at..).unwrap_or(&[]));
        Decoded {
            events: n,
            consumed: at + tail.consumed,
        }
    }

    /// End of the stream: the counters, or the partial record left over.
    pub fn finish(&self) -> Result<WordCounts, WordError> {
        if self.carry_len > 0 {
            return Err(WordError::PartialRecord {
                offset: self.bytes_in.saturating_sub(u64::from(self.carry_len)),
                have: self.carry_len,
                need: self.fmt.layout.record_bytes,
            });
        }
        Ok(self.counts)
    }

    /// Append fewer bytes than complete a record to the carry.
    fn keep_tail(&mut self, bytes: &[u8]) -> Decoded {
        let have = usize::from(self.carry_len);
        let end = have.saturating_add(bytes.len());
        match self.carry.get_mut(have..end) {
            Some(dst) if end < self.fmt.record_bytes() => {
                dst.copy_from_slice(bytes);
                self.carry_len = end as u8;
                self.bytes_in = self.bytes_in.saturating_add(bytes.len() as u64);
                Decoded {
                    events: 0,
                    consumed: bytes.len(),
                }
            }
            // Callers pass less than a record's remainder, so this arm does not happen.
            _ => Decoded {
                events: 0,
                consumed: 0,
            },
        }
    }

    /// Settle one record; `false` (nothing changed) if it is an event and `out` is full.
    #[inline]
    fn take(&mut self, word: u64, out: &mut [TdcEvent], n: &mut usize) -> bool {
        match self.step(word) {
            Step::Emit(ev) => {
                let Some(slot) = out.get_mut(*n) else {
                    return false;
                };
                *slot = ev;
                *n += 1;
                self.counts.count(RecordFate::Event);
            }
            Step::Drop(fate) => self.counts.count(fate),
            Step::Rollover(wraps) => {
                self.counts.rollovers = self.counts.rollovers.saturating_add(wraps);
                self.counts.count(RecordFate::Rollover);
            }
        }
        self.counts.records = self.counts.records.saturating_add(1);
        true
    }

    /// What `word` means given the wraps so far; changes nothing.
    #[inline]
    fn step(&self, word: u64) -> Step {
        let f = &self.fmt;
        if let Some(k) = f.kinds {
            let kind = k.kind.get(word);
            if kind == k.rollover {
                let wraps = if k.count_present {
                    k.count.get(word)
                } else {
                    1
                };
                return Step::Rollover(wraps);
            }
            if kind != k.event {
                return Step::Drop(RecordFate::UnknownKind);
            }
        }
        // The channel field is at most 8 bits wide, so it fits a u8.
        let channel = f.channel.get(word) as u8;
        if channel > f.layout.max_channel {
            return Step::Drop(RecordFate::ChannelAboveMax);
        }
        let wraps = self.counts.rollovers;
        if wraps > f.max_rollovers {
            return Step::Drop(RecordFate::CounterOverflow);
        }
        Step::Emit(TdcEvent {
            count: (wraps << f.layout.time.width) | f.time.get(word),
            channel,
        })
    }
}
