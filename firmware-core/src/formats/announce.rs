//! Announce record (type 3, receiver → transmitter): a batch of detected slots with the
//! receiver's basis, and the receiver's report on earlier announce frames.
//!
//! Payload, little-endian: `first_slot u64 | count u16 | resolved_below u16 | answered_map u64 |
//! flags u8 | (count − 1) slot deltas as LEB128 varints ([`super::bytes`]) | ⌈count/8⌉ bytes of
//! basis bitmap`. `docs/wire-protocol.md` is the contract.
//!
//! The receiver's link endpoint builds a batch in place as slots arrive ([`emit_fixed`] and
//! [`Writer::varint`]); [`emit`] writes a whole batch from a slice.

use super::bytes::{varint_len, Reader, Writer};
use super::framing::{FrameError, LINK_MAX_PAYLOAD};
use crate::gates::Basis;
use crate::sift::Announcement;

/// Bytes of the fixed part of an announce payload.
pub const FIXED_LEN: usize = 21;
/// Most announcements one announce frame may carry.
pub const MAX_ENTRIES: usize = 512;
/// Announce flag: the receiver closes the link; this report is final.
pub const FLAG_FINAL: u8 = 0x01;
/// Bits of the answered map: frames described behind `resolved_below`.
pub const REPORT_WINDOW: u16 = 64;

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

/// Payload bytes of an announce record for slot-ordered `entries` (slot gaps as varints).
pub fn len(entries: &[Announcement]) -> usize {
    let deltas: usize = entries
        .windows(2)
        .map(|w| match w {
            [a, b] => varint_len(b.slot.wrapping_sub(a.slot)),
            _ => 0,
        })
        .sum();
    FIXED_LEN + deltas + entries.len().div_ceil(8)
}

/// Write the fixed part of an announce payload into `out[..FIXED_LEN]`.
pub fn emit_fixed(
    out: &mut [u8],
    first_slot: u64,
    count: u16,
    report: Report,
    flags: u8,
) -> Result<(), FrameError> {
    let dst = out
        .get_mut(..FIXED_LEN)
        .ok_or(FrameError::BufferTooSmall { needed: FIXED_LEN })?;
    let mut w = Writer::new(dst);
    w.u64(first_slot)?;
    w.u16(count)?;
    w.u16(report.resolved_below)?;
    w.u64(report.answered_map)?;
    w.u8(flags)
}

/// Write a whole announce payload from slot-ordered announcements into `out`; returns its
/// length. Slots must increase strictly; more than [`MAX_ENTRIES`] or too many bytes is an error.
pub fn emit(
    entries: &[Announcement],
    report: Report,
    flags: u8,
    out: &mut [u8],
) -> Result<usize, FrameError> {
    let count = u16::try_from(entries.len())
        .ok()
        .filter(|_| entries.len() <= MAX_ENTRIES)
        .ok_or(FrameError::PayloadTooLong { len: entries.len() })?;
    let first = entries.first().map_or(0, |a| a.slot);
    emit_fixed(out, first, count, report, flags)?;
    let mut w = Writer::new(out);
    w.space(FIXED_LEN)?;
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
        w.varint(d)?;
    }
    let map = w.space(entries.len().div_ceil(8))?;
    map.fill(0);
    for (i, a) in entries.iter().enumerate() {
        if a.basis == Basis::X {
            if let Some(b) = map.get_mut(i / 8) {
                *b |= 1 << (i % 8);
            }
        }
    }
    let len = w.finish();
    if len > LINK_MAX_PAYLOAD {
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
        let mut r = Reader::new(p);
        let first_slot = r.u64()?;
        let count = r.u16()?;
        let report = Report {
            resolved_below: r.u16()?,
            answered_map: r.u64()?,
        };
        let flags = r.u8()?;
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
        let mut slot = first_slot;
        for _ in 1..count {
            let at = r.position();
            let d = r.varint("slot_delta")?;
            slot = slot
                .checked_add(d)
                .filter(|_| d > 0)
                .ok_or(bad(at, "slot_delta"))?;
        }
        let deltas = p.get(FIXED_LEN..r.position()).unwrap_or_default();
        let bases = r.bytes(usize::from(count).div_ceil(8))?;
        let end = r.position();
        r.finish()?;
        let used = usize::from(count) % 8;
        if used != 0 && bases.last().is_some_and(|&b| b >> used != 0) {
            return Err(bad(end - 1, "basis padding"));
        }
        Ok(Self {
            first_slot,
            count,
            report,
            flags,
            deltas,
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
            deltas: Reader::new(self.deltas),
            slot: self.first_slot,
        }
    }
}

/// Iterator over the announcements of an [`AnnounceView`].
#[derive(Clone, Debug)]
pub struct AnnounceIter<'a> {
    view: AnnounceView<'a>,
    i: usize,
    deltas: Reader<'a>,
    slot: u64,
}

impl Iterator for AnnounceIter<'_> {
    type Item = Announcement;
    fn next(&mut self) -> Option<Announcement> {
        if self.i >= usize::from(self.view.count) {
            return None;
        }
        if self.i > 0 {
            // Checked by `parse`: every delta is a valid varint.
            let d = self.deltas.varint("slot_delta").ok()?;
            self.slot = self.slot.wrapping_add(d);
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

#[cfg(test)]
mod tests {
    use super::*;

    fn ann(slot: u64, x: bool) -> Announcement {
        Announcement {
            slot,
            basis: if x { Basis::X } else { Basis::Z },
        }
    }

    #[test]
    fn round_trip_and_errors() {
        let entries = [ann(5, true), ann(6, false), ann(300, true)];
        let report = Report {
            resolved_below: 4,
            answered_map: 0b1011,
        };
        let mut p = [0u8; 64];
        let n = emit(&entries, report, FLAG_FINAL, &mut p).unwrap();
        // 21 fixed + varints 1 (1) and 2 (294) + 1 basis byte.
        assert_eq!((n, len(&entries)), (25, 25));
        assert_eq!(&p[21..25], &[0x01, 0xA6, 0x02, 0b101]);
        let v = AnnounceView::parse(&p[..n]).unwrap();
        assert_eq!((v.count, v.report, v.is_final()), (3, report, true));
        assert_eq!(v.iter().collect::<Vec<_>>(), entries);
        assert_eq!(
            AnnounceView::parse(&p[..n - 1]),
            Err(FrameError::Truncated { offset: n - 1 })
        );
        assert_eq!(
            AnnounceView::parse(&p[..n + 1]),
            Err(FrameError::LengthMismatch {
                declared: 25,
                actual: 26
            })
        );
        assert_eq!(
            AnnounceView::parse(&p[..20]),
            Err(FrameError::Truncated { offset: 20 })
        );
        assert!(emit(&entries, report, 0, &mut p[..24]).is_err());
        assert!(matches!(
            emit(&[ann(6, false), ann(5, true)], report, 0, &mut p),
            Err(FrameError::BadField {
                field: "slot order",
                ..
            })
        ));
        let empty = emit(&[], Report::default(), FLAG_FINAL, &mut p).unwrap();
        assert_eq!((empty, len(&[])), (FIXED_LEN, FIXED_LEN));
        assert_eq!(AnnounceView::parse(&p[..empty]).unwrap().iter().count(), 0);
    }
}
