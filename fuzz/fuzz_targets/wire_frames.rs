//! Any bytes into the streaming frame decoder and the link payload parsers: no panic, and every
//! frame handed out re-encodes to the same frame.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::formats::{decode_frame, encode_frame, RecordType, MAX_FRAME, MAX_RAW};
use slotwise::wire::{AnnounceView, AnswersView, FrameDecoder};

fuzz_target!(|data: &[u8]| {
    let mut dec = FrameDecoder::new();
    let mut raw = [0u8; MAX_RAW];
    let mut out = [0u8; MAX_FRAME];
    let mut scratch = [0u8; MAX_RAW];
    for &b in data {
        let Some(Ok(f)) = dec.push(b) else { continue };
        match f.record {
            RecordType::Announce => {
                if let Ok(v) = AnnounceView::parse(f.payload) {
                    let mut prev = None;
                    for a in v.iter() {
                        assert!(prev.is_none_or(|p| a.slot > p), "slots must increase");
                        prev = Some(a.slot);
                    }
                    assert_eq!(v.iter().count(), usize::from(v.count));
                }
            }
            RecordType::Answers => {
                if let Ok(v) = AnswersView::parse(f.payload) {
                    assert_eq!(v.iter().count(), v.count());
                }
            }
            _ => {}
        }
        let n = encode_frame(f.record, f.seq, f.payload, &mut raw, &mut out).unwrap();
        let again = decode_frame(&out[..n], &mut scratch).unwrap();
        assert_eq!(
            (again.record, again.seq, again.payload),
            (f.record, f.seq, f.payload)
        );
    }
});
