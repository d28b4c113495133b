//! The two link payloads, as both sides read and write them (layout in `docs/wire-protocol.md`).
//!
//! Announce (type 3, receiver → transmitter), all integers little-endian:
//! `first_slot u64 | count u16 | resolved_below u16 | answered_map u64 | flags u8 |
//! (count − 1) slot deltas as LEB128 varints | ⌈count/8⌉ bytes of basis bitmap`.
//!
//! Answers (type 4, transmitter → receiver): `ann_seq u16 | count u16 | first_slot u64 |
//! count entry bytes` (bit 0 basis match, bit 1 revealed, bit 2 transmitted bit, bits 3–4
//! intensity class, bits 5–7 zero).
//!
//! LEB128 is the unsigned variable-length integer of the DWARF standard (DWARF 5, §7.6): seven
//! bits per byte, least significant group first, bit 7 set on every byte but the last.

use crate::frames::{exact_len, read_u64, FrameError, MAX_PAYLOAD};
use crate::gates::Basis;
use crate::sift::Announcement;

/// Bytes of the fixed part of an announce payload.
pub const ANNOUNCE_FIXED: usize = 21;
/// Bytes of the fixed part of an answers payload.
pub const ANSWERS_FIXED: usize = 12;
/// Most announcements one announce frame may carry.
pub const MAX_ENTRIES: usize = 512;
/// Longest LEB128 encoding of a u64, bytes.
pub const MAX_VARINT: usize = 10;
/// Announce flag: the receiver closes the link; this report is final.
pub const FLAG_FINAL: u8 = 0x01;
/// Bits of the answered map: frames described behind `resolved_below`.
pub const REPORT_WINDOW: u16 = 64;

const _: () = assert!(ANSWERS_FIXED + MAX_ENTRIES <= MAX_PAYLOAD);

/// The receiver's report on earlier announce frames, carried by every announce frame.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Report {
    /// Every announce frame with a sequence number before this one is final (answered or expired).
    pub resolved_below: u16,
    /// Bit `i` set: announce frame `resolved_below − 1 − i` was answered and its answers used;
    /// clear: it expired unanswered.
    pub answered_map: u64,
}

impl Report {
    /// The fate of announce frame `seq`: `Some(true)` answered, `Some(false)` expired, `None`
    /// not yet final or older than the 64-frame window.
    pub fn fate(&self, seq: u16) -> Option<bool> {
        let back = self.resolved_below.wrapping_sub(seq);
        if back == 0 || back > REPORT_WINDOW {
            return None;
        }
        Some(self.answered_map >> (back - 1) & 1 == 1)
    }

    /// Whether announce frame `seq` is final but too old for the window (its fate is lost).
    pub fn beyond_window(&self, seq: u16) -> bool {
        let back = self.resolved_below.wrapping_sub(seq);
        back > REPORT_WINDOW && back < 0x8000
    }
}

/// Bytes of `v` as LEB128.
pub const fn varint_len(mut v: u64) -> usize {
    let mut n = 1;
    while v >= 0x80 {
        v >>= 7;
        n += 1;
    }
    n
}

/// Write `v` as LEB128 into `out`; returns bytes written (0 if `out` is too short).
pub fn put_varint(mut v: u64, out: &mut [u8]) -> usize {
    let need = varint_len(v);
    if out.len() < need {
        return 0;
    }
    for b in out.iter_mut().take(need) {
        let low = (v & 0x7F) as u8;
        v >>= 7;
        *b = if v == 0 { low } else { low | 0x80 };
    }
    need
}

/// Read one LEB128 value at `at`; returns (value, bytes). Longer than 10 bytes or above u64 is
/// a [`FrameError::BadField`].
pub fn get_varint(p: &[u8], at: usize) -> Result<(u64, usize), FrameError> {
    let mut v = 0u64;
    for k in 0..MAX_VARINT {
        let b = *p
            .get(at + k)
            .ok_or(FrameError::Truncated { offset: p.len() })?;
        let bits = u64::from(b & 0x7F);
        if k == MAX_VARINT - 1 && bits > 1 {
            return Err(FrameError::BadField {
                offset: at,
                field: "slot_delta",
            });
        }
        v |= bits << (7 * k);
        if b & 0x80 == 0 {
            return Ok((v, k + 1));
        }
    }
    Err(FrameError::BadField {
        offset: at,
        field: "slot_delta",
    })
}

fn u16_at(p: &[u8], at: usize) -> Result<u16, FrameError> {
    match p.get(at..at + 2) {
        Some(&[a, b]) => Ok(u16::from_le_bytes([a, b])),
        _ => Err(FrameError::Truncated { offset: p.len() }),
    }
}

