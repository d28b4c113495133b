//! Consistent Overhead Byte Stuffing (Cheshire & Baker, IEEE/ACM Trans. Networking 7(2), 1999).
//!
//! COBS removes every 0x00 from a record so that 0x00 can delimit records on a byte stream. Each
//! block starts with a code byte `c`: `c - 1` data bytes follow, then an implied zero unless
//! `c == 0xFF` (a full block of 254 non-zero bytes) or the block is the last one. The overhead is
//! at most one byte per 254 bytes of data, plus one.
//!
//! After a full final block no empty trailer block is written (the variant shown in the usual
//! worked examples); decoders accept both forms, so this costs nothing in compatibility.

use core::fmt;

/// Why bytes could not be stuffed or unstuffed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum CobsError {
    /// The output buffer is too small; `needed` bytes would do.
    BufferTooSmall {
        /// Bytes needed.
        needed: usize,
    },
    /// A 0x00 inside the stuffed bytes, or a block running past their end.
    Broken {
        /// Byte offset in the stuffed bytes.
        offset: usize,
    },
}

impl fmt::Display for CobsError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::BufferTooSmall { needed } => write!(f, "buffer too small: {needed} bytes needed"),
            Self::Broken { offset } => write!(f, "byte stuffing broken at stuffed byte {offset}"),
        }
    }
}

impl core::error::Error for CobsError {}

/// Largest COBS encoding of `n` data bytes (without the 0x00 delimiter).
pub const fn max_encoded_len(n: usize) -> usize {
    n + n / 254 + 1
}

fn put(dst: &mut [u8], at: usize, byte: u8, needed: usize) -> Result<(), CobsError> {
    match dst.get_mut(at) {
        Some(d) => {
            *d = byte;
            Ok(())
        }
        None => Err(CobsError::BufferTooSmall { needed }),
    }
}

/// Encode `src` into `dst` (no delimiter); returns the encoded length in bytes.
pub fn encode(src: &[u8], dst: &mut [u8]) -> Result<usize, CobsError> {
    let needed = max_encoded_len(src.len());
    let mut code_at = 0usize;
    let mut out = 1usize;
    let mut code = 1u8;
    let last = src.len();
    for (i, &b) in src.iter().enumerate() {
        if b != 0 {
            put(dst, out, b, needed)?;
            out += 1;
            code += 1;
            if code != 0xFF {
                continue;
            }
            if i + 1 == last {
                put(dst, code_at, code, needed)?;
                return Ok(out);
            }
        }
        put(dst, code_at, code, needed)?;
        code_at = out;
        out += 1;
        code = 1;
    }
    put(dst, code_at, code, needed)?;
    Ok(out)
}

