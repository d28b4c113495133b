//! The dense form: header, fixed-size blocks of nibbles, end record, each closed by a CRC-32C
//! (the capture's CRC, `crate::capture::crc32c`). Layout in `docs/transmitter-record.md`.
//!
//! Every block but the last holds exactly `block_slots` slots, so block `k` starts at a byte
//! offset the header alone fixes: a reader finds each block without scanning, and a damaged block
//! costs only its own slots.

use super::error::{TxErrorKind, TxRecordError};
use super::{
    decode_choice, encode_choice, protocol_code, protocol_of_code, TxChoice, TxRecord,
    TxRecordHeader, BLOCK_SYNC, CODE_NOT_RECORDED, END_SYNC, FLAGS_KNOWN_REQUIRED,
    FLAGS_REQUIRED_MASK, FLAG_HELLO, FORMAT_MAJOR, FORMAT_VERSION, MAGIC, MARKER_VACUUM,
    MAX_BLOCK_SLOTS,
};
use crate::capture::{crc32c, le_u16, le_u32, le_u64, ErrorKind};
use std::io::{self, Read, Write};

/// Header length in bytes, CRC included.
pub(crate) const HEADER_LEN: usize = 56;
/// Bytes of a block before its payload: sync, index, first slot, slot count.
pub(crate) const BLOCK_HEAD_LEN: usize = 24;
/// Length of the end record: sync, block count, recorded slots, CRC.
pub(crate) const END_LEN: usize = 24;

const OFF_VERSION: usize = 8;
const OFF_PROTOCOL: usize = 10;
const OFF_CLASSES: usize = 11;
const OFF_FLAGS: usize = 12;
const OFF_BLOCK_SLOTS: usize = 16;
const OFF_FIRST_SLOT: usize = 20;
const OFF_SLOT_COUNT: usize = 28;
const OFF_HELLO_T: usize = 36;
const OFF_HELLO_SLOT: usize = 44;
const OFF_HEADER_CRC: usize = 52;

/// Bytes of a dense record of `slots` slots in blocks of `block_slots` (even) slots.
pub fn dense_size(slots: u64, block_slots: u32) -> u64 {
    let bs = u64::from(block_slots.max(2));
    let block = |n: u64| (BLOCK_HEAD_LEN as u64 + 4) + n.div_ceil(2);
    let rest = match slots % bs {
        0 => 0,
        r => block(r),
    };
    HEADER_LEN as u64 + (slots / bs) * block(bs) + rest + END_LEN as u64
}

fn header_field(o: usize) -> &'static str {
    match o {
        0..=7 => "magic",
        8..=9 => "version",
        10 => "protocol",
        11 => "intensity_classes",
        12..=15 => "flags",
        16..=19 => "block_slots",
        20..=27 => "first_slot",
        28..=35 => "slot_count",
        36..=43 => "hello_t_ps",
        44..=51 => "hello_slot",
        _ => "header_crc",
    }
}

fn block_field(o: usize, payload: usize) -> &'static str {
    match o {
        0..=3 => "block_sync",
        4..=11 => "block_index",
        12..=19 => "block_first_slot",
        20..=23 => "slot_count",
        o if o < BLOCK_HEAD_LEN + payload => "payload",
        _ => "block_crc",
    }
}

fn end_field(o: usize) -> &'static str {
    match o {
        0..=3 => "end_record",
        4..=11 => "end_block_count",
        12..=19 => "end_recorded_slots",
        _ => "end_crc",
    }
}

fn invalid(msg: String) -> io::Error {
    io::Error::new(io::ErrorKind::InvalidInput, msg)
}

/// Whether `n` is a valid block size: even, 2..=[`MAX_BLOCK_SLOTS`].
fn block_slots_ok(n: u32) -> bool {
    (2..=MAX_BLOCK_SLOTS).contains(&n) && n.is_multiple_of(2)
}

