use super::*;
use crate::formats::{KeyBlock, Summary};
use proptest::prelude::*;

fn frame(record: RecordType, seq: u16, payload: &[u8]) -> Vec<u8> {
    let mut raw = vec![0u8; MAX_RAW];
    let mut out = vec![0u8; MAX_FRAME];
    let n = encode_frame(record, seq, payload, &mut raw, &mut out).unwrap();
    out.truncate(n);
    out
}

/// Stuff raw bytes with a correct CRC appended (to reach the checks behind the CRC).
fn stuff_with_crc(body: &[u8]) -> Vec<u8> {
    let mut raw = body.to_vec();
    raw.extend_from_slice(&crc32c(body).to_le_bytes());
    let mut out = vec![0u8; cobs::max_encoded_len(raw.len())];
    let n = cobs::encode(&raw, &mut out).unwrap();
    out.truncate(n);
    out
}

fn decode(stuffed: &[u8]) -> Result<(RecordType, u16, Vec<u8>), FrameError> {
    let mut scratch = vec![0u8; MAX_RAW + 64];
    decode_frame(stuffed, &mut scratch).map(|f| (f.record, f.seq, f.payload.to_vec()))
}

#[test]
fn record_type_list_is_consistent() {
    for (i, t) in RecordType::ALL.into_iter().enumerate() {
        assert_eq!(usize::from(t.code()), i + 1);
        assert_eq!(RecordType::from_code(t.code()), Some(t));
        assert!(!t.name().is_empty());
    }
    assert_eq!(RecordType::from_code(0), None);
    assert_eq!(RecordType::from_code(10), None);
}

// Check value for ASCII "123456789" in Cook's catalogue of parametrised CRC algorithms.
#[test]
fn crc32c_check_value() {
    assert_eq!(crc32c(b"123456789"), 0xE306_9283);
}

// A message followed by its reflected CRC-32/ISCSI (little-endian) always checks to the same
// constant: the catalogue's residue 0xB798B438, xored with xorout 0xFFFFFFFF (from memory).
#[test]
fn crc32c_residue_of_a_codeword() {
    for msg in [&b"123456789"[..], b"", b"\x00\x00\x00\x00slotwise"] {
        let mut w = msg.to_vec();
        w.extend_from_slice(&crc32c(msg).to_le_bytes());
        assert_eq!(crc32c(&w), 0xB798_B438 ^ 0xFFFF_FFFF);
    }
}

#[test]
fn tagged_frame_round_trips() {
    let tag = [1, 2, 3, 4, 5, 6, 7, 8];
    let mut raw = vec![0u8; MAX_RAW];
    let mut out = vec![0u8; MAX_FRAME];
    let n =
        encode_frame_tagged(RecordType::Answers, 9, &[0xAA, 0], &tag, &mut raw, &mut out).unwrap();
    let mut scratch = vec![0u8; MAX_RAW];
    let f = decode_frame(&out[..n], &mut scratch).unwrap();
    assert_eq!(
        (f.record, f.seq, f.payload, f.tag),
        (RecordType::Answers, 9, &[0xAA, 0][..], Some(tag))
    );
    let plain = frame(RecordType::Answers, 9, &[0xAA, 0]);
    assert_eq!(decode_frame(&plain, &mut scratch).unwrap().tag, None);
}

#[test]
fn frame_layout_by_hand() {
    let f = frame(RecordType::Summary, 0x0102, &[0xAA, 0x00]);
    assert_eq!(f.last(), Some(&0));
    let mut scratch = [0u8; 32];
    let n = cobs::decode(&f[..f.len() - 1], &mut scratch).unwrap();
    let crc = crc32c(&[1, 2, 0x02, 0x01, 2, 0, 0xAA, 0x00]).to_le_bytes();
    assert_eq!(
        &scratch[..n],
        &[1, 2, 0x02, 0x01, 2, 0, 0xAA, 0x00, crc[0], crc[1], crc[2], crc[3]]
    );
}

#[test]
fn decoder_errors_are_typed() {
    assert_eq!(
        decode(&[0x03, 0x01, 0x02]),
        Err(FrameError::Truncated { offset: 2 })
    );
    let good = frame(RecordType::KeyBlock, 7, &[1, 2, 3]);
    let mut bad = good.clone();
    bad[3] ^= 0x40;
    assert!(matches!(decode(&bad), Err(FrameError::BadCrc { .. })));
    // Cut inside the last COBS block: the block runs past the end.
    assert!(matches!(
        decode(&good[..good.len() - 3]),
        Err(FrameError::Cobs { .. })
    ));
    assert_eq!(
        decode(&stuffed_header(3, 1, 0, &[])),
        Err(FrameError::UnknownVersion(3))
    );
    // A tagged frame needs its 8 tag bytes after the payload.
    assert_eq!(
        decode(&stuffed_header(VERSION_TAGGED, 1, 0, &[1, 2, 3])),
        Err(FrameError::LengthMismatch {
            declared: 0,
            actual: 0
        })
    );
    assert_eq!(
        decode(&stuffed_header(VERSION, 10, 0, &[])),
        Err(FrameError::UnknownType(10))
    );
    assert_eq!(
        decode(&stuffed_header(VERSION, 1, 5000, &[])),
        Err(FrameError::Oversized(5000))
    );
    assert_eq!(
        decode(&stuffed_header(VERSION, 1, 3, &[9])),
        Err(FrameError::LengthMismatch {
            declared: 3,
            actual: 1
        })
    );
    let mut small = [0u8; 4];
    assert!(matches!(
        decode_frame(&good, &mut small),
        Err(FrameError::BufferTooSmall { .. })
    ));
}

fn stuffed_header(version: u8, code: u8, len: u16, payload: &[u8]) -> Vec<u8> {
    let l = len.to_le_bytes();
    let mut body = vec![version, code, 0, 0, l[0], l[1]];
    body.extend_from_slice(payload);
    stuff_with_crc(&body)
}

proptest! {
    #[test]
    fn frame_round_trip(code in 1u8..3, seq in any::<u16>(),
                        payload in proptest::collection::vec(any::<u8>(), 0..MAX_PAYLOAD)) {
        let record = RecordType::from_code(code).unwrap();
        let f = frame(record, seq, &payload);
        prop_assert!(f.len() <= MAX_FRAME);
        prop_assert_eq!(f.iter().filter(|&&b| b == 0).count(), 1);
        prop_assert_eq!(decode(&f), Ok((record, seq, payload)));
    }

    #[test]
    fn decoder_never_panics(data in proptest::collection::vec(any::<u8>(), 0..1200),
                            cap in 0usize..1200) {
        let mut scratch = vec![0u8; cap];
        if let Ok(f) = decode_frame(&data, &mut scratch) {
            let _ = KeyBlock::parse(f.payload).map(|k| k.get(3));
            let _ = Summary::parse(f.payload);
        }
    }

    #[test]
    fn key_block_parse_never_panics(p in proptest::collection::vec(any::<u8>(), 0..400)) {
        if let Ok(k) = KeyBlock::parse(&p) {
            for i in 0..=usize::from(k.n_bits) {
                let _ = k.get(i);
            }
        }
    }
}
