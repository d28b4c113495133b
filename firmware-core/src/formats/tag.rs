//! The Wegman-Carter tag of an authenticated link frame: a polynomial hash over GF(2^128),
//! truncated to 64 bits and one-time padded.
//!
//! Wegman & Carter (J. Comput. Syst. Sci. 22, 265, 1981) authenticate a message with
//! `tag = h_k(message) XOR pad`: `h_k` an almost-XOR-universal hash under a key `k` that may be
//! reused, `pad` fresh secret key bits used once. The hash here is POLYVAL (RFC 8452, §3, the
//! GHASH-like hash of AES-GCM-SIV), computed by RustCrypto's `polyval` crate; its key `H` is 16
//! bytes of the pre-shared key, never zero.
//!
//! The hashed message is one header block and the payload, zero-padded to whole 16-byte blocks:
//!
//! ```text
//! block 0:   type u8 | direction u8 | seq u16 | len u16 | 0 0 | frame number u64
//! block 1..: payload, zero-padded
//! ```
//!
//! The tag is the first [`TAG_LEN`] bytes of `POLYVAL(H, blocks)` XOR the [`PAD_LEN`] pad bytes.
//! Two different messages of at most `L` blocks give POLYVAL values that are equal (or differ by
//! any chosen value) for at most `L` of the 2^128 keys: their difference is a nonzero polynomial
//! of degree at most `L` in `H·x^-128` (block 0 is never zero, its type byte is at least 1, so
//! messages of different block counts differ in the top coefficient, and `len` tells apart
//! payloads of equal block count). Truncating to 64 bits keeps that bound over 2^64 outcomes, so
//! each forgery attempt succeeds with probability at most `L / 2^64`; with the pad, the hash
//! family is `L/2^64`-almost strongly universal. `docs/wire-protocol.md` §9 turns this into
//! figures per tag and per session.

use super::framing::{RecordType, TAG_LEN};
use polyval::universal_hash::UniversalHash;
use polyval::Polyval;

/// Bytes of the POLYVAL hash key `H`.
pub const HASH_KEY_LEN: usize = 16;
/// Bytes of one-time pad per tag (one pad word of the key pool).
pub const PAD_LEN: usize = TAG_LEN;
/// Bytes of one POLYVAL block.
pub const BLOCK_LEN: usize = 16;

/// Which way a frame travels; part of every tag and of its pad's position.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Direction {
    /// Receiver to transmitter (announce frames and reports).
    ToTransmitter = 0,
    /// Transmitter to receiver (answers frames).
    ToReceiver = 1,
}

impl Direction {
    /// Both directions, in code order.
    pub const ALL: [Direction; 2] = [Self::ToTransmitter, Self::ToReceiver];

    /// The direction code hashed into block 0.
    pub const fn code(self) -> u8 {
        self as u8
    }

    /// Index of the pad word for frame number `num` in this direction: `2·num + code`.
    ///
    /// Each announce frame `num` owns the pad pair `(2·num, 2·num + 1)`: the first for the frame
    /// itself, the second for the answers frame that answers it. Both sides derive the position
    /// from authenticated numbers, so a lost or forged frame never shifts later pads.
    pub const fn pad_word(self, num: u64) -> u64 {
        num.wrapping_mul(2).wrapping_add(self as u64)
    }
}

/// What a tag covers.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TagInput<'a> {
    /// Which way the frame travels.
    pub dir: Direction,
    /// Record type in the frame header.
    pub record: RecordType,
    /// Sequence number in the frame header.
    pub seq: u16,
    /// Frame number the pad is derived from: the announce frame's full 64-bit number (for an
    /// answers frame, the number of the announce frame it answers).
    pub num: u64,
    /// Payload bytes.
    pub payload: &'a [u8],
}

impl TagInput<'_> {
    /// Block 0 of the hashed message.
    pub fn header_block(&self) -> [u8; BLOCK_LEN] {
        let mut b = [0u8; BLOCK_LEN];
        let s = self.seq.to_le_bytes();
        let l = (self.payload.len() as u16).to_le_bytes();
        let n = self.num.to_le_bytes();
        let head = [
            self.record.code(),
            self.dir.code(),
            s[0],
            s[1],
            l[0],
            l[1],
            0,
            0,
        ];
        for (d, v) in b.iter_mut().zip(head.iter().chain(n.iter())) {
            *d = *v;
        }
        b
    }
}