/// Check the fields a writer must get right; the message names the field.
fn validate(h: &TxRecordHeader) -> Result<(), String> {
    if !(1..=3).contains(&h.intensity_classes) {
        return Err(format!(
            "field 'intensity_classes': {} is outside 1..=3",
            h.intensity_classes
        ));
    }
    if !block_slots_ok(h.block_slots) {
        return Err(format!(
            "field 'block_slots': {} is not an even number in 2..={MAX_BLOCK_SLOTS}",
            h.block_slots
        ));
    }
    let unknown = h.flags & FLAGS_REQUIRED_MASK & !FLAGS_KNOWN_REQUIRED;
    if unknown != 0 {
        return Err(format!(
            "field 'flags': unknown required bits 0x{unknown:08X}"
        ));
    }
    if (h.flags & FLAG_HELLO != 0) != h.hello.is_some() {
        return Err("field 'flags': the hello flag and the hello fields disagree".into());
    }
    if h.first_slot.checked_add(h.slot_count).is_none() {
        return Err(format!(
            "field 'slot_count': {} slots from {} run past 2^64",
            h.slot_count, h.first_slot
        ));
    }
    Ok(())
}

fn encode_header(h: &TxRecordHeader) -> [u8; HEADER_LEN] {
    let mut b = [0u8; HEADER_LEN];
    let (t, slot) = h.hello.unwrap_or((0, 0));
    let mut put = |at: usize, bytes: &[u8]| {
        if let Some(dst) = b.get_mut(at..at + bytes.len()) {
            dst.copy_from_slice(bytes);
        }
    };
    put(0, &MAGIC);
    put(OFF_VERSION, &FORMAT_VERSION.to_le_bytes());
    put(OFF_PROTOCOL, &[protocol_code(h.protocol)]);
    put(OFF_CLASSES, &[h.intensity_classes]);
    put(OFF_FLAGS, &h.flags.to_le_bytes());
    put(OFF_BLOCK_SLOTS, &h.block_slots.to_le_bytes());
    put(OFF_FIRST_SLOT, &h.first_slot.to_le_bytes());
    put(OFF_SLOT_COUNT, &h.slot_count.to_le_bytes());
    put(OFF_HELLO_T, &t.to_le_bytes());
    put(OFF_HELLO_SLOT, &slot.to_le_bytes());
    let crc = crc32c(b.get(..OFF_HEADER_CRC).unwrap_or_default());
    if let Some(dst) = b.get_mut(OFF_HEADER_CRC..HEADER_LEN) {
        dst.copy_from_slice(&crc.to_le_bytes());
    }
    b
}

/// Writes the dense form to any byte sink, slot after slot; memory stays within one block.
///
/// Dropping the writer without [`Self::finish`] leaves the record without its end record, which
/// readers report as cut short.
#[derive(Debug)]
pub struct DenseWriter<W: Write> {
    w: W,
    header: TxRecordHeader,
    payload: Vec<u8>,
    in_block: u32,
    written: u64,
    blocks: u64,
    recorded: u64,
    out: Vec<u8>,
}

impl<W: Write> DenseWriter<W> {
    /// Check `header` and write it; the slots then follow from `header.first_slot` on.
    pub fn new(mut w: W, header: TxRecordHeader) -> io::Result<Self> {
        let header = TxRecordHeader {
            version: FORMAT_VERSION,
            ..header
        };
        validate(&header).map_err(|m| invalid(format!("transmitter record header {m}")))?;
        w.write_all(&encode_header(&header))?;
        Ok(Self {
            w,
            payload: Vec::with_capacity(header.block_slots as usize / 2),
            header,
            in_block: 0,
            written: 0,
            blocks: 0,
            recorded: 0,
            out: Vec::new(),
        })
    }

    /// The header as written.
    pub fn header(&self) -> &TxRecordHeader {
        &self.header
    }

    /// Slot number the next [`Self::push`] records.
    pub fn next_slot(&self) -> u64 {
        self.header.first_slot + self.written
    }

