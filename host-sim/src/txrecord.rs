//! The transmitter record: what the transmitter really sent, slot by slot, as a file.
//!
//! A replay's answers must come from the transmitter of the run, not from a generator the
//! receiver team guesses. This module reads and writes the record in its two documented forms
//! (`docs/transmitter-record.md`): a dense binary form, four bits per slot in CRC-32C-protected
//! blocks like the capture's (`crate::capture`), and a sparse CSV form for a transmitter's own log.
//! A slot the record does not hold is answered with `None`, never with invented content.
//!
//! Nibble packing of small codes two to a byte, low nibble first, is common practice.
#![warn(missing_docs)]

mod dense;
mod error;
mod inspect;
mod sparse;
#[cfg(test)]
mod tests;

use crate::scenario::Protocol;
use slotwise::frame::MarkerSpec;
use slotwise::Basis;
use std::fmt;
use std::fs::File;
use std::io::Read;
use std::ops::Range;
use std::path::Path;

pub use dense::{dense_size, read_dense, DenseRead, DenseWriter, RecordDamage};
pub use error::{Location, RangeMismatch, TxErrorKind, TxRecordError};
pub use inspect::{inspect, RecordReport};
pub use sparse::{read_sparse, SparseWriter};

/// Intensity index of a vacuum slot (no light; matches no intensity class), as the marker sends.
pub const MARKER_VACUUM: u8 = u8::MAX;

/// The state prepared in one slot.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct TxChoice {
    /// Preparation basis.
    pub basis: Basis,
    /// Bit (0 or 1); always 0 for the X state of the three-state protocol.
    pub bit: u8,
    /// Intensity class index (0 = signal), or [`MARKER_VACUUM`] for no light.
    pub intensity: u8,
}

/// First eight bytes of every dense record.
pub const MAGIC: [u8; 8] = *b"SLOTWTXR";
/// Major number of the format version this code writes and reads.
pub const FORMAT_MAJOR: u8 = 1;
/// Format version as stored: major in the high byte, minor (0) in the low byte.
pub const FORMAT_VERSION: u16 = (FORMAT_MAJOR as u16) << 8;
/// Sync word that starts every data block of a dense record.
pub const BLOCK_SYNC: [u8; 4] = *b"SWTB";
/// Sync word that starts the end record of a dense record.
pub const END_SYNC: [u8; 4] = *b"SWTE";
/// Slots per block unless the header says otherwise (32 KiB of payload).
pub const DEFAULT_BLOCK_SLOTS: u32 = 1 << 16;
/// Largest block size in slots a header may declare (2^24: 8 MiB of payload).
pub const MAX_BLOCK_SLOTS: u32 = 1 << 24;
/// Required flag: marker slots follow the marker contract (`docs/marker.md`).
pub const FLAG_MARKER: u32 = 1;
/// Required flag: the header's hello fields hold a receiver time and the slot counter then.
pub const FLAG_HELLO: u32 = 1 << 1;
/// Flag bits 0–15: a reader refuses a record with a set bit it does not know.
pub const FLAGS_REQUIRED_MASK: u32 = 0x0000_FFFF;
/// Required flag bits this version knows.
pub const FLAGS_KNOWN_REQUIRED: u32 = FLAG_MARKER | FLAG_HELLO;
/// Advisory flag: the record comes from the link simulator.
pub const FLAG_SIMULATED: u32 = 1 << 16;

/// Nibble of a slot without light (vacuum).
pub const CODE_VACUUM: u8 = 0x3;
/// Nibble of a slot the record does not hold.
pub const CODE_NOT_RECORDED: u8 = 0x7;

/// The nibble of one slot's choice, or `None` for a choice the format cannot hold (bit above 1,
/// intensity class above 2, vacuum with another state than Z, 0).
pub fn encode_choice(c: Option<TxChoice>) -> Option<u8> {
    let Some(c) = c else {
        return Some(CODE_NOT_RECORDED);
    };
    if c.intensity == MARKER_VACUUM {
        return (c.basis == Basis::Z && c.bit == 0).then_some(CODE_VACUUM);
    }
    if c.bit > 1 || c.intensity > 2 {
        return None;
    }
    Some(c.bit << 3 | u8::from(c.basis == Basis::X) << 2 | c.intensity)
}

