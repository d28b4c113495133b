//! Errors of the capture reader: every one names the file, the byte offset, the block (if any)
//! and the field that was wrong, so a damaged capture can be located with a hex viewer.

use std::fmt;
use std::io;

/// What was wrong with the bytes at [`CaptureError::offset`].
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum ErrorKind {
    /// The file holds no bytes at all.
    Empty,
    /// The file ends at the error's offset, inside the named field.
    Truncated {
        /// Bytes still needed to complete the header or record.
        missing: u64,
    },
    /// The first eight bytes are not the capture magic.
    BadMagic {
        /// The bytes found (fewer than eight if the file is shorter).
        found: Vec<u8>,
    },
    /// The format version's major number is newer than this reader understands.
    UnsupportedVersion {
        /// The version found, major in the high byte, minor in the low byte.
        found: u16,
    },
    /// A stored CRC-32C does not match the bytes it covers.
    CrcMismatch {
        /// CRC stored in the file.
        stored: u32,
        /// CRC computed over the covered bytes.
        computed: u32,
        /// Byte offset where the covered range starts (it ends at the CRC field).
        covered_from: u64,
    },
    /// Neither a block sync word nor an end-record sync word where a record must start.
    BadSync {
        /// The four bytes found.
        found: [u8; 4],
    },
    /// A number outside the range the format allows.
    OutOfRange {
        /// The value found.
        value: u64,
        /// Smallest allowed value.
        min: u64,
        /// Largest allowed value.
        max: u64,
    },
    /// Flag bits in the "must understand" half that this reader does not know.
    UnknownFlags {
        /// The unknown bits.
        bits: u32,
    },
    /// The metadata blob is not valid UTF-8.
    NotUtf8 {
        /// Length of the valid UTF-8 prefix in bytes.
        valid_up_to: u64,
    },
    /// A varint continues past the end of the payload.
    VarintOverrun,
    /// A varint is longer than 10 bytes or exceeds 2^64 − 1.
    VarintTooLong,
    /// The payload ends where an event's channel byte should be.
    PayloadOverrun,
    /// Bytes left over in the payload after the last event.
    TrailingPayload {
        /// Unused bytes.
        unused: u64,
    },
    /// A counter value or step has bits above the declared counter width.
    TooWide {
        /// The value found.
        value: u64,
        /// Declared counter width in bits.
        bits: u8,
    },
    /// An event's channel is not below the header's channel count.
    ChannelOutOfRange {
        /// The channel found.
        channel: u8,
        /// Channel count from the header.
        channel_count: u8,
    },
    /// A block carries another index than the one that must come next.
    IndexMismatch {
        /// Index expected at this position.
        expected: u64,
        /// Index stored in the block.
        found: u64,
    },
    /// A declared count disagrees with what the file holds.
    CountMismatch {
        /// What is counted ("blocks" or "events").
        what: &'static str,
        /// Count declared in the file.
        declared: u64,
        /// Count actually found.
        found: u64,
        /// Byte offset where the data ended.
        end_offset: u64,
    },
    /// The data stops at a record boundary without the end record.
    MissingEndRecord {
        /// Blocks read before the end of the file.
        blocks: u64,
    },
    /// Bytes follow the end record.
    TrailingData,
    /// The underlying reader failed.
    Io {
        /// The I/O error's kind.
        kind: io::ErrorKind,
        /// The I/O error's message.
        message: String,
    },
}

/// A capture could not be read: which file, where, which field, and why.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct CaptureError {
    /// Name of the file (or stream) as given to the reader.
    pub source: String,
    /// Byte offset of the offending field from the start of the capture.
    pub offset: u64,
    /// Index of the block the field belongs to, if it belongs to a block.
    pub block: Option<u64>,
    /// Name of the field as in `docs/capture-format.md` (e.g. `magic`, `block_crc`, `varint`).
    pub field: &'static str,
    /// What was wrong.
    pub kind: ErrorKind,
}

impl CaptureError {
    /// An error for an I/O failure outside any field (opening, reading, writing a file).
    pub fn io(source: &str, offset: u64, e: &io::Error) -> Self {
        Self {
            source: source.to_owned(),
            offset,
            block: None,
            field: "file",
            kind: ErrorKind::Io {
                kind: e.kind(),
                message: e.to_string(),
            },
        }
    }
}

