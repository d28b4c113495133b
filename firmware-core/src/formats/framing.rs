//! The frame around every record: header, CRC-32C and COBS, for the host link and the sifting link.
//!
//! A frame is `COBS(version u8 | type u8 | seq u16 | len u16 | payload | crc u32)` followed by one
//! 0x00 delimiter; every integer is little-endian and the CRC is CRC-32/ISCSI (Castagnoli) over
//! everything before it (parameters from Cook's catalogue of parametrised CRC algorithms). COBS is
//! Cheshire & Baker's byte stuffing (IEEE/ACM Trans. Networking 7(2), 1999, [`super::cobs`]): a
//! receiver that joins mid-stream or loses bytes resynchronises at the next 0x00.
//! `docs/frames.md` gives the layout field by field.
//!
//! The record types are listed once, in [`RecordType`]; each payload's layout lives in its own
//! module beside this one.
//!
//! An authenticated frame (version [`VERSION_TAGGED`]) carries a [`TAG_LEN`]-byte
//! Wegman-Carter tag between its payload and its CRC ([`super::tag`] computes it; the endpoint
//! checks it). `len` counts the payload only.

use super::cobs::{self, CobsError};
use core::fmt;

/// Frame format version of an untagged frame.
pub const VERSION: u8 = 1;
/// Frame format version of a frame carrying an authentication tag after its payload.
pub const VERSION_TAGGED: u8 = 2;
/// Bytes of the authentication tag of a tagged frame (64 bits).
pub const TAG_LEN: usize = 8;
/// Bytes before the payload: version, type, seq, len.
pub const HEADER_LEN: usize = 6;
/// Bytes of the CRC after the payload.
pub const CRC_LEN: usize = 4;
/// Largest payload any record type uses, in bytes: the summary's
/// ([`super::summary::LEN`], checked there).
pub const MAX_PAYLOAD: usize = 1104;
/// Largest payload of a sifting-link record (announce, answers, key refill, round), in bytes:
/// the link's batching and its records' limits are set by this, not by the board's larger
/// summary record.
pub const LINK_MAX_PAYLOAD: usize = 1056;

const _: () = assert!(LINK_MAX_PAYLOAD <= MAX_PAYLOAD);
/// Largest unstuffed frame (header, payload, tag, CRC), in bytes.
pub const MAX_RAW: usize = HEADER_LEN + MAX_PAYLOAD + TAG_LEN + CRC_LEN;
/// Largest frame on the wire, COBS overhead and 0x00 delimiter included, in bytes.
pub const MAX_FRAME: usize = cobs::max_encoded_len(MAX_RAW) + 1;

const CRC: crc::Crc<u32> = crc::Crc::<u32>::new(&crc::CRC_32_ISCSI);

const _: () = assert!(MAX_PAYLOAD <= u16::MAX as usize);

/// CRC-32/ISCSI of `bytes` (the frame check value).
pub fn crc32c(bytes: &[u8]) -> u32 {
    CRC.checksum(bytes)
}

/// The record types a frame can carry: the one list every other module reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RecordType {
    /// Sifted key bits with per-bit basis, intensity and flags ([`super::key_block`]).
    KeyBlock = 1,
    /// Every counter of the receiver, at the end of a run ([`super::summary`]).
    Summary = 2,
    /// Receiver to transmitter: a batch of detected slots with the receiver's basis
    /// ([`super::announce`]).
    Announce = 3,
    /// Transmitter to receiver: the answers to one announce frame ([`super::answers`]).
    Answers = 4,
    /// An alarm raised or cleared ([`super::alarm`]).
    Alarm = 5,
    /// Window statistics at the end of a block ([`super::statistics`]).
    Stats = 6,
    /// Post-processing host to board: fresh key for the authentication pool ([`super::refill`]).
    KeyRefill = 7,
    /// Both ways on the sifting link: round tags and the receiver's round verdicts
    /// ([`super::round`]).
    RoundTag = 8,
    /// Board to post-processing host: a round's verdict and slot range; the host keeps the
    /// round's key bits only if it verified ([`super::round`]).
    RoundVerdict = 9,
}

