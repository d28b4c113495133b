//! Stage 8 — wire frames out: CRC-protected, byte-stuffed records for the post-processing host.
//!
//! A frame is `COBS(version u8 | type u8 | seq u16 | len u16 | payload | crc u32)` followed by one
//! 0x00 delimiter; every integer is little-endian and the CRC is CRC-32/ISCSI (Castagnoli) over
//! everything before it (parameters from Cook's catalogue of parametrised CRC algorithms). COBS is
//! Cheshire & Baker's byte stuffing (IEEE/ACM Trans. Networking 7(2), 1999): a receiver that
//! joins mid-stream or loses bytes resynchronises at the next 0x00. `docs/frames.md` gives the
//! layout field by field.
//!
//! Two records exist: [`RecordType::KeyBlock`] carries sifted bits with their basis, intensity and
//! flags, emitted every `BITS` bits and at the end; [`RecordType::Summary`] carries every counter
//! of the receiver at the end. [`FrameOut`] is a [`KeySink`] that builds both in fixed buffers and
//! hands each finished frame to a [`FrameSink`] (a UART, a USB endpoint, a file).
//!
//! The live monitor adds [`RecordType::Alarm`] (an alarm raised or cleared,
//! [`crate::alarms::AlarmEvent`]) and [`RecordType::Stats`] (the window's statistics at the end
//! of a block, [`crate::stats::Snapshot`]); [`FrameOut::record`] sends either between key blocks.

pub mod cobs;

use crate::accounting::{Accounting, AnswerErrors, Fate, MultiClickEvents};
use crate::clock::SlotClock;
use crate::gates::{Basis, MAX_INTENSITIES};
use crate::numbering::Numbering;
use crate::receiver::Receiver;
use crate::sift::{KeySink, SiftedBit};
use crate::tally::Tally;
use core::fmt;

/// Frame format version written into every frame.
pub const VERSION: u8 = 1;
/// Bytes before the payload: version, type, seq, len.
pub const HEADER_LEN: usize = 6;
/// Bytes of the CRC after the payload.
pub const CRC_LEN: usize = 4;
/// Number of u64 counters in a [`Summary`] payload.
pub const SUMMARY_WORDS: usize = 2 + ACCOUNTING_WORDS + 5 + 2 + 2 * TALLY_WORDS + 2;
/// Words of the accounting block in a summary record (one per counter).
pub const ACCOUNTING_WORDS: usize = Fate::COUNT;
/// Bytes of a [`Summary`] payload.
pub const SUMMARY_LEN: usize = 8 * SUMMARY_WORDS;
/// Largest payload any record type uses, in bytes.
pub const MAX_PAYLOAD: usize = SUMMARY_LEN;
/// Largest unstuffed frame (header, payload, CRC), in bytes.
pub const MAX_RAW: usize = HEADER_LEN + MAX_PAYLOAD + CRC_LEN;
/// Largest frame on the wire, COBS overhead and 0x00 delimiter included, in bytes.
pub const MAX_FRAME: usize = cobs::max_encoded_len(MAX_RAW) + 1;
/// Most sifted bits one key block can carry.
pub const MAX_KEY_BITS: usize = 1024;
/// Largest payload [`FrameOut::record`] frames, in bytes (alarm and statistics records fit).
pub const SMALL_RECORD: usize = 256;
/// Bytes before the bitmaps in a key block: first slot, last slot, bit count.
pub const KEY_BLOCK_FIXED: usize = 18;

const TALLY_WORDS: usize = 2 * 2 * MAX_INTENSITIES * 2 * 2 + MAX_INTENSITIES * 2;
const CRC: crc::Crc<u32> = crc::Crc::<u32>::new(&crc::CRC_32_ISCSI);

const _: () = assert!(key_block_len(MAX_KEY_BITS) <= MAX_PAYLOAD);
const _: () = assert!(MAX_PAYLOAD <= u16::MAX as usize);

/// Payload bytes of a key block with `n_bits` bits: 18 + 4 bitmaps of ⌈n/8⌉ + ⌈n/4⌉ intensity bytes.
pub const fn key_block_len(n_bits: usize) -> usize {
    KEY_BLOCK_FIXED + 4 * n_bits.div_ceil(8) + n_bits.div_ceil(4)
}

