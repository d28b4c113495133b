//! Key-refill record (type 7, post-processing host → board): fresh key for the authentication
//! pool of the sifting link.
//!
//! Payload, little-endian: `first_word u64 | words u16 | key (8 · words bytes)`. `first_word` is
//! the pad-word index of the record's first 8 key bytes in the key stream both ends share
//! (`docs/wire-protocol.md` §9); records must follow each other without gap or overlap, which the
//! pool checks. The record travels on the board's local link to its own post-processing host,
//! never on the sifting link.

use super::bytes::{Reader, Writer};
use super::framing::{FrameError, LINK_MAX_PAYLOAD};
use super::tag::PAD_LEN;

/// Bytes of the fixed part of a refill payload.
pub const FIXED_LEN: usize = 10;
/// Most pad words one refill record carries.
pub const MAX_WORDS: usize = (LINK_MAX_PAYLOAD - FIXED_LEN) / PAD_LEN;

/// Payload bytes of a refill record of `words` pad words.
pub const fn len(words: usize) -> usize {
    FIXED_LEN + words * PAD_LEN
}

/// A checked refill payload, borrowing its key bytes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct RefillView<'a> {
    /// Pad-word index of the first key word.
    pub first_word: u64,
    /// Key bytes, a whole number of pad words (1 ..= [`MAX_WORDS`]).
    pub key: &'a [u8],
}

impl<'a> RefillView<'a> {
    /// Check a refill payload: word count in range and exactly the bytes it announces.
    pub fn parse(payload: &'a [u8]) -> Result<Self, FrameError> {
        let mut r = Reader::new(payload);
        let first_word = r.u64()?;
        let words = usize::from(r.u16()?);
        if words == 0 || words > MAX_WORDS {
            return Err(FrameError::BadField {
                offset: 8,
                field: "words",
            });
        }
        let key = r.bytes(words * PAD_LEN)?;
        r.finish()?;
        Ok(Self { first_word, key })
    }

    /// Pad words carried.
    pub const fn words(&self) -> usize {
        self.key.len() / PAD_LEN
    }
}

/// Write a refill payload into `out`; returns its length. `key` must be 1 ..= [`MAX_WORDS`]
/// whole pad words.
pub fn emit(first_word: u64, key: &[u8], out: &mut [u8]) -> Result<usize, FrameError> {
    let words = key.len() / PAD_LEN;
    if !key.len().is_multiple_of(PAD_LEN) || words == 0 || words > MAX_WORDS {
        return Err(FrameError::BadField {
            offset: 8,
            field: "words",
        });
    }
    let n = len(words);
    let dst = out
        .get_mut(..n)
        .ok_or(FrameError::BufferTooSmall { needed: n })?;
    let mut w = Writer::new(dst);
    w.u64(first_word)?;
    w.u16(words as u16)?;
    w.bytes(key)?;
    Ok(n)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn refill_round_trips_and_refuses_bad_counts() {
        let key: Vec<u8> = (0..24).collect();
        let mut out = [0u8; 64];
        let n = emit(40, &key, &mut out).unwrap();
        assert_eq!(n, len(3));
        let v = RefillView::parse(&out[..n]).unwrap();
        assert_eq!((v.first_word, v.words(), v.key), (40, 3, &key[..]));
        assert!(RefillView::parse(&out[..n - 1]).is_err());
        let mut longer = out[..n].to_vec();
        longer.push(0);
        assert!(RefillView::parse(&longer).is_err());
        out[8] = 0;
        out[9] = 0;
        assert!(RefillView::parse(&out[..FIXED_LEN]).is_err());
        assert!(emit(0, &key[..5], &mut out).is_err());
        assert!(emit(0, &[], &mut out).is_err());
        assert_eq!(MAX_WORDS, 130);
        assert!(len(MAX_WORDS) <= LINK_MAX_PAYLOAD);
    }
}
