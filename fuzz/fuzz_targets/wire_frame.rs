//! Wire frames from arbitrary bytes (`slotwise::frames::decode_frame`, then the key-block and
//! summary payload parsers), and arbitrary payloads through encode then decode.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::frames::{self, KeyBlock, RecordType, Summary, MAX_FRAME, MAX_PAYLOAD, MAX_RAW};

fuzz_target!(|data: &[u8]| {
    let mut scratch = [0u8; MAX_RAW + 64];
    if let Ok(f) = frames::decode_frame(data, &mut scratch) {
        assert!(f.payload.len() <= MAX_PAYLOAD);
        if let Ok(k) = KeyBlock::parse(f.payload) {
            for i in 0..1100 {
                let _ = k.get(i);
            }
        }
        let _ = Summary::decode(f.payload);
    }
    // A tiny scratch buffer must give an error, not a panic.
    let mut small = [0u8; 7];
    let _ = frames::decode_frame(data, &mut small);
    // Round trip: any payload that fits comes back unchanged.
    if let Some((&seq, payload)) = data.split_first() {
        if payload.len() <= MAX_PAYLOAD {
            let mut raw = [0u8; MAX_RAW];
            let mut out = [0u8; MAX_FRAME];
            let n = frames::encode_frame(
                RecordType::KeyBlock,
                u16::from(seq),
                payload,
                &mut raw,
                &mut out,
            )
            .expect("a payload within MAX_PAYLOAD encodes");
            let f = frames::decode_frame(&out[..n], &mut scratch).expect("own frame decodes");
            assert_eq!(f.payload, payload);
            assert_eq!(f.seq, u16::from(seq));
            assert!(
                !out[..n - 1].contains(&0),
                "COBS output holds no zero before the delimiter"
            );
        }
    }
});