/// The choice a nibble stands for: `Ok(None)` for "not recorded", `Err(())` for a reserved code.
#[allow(clippy::result_unit_err)]
pub fn decode_choice(code: u8) -> Result<Option<TxChoice>, ()> {
    let code = code & 0x0F;
    match code {
        CODE_NOT_RECORDED => Ok(None),
        CODE_VACUUM => Ok(Some(TxChoice {
            basis: Basis::Z,
            bit: 0,
            intensity: MARKER_VACUUM,
        })),
        c if c & 0b11 == 0b11 => Err(()),
        c => Ok(Some(TxChoice {
            basis: if c & 0b100 != 0 { Basis::X } else { Basis::Z },
            bit: c >> 3,
            intensity: c & 0b11,
        })),
    }
}

/// Protocol code of the header (255 = not stated).
pub fn protocol_code(p: Option<Protocol>) -> u8 {
    match p {
        Some(Protocol::Bb84) => 0,
        Some(Protocol::EfficientBb84) => 1,
        Some(Protocol::ThreeState) => 2,
        None => u8::MAX,
    }
}

/// The protocol of a header code; `Err` for a code without meaning.
pub fn protocol_of_code(code: u8) -> Result<Option<Protocol>, u8> {
    match code {
        0 => Ok(Some(Protocol::Bb84)),
        1 => Ok(Some(Protocol::EfficientBb84)),
        2 => Ok(Some(Protocol::ThreeState)),
        u8::MAX => Ok(None),
        c => Err(c),
    }
}

/// The protocol's name as written in the sparse form and in reports.
pub fn protocol_name(p: Option<Protocol>) -> &'static str {
    match p {
        Some(Protocol::Bb84) => "bb84",
        Some(Protocol::EfficientBb84) => "efficient-bb84",
        Some(Protocol::ThreeState) => "three-state",
        None => "unstated",
    }
}

/// What a record says about itself: the slots it covers, the transmitter's settings, the hello.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct TxRecordHeader {
    /// Format version, major in the high byte (set by readers; writers write the current one).
    pub version: u16,
    /// The transmitter's protocol, when stated.
    #[serde(serialize_with = "ser_protocol")]
    pub protocol: Option<Protocol>,
    /// Number of intensity classes (1..=3); every class index is below it.
    pub intensity_classes: u8,
    /// Flag bits ([`FLAG_MARKER`], [`FLAG_HELLO`], [`FLAG_SIMULATED`]).
    pub flags: u32,
    /// Slots per data block of the dense form (even, 2..=[`MAX_BLOCK_SLOTS`]).
    pub block_slots: u32,
    /// Slot number of the first slot covered (the transmitter's absolute counter).
    pub first_slot: u64,
    /// Number of slots covered, from `first_slot` on.
    pub slot_count: u64,
    /// Receiver time in ps on the capture's unwrapped time base, and the transmitter's slot
    /// counter at that time: the coarse numbering hint.
    pub hello: Option<(u64, u64)>,
}

fn ser_protocol<S: serde::Serializer>(p: &Option<Protocol>, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(protocol_name(*p))
}

impl TxRecordHeader {
    /// A header covering `slots` with `intensity_classes` classes; no marker, no hello, default
    /// block size, protocol unstated.
    pub fn new(slots: Range<u64>, intensity_classes: u8) -> Self {
        Self {
            version: FORMAT_VERSION,
            protocol: None,
            intensity_classes,
            flags: 0,
            block_slots: DEFAULT_BLOCK_SLOTS,
            first_slot: slots.start,
            slot_count: slots.end.saturating_sub(slots.start),
            hello: None,
        }
    }

    /// The same header with the transmitter's protocol stated.
    pub fn with_protocol(mut self, p: Protocol) -> Self {
        self.protocol = Some(p);
        self
    }

    /// The same header saying whether the marker contract applies.
    pub fn with_marker(mut self, marker: bool) -> Self {
        self.flags = (self.flags & !FLAG_MARKER) | if marker { FLAG_MARKER } else { 0 };
        self
    }

    /// The same header with a hello: receiver time `t_ps` and the transmitter's slot then.
    pub fn with_hello(mut self, t_ps: u64, slot: u64) -> Self {
        self.hello = Some((t_ps, slot));
        self.flags |= FLAG_HELLO;
        self
    }

    /// The same header with another block size in slots.
    pub fn with_block_slots(mut self, slots: u32) -> Self {
        self.block_slots = slots;
        self
    }

    /// The same header with the given flag bits set.
    pub fn with_flags(mut self, flags: u32) -> Self {
        self.flags |= flags;
        self
    }

    /// Whether marker slots follow the marker contract.
    pub fn marker(&self) -> bool {
        self.flags & FLAG_MARKER != 0
    }

    /// The slots covered, `first_slot .. first_slot + slot_count`.
    pub fn range(&self) -> Range<u64> {
        self.first_slot..self.first_slot.saturating_add(self.slot_count)
    }
}