/// Write the fixed part of an announce payload into `out[..ANNOUNCE_FIXED]`.
pub fn put_announce_fixed(
    out: &mut [u8],
    first_slot: u64,
    count: u16,
    report: Report,
    flags: u8,
) -> Result<(), FrameError> {
    let dst = out
        .get_mut(..ANNOUNCE_FIXED)
        .ok_or(FrameError::BufferTooSmall {
            needed: ANNOUNCE_FIXED,
        })?;
    let fields = first_slot
        .to_le_bytes()
        .into_iter()
        .chain(count.to_le_bytes())
        .chain(report.resolved_below.to_le_bytes())
        .chain(report.answered_map.to_le_bytes())
        .chain([flags]);
    dst.iter_mut().zip(fields).for_each(|(d, s)| *d = s);
    Ok(())
}

/// Encode a whole announce payload from slot-ordered announcements; returns its length.
/// Slots must increase strictly; more than [`MAX_ENTRIES`] or too many bytes is an error.
pub fn encode_announce(
    entries: &[Announcement],
    report: Report,
    flags: u8,
    out: &mut [u8],
) -> Result<usize, FrameError> {
    if entries.len() > MAX_ENTRIES {
        return Err(FrameError::PayloadTooLong { len: entries.len() });
    }
    let first = entries.first().map_or(0, |a| a.slot);
    put_announce_fixed(out, first, entries.len() as u16, report, flags)?;
    let mut at = ANNOUNCE_FIXED;
    let mut prev = first;
    for (i, a) in entries.iter().enumerate().skip(1) {
        let d = a
            .slot
            .checked_sub(prev)
            .filter(|&d| d > 0)
            .ok_or(FrameError::BadField {
                offset: i,
                field: "slot order",
            })?;
        prev = a.slot;
        let n = put_varint(d, out.get_mut(at..).unwrap_or_default());
        if n == 0 {
            return Err(FrameError::BufferTooSmall {
                needed: at + MAX_VARINT,
            });
        }
        at += n;
    }
    let m = entries.len().div_ceil(8);
    let map = out
        .get_mut(at..at + m)
        .ok_or(FrameError::BufferTooSmall { needed: at + m })?;
    map.fill(0);
    for (i, a) in entries.iter().enumerate() {
        if a.basis == Basis::X {
            if let Some(b) = map.get_mut(i / 8) {
                *b |= 1 << (i % 8);
            }
        }
    }
    let len = at + m;
    if len > MAX_PAYLOAD {
        return Err(FrameError::PayloadTooLong { len });
    }
    Ok(len)
}

/// A checked announce payload; iterate it for its announcements.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct AnnounceView<'a> {
    /// Slot of the first announcement (0 when there is none).
    pub first_slot: u64,
    /// Number of announcements.
    pub count: u16,
    /// The receiver's report on earlier announce frames.
    pub report: Report,
    /// Flag byte ([`FLAG_FINAL`]).
    pub flags: u8,
    deltas: &'a [u8],
    bases: &'a [u8],
}

impl<'a> AnnounceView<'a> {
    /// Check a whole announce payload: every varint, no slot overflow, exact length.
    pub fn parse(p: &'a [u8]) -> Result<Self, FrameError> {
        if p.len() < ANNOUNCE_FIXED {
            return Err(FrameError::Truncated { offset: p.len() });
        }
        let first_slot = read_u64(p, 0)?;
        let count = u16_at(p, 8)?;
        let report = Report {
            resolved_below: u16_at(p, 10)?,
            answered_map: read_u64(p, 12)?,
        };
        let flags = p.get(20).copied().unwrap_or(0);
        let bad = |offset, field| FrameError::BadField { offset, field };
        if flags & !FLAG_FINAL != 0 {
            return Err(bad(20, "flags"));
        }
        if usize::from(count) > MAX_ENTRIES {
            return Err(bad(8, "count"));
        }
        if count == 0 && first_slot != 0 {
            return Err(bad(0, "first_slot"));
        }
        let mut at = ANNOUNCE_FIXED;
        let mut slot = first_slot;
        for _ in 1..count {
            let (d, n) = get_varint(p, at)?;
            slot = slot
                .checked_add(d)
                .filter(|_| d > 0)
                .ok_or(bad(at, "slot_delta"))?;
            at += n;
        }
        let m = usize::from(count).div_ceil(8);
        let want = at + m;
        exact_len(p, want)?;
        let bases = p.get(at..want).unwrap_or_default();
        let used = usize::from(count) % 8;
        if used != 0 && bases.last().is_some_and(|&b| b >> used != 0) {
            return Err(bad(want - 1, "basis padding"));
        }
        Ok(Self {
            first_slot,
            count,
            report,
            flags,
            deltas: p.get(ANNOUNCE_FIXED..at).unwrap_or_default(),
            bases,
        })
    }

    /// Whether the receiver marked this report final.
    pub const fn is_final(&self) -> bool {
        self.flags & FLAG_FINAL != 0
    }

    /// The announcements in slot order.
    pub fn iter(&self) -> AnnounceIter<'a> {
        AnnounceIter {
            view: *self,
            i: 0,
            at: 0,
            slot: self.first_slot,
        }
    }
}

/// Iterator over the announcements of an [`AnnounceView`].
#[derive(Clone, Debug)]
pub struct AnnounceIter<'a> {
    view: AnnounceView<'a>,
    i: usize,
    at: usize,
    slot: u64,
}

