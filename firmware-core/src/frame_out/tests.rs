use super::*;
use crate::formats::{decode_frame, FrameError, KeyBlock};
use crate::gates::Basis;
use crate::sift::SiftedBit;
use proptest::prelude::*;

#[derive(Default)]
struct Frames(Vec<Vec<u8>>);

impl FrameSink for Frames {
    fn frame(&mut self, bytes: &[u8]) {
        self.0.push(bytes.to_vec());
    }
}

fn decode(stuffed: &[u8]) -> Result<(RecordType, u16, Vec<u8>), FrameError> {
    let mut scratch = vec![0u8; MAX_RAW + 64];
    decode_frame(stuffed, &mut scratch).map(|f| (f.record, f.seq, f.payload.to_vec()))
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
            RecordType::Summary => summary = Some(Summary::parse(&payload).unwrap()),
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