/// `POLYVAL(H, first, data zero-padded to whole blocks)` (RFC 8452, §3), all 16 bytes.
pub fn polyval_hash(
    h: &[u8; HASH_KEY_LEN],
    first: Option<&[u8; BLOCK_LEN]>,
    data: &[u8],
) -> [u8; 16] {
    let mut p = Polyval::new(&(*h).into());
    if let Some(b) = first {
        p.update(&[(*b).into()]);
    }
    p.update_padded(data);
    p.finalize().into()
}

/// The tag of `m` under hash key `h` and one-time pad `pad`.
pub fn tag(h: &[u8; HASH_KEY_LEN], pad: &[u8; PAD_LEN], m: &TagInput<'_>) -> [u8; TAG_LEN] {
    let full = polyval_hash(h, Some(&m.header_block()), m.payload);
    let mut t = [0u8; TAG_LEN];
    for ((d, a), b) in t.iter_mut().zip(full.iter()).zip(pad.iter()) {
        *d = a ^ b;
    }
    t
}

/// Compare two tags in time independent of where they differ.
pub fn tags_equal(a: &[u8; TAG_LEN], b: &[u8; TAG_LEN]) -> bool {
    a.iter()
        .zip(b.iter())
        .fold(0u8, |acc, (x, y)| acc | (x ^ y))
        == 0
}

#[cfg(test)]
mod tests {
    use super::*;

    fn hex16(s: &str) -> [u8; 16] {
        let mut out = [0u8; 16];
        for (i, o) in out.iter_mut().enumerate() {
            *o = u8::from_str_radix(&s[2 * i..2 * i + 2], 16).unwrap();
        }
        out
    }

    /// RFC 8452 (AES-GCM-SIV), Appendix A: POLYVAL(H, X_1, X_2).
    #[test]
    fn rfc8452_appendix_a_polyval() {
        let h = hex16("25629347589242761d31f826ba4b757b");
        let x1 = hex16("4f4f95668c83dfb6401762bb2d01a262");
        let x2 = hex16("d1a24ddd2721d006bbe45f20d3c9f362");
        let want = hex16("f7a3b47b846119fae5b7866cf5e5b77e");
        assert_eq!(polyval_hash(&h, Some(&x1), &x2), want);
        let both: Vec<u8> = x1.iter().chain(x2.iter()).copied().collect();
        assert_eq!(polyval_hash(&h, None, &both), want);
    }

    /// RFC 8452, Appendix C.1, the AEAD_AES_128_GCM_SIV example with an 8-byte plaintext:
    /// record authentication key, POLYVAL input (plaintext block, length block) and result.
    #[test]
    fn rfc8452_appendix_c1_polyval() {
        let h = hex16("d9b360279694941ac5dbc6987ada7377");
        let b1 = hex16("01000000000000000000000000000000");
        let b2 = hex16("00000000000000004000000000000000");
        let want = hex16("eb93b7740962c5e49d2a90a7dc5cec74");
        assert_eq!(polyval_hash(&h, Some(&b1), &b2), want);
    }

    #[test]
    fn tag_covers_every_field_and_the_pad() {
        let h = [7u8; 16];
        let pad = [0x5A; PAD_LEN];
        let m = TagInput {
            dir: Direction::ToReceiver,
            record: RecordType::Answers,
            seq: 9,
            num: 5,
            payload: &[1, 2, 3],
        };
        let t = tag(&h, &pad, &m);
        let changed = [
            TagInput {
                dir: Direction::ToTransmitter,
                ..m
            },
            TagInput {
                record: RecordType::Announce,
                ..m
            },
            TagInput { seq: 10, ..m },
            TagInput { num: 6, ..m },
            TagInput {
                payload: &[1, 2, 3, 0],
                ..m
            },
            TagInput {
                payload: &[1, 2, 2],
                ..m
            },
        ];
        for c in changed {
            assert_ne!(tag(&h, &pad, &c), t, "{c:?}");
        }
        assert_ne!(tag(&h, &[0; PAD_LEN], &m), t);
        assert!(tags_equal(&t, &t) && !tags_equal(&t, &[0; TAG_LEN]));
        assert_eq!(Direction::ToReceiver.pad_word(5), 11);
    }
}
