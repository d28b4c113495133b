//! The COBS decoder on arbitrary bytes and any output size; encode then decode is the identity
//! (Cheshire & Baker, IEEE/ACM Trans. Networking 7(2), 1999).
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::formats::cobs;

fuzz_target!(|data: &[u8]| {
    let mut out = vec![0u8; data.len() + 8];
    if let Ok(n) = cobs::decode(data, &mut out) {
        assert!(n <= data.len());
    }
    let cut = usize::from(data.first().copied().unwrap_or(0));
    let mut short = vec![0u8; cut.min(data.len())];
    let _ = cobs::decode(data, &mut short);
    let mut enc = vec![0u8; cobs::max_encoded_len(data.len())];
    let n = cobs::encode(data, &mut enc).expect("max_encoded_len is enough");
    assert!(!enc[..n].contains(&0));
    let mut back = vec![0u8; data.len()];
    let m = cobs::decode(&enc[..n], &mut back).expect("own encoding decodes");
    assert_eq!(&back[..m], data);
});