/// CRC-32/ISCSI of `bytes` (the frame check value).
pub fn crc32c(bytes: &[u8]) -> u32 {
    CRC.checksum(bytes)
}

/// The record types a frame can carry.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RecordType {
    /// Sifted key bits with per-bit basis, intensity and flags.
    KeyBlock = 1,
    /// Every counter of the receiver, at the end of a run.
    Summary = 2,
    /// Receiver to transmitter: a batch of detected slots with the receiver's basis (`wire`).
    Announce = 3,
    /// Transmitter to receiver: the answers to one announce frame (`wire`).
    Answers = 4,
    /// An alarm raised or cleared ([`crate::alarms::AlarmEvent`]).
    Alarm = 5,
    /// Window statistics at the end of a block ([`crate::stats::Snapshot`]).
    Stats = 6,
}

impl RecordType {
    /// The type for a wire code, if known.
    pub const fn from_code(code: u8) -> Option<Self> {
        match code {
            1 => Some(Self::KeyBlock),
            2 => Some(Self::Summary),
            3 => Some(Self::Announce),
            4 => Some(Self::Answers),
            5 => Some(Self::Alarm),
            6 => Some(Self::Stats),
            _ => None,
        }
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
    /// Version byte other than [`VERSION`].
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
    write_header(head, record, seq, len);
    seal(raw, total, out)
}

fn write_header(head: &mut [u8], record: RecordType, seq: u16, len: usize) {
    let s = seq.to_le_bytes();
    let l = (len as u16).to_le_bytes();
    for (d, b) in head
        .iter_mut()
        .zip([VERSION, record as u8, s[0], s[1], l[0], l[1]])
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
    write_header(head, record, seq, len);
    seal(raw, HEADER_LEN + len + CRC_LEN, out)
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
    if version != VERSION {
        return Err(FrameError::UnknownVersion(version));
    }
    let record = RecordType::from_code(code).ok_or(FrameError::UnknownType(code))?;
    let declared = u16::from_le_bytes([l0, l1]);
    if usize::from(declared) > MAX_PAYLOAD {
        return Err(FrameError::Oversized(declared));
    }
    if usize::from(declared) != payload.len() {
        return Err(FrameError::LengthMismatch {
            declared,
            actual: payload.len(),
        });
    }
    Ok(Frame {
        record,
        seq: u16::from_le_bytes([s0, s1]),
        payload,
    })
}

fn le_array<const N: usize>(bytes: &[u8]) -> [u8; N] {
    let mut a = [0u8; N];
    for (d, s) in a.iter_mut().zip(bytes) {
        *d = *s;
    }
    a
}

/// Little-endian u64 at byte offset `at` of payload `p`; `Truncated` at the payload end if short.
pub(crate) fn read_u64(p: &[u8], at: usize) -> Result<u64, FrameError> {
    let b = p
        .get(at..at + 8)
        .ok_or(FrameError::Truncated { offset: p.len() })?;
    Ok(u64::from_le_bytes(le_array(b)))
}

/// Check that payload `p` is exactly `want` bytes: shorter is `Truncated` at its end, longer is a
/// `LengthMismatch` declaring `want`.
pub(crate) fn exact_len(p: &[u8], want: usize) -> Result<(), FrameError> {
    if p.len() < want {
        return Err(FrameError::Truncated { offset: p.len() });
    }
    if p.len() > want {
        return Err(FrameError::LengthMismatch {
            declared: want as u16,
            actual: p.len(),
        });
    }
    Ok(())
}

/// A decoded key block: its slot range and bitmaps, borrowed from the payload.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct KeyBlock<'a> {
    /// Lowest slot index among the block's bits.
    pub first_slot: u64,
    /// Highest slot index among the block's bits.
    pub last_slot: u64,
    /// Number of bits in the block.
    pub n_bits: u16,
    bitmaps: &'a [u8],
}

/// One bit of a key block with its metadata.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct KeyBit {
    /// The receiver's bit.
    pub bit: u8,
    /// Basis of the bit.
    pub basis: Basis,
    /// Intensity class index.
    pub intensity: u8,
    /// From a squashed multi-click slot.
    pub multi_click: bool,
    /// The transmitter revealed its bit for this slot (the bit is public, not key).
    pub revealed: bool,
}

