//! Key-block record (type 1): sifted bits with their basis, intensity and flags.
//!
//! Payload: `first_slot u64 | last_slot u64 | n_bits u16 | bit map | basis map | multi-click map
//! | revealed map | intensities`, each map ⌈n/8⌉ bytes (bit `i` of the block is bit `i % 8` of
//! byte `i / 8`), the intensities ⌈n/4⌉ bytes of 2-bit classes (bits `2(i % 4)..` of byte
//! `i / 4`). `docs/frames.md` has the table.
//!
//! A board builds a block in place while bits arrive ([`put_bit`] into an area sized for its
//! capacity, then [`seal`] moves the maps down for a short block), so no second buffer is needed;
//! [`emit`] writes a whole block from a slice of bits the same way.

use super::bytes::{Reader, Writer};
use super::framing::{FrameError, MAX_PAYLOAD};
use crate::gates::Basis;

/// Bytes before the maps: first slot, last slot, bit count.
pub const FIXED_LEN: usize = 18;
/// Most sifted bits one key block can carry.
pub const MAX_BITS: usize = 1024;

const _: () = assert!(len(MAX_BITS) <= MAX_PAYLOAD);

/// Payload bytes of a key block with `n_bits` bits: 18 + 4 maps of ⌈n/8⌉ + ⌈n/4⌉ intensity bytes.
pub const fn len(n_bits: usize) -> usize {
    FIXED_LEN + 4 * n_bits.div_ceil(8) + n_bits.div_ceil(4)
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

/// A decoded key block: its slot range and maps, borrowed from the payload.
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

impl<'a> KeyBlock<'a> {
    /// Read a key-block payload, checking that its length matches its bit count.
    pub fn parse(p: &'a [u8]) -> Result<Self, FrameError> {
        let mut r = Reader::new(p);
        let first_slot = r.u64()?;
        let last_slot = r.u64()?;
        let n_bits = r.u16()?;
        let n = usize::from(n_bits);
        if n == 0 || n > MAX_BITS {
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
        let bitmaps = r.bytes(len(n) - FIXED_LEN)?;
        r.finish()?;
        Ok(Self {
            first_slot,
            last_slot,
            n_bits,
            bitmaps,
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

    /// The bits in emission order.
    pub fn iter(&self) -> impl Iterator<Item = KeyBit> + '_ {
        (0..usize::from(self.n_bits)).filter_map(|i| self.get(i))
    }
}

fn set(area: &mut [u8], at: usize, mask: u8) -> Result<(), FrameError> {
    let b = area
        .get_mut(at)
        .ok_or(FrameError::BufferTooSmall { needed: at + 1 })?;
    *b |= mask;
    Ok(())
}

/// Set bit `i` of a block being built in `area` (the payload, zeroed beforehand) sized for `cap`
/// bits: the maps sit at their full-capacity offsets until [`seal`].
pub fn put_bit(area: &mut [u8], cap: usize, i: usize, bit: &KeyBit) -> Result<(), FrameError> {
    let m = cap.div_ceil(8);
    let at = FIXED_LEN + i / 8;
    let mask = 1 << (i % 8);
    let flags = [
        bit.bit & 1 == 1,
        bit.basis == Basis::X,
        bit.multi_click,
        bit.revealed,
    ];
    for (map, on) in flags.into_iter().enumerate() {
        if on {
            set(area, at + map * m, mask)?;
        }
    }
    set(
        area,
        FIXED_LEN + 4 * m + i / 4,
        (bit.intensity & 0b11) << (2 * (i % 4)),
    )
}

/// Finish a block of `n` bits built with [`put_bit`] at capacity `cap`: move the maps to their
/// offsets for `n` bits and write the fixed fields. Returns the payload length, [`len`]`(n)`.
pub fn seal(
    area: &mut [u8],
    cap: usize,
    n: usize,
    first_slot: u64,
    last_slot: u64,
) -> Result<usize, FrameError> {
    let count = u16::try_from(n)
        .ok()
        .filter(|&c| c > 0 && n <= cap && n <= MAX_BITS)
        .ok_or(FrameError::BadField {
            offset: 16,
            field: "n_bits",
        })?;
    let (m_cap, m) = (cap.div_ceil(8), n.div_ceil(8));
    let total = len(n).max(FIXED_LEN + 4 * m_cap + cap.div_ceil(4));
    if area.len() < total {
        return Err(FrameError::BufferTooSmall { needed: total });
    }
    for map in 1..5 {
        let bytes = if map == 4 { n.div_ceil(4) } else { m };
        let from = FIXED_LEN + map * m_cap;
        area.copy_within(from..from + bytes, FIXED_LEN + map * m);
    }
    let mut w = Writer::new(area);
    w.u64(first_slot)?;
    w.u64(last_slot)?;
    w.u16(count)?;
    Ok(len(n))
}

/// Write a whole key-block payload for `bits` (at most [`MAX_BITS`]) into `out`; returns its
/// length.
pub fn emit(
    first_slot: u64,
    last_slot: u64,
    bits: &[KeyBit],
    out: &mut [u8],
) -> Result<usize, FrameError> {
    let n = bits.len();
    let area = out
        .get_mut(..len(n))
        .ok_or(FrameError::BufferTooSmall { needed: len(n) })?;
    area.fill(0);
    for (i, b) in bits.iter().enumerate() {
        put_bit(area, n, i, b)?;
    }
    seal(area, n, n, first_slot, last_slot)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn key_bit(bit: u8, x: bool, intensity: u8, multi_click: bool, revealed: bool) -> KeyBit {
        KeyBit {
            bit,
            basis: if x { Basis::X } else { Basis::Z },
            intensity,
            multi_click,
            revealed,
        }
    }

    // Layout of docs/frames.md, by hand: 3 bits, maps of 1 byte, intensities in 1 byte.
    #[test]
    fn layout_by_hand() {
        let bits = [
            key_bit(1, false, 2, false, false),
            key_bit(0, true, 1, true, false),
            key_bit(1, true, 0, false, true),
        ];
        let mut p = [0xEEu8; 32];
        assert_eq!(emit(0x10, 0x20, &bits, &mut p), Ok(len(3)));
        assert_eq!(len(3), 23);
        assert_eq!(&p[..8], &[0x10, 0, 0, 0, 0, 0, 0, 0]);
        assert_eq!(&p[16..18], &[3, 0]);
        assert_eq!(&p[18..23], &[0b101, 0b110, 0b010, 0b100, 0b0110]);
        let kb = KeyBlock::parse(&p[..23]).unwrap();
        assert_eq!(kb.iter().collect::<Vec<_>>(), bits);
        assert_eq!(
            KeyBlock::parse(&p[..22]),
            Err(FrameError::Truncated { offset: 22 })
        );
        assert_eq!(
            KeyBlock::parse(&p[..24]),
            Err(FrameError::LengthMismatch {
                declared: 23,
                actual: 24
            })
        );
        assert_eq!(
            emit(0, 0, &bits, &mut [0u8; 22]),
            Err(FrameError::BufferTooSmall { needed: 23 })
        );
        assert!(emit(0, 0, &[], &mut p).is_err());
    }

    proptest! {
        #[test]
        fn round_trip(bits in proptest::collection::vec(
                (0u8..2, any::<bool>(), 0u8..4, any::<bool>(), any::<bool>()), 1..=MAX_BITS),
                first in 0u64..1 << 40, span in 0u64..1 << 20) {
            let bits: Vec<KeyBit> =
                bits.into_iter().map(|(b, x, i, m, r)| key_bit(b, x, i, m, r)).collect();
            let mut p = vec![0u8; MAX_PAYLOAD];
            let n = emit(first, first + span, &bits, &mut p).unwrap();
            prop_assert_eq!(n, len(bits.len()));
            let kb = KeyBlock::parse(&p[..n]).unwrap();
            prop_assert_eq!((kb.first_slot, kb.last_slot), (first, first + span));
            prop_assert_eq!(kb.iter().collect::<Vec<_>>(), bits);
        }
    }
}
