//! Any bytes as the transmitter's side of a round-authenticated link: the endpoint never panics,
//! no round verifies without the key (every verdict is "failed"), and the pool's accounting holds.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::wire::{AuthConfig, LinkAuth, LinkConfig, ReceiverLink};
use slotwise::{Announcement, Basis, Transmitter};
use std::convert::Infallible;

struct Bytes(Vec<u8>, usize);
impl embedded_io::ErrorType for Bytes {
    type Error = Infallible;
}
impl embedded_io::Read for Bytes {
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        let rest = &self.0[self.1..];
        let n = rest.len().min(buf.len());
        buf[..n].copy_from_slice(&rest[..n]);
        self.1 += n;
        Ok(n)
    }
}
impl embedded_io::ReadReady for Bytes {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        Ok(self.1 < self.0.len())
    }
}
struct Sink;
impl embedded_io::ErrorType for Sink {
    type Error = Infallible;
}
impl embedded_io::Write for Sink {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Infallible> {
        Ok(())
    }
}

fuzz_target!(|data: &[u8]| {
    // The fuzzer never sees the key: any round tag it makes is a forgery.
    let key: Vec<u8> = (0..64 * 8).map(|i| (i as u8).wrapping_mul(73) ^ 0x91).collect();
    let auth = LinkAuth::<64>::new(AuthConfig::DEFAULT, [0x5C; 16], &key).unwrap();
    let cfg = LinkConfig::new(1 << 40, 100).unwrap();
    let mut l = ReceiverLink::<_, _, 4, 64, 64>::new_round_authenticated(
        cfg,
        auth,
        2,
        Bytes(data.to_vec(), 0),
        Sink,
    )
    .unwrap();
    for s in 0..24u64 {
        l.announce(Announcement {
            slot: 1 + s * 3,
            basis: if s % 3 == 0 { Basis::X } else { Basis::Z },
        });
        while l.poll_answer().is_some() {}
    }
    l.flush();
    while l.poll_answer().is_some() {}
    l.close();
    while l.poll_answer().is_some() {}
    l.give_up_rounds();
    while let Some(v) = l.poll_verdict() {
        assert!(!v.kept);
    }
    assert_eq!(l.rounds().unwrap().counters().verified, 0);
    let a = l.auth().unwrap();
    let k = a.counters();
    assert_eq!(
        k.key_bits_loaded,
        k.key_bits_consumed + k.key_bits_abandoned + a.key_bits_left()
    );
});