    /// Record the next slot: what was sent, or `None` when it is not known. Refused (nothing
    /// written) past the header's range or for a choice the format cannot hold.
    pub fn push(&mut self, c: Option<TxChoice>) -> io::Result<()> {
        let slot = self.next_slot();
        if self.written >= self.header.slot_count {
            return Err(invalid(format!(
                "slot {slot} is past the record's slots {}..{}",
                self.header.first_slot, slot
            )));
        }
        let code = encode_choice(c)
            .filter(|_| {
                c.is_none_or(|c| {
                    c.intensity == MARKER_VACUUM || c.intensity < self.header.intensity_classes
                })
            })
            .ok_or_else(|| {
                invalid(format!(
                    "slot {slot}: {c:?} cannot be recorded with {} intensity classes (vacuum is \
                     written as Z, bit 0)",
                    self.header.intensity_classes
                ))
            })?;
        if self.in_block.is_multiple_of(2) {
            self.payload.push(code);
        } else if let Some(last) = self.payload.last_mut() {
            *last |= code << 4;
        }
        self.recorded += u64::from(code != CODE_NOT_RECORDED);
        self.in_block += 1;
        self.written += 1;
        if self.in_block == self.header.block_slots || self.written == self.header.slot_count {
            self.flush_block()?;
        }
        Ok(())
    }

    /// Record `c` at `slot`, first marking every slot skipped over as not recorded. Refused for a
    /// slot before [`Self::next_slot`].
    pub fn push_at(&mut self, slot: u64, c: Option<TxChoice>) -> io::Result<()> {
        if slot < self.next_slot() {
            return Err(invalid(format!(
                "slot {slot} comes before slot {}: slots must ascend",
                self.next_slot()
            )));
        }
        while self.next_slot() < slot {
            self.push(None)?;
        }
        self.push(c)
    }

    fn flush_block(&mut self) -> io::Result<()> {
        if self.in_block == 0 {
            return Ok(());
        }
        let first = self.header.first_slot + self.blocks * u64::from(self.header.block_slots);
        self.out.clear();
        self.out.extend_from_slice(&BLOCK_SYNC);
        self.out.extend_from_slice(&self.blocks.to_le_bytes());
        self.out.extend_from_slice(&first.to_le_bytes());
        self.out.extend_from_slice(&self.in_block.to_le_bytes());
        self.out.extend_from_slice(&self.payload);
        let crc = crc32c(&self.out);
        self.out.extend_from_slice(&crc.to_le_bytes());
        self.w.write_all(&self.out)?;
        self.payload.clear();
        self.in_block = 0;
        self.blocks += 1;
        Ok(())
    }

    /// Mark the slots not pushed yet as not recorded, write the end record, hand back the sink.
    pub fn finish(mut self) -> io::Result<W> {
        while self.written < self.header.slot_count {
            self.push(None)?;
        }
        self.w.write_all(&encode_end(self.blocks, self.recorded))?;
        self.w.flush()?;
        Ok(self.w)
    }
}

fn encode_end(blocks: u64, recorded: u64) -> [u8; END_LEN] {
    let mut b = [0u8; END_LEN];
    let mut body = Vec::with_capacity(END_LEN);
    body.extend_from_slice(&END_SYNC);
    body.extend_from_slice(&blocks.to_le_bytes());
    body.extend_from_slice(&recorded.to_le_bytes());
    body.extend_from_slice(&crc32c(&body).to_le_bytes());
    b.copy_from_slice(&body);
    b
}

/// One damaged block as found by the skipping reader: its slots count as not recorded.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct RecordDamage {
    /// Index of the block.
    pub block: u64,
    /// Byte offset of the block.
    pub offset: u64,
    /// Slots the block covers (now not recorded).
    pub slots: u64,
    /// The fault found, naming offset and field.
    pub reason: String,
}

/// What [`read_dense`] read: the record and, when it skipped damage, what it lost.
#[derive(Clone, Debug)]
pub struct DenseRead {
    /// The record (damaged or missing blocks' slots are not recorded).
    pub record: TxRecord,
    /// Size of the file in bytes as read.
    pub total_bytes: u64,
    /// Blocks that failed their checks.
    pub damage: Vec<RecordDamage>,
    /// Whether a verified end record closed the file.
    pub end_ok: bool,
    /// A fault at or after the end record (counts disagreeing, data after it), or why it was not
    /// verified.
    pub end_error: Option<String>,
}

