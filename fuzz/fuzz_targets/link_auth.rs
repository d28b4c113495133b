//! Any bytes as tagged frames on an authenticated link, checked by the core's tag verifier:
//! nothing made without the key is ever accepted, a refusal never spends a pad word, and the
//! pool's accounting holds after every frame.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::formats::decode_frame;
use slotwise::formats::tag::{Direction, TagInput};
use slotwise::formats::MAX_RAW;
use slotwise::wire::{AuthConfig, FrameDecoder, LinkAuth};

fuzz_target!(|data: &[u8]| {
    // The fuzzer never sees the key: any frame it makes is a forgery.
    let h = [0x5Cu8; 16];
    let key: Vec<u8> = (0..64 * 8).map(|i| (i as u8).wrapping_mul(73) ^ 0x91).collect();
    let mut auth = LinkAuth::<64>::new(AuthConfig::new(0, 8, 1 << 20).unwrap(), h, &key).unwrap();
    let mut dec = FrameDecoder::new();
    let (mut frames, mut scratch) = (0u64, vec![0u8; MAX_RAW]);
    // Whole stuffed frames, and the same bytes as a stream.
    for piece in data.split(|&b| b == 0) {
        if let Ok(f) = decode_frame(piece, &mut scratch) {
            check(&mut auth, &f, &mut frames);
        }
    }
    for &b in data {
        if let Some(Ok(f)) = dec.push(b) {
            check(&mut auth, &f, &mut frames);
        }
    }
    let c = auth.counters();
    assert_eq!(c.frames_verified, 0);
    assert_eq!(c.refusals, frames);
    assert_eq!(c.key_bits_consumed, 0);
    assert_eq!(auth.key_bits_left(), 64 * 64);
});

fn check(auth: &mut LinkAuth<64>, f: &slotwise::formats::Frame<'_>, frames: &mut u64) {
    let num = u64::from(f.seq) % 40;
    for dir in Direction::ALL {
        let m = TagInput {
            dir,
            record: f.record,
            seq: f.seq,
            num,
            payload: f.payload,
        };
        assert!(auth.verify(&m, f.tag.as_ref()).is_err());
        *frames += 1;
        let k = auth.counters();
        assert_eq!(
            k.key_bits_loaded,
            k.key_bits_consumed + k.key_bits_abandoned + auth.key_bits_left()
        );
    }
}