#[derive(Clone, PartialEq, Eq)]
enum Store {
    /// One nibble per slot of the range, low nibble first.
    Dense(Vec<u8>),
    /// The recorded slots in ascending order with their nibbles.
    Sparse { slots: Vec<u64>, codes: Vec<u8> },
}

/// A transmitter record in memory (dense: half a byte per covered slot; sparse: nine bytes per
/// recorded slot).
#[derive(Clone, PartialEq, Eq)]
pub struct TxRecord {
    header: TxRecordHeader,
    store: Store,
    source: String,
}

impl fmt::Debug for TxRecord {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("TxRecord")
            .field("source", &self.source)
            .field("header", &self.header)
            .field("recorded", &self.recorded())
            .finish()
    }
}

impl TxRecord {
    /// Read a record from `path`: the dense form when the file starts with [`MAGIC`] (or has
    /// no `.csv` name and is not text), the sparse form otherwise. Errors name the file and the
    /// byte offset or line, and the field.
    pub fn load(path: impl AsRef<Path>) -> Result<Self, TxRecordError> {
        let path = path.as_ref();
        let name = path.display().to_string();
        let mut file = File::open(path).map_err(|e| TxRecordError::io(&name, &e))?;
        let mut head = [0u8; 8];
        let mut n = 0;
        while n < head.len() {
            match file.read(&mut head[n..]) {
                Ok(0) => break,
                Ok(k) => n += k,
                Err(e) => return Err(TxRecordError::io(&name, &e)),
            }
        }
        let rest = std::io::BufReader::new(std::io::Cursor::new(head[..n].to_vec()).chain(file));
        if is_sparse(path, &head[..n]) {
            read_sparse(rest, &name)
        } else {
            read_dense(rest, &name, false).map(|r| r.record)
        }
    }

    /// A record in memory holding `slots` (ascending, inside the header's range, each choice one
    /// the format can hold); `name` stands for its file in messages.
    pub fn from_slots(
        header: TxRecordHeader,
        slots: impl IntoIterator<Item = (u64, TxChoice)>,
        name: &str,
    ) -> Result<Self, String> {
        let (mut ks, mut codes) = (Vec::new(), Vec::new());
        for (k, c) in slots {
            let code = encode_choice(Some(c))
                .filter(|_| c.intensity == MARKER_VACUUM || c.intensity < header.intensity_classes)
                .ok_or_else(|| format!("{name}: slot {k}: {c:?} cannot be recorded"))?;
            if !header.range().contains(&k) || ks.last().is_some_and(|&l| k <= l) {
                return Err(format!(
                    "{name}: slot {k} is outside {:?} or not above the slot before",
                    header.range()
                ));
            }
            ks.push(k);
            codes.push(code);
        }
        Ok(Self::sparse(header, ks, codes, name))
    }

    pub(crate) fn dense(header: TxRecordHeader, nibbles: Vec<u8>, source: &str) -> Self {
        Self {
            header,
            store: Store::Dense(nibbles),
            source: source.to_owned(),
        }
    }

    pub(crate) fn sparse(
        header: TxRecordHeader,
        slots: Vec<u64>,
        codes: Vec<u8>,
        source: &str,
    ) -> Self {
        Self {
            header,
            store: Store::Sparse { slots, codes },
            source: source.to_owned(),
        }
    }

    /// The header as read.
    pub fn header(&self) -> &TxRecordHeader {
        &self.header
    }

    /// Name of the file it was read from.
    pub fn source(&self) -> &str {
        &self.source
    }

    /// Whether it was read from the sparse form.
    pub fn is_sparse(&self) -> bool {
        matches!(self.store, Store::Sparse { .. })
    }

    /// First slot covered (the transmitter's absolute slot number).
    pub fn first_slot(&self) -> u64 {
        self.header.first_slot
    }

    /// Number of slots covered.
    pub fn slot_count(&self) -> u64 {
        self.header.slot_count
    }

    /// The slots covered; only the recorded ones among them have a [`Self::choice`].
    pub fn range(&self) -> Range<u64> {
        self.header.range()
    }

    /// The hello: receiver time in ps (unwrapped time base) and the transmitter's slot then.
    pub fn hello(&self) -> Option<(u64, u64)> {
        self.header.hello
    }