/// Read up to `buf.len()` bytes; fewer only at the end of the stream.
fn fill<R: Read>(r: &mut R, buf: &mut [u8]) -> io::Result<usize> {
    let mut n = 0;
    while n < buf.len() {
        match r.read(buf.get_mut(n..).unwrap_or_default()) {
            Ok(0) => break,
            Ok(k) => n += k,
            Err(e) if e.kind() == io::ErrorKind::Interrupted => {}
            Err(e) => return Err(e),
        }
    }
    Ok(n)
}

fn common(k: ErrorKind) -> TxErrorKind {
    TxErrorKind::Common(k)
}

fn parse_header(b: &[u8], got: usize, name: &str) -> Result<TxRecordHeader, TxRecordError> {
    let err = |o: usize, kind| TxRecordError::at_byte(name, o as u64, header_field(o), kind);
    if got == 0 {
        return Err(err(0, common(ErrorKind::Empty)));
    }
    let have = b.get(..got.min(MAGIC.len())).unwrap_or_default();
    if !MAGIC.starts_with(have) {
        let found = have.to_vec();
        return Err(err(0, TxErrorKind::BadMagic { found }));
    }
    if got >= OFF_VERSION + 2 && le_u16(b, OFF_VERSION) >> 8 > u16::from(FORMAT_MAJOR) {
        let found = le_u16(b, OFF_VERSION);
        return Err(err(
            OFF_VERSION,
            common(ErrorKind::UnsupportedVersion { found }),
        ));
    }
    if got < HEADER_LEN {
        let missing = (HEADER_LEN - got) as u64;
        return Err(err(got, common(ErrorKind::Truncated { missing })));
    }
    let stored = le_u32(b, OFF_HEADER_CRC);
    let computed = crc32c(b.get(..OFF_HEADER_CRC).unwrap_or_default());
    if stored != computed {
        return Err(err(
            OFF_HEADER_CRC,
            common(ErrorKind::CrcMismatch {
                stored,
                computed,
                covered_from: 0,
            }),
        ));
    }
    let code = b.get(OFF_PROTOCOL).copied().unwrap_or_default();
    let protocol = protocol_of_code(code).map_err(|c| {
        err(
            OFF_PROTOCOL,
            TxErrorKind::BadValue {
                found: c.to_string(),
                expected: "0, 1, 2 or 255",
            },
        )
    })?;
    let h = TxRecordHeader {
        version: le_u16(b, OFF_VERSION),
        protocol,
        intensity_classes: b.get(OFF_CLASSES).copied().unwrap_or_default(),
        flags: le_u32(b, OFF_FLAGS),
        block_slots: le_u32(b, OFF_BLOCK_SLOTS),
        first_slot: le_u64(b, OFF_FIRST_SLOT),
        slot_count: le_u64(b, OFF_SLOT_COUNT),
        hello: (le_u32(b, OFF_FLAGS) & FLAG_HELLO != 0)
            .then(|| (le_u64(b, OFF_HELLO_T), le_u64(b, OFF_HELLO_SLOT))),
    };
    let range = |value: u64, min: u64, max: u64| common(ErrorKind::OutOfRange { value, min, max });
    if !(1..=3).contains(&h.intensity_classes) {
        let v = h.intensity_classes.into();
        return Err(err(OFF_CLASSES, range(v, 1, 3)));
    }
    let unknown = h.flags & FLAGS_REQUIRED_MASK & !FLAGS_KNOWN_REQUIRED;
    if unknown != 0 {
        let kind = common(ErrorKind::UnknownFlags { bits: unknown });
        return Err(err(OFF_FLAGS, kind));
    }
    if !block_slots_ok(h.block_slots) {
        return Err(err(
            OFF_BLOCK_SLOTS,
            TxErrorKind::BadValue {
                found: h.block_slots.to_string(),
                expected: "an even number of slots in 2..=16777216",
            },
        ));
    }
    if h.first_slot.checked_add(h.slot_count).is_none() {
        let max = u64::MAX - h.first_slot;
        return Err(err(OFF_SLOT_COUNT, range(h.slot_count, 0, max)));
    }
    Ok(h)
}

