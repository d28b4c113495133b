//! Wire frames from arbitrary bytes (`slotwise::formats::decode_frame`, then the key-block,
//! summary, alarm and statistics payload parsers), and arbitrary payloads through encode then
//! decode.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::formats::{
    self, AlarmEvent, KeyBlock, RecordType, Snapshot, Summary, MAX_FRAME, MAX_PAYLOAD, MAX_RAW,
};

fuzz_target!(|data: &[u8]| {
    let mut scratch = [0u8; MAX_RAW + 64];
    if let Ok(f) = formats::decode_frame(data, &mut scratch) {
        assert!(f.payload.len() <= MAX_PAYLOAD);
        if let Ok(k) = KeyBlock::parse(f.payload) {
            for i in 0..1100 {
                let _ = k.get(i);
            }
        }
        let _ = Summary::parse(f.payload);
        let _ = AlarmEvent::parse(f.payload);
        let _ = Snapshot::parse(f.payload);
    }
    // A tiny scratch buffer must give an error, not a panic.
    let mut small = [0u8; 7];
    let _ = formats::decode_frame(data, &mut small);
    // Round trip: any payload that fits comes back unchanged.
    if let Some((&seq, payload)) = data.split_first() {
        if payload.len() <= MAX_PAYLOAD {
            let mut raw = [0u8; MAX_RAW];
            let mut out = [0u8; MAX_FRAME];
            let n = formats::encode_frame(
                RecordType::KeyBlock,
                u16::from(seq),
                payload,
                &mut raw,
                &mut out,
            )
            .expect("a payload within MAX_PAYLOAD encodes");
            let f = formats::decode_frame(&out[..n], &mut scratch).expect("own frame decodes");
            assert_eq!(f.payload, payload);
            assert_eq!(f.seq, u16::from(seq));
            assert!(
                !out[..n - 1].contains(&0),
                "COBS output holds no zero before the delimiter"
            );
        }
    }
});