impl RecordType {
    /// Every record type, in wire-code order.
    pub const ALL: [RecordType; 9] = [
        Self::KeyBlock,
        Self::Summary,
        Self::Announce,
        Self::Answers,
        Self::Alarm,
        Self::Stats,
        Self::KeyRefill,
        Self::RoundTag,
        Self::RoundVerdict,
    ];

    /// Short snake-case name for reports.
    pub const fn name(self) -> &'static str {
        match self {
            Self::KeyBlock => "key_block",
            Self::Summary => "summary",
            Self::Announce => "announce",
            Self::Answers => "answers",
            Self::Alarm => "alarm",
            Self::Stats => "stats",
            Self::KeyRefill => "key_refill",
            Self::RoundTag => "round_tag",
            Self::RoundVerdict => "round_verdict",
        }
    }

    /// The wire code in the header's type byte.
    pub const fn code(self) -> u8 {
        self as u8
    }

    /// The type for a wire code, if known.
    pub const fn from_code(code: u8) -> Option<Self> {
        let mut rest: &[Self] = &Self::ALL;
        while let [t, tail @ ..] = rest {
            if t.code() == code {
                return Some(*t);
            }
            rest = tail;
        }
        None
    }
}

impl fmt::Display for RecordType {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Why a frame or record could not be built or read.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum FrameError {
    /// The output buffer is too small; `needed` bytes would do.
    BufferTooSmall {
        /// Bytes needed.
        needed: usize,
    },
    /// A payload longer than [`MAX_PAYLOAD`] was handed to the encoder.
    PayloadTooLong {
        /// Payload length in bytes.
        len: usize,
    },
    /// Broken byte stuffing: a 0x00 inside the frame, or a block running past its end.
    Cobs {
        /// Byte offset in the stuffed frame.
        offset: usize,
    },
    /// The unstuffed frame or record ends before its fields do.
    Truncated {
        /// Byte offset (in the unstuffed frame or payload) where more bytes were needed.
        offset: usize,
    },
    /// The CRC does not match the frame's contents.
    BadCrc {
        /// CRC stored in the frame.
        stored: u32,
        /// CRC computed over the frame.
        computed: u32,
    },
    /// Version byte other than [`VERSION`] or [`VERSION_TAGGED`].
    UnknownVersion(u8),
    /// Record type code not in [`RecordType`].
    UnknownType(u8),
    /// Declared payload length above [`MAX_PAYLOAD`].
    Oversized(u16),
    /// Declared payload length differs from the bytes present.
    LengthMismatch {
        /// Length in the header, bytes.
        declared: u16,
        /// Payload bytes present.
        actual: usize,
    },
    /// More stuffed bytes than the largest frame before a 0x00 delimiter.
    Overlong {
        /// Stuffed bytes taken before giving up on the frame.
        bytes: usize,
    },
    /// The payload ends inside or before a named field of a record (a record whose fields depend
    /// on a format word it carries, so the missing field is known).
    TruncatedField {
        /// Byte offset of the field in the payload.
        offset: usize,
        /// Field name.
        field: &'static str,
    },
    /// A record field holds a value outside its range.
    BadField {
        /// Byte offset of the field in the payload.
        offset: usize,
        /// Field name.
        field: &'static str,
    },
}

impl fmt::Display for FrameError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::BufferTooSmall { needed } => write!(f, "buffer too small: {needed} bytes needed"),
            Self::PayloadTooLong { len } => {
                write!(f, "payload of {len} bytes exceeds {MAX_PAYLOAD}")
            }
            Self::Cobs { offset } => write!(f, "byte stuffing broken at stuffed byte {offset}"),
            Self::Truncated { offset } => write!(f, "ends at byte {offset} before its fields do"),
            Self::BadCrc { stored, computed } => {
                write!(
                    f,
                    "crc field 0x{stored:08X} but contents give 0x{computed:08X}"
                )
            }
            Self::UnknownVersion(v) => write!(f, "version field {v}; expected {VERSION}"),
            Self::UnknownType(t) => write!(f, "type field {t} is not a known record type"),
            Self::Oversized(n) => write!(f, "len field {n} exceeds {MAX_PAYLOAD}"),
            Self::LengthMismatch { declared, actual } => {
                write!(f, "len field {declared} but {actual} payload bytes present")
            }
            Self::Overlong { bytes } => {
                write!(
                    f,
                    "{bytes} stuffed bytes without a delimiter; at most {MAX_FRAME}"
                )
            }
            Self::TruncatedField { offset, field } => {
                write!(
                    f,
                    "ends before field {field} at payload byte {offset} is complete"
                )
            }
            Self::BadField { offset, field } => {
                write!(f, "field {field} at payload byte {offset} out of range")
            }
        }
    }
}