/// Check one whole block `b` (index `k`, at byte `at`) and count its recorded slots.
fn check_block(
    b: &[u8],
    k: u64,
    n: u32,
    h: &TxRecordHeader,
    at: u64,
    name: &str,
) -> Result<u64, TxRecordError> {
    let plen = (n as usize).div_ceil(2);
    let err = |o: usize, kind| {
        TxRecordError::at_byte(name, at + o as u64, block_field(o, plen), kind).in_block(k)
    };
    let sync = le_u32(b, 0).to_le_bytes();
    if sync != BLOCK_SYNC {
        let kind = TxErrorKind::BadSync {
            found: sync,
            expected: BLOCK_SYNC,
        };
        return Err(err(0, kind));
    }
    let crc_at = BLOCK_HEAD_LEN + plen;
    let stored = le_u32(b, crc_at);
    let computed = crc32c(b.get(..crc_at).unwrap_or_default());
    if stored != computed {
        let kind = common(ErrorKind::CrcMismatch {
            stored,
            computed,
            covered_from: at,
        });
        return Err(err(crc_at, kind));
    }
    let index = le_u64(b, 4);
    if index != k {
        let kind = common(ErrorKind::IndexMismatch {
            expected: k,
            found: index,
        });
        return Err(err(4, kind));
    }
    let first = h.first_slot + k * u64::from(h.block_slots);
    let stated = le_u64(b, 12);
    if stated != first {
        return Err(err(
            12,
            common(ErrorKind::OutOfRange {
                value: stated,
                min: first,
                max: first,
            }),
        ));
    }
    let count = le_u32(b, 20);
    if count != n {
        let kind = common(ErrorKind::OutOfRange {
            value: count.into(),
            min: n.into(),
            max: n.into(),
        });
        return Err(err(20, kind));
    }
    let mut recorded = 0;
    for i in 0..n as usize {
        let byte = b.get(BLOCK_HEAD_LEN + i / 2).copied().unwrap_or_default();
        let code = if i % 2 == 0 { byte & 0x0F } else { byte >> 4 };
        let ok = match decode_choice(code) {
            Ok(None) => true,
            Ok(Some(c)) => c.intensity == MARKER_VACUUM || c.intensity < h.intensity_classes,
            Err(()) => false,
        };
        if !ok {
            let slot = first + i as u64;
            return Err(err(
                BLOCK_HEAD_LEN + i / 2,
                TxErrorKind::BadCode { slot, code },
            ));
        }
        recorded += u64::from(code != CODE_NOT_RECORDED);
    }
    if n % 2 == 1 {
        let pad = b
            .get(BLOCK_HEAD_LEN + plen - 1)
            .copied()
            .unwrap_or_default()
            >> 4;
        if pad != 0 {
            return Err(TxRecordError::at_byte(
                name,
                at + (BLOCK_HEAD_LEN + plen - 1) as u64,
                "padding",
                TxErrorKind::BadPadding { code: pad },
            )
            .in_block(k));
        }
    }
    Ok(recorded)
}

