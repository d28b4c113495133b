//! Errors of the record readers: every one names the file, the place (byte offset and block of
//! the dense form, line and column of the sparse one) and the field, in the capture's style.

use crate::capture::ErrorKind;
use std::fmt;
use std::io;
use std::ops::Range;

/// What was wrong at an error's place.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum TxErrorKind {
    /// A fault the capture format shares (CRC, range, truncation, counts, trailing data, I/O).
    Common(ErrorKind),
    /// The first eight bytes are not the record magic.
    BadMagic {
        /// The bytes found (fewer than eight if the file is shorter).
        found: Vec<u8>,
    },
    /// Not the sync word that must start the record at this place.
    BadSync {
        /// The four bytes found.
        found: [u8; 4],
        /// The sync word expected there.
        expected: [u8; 4],
    },
    /// A slot code that is reserved, or an intensity class at or above the header's count.
    BadCode {
        /// Slot the code belongs to.
        slot: u64,
        /// The nibble found.
        code: u8,
    },
    /// A padding nibble that is not zero.
    BadPadding {
        /// The nibble found.
        code: u8,
    },
    /// A sparse field that does not parse or is outside its values.
    BadValue {
        /// The text found.
        found: String,
        /// What the field takes.
        expected: &'static str,
    },
    /// A sparse slot not above the one before it.
    NotAscending {
        /// The slot found.
        slot: u64,
        /// The slot of the line before.
        previous: u64,
    },
    /// A sparse slot outside the header's range.
    OutsideRange {
        /// The slot found.
        slot: u64,
        /// The header's range.
        range: Range<u64>,
    },
    /// A header field the sparse form needs is missing.
    MissingField,
}

/// Where in a file an error is.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Location {
    /// Dense form: byte offset from the start of the file, and the block if the field is in one.
    Byte {
        /// Byte offset of the field.
        offset: u64,
        /// Index of the block the field belongs to.
        block: Option<u64>,
    },
    /// Sparse form: line number (1-based) and column (1-based, 0 for the whole line).
    Line {
        /// Line number.
        line: u64,
        /// Column number of the field, 0 when the fault is not in one column.
        column: u32,
    },
}

/// A record could not be read: which file, where, which field, and why.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TxRecordError {
    /// Name of the file as given to the reader.
    pub source: String,
    /// Where the offending field is.
    pub at: Location,
    /// Name of the field as in `docs/transmitter-record.md` (e.g. `magic`, `block_crc`, `bit`).
    pub field: &'static str,
    /// What was wrong.
    pub kind: TxErrorKind,
}

impl TxRecordError {
    /// An error at byte `offset` of the dense form.
    pub(crate) fn at_byte(
        source: &str,
        offset: u64,
        field: &'static str,
        kind: TxErrorKind,
    ) -> Self {
        Self {
            source: source.to_owned(),
            at: Location::Byte {
                offset,
                block: None,
            },
            field,
            kind,
        }
    }

    /// An error at `line`, `column` of the sparse form.
    pub(crate) fn at_line(
        source: &str,
        line: u64,
        column: u32,
        field: &'static str,
        kind: TxErrorKind,
    ) -> Self {
        Self {
            source: source.to_owned(),
            at: Location::Line { line, column },
            field,
            kind,
        }
    }

    /// The same error placed in block `b`.
    pub(crate) fn in_block(mut self, b: u64) -> Self {
        if let Location::Byte { block, .. } = &mut self.at {
            *block = Some(b);
        }
        self
    }

    /// An I/O failure outside any field (opening or reading the file).
    pub fn io(source: &str, e: &io::Error) -> Self {
        Self::at_byte(
            source,
            0,
            "file",
            TxErrorKind::Common(ErrorKind::Io {
                kind: e.kind(),
                message: e.to_string(),
            }),
        )
    }

    /// Byte offset of the field (dense form).
    pub fn offset(&self) -> Option<u64> {
        match self.at {
            Location::Byte { offset, .. } => Some(offset),
            Location::Line { .. } => None,
        }
    }

    /// Line number of the field (sparse form).
    pub fn line(&self) -> Option<u64> {
        match self.at {
            Location::Line { line, .. } => Some(line),
            Location::Byte { .. } => None,
        }
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02X}")).collect()
}

impl fmt::Display for TxErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Common(k) => write!(f, "{k}"),
            Self::BadMagic { found } => write!(
                f,
                "not a slotwise transmitter record (found 0x{}, expected \"SLOTWTXR\")",
                hex(found)
            ),
            Self::BadSync { found, expected } => write!(
                f,
                "expected \"{}\", found 0x{}",
                String::from_utf8_lossy(expected),
                hex(found)
            ),
            Self::BadCode { slot, code } => write!(
                f,
                "slot {slot}: code 0x{code:X} is reserved or names an intensity class the header \
                 does not have"
            ),
            Self::BadPadding { code } => {
                write!(f, "padding nibble 0x{code:X} after the last slot must be 0")
            }
            Self::BadValue { found, expected } => {
                write!(f, "found {found:?}, expected {expected}")
            }
            Self::NotAscending { slot, previous } => write!(
                f,
                "slot {slot} does not come after slot {previous}: slots must ascend"
            ),
            Self::OutsideRange { slot, range } => write!(
                f,
                "slot {slot} is outside the record's slots {}..{}",
                range.start, range.end
            ),
            Self::MissingField => write!(f, "missing: the header lines must give it"),
        }
    }
}

impl fmt::Display for TxRecordError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.at {
            Location::Byte { offset, block } => {
                write!(f, "{}: byte {offset}", self.source)?;
                if let Some(b) = block {
                    write!(f, " (block {b})")?;
                }
            }
            Location::Line { line, column: 0 } => write!(f, "{}: line {line}", self.source)?,
            Location::Line { line, column } => {
                write!(f, "{}: line {line}, column {column}", self.source)?
            }
        }
        write!(f, ", field '{}': {}", self.field, self.kind)
    }
}

impl std::error::Error for TxRecordError {}

/// A record asked to answer for slots it does not cover.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RangeMismatch {
    /// Name of the record's file.
    pub source: String,
    /// The slots the record covers.
    pub record: Range<u64>,
    /// The slots the run needs.
    pub wanted: Range<u64>,
}

impl fmt::Display for RangeMismatch {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}: the transmitter record covers slots {}..{}, the run needs slots {}..{}; give \
             the record of this run",
            self.source, self.record.start, self.record.end, self.wanted.start, self.wanted.end
        )
    }
}

impl std::error::Error for RangeMismatch {}
