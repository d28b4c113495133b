use super::*;
use crate::sift::SiftedBit;
use proptest::prelude::*;

#[derive(Default)]
struct Frames(Vec<Vec<u8>>);

impl FrameSink for Frames {
    fn frame(&mut self, bytes: &[u8]) {
        self.0.push(bytes.to_vec());
    }
}

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
        decode(&stuffed_header(2, 1, 0, &[])),
        Err(FrameError::UnknownVersion(2))
    );
    assert_eq!(
        decode(&stuffed_header(VERSION, 9, 0, &[])),
        Err(FrameError::UnknownType(9))
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

#[test]
fn summary_words_sit_at_documented_offsets() {
    let mut words = 0u64..;
    let mut next = || words.next().unwrap_or(0) + 1;
    let mut t = Tally::new();
    t.counts[1][0][2][0][1] = 77;
    t.untested[2][1] = 88;
    let s = Summary {
        detections_in: next(),
        sifted_bits: next(),
        accounting: Accounting::from_counts([(); Fate::COUNT].map(|()| next())),
        multi: MultiClickEvents {
            sifted: next(),
            basis_mismatch: next(),
            queue_overflow: next(),
            unanswered: next(),
            cross_basis: next(),
        },
        answer_errors: AnswerErrors {
            unmatched: next(),
            malformed: next(),
        },
        tally: t,
        multi_tally: Tally::new(),
        key_blocks: 5,
        frame_errors: 6,
    };
    let mut p = [0u8; SUMMARY_LEN];
    assert_eq!(s.encode(&mut p), Ok(SUMMARY_LEN));
    let word = |k: usize| u64::from_le_bytes(p[8 * k..8 * k + 8].try_into().unwrap());
    // docs/frames.md: words 0..22 are the counters in declaration order.
    for k in 0..22 {
        assert_eq!(word(k), k as u64 + 1, "word {k}");
    }
    // tally.counts[tx_basis][tx_bit][intensity][rx_basis][rx_bit], row-major, from word 22.
    let (tx_basis, tx_bit, intensity, rx_basis, rx_bit) = (1, 0, 2, 0, 1);
    let idx = (((tx_basis * 2 + tx_bit) * 3 + intensity) * 2 + rx_basis) * 2 + rx_bit;
    assert_eq!(word(22 + idx), 77);
    assert_eq!(word(22 + 48 + 2 * 2 + 1), 88);
    assert_eq!(word(SUMMARY_WORDS - 2), 5);
    assert_eq!(word(SUMMARY_WORDS - 1), 6);
    assert_eq!(Summary::decode(&p), Ok(s));
    assert!(matches!(
        Summary::decode(&p[1..]),
        Err(FrameError::Truncated { .. })
    ));
}

fn sifted(slot: u64, bit: u8, x: bool, intensity: u8, multi: bool, revealed: bool) -> SiftedBit {
    SiftedBit {
        slot,
        basis: if x { Basis::X } else { Basis::Z },
        bit,
        intensity,
        multi_click: multi,
        tx_bit: revealed.then_some(bit),
    }
}

type Blocks = Vec<(u64, u64, Vec<KeyBit>)>;

fn read_back(frames: &[Vec<u8>]) -> (Blocks, Option<Summary>) {
    let mut blocks = Vec::new();
    let mut summary = None;
    for (i, f) in frames.iter().enumerate() {
        let (record, seq, payload) = decode(f).unwrap();
        assert_eq!(usize::from(seq), i);
        match record {
            RecordType::KeyBlock => {
                let kb = KeyBlock::parse(&payload).unwrap();
                let bits = (0..usize::from(kb.n_bits))
                    .map(|k| kb.get(k).unwrap())
                    .collect();
                assert_eq!(kb.get(usize::from(kb.n_bits)), None);
                blocks.push((kb.first_slot, kb.last_slot, bits));
            }
            RecordType::Summary => summary = Some(Summary::decode(&payload).unwrap()),
            other => panic!("unexpected record {other:?}"),
        }
    }
    (blocks, summary)
}

fn check_frame_out<const BITS: usize>(input: &[(u8, bool, u8, bool, bool)]) {
    let mut out = FrameOut::<Frames, BITS>::new(Frames::default());
    for (k, &(bit, x, i, m, r)) in input.iter().enumerate() {
        out.sifted(sifted(1000 + 3 * k as u64, bit, x, i, m, r));
    }
    let s = Summary {
        detections_in: 42,
        ..Summary::default()
    };
    out.finish(&s);
    let (blocks, summary) = read_back(&out.sink().0);
    let summary = summary.unwrap();
    assert_eq!(summary.detections_in, 42);
    assert_eq!(summary.key_blocks, blocks.len() as u64);
    assert_eq!(blocks.len(), input.len().div_ceil(BITS));
    let mut k = 0;
    for (first, last, bits) in &blocks {
        assert_eq!(*first, 1000 + 3 * k as u64);
        assert_eq!(*last, 1000 + 3 * (k + bits.len() - 1) as u64);
        for b in bits {
            let (bit, x, i, m, r) = input[k];
            let want = KeyBit {
                bit,
                basis: if x { Basis::X } else { Basis::Z },
                intensity: i,
                multi_click: m,
                revealed: r,
            };
            assert_eq!(*b, want, "bit {k}");
            k += 1;
        }
    }
    assert_eq!(k, input.len());
}

fn bits_strategy() -> impl Strategy<Value = Vec<(u8, bool, u8, bool, bool)>> {
    proptest::collection::vec(
        (0u8..2, any::<bool>(), 0u8..3, any::<bool>(), any::<bool>()),
        0..700,
    )
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
            let _ = Summary::decode(f.payload);
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

    #[test]
    fn frame_out_blocks_of_256(input in bits_strategy()) {
        check_frame_out::<256>(&input);
    }

    #[test]
    fn frame_out_blocks_of_13(input in bits_strategy()) {
        check_frame_out::<13>(&input);
    }
}

#[test]
fn small_records_interleave_with_key_blocks() {
    let mut out = FrameOut::<Frames, 4>::new(Frames::default());
    out.sifted(sifted(10, 1, false, 0, false, false));
    out.record(RecordType::Alarm, &[7; 20]);
    out.record(RecordType::Stats, &[0; SMALL_RECORD + 1]);
    assert_eq!(out.frame_errors(), 1);
    out.sifted(sifted(11, 0, true, 1, false, true));
    out.finish(&Summary::default());
    let frames = &out.sink().0;
    let got: Vec<_> = frames.iter().map(|f| decode(f).unwrap()).collect();
    assert_eq!(got[0], (RecordType::Alarm, 0, vec![7; 20]));
    assert_eq!((got[1].0, got[1].1), (RecordType::KeyBlock, 1));
    // The key bit buffered before the alarm is still in the block.
    let kb = KeyBlock::parse(&got[1].2).unwrap();
    assert_eq!((kb.first_slot, kb.last_slot, kb.n_bits), (10, 11, 2));
    assert_eq!((got[2].0, got[2].1), (RecordType::Summary, 2));
}