/// Read the dense form from `r` (file name `name`). With `skip`, a damaged block is listed and
/// its slots stay not recorded, and a file cut short or without a verified end record is
/// returned with `end_ok` false; without it, the first fault is the error. Header faults are
/// errors either way.
pub fn read_dense<R: Read>(mut r: R, name: &str, skip: bool) -> Result<DenseRead, TxRecordError> {
    let io = |e: io::Error| TxRecordError::io(name, &e);
    let mut hb = [0u8; HEADER_LEN];
    let got = fill(&mut r, &mut hb).map_err(io)?;
    let h = parse_header(&hb, got, name)?;
    let mut pos = HEADER_LEN as u64;
    let bs = u64::from(h.block_slots);
    let block_count = h.slot_count.div_ceil(bs);
    let mut nibbles: Vec<u8> = Vec::new();
    let mut damage = Vec::new();
    let mut recorded = 0u64;
    let mut buf = Vec::new();
    let not_recorded = CODE_NOT_RECORDED | CODE_NOT_RECORDED << 4;
    let done = |nibbles: Vec<u8>, damage, total, end_ok, end_error| DenseRead {
        record: TxRecord::dense(h.clone(), nibbles, name),
        total_bytes: total,
        damage,
        end_ok,
        end_error,
    };
    for k in 0..block_count {
        let n = (h.slot_count - k * bs).min(bs) as u32;
        let plen = (n as usize).div_ceil(2);
        buf.resize(BLOCK_HEAD_LEN + plen + 4, 0);
        let got = fill(&mut r, &mut buf).map_err(io)?;
        if got < buf.len() {
            let e = TxRecordError::at_byte(
                name,
                pos + got as u64,
                block_field(got, plen),
                common(ErrorKind::Truncated {
                    missing: (buf.len() - got) as u64,
                }),
            )
            .in_block(k);
            if !skip {
                return Err(e);
            }
            let total = pos + got as u64;
            return Ok(done(nibbles, damage, total, false, Some(e.to_string())));
        }
        match check_block(&buf, k, n, &h, pos, name) {
            Ok(rec) => {
                recorded += rec;
                nibbles.extend_from_slice(
                    buf.get(BLOCK_HEAD_LEN..BLOCK_HEAD_LEN + plen)
                        .unwrap_or_default(),
                );
            }
            Err(e) if skip => {
                damage.push(RecordDamage {
                    block: k,
                    offset: pos,
                    slots: n.into(),
                    reason: e.to_string(),
                });
                nibbles.resize(nibbles.len() + plen, not_recorded);
            }
            Err(e) => return Err(e),
        }
        pos += buf.len() as u64;
    }
    let mut end = [0u8; END_LEN];
    let got = fill(&mut r, &mut end).map_err(io)?;
    let fault = |o: usize, kind| TxRecordError::at_byte(name, pos + o as u64, end_field(o), kind);
    let verified = if got == 0 {
        Err(fault(
            0,
            common(ErrorKind::MissingEndRecord {
                blocks: block_count,
            }),
        ))
    } else if end.get(..got.min(4)) != END_SYNC.get(..got.min(4)) {
        let found = le_u32(&end, 0).to_le_bytes();
        Err(fault(
            0,
            TxErrorKind::BadSync {
                found,
                expected: END_SYNC,
            },
        ))
    } else if got < END_LEN {
        let missing = (END_LEN - got) as u64;
        Err(fault(got, common(ErrorKind::Truncated { missing })))
    } else {
        let stored = le_u32(&end, 20);
        let computed = crc32c(end.get(..20).unwrap_or_default());
        if stored == computed {
            Ok(())
        } else {
            let covered_from = pos;
            Err(fault(
                20,
                common(ErrorKind::CrcMismatch {
                    stored,
                    computed,
                    covered_from,
                }),
            ))
        }
    };
    if let Err(e) = verified {
        if !skip {
            return Err(e);
        }
        let total = pos + got as u64;
        return Ok(done(nibbles, damage, total, false, Some(e.to_string())));
    }
    let end_at = pos + END_LEN as u64;
    let mismatch = |o: usize, what, declared, found| {
        fault(
            o,
            common(ErrorKind::CountMismatch {
                what,
                declared,
                found,
                end_offset: end_at,
            }),
        )
    };
    let blocks = le_u64(&end, 4);
    let stated = le_u64(&end, 12);
    let mut extra = [0u8; 1];
    let end_check = if blocks != block_count {
        Err(mismatch(4, "blocks", blocks, block_count))
    } else if damage.is_empty() && stated != recorded {
        Err(mismatch(12, "recorded slots", stated, recorded))
    } else if fill(&mut r, &mut extra).map_err(io)? > 0 {
        Err(TxRecordError::at_byte(
            name,
            end_at,
            "trailing_data",
            common(ErrorKind::TrailingData),
        ))
    } else {
        Ok(())
    };
    match end_check {
        Ok(()) => Ok(done(nibbles, damage, end_at, true, None)),
        Err(e) if skip => Ok(done(nibbles, damage, end_at, true, Some(e.to_string()))),
        Err(e) => Err(e),
    }
}
