//! Any bytes as key-refill frames from the post-processing host: the endpoint never panics, a
//! refused record loads nothing, a loaded one loads exactly its words, and the pool's accounting
//! holds after every frame.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::formats::refill::RefillView;
use slotwise::formats::{decode_frame, RecordType, MAX_RAW};
use slotwise::wire::{AuthConfig, LinkAuth, LinkConfig, ReceiverLink};
use std::convert::Infallible;

struct Idle;
impl embedded_io::ErrorType for Idle {
    type Error = Infallible;
}
impl embedded_io::Read for Idle {
    fn read(&mut self, _: &mut [u8]) -> Result<usize, Infallible> {
        Ok(0)
    }
}
impl embedded_io::ReadReady for Idle {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        Ok(false)
    }
}
impl embedded_io::Write for Idle {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Infallible> {
        Ok(())
    }
}

fuzz_target!(|data: &[u8]| {
    let auth = LinkAuth::<300>::new(AuthConfig::DEFAULT, [3; 16], &[7; 8 * 4]).unwrap();
    let cfg = LinkConfig::new(1000, 100).unwrap();
    let mut l = ReceiverLink::<_, _, 8, 64, 300>::new_authenticated(cfg, auth, Idle, Idle);
    let mut scratch = vec![0u8; MAX_RAW];
    for piece in data.split(|&b| b == 0).filter(|p| !p.is_empty()) {
        let before = l.auth().unwrap().pool().end();
        let r = l.take_refill_frame(piece);
        let a = l.auth().unwrap();
        match r {
            Ok(n) => {
                assert_eq!(a.pool().end(), before + n as u64);
                let f = decode_frame(piece, &mut scratch).unwrap();
                assert_eq!(f.record, RecordType::KeyRefill);
                let v = RefillView::parse(f.payload).unwrap();
                assert_eq!((v.first_word, v.words()), (before, n));
            }
            Err(_) => assert_eq!(a.pool().end(), before),
        }
        let k = a.counters();
        assert_eq!(k.key_bits_loaded, k.key_bits_consumed + k.key_bits_abandoned + a.key_bits_left());
    }
});