impl<'a> KeyBlock<'a> {
    /// Read a key-block payload, checking that its length matches its bit count.
    pub fn parse(p: &'a [u8]) -> Result<Self, FrameError> {
        let first_slot = read_u64(p, 0)?;
        let last_slot = read_u64(p, 8)?;
        let nb = p
            .get(16..18)
            .ok_or(FrameError::Truncated { offset: p.len() })?;
        let n_bits = u16::from_le_bytes(le_array(nb));
        let n = usize::from(n_bits);
        if n == 0 || n > MAX_KEY_BITS {
            return Err(FrameError::BadField {
                offset: 16,
                field: "n_bits",
            });
        }
        if first_slot > last_slot {
            return Err(FrameError::BadField {
                offset: 8,
                field: "last_slot",
            });
        }
        exact_len(p, key_block_len(n))?;
        Ok(Self {
            first_slot,
            last_slot,
            n_bits,
            bitmaps: p.get(KEY_BLOCK_FIXED..).unwrap_or(&[]),
        })
    }

    /// Bit `i` (0-based, in emission order) with its metadata, or `None` past the end.
    pub fn get(&self, i: usize) -> Option<KeyBit> {
        let n = usize::from(self.n_bits);
        if i >= n {
            return None;
        }
        let m = n.div_ceil(8);
        let flag = |map: usize| {
            self.bitmaps
                .get(map * m + i / 8)
                .is_some_and(|b| b >> (i % 8) & 1 == 1)
        };
        let intensity = self
            .bitmaps
            .get(4 * m + i / 4)
            .map_or(0, |b| (b >> (2 * (i % 4))) & 0b11);
        Some(KeyBit {
            bit: u8::from(flag(0)),
            basis: if flag(1) { Basis::X } else { Basis::Z },
            multi_click: flag(2),
            revealed: flag(3),
            intensity,
        })
    }
}

/// Every counter of a receiver at one moment: the payload of a [`RecordType::Summary`] frame.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Summary {
    /// Detections taken in.
    pub detections_in: u64,
    /// Sifted bits produced.
    pub sifted_bits: u64,
    /// Where every detection went.
    pub accounting: Accounting,
    /// Multi-click slot events by outcome.
    pub multi: MultiClickEvents,
    /// Problems with the transmitter's answers.
    pub answer_errors: AnswerErrors,
    /// Tally of single-click slots.
    pub tally: Tally,
    /// Tally of squashed multi-click slots.
    pub multi_tally: Tally,
    /// Key-block frames emitted before this summary.
    pub key_blocks: u64,
    /// Frames that could not be built (0 unless a buffer is misconfigured).
    pub frame_errors: u64,
}

fn tally_words(t: &Tally, out: &mut impl FnMut(u64)) {
    t.counts
        .iter()
        .flatten()
        .flatten()
        .flatten()
        .flatten()
        .for_each(|&c| out(c));
    t.untested.iter().flatten().for_each(|&c| out(c));
}

fn tally_from(next: &mut impl FnMut() -> u64) -> Tally {
    let mut t = Tally::new();
    for c in t.counts.iter_mut().flatten().flatten().flatten().flatten() {
        *c = next();
    }
    for c in t.untested.iter_mut().flatten() {
        *c = next();
    }
    t
}

impl Summary {
    /// The counters of `rx` (frame counters left at zero).
    pub fn of<C: SlotClock, const P: usize, N: Numbering>(rx: &Receiver<C, P, N>) -> Self {
        Self {
            detections_in: rx.detections_in(),
            sifted_bits: rx.sifted_bits(),
            accounting: *rx.accounting(),
            multi: *rx.multi_click_events(),
            answer_errors: *rx.answer_errors(),
            tally: *rx.tally(),
            multi_tally: *rx.multi_click_tally(),
            key_blocks: 0,
            frame_errors: 0,
        }
    }

    fn for_each_word(&self, mut out: impl FnMut(u64)) {
        out(self.detections_in);
        out(self.sifted_bits);
        self.accounting.fields().iter().for_each(|&(_, v)| out(v));
        let m = &self.multi;
        [
            m.sifted,
            m.basis_mismatch,
            m.queue_overflow,
            m.unanswered,
            m.cross_basis,
        ]
        .iter()
        .for_each(|&v| out(v));
        out(self.answer_errors.unmatched);
        out(self.answer_errors.malformed);
        tally_words(&self.tally, &mut out);
        tally_words(&self.multi_tally, &mut out);
        out(self.key_blocks);
        out(self.frame_errors);
    }