impl core::error::Error for FrameError {}

/// One decoded frame, borrowing its payload from the caller's scratch buffer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Frame<'a> {
    /// Record type.
    pub record: RecordType,
    /// Sequence number (wraps at 2^16).
    pub seq: u16,
    /// Payload bytes.
    pub payload: &'a [u8],
    /// The authentication tag of a tagged frame (version [`VERSION_TAGGED`]), else `None`.
    pub tag: Option<[u8; TAG_LEN]>,
}

/// Build one frame into `out`: header, payload, CRC, COBS, 0x00. Returns bytes written.
pub fn encode_frame(
    record: RecordType,
    seq: u16,
    payload: &[u8],
    raw: &mut [u8],
    out: &mut [u8],
) -> Result<usize, FrameError> {
    let len = payload.len();
    if len > MAX_PAYLOAD {
        return Err(FrameError::PayloadTooLong { len });
    }
    let total = HEADER_LEN + len + CRC_LEN;
    let buf = raw
        .get_mut(..total)
        .ok_or(FrameError::BufferTooSmall { needed: total })?;
    let (head, rest) = buf.split_at_mut(HEADER_LEN);
    let (body, _) = rest.split_at_mut(len);
    body.copy_from_slice(payload);
    write_header(head, VERSION, record, seq, len);
    seal(raw, total, out)
}

/// As [`encode_frame`], for a tagged frame: `tag` goes between the payload and the CRC.
pub fn encode_frame_tagged(
    record: RecordType,
    seq: u16,
    payload: &[u8],
    tag: &[u8; TAG_LEN],
    raw: &mut [u8],
    out: &mut [u8],
) -> Result<usize, FrameError> {
    let len = payload.len();
    if len > MAX_PAYLOAD {
        return Err(FrameError::PayloadTooLong { len });
    }
    let body = raw
        .get_mut(HEADER_LEN..HEADER_LEN + len)
        .ok_or(FrameError::BufferTooSmall {
            needed: HEADER_LEN + len + TAG_LEN + CRC_LEN,
        })?;
    body.copy_from_slice(payload);
    seal_in_place_tagged(record, seq, len, tag, raw, out)
}

fn write_header(head: &mut [u8], version: u8, record: RecordType, seq: u16, len: usize) {
    let s = seq.to_le_bytes();
    let l = (len as u16).to_le_bytes();
    for (d, b) in head
        .iter_mut()
        .zip([version, record.code(), s[0], s[1], l[0], l[1]])
    {
        *d = b;
    }
}

/// Frame a payload already placed at `raw[HEADER_LEN..HEADER_LEN + len]`: header, CRC, COBS and
/// delimiter into `out`. Returns bytes written.
pub fn seal_in_place(
    record: RecordType,
    seq: u16,
    len: usize,
    raw: &mut [u8],
    out: &mut [u8],
) -> Result<usize, FrameError> {
    if len > MAX_PAYLOAD {
        return Err(FrameError::PayloadTooLong { len });
    }
    let head = raw
        .get_mut(..HEADER_LEN)
        .ok_or(FrameError::BufferTooSmall { needed: HEADER_LEN })?;
    write_header(head, VERSION, record, seq, len);
    seal(raw, HEADER_LEN + len + CRC_LEN, out)
}