/// A located fault before the reader adds the source name.
#[derive(Clone, Debug, PartialEq, Eq)]
pub(crate) struct Fault {
    pub offset: u64,
    pub block: Option<u64>,
    pub field: &'static str,
    pub kind: ErrorKind,
}

impl Fault {
    pub(crate) fn new(offset: u64, field: &'static str, kind: ErrorKind) -> Self {
        Self {
            offset,
            block: None,
            field,
            kind,
        }
    }

    pub(crate) fn in_block(mut self, block: u64) -> Self {
        self.block = Some(block);
        self
    }

    pub(crate) fn with_source(self, source: &str) -> CaptureError {
        CaptureError {
            source: source.to_owned(),
            offset: self.offset,
            block: self.block,
            field: self.field,
            kind: self.kind,
        }
    }

    pub(crate) fn is_io(&self) -> bool {
        matches!(self.kind, ErrorKind::Io { .. })
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02X}")).collect()
}

impl fmt::Display for ErrorKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Empty => write!(f, "file is empty (no capture header)"),
            Self::Truncated { missing } => write!(
                f,
                "truncated: the file ends here, {missing} more bytes are needed to complete the record"
            ),
            Self::BadMagic { found } => write!(
                f,
                "not a slotwise capture (found 0x{}, expected \"SLOTWCAP\")",
                hex(found)
            ),
            Self::UnsupportedVersion { found } => write!(
                f,
                "format version {}.{} is newer than this reader, which supports major version {}",
                found >> 8,
                found & 0xFF,
                super::FORMAT_MAJOR
            ),
            Self::CrcMismatch {
                stored,
                computed,
                covered_from,
            } => write!(
                f,
                "CRC mismatch (stored 0x{stored:08X}, computed 0x{computed:08X} over bytes from {covered_from})"
            ),
            Self::BadSync { found } => write!(
                f,
                "expected block sync \"SWBK\" or end record \"SWEN\", found 0x{}",
                hex(found)
            ),
            Self::OutOfRange { value, min, max } => {
                write!(f, "value {value} is outside the allowed {min}..={max}")
            }
            Self::UnknownFlags { bits } => write!(
                f,
                "flag bits 0x{bits:08X} must be understood but are unknown to this reader"
            ),
            Self::NotUtf8 { valid_up_to } => {
                write!(f, "not UTF-8 after the first {valid_up_to} bytes")
            }
            Self::VarintOverrun => write!(f, "varint runs past the end of the payload"),
            Self::VarintTooLong => write!(f, "varint longer than 10 bytes or above 2^64-1"),
            Self::PayloadOverrun => write!(f, "payload ends where a channel byte should be"),
            Self::TrailingPayload { unused } => {
                write!(f, "{unused} bytes left in the payload after the last event")
            }
            Self::TooWide { value, bits } => write!(
                f,
                "value 0x{value:X} is wider than the declared {bits}-bit counter"
            ),
            Self::ChannelOutOfRange {
                channel,
                channel_count,
            } => write!(
                f,
                "channel {channel} is not below the header's channel count {channel_count}"
            ),
            Self::IndexMismatch { expected, found } => {
                write!(f, "block index {found} where block {expected} must come")
            }
            Self::CountMismatch {
                what,
                declared,
                found,
                end_offset,
            } => write!(
                f,
                "declares {declared} {what}, the file holds {found} (data ends at byte {end_offset})"
            ),
            Self::MissingEndRecord { blocks } => write!(
                f,
                "file ends after {blocks} blocks without an end record (truncated, or the writer never finished)"
            ),
            Self::TrailingData => write!(f, "data follows the end record"),
            Self::Io { kind, message } => write!(f, "I/O error ({kind:?}): {message}"),
        }
    }
}

impl fmt::Display for CaptureError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: byte {}", self.source, self.offset)?;
        if let Some(b) = self.block {
            write!(f, " (block {b})")?;
        }
        write!(f, ", field '{}': {}", self.field, self.kind)
    }
}

impl std::error::Error for CaptureError {}