    /// Write the payload ([`SUMMARY_LEN`] bytes) into `out`; returns its length.
    pub fn encode(&self, out: &mut [u8]) -> Result<usize, FrameError> {
        let dst = out
            .get_mut(..SUMMARY_LEN)
            .ok_or(FrameError::BufferTooSmall {
                needed: SUMMARY_LEN,
            })?;
        let mut chunks = dst.chunks_exact_mut(8);
        self.for_each_word(|v| {
            if let Some(c) = chunks.next() {
                c.copy_from_slice(&v.to_le_bytes());
            }
        });
        Ok(SUMMARY_LEN)
    }

    /// Read a summary payload.
    pub fn decode(p: &[u8]) -> Result<Self, FrameError> {
        exact_len(p, SUMMARY_LEN)?;
        let mut words = p.chunks_exact(8).map(|c| u64::from_le_bytes(le_array(c)));
        let mut next = || words.next().unwrap_or(0);
        let detections_in = next();
        let sifted_bits = next();
        let mut a = [0u64; ACCOUNTING_WORDS];
        a.iter_mut().for_each(|v| *v = next());
        let multi = MultiClickEvents {
            sifted: next(),
            basis_mismatch: next(),
            queue_overflow: next(),
            unanswered: next(),
            cross_basis: next(),
        };
        let answer_errors = AnswerErrors {
            unmatched: next(),
            malformed: next(),
        };
        let tally = tally_from(&mut next);
        let multi_tally = tally_from(&mut next);
        Ok(Self {
            detections_in,
            sifted_bits,
            accounting: Accounting::from_counts(a),
            multi,
            answer_errors,
            tally,
            multi_tally,
            key_blocks: next(),
            frame_errors: next(),
        })
    }
}

/// Where finished frames go: one call per frame, delimiter included.
pub trait FrameSink {
    /// Take one complete frame (COBS bytes followed by 0x00).
    fn frame(&mut self, bytes: &[u8]);
}

/// A [`KeySink`] that packs sifted bits into key-block frames of `BITS` bits and writes the
/// summary at the end, in two fixed buffers (about 2.1 KiB).
pub struct FrameOut<S: FrameSink, const BITS: usize> {
    sink: S,
    raw: [u8; MAX_RAW],
    enc: [u8; MAX_FRAME],
    n_bits: usize,
    first_slot: u64,
    last_slot: u64,
    seq: u16,
    key_blocks: u64,
    frame_errors: u64,
}

impl<S: FrameSink, const BITS: usize> FrameOut<S, BITS> {
    const M: usize = BITS.div_ceil(8);

    /// A frame writer handing its frames to `sink`.
    pub const fn new(sink: S) -> Self {
        const {
            assert!(
                BITS > 0 && BITS <= MAX_KEY_BITS,
                "BITS must lie in 1..=1024"
            )
        };
        Self {
            sink,
            raw: [0; MAX_RAW],
            enc: [0; MAX_FRAME],
            n_bits: 0,
            first_slot: u64::MAX,
            last_slot: 0,
            seq: 0,
            key_blocks: 0,
            frame_errors: 0,
        }
    }

    /// The sink the frames go to.
    pub const fn sink(&self) -> &S {
        &self.sink
    }

    /// The sink, mutably (to flush or inspect a transport).
    pub fn sink_mut(&mut self) -> &mut S {
        &mut self.sink
    }

    /// Give the sink back.
    pub fn into_sink(self) -> S {
        self.sink
    }

    /// Key-block frames emitted so far.
    pub const fn key_blocks(&self) -> u64 {
        self.key_blocks
    }

    /// Frames that could not be built (0 unless a buffer is misconfigured).
    pub const fn frame_errors(&self) -> u64 {
        self.frame_errors
    }

    /// Bits waiting for the next key block.
    pub const fn buffered_bits(&self) -> usize {
        self.n_bits
    }

