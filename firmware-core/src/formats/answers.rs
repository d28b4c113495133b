//! Answers record (type 4, transmitter → receiver): the answers to one announce frame.
//!
//! Payload, little-endian: `ann_seq u16 | count u16 | first_slot u64 | count entry bytes` (bit 0
//! basis match, bit 1 revealed, bit 2 transmitted bit, bits 3–4 intensity class, bits 5–7 zero).
//! `docs/wire-protocol.md` is the contract.

use super::announce::MAX_ENTRIES;
use super::bytes::{Reader, Writer};
use super::framing::{FrameError, LINK_MAX_PAYLOAD};

/// Bytes of the fixed part of an answers payload.
pub const FIXED_LEN: usize = 12;

const _: () = assert!(len(MAX_ENTRIES) <= LINK_MAX_PAYLOAD);

/// Payload bytes of an answers record with `count` entries.
pub const fn len(count: usize) -> usize {
    FIXED_LEN + count
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

/// Write an answers payload for announce frame `ann_seq` into `out`; returns its length.
pub fn emit(
    ann_seq: u16,
    first_slot: u64,
    entries: &[AnswerEntry],
    out: &mut [u8],
) -> Result<usize, FrameError> {
    let n = entries.len();
    let count = u16::try_from(n)
        .ok()
        .filter(|_| n > 0 && n <= MAX_ENTRIES)
        .ok_or(FrameError::BadField {
            offset: 2,
            field: "count",
        })?;
    let dst = out
        .get_mut(..len(n))
        .ok_or(FrameError::BufferTooSmall { needed: len(n) })?;
    let mut w = Writer::new(dst);
    w.u16(ann_seq)?;
    w.u16(count)?;
    w.u64(first_slot)?;
    for (i, e) in entries.iter().enumerate() {
        w.u8(e.to_byte().ok_or(FrameError::BadField {
            offset: FIXED_LEN + i,
            field: "entry",
        })?)?;
    }
    Ok(w.finish())
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
        let mut r = Reader::new(p);
        let ann_seq = r.u16()?;
        let count = usize::from(r.u16()?);
        let first_slot = r.u64()?;
        if count == 0 || count > MAX_ENTRIES {
            return Err(FrameError::BadField {
                offset: 2,
                field: "count",
            });
        }
        let entries = r.bytes(count)?;
        r.finish()?;
        if let Some(i) = entries
            .iter()
            .position(|&b| AnswerEntry::from_byte(b).is_none())
        {
            return Err(FrameError::BadField {
                offset: FIXED_LEN + i,
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_errors() {
        let e = [
            AnswerEntry {
                basis_match: true,
                intensity: 2,
                bit: Some(1),
            },
            AnswerEntry {
                basis_match: false,
                intensity: 0,
                bit: None,
            },
        ];
        let mut p = [0u8; 16];
        assert_eq!(emit(0x0102, 7, &e, &mut p), Ok(len(2)));
        assert_eq!(p[..4], [0x02, 0x01, 2, 0]);
        assert_eq!(p[12..14], [0b10111, 0]);
        let v = AnswersView::parse(&p[..len(2)]).unwrap();
        assert_eq!((v.ann_seq, v.first_slot), (0x0102, 7));
        assert_eq!(v.iter().collect::<Vec<_>>(), e);
        assert_eq!(
            AnswersView::parse(&p[..len(2) - 1]),
            Err(FrameError::Truncated { offset: 13 })
        );
        assert_eq!(
            AnswersView::parse(&p[..len(2) + 1]),
            Err(FrameError::LengthMismatch {
                declared: 14,
                actual: 15
            })
        );
        assert_eq!(
            emit(0, 0, &e, &mut p[..13]),
            Err(FrameError::BufferTooSmall { needed: 14 })
        );
        assert!(emit(0, 0, &[], &mut p).is_err());
    }
}