    fn code(&self, slot: u64) -> u8 {
        if !self.range().contains(&slot) {
            return CODE_NOT_RECORDED;
        }
        match &self.store {
            Store::Dense(n) => {
                let i = slot - self.header.first_slot;
                let byte = usize::try_from(i / 2)
                    .ok()
                    .and_then(|j| n.get(j))
                    .copied()
                    .unwrap_or(CODE_NOT_RECORDED | CODE_NOT_RECORDED << 4);
                if i.is_multiple_of(2) {
                    byte & 0x0F
                } else {
                    byte >> 4
                }
            }
            Store::Sparse { slots, codes } => match slots.binary_search(&slot) {
                Ok(j) => codes.get(j).copied().unwrap_or(CODE_NOT_RECORDED),
                Err(_) => CODE_NOT_RECORDED,
            },
        }
    }

    /// What the transmitter sent in `slot`; `None` when the record does not hold that slot.
    pub fn choice(&self, slot: u64) -> Option<TxChoice> {
        decode_choice(self.code(slot)).ok().flatten()
    }

    /// Whether `slot` is a marker slot of the record's marker (never announced, never key).
    pub fn is_marker_slot(&self, slot: u64) -> bool {
        self.header.marker() && MarkerSpec::standard().is_marker_slot(slot)
    }

    /// Slots the record holds (every code but "not recorded").
    pub fn recorded(&self) -> u64 {
        match &self.store {
            Store::Dense(n) => {
                let covered = self.header.slot_count;
                let missing: u64 = n
                    .iter()
                    .map(|b| {
                        u64::from(b & 0x0F == CODE_NOT_RECORDED)
                            + u64::from(b >> 4 == CODE_NOT_RECORDED)
                    })
                    .sum();
                // An odd count leaves a zero padding nibble, which is not "not recorded".
                covered.saturating_sub(missing)
            }
            Store::Sparse { slots, .. } => slots.len() as u64,
        }
    }

    /// Number of recorded non-marker slots of each intensity class among `slots` (index = class;
    /// vacuum and unrecorded slots are not counted), as the seeded choices count them.
    pub fn count_sent(&self, slots: Range<u64>) -> [u64; 3] {
        let mut n = [0u64; 3];
        let mut add = |k: u64, code: u8| {
            if self.is_marker_slot(k) {
                return;
            }
            if let Ok(Some(c)) = decode_choice(code) {
                if let Some(x) = n.get_mut(usize::from(c.intensity)) {
                    *x += 1;
                }
            }
        };
        let r = self.range();
        match &self.store {
            Store::Dense(_) => {
                for k in slots.start.max(r.start)..slots.end.min(r.end) {
                    add(k, self.code(k));
                }
            }
            Store::Sparse { slots: s, codes } => {
                let lo = s.partition_point(|&k| k < slots.start);
                let hi = s.partition_point(|&k| k < slots.end);
                for (&k, &c) in s.iter().zip(codes).take(hi).skip(lo) {
                    add(k, c);
                }
            }
        }
        n
    }

    /// Every recorded slot in ascending order with its choice.
    pub fn iter(&self) -> Box<dyn Iterator<Item = (u64, TxChoice)> + '_> {
        match &self.store {
            Store::Dense(_) => {
                Box::new(self.range().filter_map(|k| self.choice(k).map(|c| (k, c))))
            }
            Store::Sparse { slots, codes } => Box::new(
                slots
                    .iter()
                    .zip(codes)
                    .filter_map(|(&k, &c)| decode_choice(c).ok().flatten().map(|c| (k, c))),
            ),
        }
    }

    /// Refuse the record for a run over `wanted` unless it covers all of it; the error names
    /// both ranges.
    pub fn check_range(&self, wanted: Range<u64>) -> Result<(), RangeMismatch> {
        let have = self.range();
        if wanted.is_empty() || (have.start <= wanted.start && wanted.end <= have.end) {
            return Ok(());
        }
        Err(RangeMismatch {
            source: self.source.clone(),
            record: have,
            wanted,
        })
    }
}

/// Whether `path` names a transmitter record: a `.swtx` file, a `.swtx.csv` file, or a file
/// starting with [`MAGIC`].
pub fn is_record_file(path: &Path) -> bool {
    let name = path.to_string_lossy().to_ascii_lowercase();
    if name.ends_with(".swtx") || name.ends_with(".swtx.csv") {
        return true;
    }
    let mut head = [0u8; 8];
    File::open(path)
        .and_then(|mut f| f.read_exact(&mut head))
        .is_ok_and(|()| head == MAGIC)
}

/// Sparse when the bytes do not start like the dense magic and the name ends in `.csv` or the
/// text starts like the sparse form (`#` or `slot`).
fn is_sparse(path: &Path, head: &[u8]) -> bool {
    if !head.is_empty() && MAGIC.starts_with(head) {
        return false;
    }
    let csv = path
        .extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"));
    csv || head.starts_with(b"#") || head.starts_with(b"slot")
}