    fn set(&mut self, map: usize, i: usize) {
        let at = HEADER_LEN + KEY_BLOCK_FIXED + map * Self::M + i / 8;
        if let Some(b) = self.raw.get_mut(at) {
            *b |= 1 << (i % 8);
        }
    }

    /// Emit the buffered bits as a key block now (nothing when no bit is buffered).
    pub fn flush(&mut self) {
        let n = self.n_bits;
        if n == 0 {
            return;
        }
        let m = n.div_ceil(8);
        let base = HEADER_LEN + KEY_BLOCK_FIXED;
        // Sections were filled at their full-block offsets; a short block moves them down.
        for map in 1..5 {
            let len = if map == 4 { n.div_ceil(4) } else { m };
            let from = base + map * Self::M;
            if from + len <= MAX_RAW {
                self.raw.copy_within(from..from + len, base + map * m);
            }
        }
        let len = key_block_len(n);
        let first = self.first_slot.to_le_bytes();
        let last = self.last_slot.to_le_bytes();
        let count = (n as u16).to_le_bytes();
        let fixed = first.iter().chain(&last).chain(&count);
        if let Some(d) = self.raw.get_mut(HEADER_LEN..base) {
            d.iter_mut().zip(fixed).for_each(|(d, s)| *d = *s);
        }
        self.emit(RecordType::KeyBlock, len);
        self.key_blocks += 1;
        self.n_bits = 0;
        self.first_slot = u64::MAX;
        self.last_slot = 0;
        if let Some(area) = self.raw.get_mut(base..base + key_block_len(BITS)) {
            area.fill(0);
        }
    }

    /// Header, CRC, COBS and delimiter around the payload already in `raw`, then to the sink.
    fn emit(&mut self, record: RecordType, len: usize) {
        if let Some(head) = self.raw.get_mut(..HEADER_LEN) {
            write_header(head, record, self.seq, len);
        }
        match seal(&mut self.raw, HEADER_LEN + len + CRC_LEN, &mut self.enc) {
            Ok(n) => {
                self.seq = self.seq.wrapping_add(1);
                self.sink.frame(self.enc.get(..n).unwrap_or(&[]));
            }
            Err(_) => self.frame_errors += 1,
        }
    }

    /// Emit one small record (payload at most [`SMALL_RECORD`] bytes: alarms, statistics) now,
    /// between key blocks; key bits buffered so far stay buffered.
    pub fn record(&mut self, record: RecordType, payload: &[u8]) {
        let mut raw = [0u8; HEADER_LEN + SMALL_RECORD + CRC_LEN];
        match encode_frame(record, self.seq, payload, &mut raw, &mut self.enc) {
            Ok(n) => {
                self.seq = self.seq.wrapping_add(1);
                self.sink.frame(self.enc.get(..n).unwrap_or(&[]));
            }
            Err(_) => self.frame_errors += 1,
        }
    }

    /// Flush the buffered bits, then emit `summary` (its frame counters filled in here).
    pub fn finish(&mut self, summary: &Summary) {
        self.flush();
        let s = Summary {
            key_blocks: self.key_blocks,
            frame_errors: self.frame_errors,
            ..*summary
        };
        let area = self.raw.get_mut(HEADER_LEN..).unwrap_or_default();
        match s.encode(area) {
            Ok(len) => self.emit(RecordType::Summary, len),
            Err(_) => self.frame_errors += 1,
        }
    }
}

impl<S: FrameSink, const BITS: usize> KeySink for FrameOut<S, BITS> {
    fn sifted(&mut self, bit: SiftedBit) {
        let i = self.n_bits;
        if bit.bit & 1 == 1 {
            self.set(0, i);
        }
        if bit.basis == Basis::X {
            self.set(1, i);
        }
        if bit.multi_click {
            self.set(2, i);
        }
        if bit.tx_bit.is_some() {
            self.set(3, i);
        }
        let at = HEADER_LEN + KEY_BLOCK_FIXED + 4 * Self::M + i / 4;
        if let Some(b) = self.raw.get_mut(at) {
            *b |= (bit.intensity & 0b11) << (2 * (i % 4));
        }
        self.first_slot = self.first_slot.min(bit.slot);
        self.last_slot = self.last_slot.max(bit.slot);
        self.n_bits = i + 1;
        if self.n_bits >= BITS {
            self.flush();
        }
    }
}

#[cfg(test)]
mod tests;