/// As [`seal_in_place`], for a tagged frame: writes `tag` after the payload, then the CRC.
pub fn seal_in_place_tagged(
    record: RecordType,
    seq: u16,
    len: usize,
    tag: &[u8; TAG_LEN],
    raw: &mut [u8],
    out: &mut [u8],
) -> Result<usize, FrameError> {
    if len > MAX_PAYLOAD {
        return Err(FrameError::PayloadTooLong { len });
    }
    let total = HEADER_LEN + len + TAG_LEN + CRC_LEN;
    let head = raw
        .get_mut(..HEADER_LEN)
        .ok_or(FrameError::BufferTooSmall { needed: total })?;
    write_header(head, VERSION_TAGGED, record, seq, len);
    raw.get_mut(HEADER_LEN + len..HEADER_LEN + len + TAG_LEN)
        .ok_or(FrameError::BufferTooSmall { needed: total })?
        .copy_from_slice(tag);
    seal(raw, total, out)
}

/// CRC over `raw[..total - 4]` into its last 4 bytes, then COBS into `out` with the delimiter.
fn seal(raw: &mut [u8], total: usize, out: &mut [u8]) -> Result<usize, FrameError> {
    let body_len = total - CRC_LEN;
    let crc = crc32c(raw.get(..body_len).unwrap_or(&[]));
    raw.get_mut(body_len..total)
        .ok_or(FrameError::BufferTooSmall { needed: total })?
        .copy_from_slice(&crc.to_le_bytes());
    let n = cobs::encode(raw.get(..total).unwrap_or(&[]), out)?;
    match out.get_mut(n) {
        Some(d) => *d = 0,
        None => return Err(FrameError::BufferTooSmall { needed: n + 1 }),
    }
    Ok(n + 1)
}

/// Decode one stuffed frame (a trailing 0x00 delimiter is allowed) using `scratch` for the
/// unstuffed bytes. Never panics, whatever the input.
pub fn decode_frame<'a>(stuffed: &[u8], scratch: &'a mut [u8]) -> Result<Frame<'a>, FrameError> {
    let stuffed = match stuffed.split_last() {
        Some((0, rest)) => rest,
        _ => stuffed,
    };
    let n = cobs::decode(stuffed, scratch)?;
    let raw: &'a [u8] = scratch.get(..n).unwrap_or(&[]);
    if n < HEADER_LEN + CRC_LEN {
        return Err(FrameError::Truncated { offset: n });
    }
    let (body, crc_bytes) = raw.split_at(n - CRC_LEN);
    let stored = u32::from_le_bytes(le_array(crc_bytes));
    let computed = crc32c(body);
    if stored != computed {
        return Err(FrameError::BadCrc { stored, computed });
    }
    let (head, payload) = body.split_at(HEADER_LEN);
    let h: [u8; HEADER_LEN] = le_array(head);
    let [version, code, s0, s1, l0, l1] = h;
    let tag_len = match version {
        VERSION => 0,
        VERSION_TAGGED => TAG_LEN,
        v => return Err(FrameError::UnknownVersion(v)),
    };
    let record = RecordType::from_code(code).ok_or(FrameError::UnknownType(code))?;
    let declared = u16::from_le_bytes([l0, l1]);
    if usize::from(declared) > MAX_PAYLOAD {
        return Err(FrameError::Oversized(declared));
    }
    let actual = payload.len().saturating_sub(tag_len);
    if payload.len() < tag_len || usize::from(declared) != actual {
        return Err(FrameError::LengthMismatch { declared, actual });
    }
    let (payload, tag_bytes) = payload.split_at(actual);
    Ok(Frame {
        record,
        seq: u16::from_le_bytes([s0, s1]),
        payload,
        tag: (tag_len > 0).then(|| le_array(tag_bytes)),
    })
}

fn le_array<const N: usize>(bytes: &[u8]) -> [u8; N] {
    let mut a = [0u8; N];
    for (d, s) in a.iter_mut().zip(bytes) {
        *d = *s;
    }
    a
}

impl From<CobsError> for FrameError {
    fn from(e: CobsError) -> Self {
        match e {
            CobsError::BufferTooSmall { needed } => Self::BufferTooSmall { needed },
            CobsError::Broken { offset } => Self::Cobs { offset },
        }
    }
}

#[cfg(test)]
mod tests;