impl Iterator for AnnounceIter<'_> {
    type Item = Announcement;
    fn next(&mut self) -> Option<Announcement> {
        if self.i >= usize::from(self.view.count) {
            return None;
        }
        if self.i > 0 {
            let (d, n) = get_varint(self.view.deltas, self.at).ok()?;
            self.slot = self.slot.wrapping_add(d);
            self.at += n;
        }
        let x = self
            .view
            .bases
            .get(self.i / 8)
            .is_some_and(|b| b >> (self.i % 8) & 1 == 1);
        self.i += 1;
        Some(Announcement {
            slot: self.slot,
            basis: if x { Basis::X } else { Basis::Z },
        })
    }
}

/// The transmitter's answer to one announcement, as it travels.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AnswerEntry {
    /// The transmitter prepared the slot in the basis the receiver announced.
    pub basis_match: bool,
    /// Intensity class index (0..=3).
    pub intensity: u8,
    /// The transmitted bit when revealed for testing.
    pub bit: Option<u8>,
}

impl AnswerEntry {
    /// The entry byte (intensity above 3 or a bit above 1 is refused).
    pub fn to_byte(self) -> Option<u8> {
        if self.intensity > 3 || self.bit.is_some_and(|b| b > 1) {
            return None;
        }
        let (revealed, bit) = match self.bit {
            Some(b) => (1u8, b),
            None => (0, 0),
        };
        Some(u8::from(self.basis_match) | revealed << 1 | bit << 2 | self.intensity << 3)
    }

    /// Read an entry byte (reserved bits set, or a bit without the revealed flag, is `None`).
    pub fn from_byte(b: u8) -> Option<Self> {
        let revealed = b & 0b10 != 0;
        if b & 0xE0 != 0 || (!revealed && b & 0b100 != 0) {
            return None;
        }
        Some(Self {
            basis_match: b & 1 != 0,
            intensity: (b >> 3) & 0b11,
            bit: revealed.then_some((b >> 2) & 1),
        })
    }
}

/// Encode an answers payload for announce frame `ann_seq`; returns its length.
pub fn encode_answers(
    ann_seq: u16,
    first_slot: u64,
    entries: &[AnswerEntry],
    out: &mut [u8],
) -> Result<usize, FrameError> {
    let n = entries.len();
    if n == 0 || n > MAX_ENTRIES {
        return Err(FrameError::BadField {
            offset: 2,
            field: "count",
        });
    }
    let len = ANSWERS_FIXED + n;
    let dst = out
        .get_mut(..len)
        .ok_or(FrameError::BufferTooSmall { needed: len })?;
    let (head, body) = dst.split_at_mut(ANSWERS_FIXED);
    let fixed = ann_seq
        .to_le_bytes()
        .into_iter()
        .chain((n as u16).to_le_bytes())
        .chain(first_slot.to_le_bytes());
    head.iter_mut().zip(fixed).for_each(|(d, s)| *d = s);
    for (i, (d, e)) in body.iter_mut().zip(entries).enumerate() {
        *d = e.to_byte().ok_or(FrameError::BadField {
            offset: ANSWERS_FIXED + i,
            field: "entry",
        })?;
    }
    Ok(len)
}

/// A checked answers payload.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct AnswersView<'a> {
    /// Sequence number of the announce frame answered.
    pub ann_seq: u16,
    /// Slot of that frame's first announcement (echoed as a check).
    pub first_slot: u64,
    entries: &'a [u8],
}

impl<'a> AnswersView<'a> {
    /// Check an answers payload: count in range, exact length, every entry byte valid.
    pub fn parse(p: &'a [u8]) -> Result<Self, FrameError> {
        let ann_seq = u16_at(p, 0)?;
        let count = usize::from(u16_at(p, 2)?);
        let first_slot = read_u64(p, 4)?;
        if count == 0 || count > MAX_ENTRIES {
            return Err(FrameError::BadField {
                offset: 2,
                field: "count",
            });
        }
        let want = ANSWERS_FIXED + count;
        exact_len(p, want)?;
        let entries = p.get(ANSWERS_FIXED..want).unwrap_or_default();
        if let Some(i) = entries
            .iter()
            .position(|&b| AnswerEntry::from_byte(b).is_none())
        {
            return Err(FrameError::BadField {
                offset: ANSWERS_FIXED + i,
                field: "entry",
            });
        }
        Ok(Self {
            ann_seq,
            first_slot,
            entries,
        })
    }

    /// Number of entries.
    pub fn count(&self) -> usize {
        self.entries.len()
    }

    /// The raw entry bytes (each valid for [`AnswerEntry::from_byte`]).
    pub fn entry_bytes(&self) -> &'a [u8] {
        self.entries
    }

    /// The entries in announcement order.
    pub fn iter(&self) -> impl Iterator<Item = AnswerEntry> + 'a {
        self.entries
            .iter()
            .filter_map(|&b| AnswerEntry::from_byte(b))
    }
}