/// Decode one COBS record `src` (no delimiter) into `dst`; returns the decoded length in bytes.
///
/// A 0x00 inside `src`, or a block running past its end, is a [`CobsError::Broken`] at that offset.
pub fn decode(src: &[u8], dst: &mut [u8]) -> Result<usize, CobsError> {
    let mut i = 0usize;
    let mut out = 0usize;
    while let Some(&code) = src.get(i) {
        if code == 0 {
            return Err(CobsError::Broken { offset: i });
        }
        let n = usize::from(code) - 1;
        let block = src
            .get(i + 1..i + 1 + n)
            .ok_or(CobsError::Broken { offset: i })?;
        if let Some(z) = block.iter().position(|&b| b == 0) {
            return Err(CobsError::Broken { offset: i + 1 + z });
        }
        let needed = out + n + 1;
        dst.get_mut(out..out + n)
            .ok_or(CobsError::BufferTooSmall { needed })?
            .copy_from_slice(block);
        out += n;
        i += 1 + n;
        if code != 0xFF && i < src.len() {
            put(dst, out, 0, needed)?;
            out += 1;
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn enc(src: &[u8]) -> Vec<u8> {
        let mut out = vec![0u8; max_encoded_len(src.len())];
        let n = encode(src, &mut out).unwrap();
        out.truncate(n);
        out
    }

    fn dec(src: &[u8]) -> Vec<u8> {
        let mut out = vec![0u8; src.len()];
        let n = decode(src, &mut out).unwrap();
        out.truncate(n);
        out
    }

    // The usual worked examples of COBS (as listed with the algorithm's encyclopaedia entry;
    // quoted from memory). The 0x00 delimiter is not part of `encode`'s output.
    #[test]
    fn worked_examples() {
        let run = |from: u8, len: usize| -> Vec<u8> {
            (0..len).map(|k| from.wrapping_add(k as u8)).collect()
        };
        let cat = |parts: &[&[u8]]| parts.concat();
        let cases: Vec<(Vec<u8>, Vec<u8>)> = vec![
            (vec![0x00], vec![0x01, 0x01]),
            (vec![0x00, 0x00], vec![0x01, 0x01, 0x01]),
            (vec![0x00, 0x11, 0x00], vec![0x01, 0x02, 0x11, 0x01]),
            (
                vec![0x11, 0x22, 0x00, 0x33],
                vec![0x03, 0x11, 0x22, 0x02, 0x33],
            ),
            (
                vec![0x11, 0x22, 0x33, 0x44],
                vec![0x05, 0x11, 0x22, 0x33, 0x44],
            ),
            (
                vec![0x11, 0x00, 0x00, 0x00],
                vec![0x02, 0x11, 0x01, 0x01, 0x01],
            ),
            // 01 02 .. FE (254 bytes) -> FF 01 02 .. FE
            (run(0x01, 254), cat(&[&[0xFF], &run(0x01, 254)])),
            // 00 01 .. FE (255 bytes) -> 01 FF 01 .. FE
            (run(0x00, 255), cat(&[&[0x01, 0xFF], &run(0x01, 254)])),
            // 01 02 .. FF (255 bytes) -> FF 01 .. FE 02 FF
            (
                run(0x01, 255),
                cat(&[&[0xFF], &run(0x01, 254), &[0x02, 0xFF]]),
            ),
            // 02 03 .. FF 00 (255 bytes) -> FF 02 .. FF 01 01
            (
                run(0x02, 255),
                cat(&[&[0xFF], &run(0x02, 254), &[0x01, 0x01]]),
            ),
            // 03 04 .. FF 00 01 (255 bytes) -> FE 03 .. FF 02 01
            (
                run(0x03, 255),
                cat(&[&[0xFE], &run(0x03, 253), &[0x02, 0x01]]),
            ),
        ];
        for (i, (raw, coded)) in cases.iter().enumerate() {
            assert_eq!(&enc(raw), coded, "encode example {i}");
            assert_eq!(&dec(coded), raw, "decode example {i}");
        }
    }

    #[test]
    fn empty_and_trailer_forms() {
        assert_eq!(enc(&[]), vec![0x01]);
        assert_eq!(dec(&[0x01]), Vec::<u8>::new());
        // The original paper's encoder ends a full final block with an empty 01 block.
        let mut paper = vec![0xFF];
        paper.extend(1..=254u8);
        paper.push(0x01);
        assert_eq!(dec(&paper), (1..=254u8).collect::<Vec<_>>());
    }

    #[test]
    fn broken_input_is_an_error_with_its_offset() {
        let mut out = [0u8; 16];
        assert_eq!(
            decode(&[0x03, 0x11, 0x00], &mut out),
            Err(CobsError::Broken { offset: 2 })
        );
        assert_eq!(
            decode(&[0x05, 0x11], &mut out),
            Err(CobsError::Broken { offset: 0 })
        );
        assert_eq!(
            decode(&[0x02, 0x11, 0x00], &mut out),
            Err(CobsError::Broken { offset: 2 })
        );
        let mut tiny = [0u8; 2];
        assert!(matches!(
            encode(&[1, 2, 3], &mut tiny),
            Err(CobsError::BufferTooSmall { needed: 4 })
        ));
    }

    proptest! {
        #[test]
        fn round_trip_and_no_zero(data in proptest::collection::vec(any::<u8>(), 0..1200)) {
            let coded = enc(&data);
            prop_assert!(coded.len() <= max_encoded_len(data.len()));
            prop_assert!(!coded.contains(&0));
            prop_assert_eq!(dec(&coded), data);
        }

        #[test]
        fn decode_never_panics(data in proptest::collection::vec(any::<u8>(), 0..600),
                               cap in 0usize..700) {
            let mut out = vec![0u8; cap];
            let _ = decode(&data, &mut out);
        }
    }
}
