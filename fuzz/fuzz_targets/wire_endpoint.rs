//! Any bytes as the transmitter's side of the link: the receiver's endpoint never panics, hands
//! over only announced slots, and accounts for every announcement.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::sift::{Announcement, Transmitter};
use slotwise::wire::{LinkConfig, ReceiverLink};
use slotwise::Basis;
use std::convert::Infallible;

struct Bytes<'a>(&'a [u8]);

impl embedded_io::ErrorType for Bytes<'_> {
    type Error = Infallible;
}
impl embedded_io::Read for Bytes<'_> {
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        let n = buf.len().min(self.0.len()).min(7);
        buf[..n].copy_from_slice(&self.0[..n]);
        self.0 = &self.0[n..];
        Ok(n)
    }
}
impl embedded_io::ReadReady for Bytes<'_> {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        Ok(!self.0.is_empty())
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
    let cfg = LinkConfig::new(1000, 100).unwrap();
    let mut l = ReceiverLink::<_, _, 8, 64>::new(cfg, Bytes(data), Sink);
    let slots: Vec<u64> = (0..40u64).map(|k| 1000 + 7 * k).collect();
    for &s in &slots {
        let basis = if s % 2 == 0 { Basis::Z } else { Basis::X };
        l.announce(Announcement { slot: s, basis });
    }
    l.flush();
    let mut seen = std::collections::HashSet::new();
    while let Some(a) = l.poll_answer() {
        assert!(slots.contains(&a.slot) && seen.insert(a.slot));
    }
    let c = *l.counters();
    assert_eq!(c.answers_in, seen.len() as u64);
    assert_eq!(
        c.announcements,
        c.answers_in + c.expired_announcements + l.waiting_announcements()
    );
});
