//! Fixed rings between the receiver and a firmware's own I/O: bytes of the classical channel in
//! and out ([`ByteRing`]), and whole output frames for the post-processing host ([`FrameRing`]).
//!
//! A board that drives its UARTs, DMA or network stack itself (a C firmware through the
//! `firmware-c` interface, or a Rust main loop) pushes received bytes into one ring and drains
//! the others when its transmitters have room. Nothing is lost silently: a byte or frame that
//! finds its ring full is refused and counted.

use core::convert::Infallible;
use embedded_io::{ErrorKind, ErrorType, Read, ReadReady, Write};
use slotwise::FrameSink;

/// A byte FIFO of `N` bytes: `embedded-io` reads take from its head, writes append at its tail.
pub struct ByteRing<const N: usize> {
    buf: [u8; N],
    head: usize,
    len: usize,
    refused: u64,
}

impl<const N: usize> Default for ByteRing<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> ByteRing<N> {
    /// An empty ring.
    pub const fn new() -> Self {
        Self {
            buf: [0; N],
            head: 0,
            len: 0,
            refused: 0,
        }
    }

    /// Bytes held, in bytes.
    pub const fn len(&self) -> usize {
        self.len
    }

    /// Whether the ring holds nothing.
    pub const fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Room left, in bytes.
    pub const fn room(&self) -> usize {
        N - self.len
    }

    /// Bytes refused because the ring was full, in bytes.
    pub const fn refused(&self) -> u64 {
        self.refused
    }

    /// Append as many of `bytes` as fit; returns how many were taken (the rest are counted as
    /// refused).
    pub fn push(&mut self, bytes: &[u8]) -> usize {
        let n = bytes.len().min(self.room());
        for &b in bytes.iter().take(n) {
            if let Some(slot) = self.buf.get_mut((self.head + self.len) % N) {
                *slot = b;
            }
            self.len += 1;
        }
        self.refused += (bytes.len() - n) as u64;
        n
    }

    /// Move up to `out.len()` bytes from the head into `out`; returns how many.
    pub fn pop_into(&mut self, out: &mut [u8]) -> usize {
        let n = out.len().min(self.len);
        for o in out.iter_mut().take(n) {
            *o = self.buf.get(self.head).copied().unwrap_or(0);
            self.head = (self.head + 1) % N;
        }
        self.len -= n;
        n
    }
}

impl<const N: usize> ErrorType for ByteRing<N> {
    type Error = Infallible;
}

impl<const N: usize> Read for ByteRing<N> {
    /// Bytes held now; 0 when empty (more may be pushed later).
    fn read(&mut self, out: &mut [u8]) -> Result<usize, Infallible> {
        Ok(self.pop_into(out))
    }
}

impl<const N: usize> ReadReady for ByteRing<N> {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        Ok(!self.is_empty())
    }
}

/// The writing side of a [`ByteRing`] for a frame writer: a write that does not fit whole is
/// refused with [`ErrorKind::OutOfMemory`] (the writer counts it), so a frame is never cut.
pub struct FrameBytesOut<const N: usize>(pub ByteRing<N>);

impl<const N: usize> ErrorType for FrameBytesOut<N> {
    type Error = ErrorKind;
}

impl<const N: usize> Write for FrameBytesOut<N> {
    fn write(&mut self, buf: &[u8]) -> Result<usize, ErrorKind> {
        if buf.len() > self.0.room() {
            self.0.refused += buf.len() as u64;
            return Err(ErrorKind::OutOfMemory);
        }
        Ok(self.0.push(buf))
    }

    fn flush(&mut self) -> Result<(), ErrorKind> {
        Ok(())
    }
}

/// Whole frames (COBS bytes and their 0x00 delimiter) waiting to be drained, in `N` bytes; a
/// frame that does not fit whole is dropped and counted.
pub struct FrameRing<const N: usize> {
    bytes: ByteRing<N>,
    frames: u64,
    dropped_frames: u64,
}

impl<const N: usize> Default for FrameRing<N> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const N: usize> FrameRing<N> {
    /// An empty ring.
    pub const fn new() -> Self {
        Self {
            bytes: ByteRing::new(),
            frames: 0,
            dropped_frames: 0,
        }
    }

    /// Frames taken in whole, in frames.
    pub const fn frames(&self) -> u64 {
        self.frames
    }

    /// Frames dropped because the ring had no room for them, in frames.
    pub const fn dropped_frames(&self) -> u64 {
        self.dropped_frames
    }

    /// Bytes waiting, in bytes.
    pub const fn pending(&self) -> usize {
        self.bytes.len()
    }

    /// Move up to `out.len()` waiting bytes into `out` (frames may be cut between calls; the
    /// byte stream stays whole); returns how many.
    pub fn drain(&mut self, out: &mut [u8]) -> usize {
        self.bytes.pop_into(out)
    }
}

impl<const N: usize> FrameSink for FrameRing<N> {
    fn frame(&mut self, bytes: &[u8]) {
        if bytes.len() > self.bytes.room() {
            self.dropped_frames += 1;
            return;
        }
        self.bytes.push(bytes);
        self.frames += 1;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bytes_come_out_in_order_across_the_wrap_and_a_full_ring_refuses_the_rest() {
        let mut r = ByteRing::<4>::new();
        assert_eq!(r.push(&[1, 2, 3]), 3);
        let mut out = [0u8; 2];
        assert_eq!(r.pop_into(&mut out), 2);
        assert_eq!(out, [1, 2]);
        assert_eq!(r.push(&[4, 5, 6, 7]), 3);
        assert_eq!(r.refused(), 1);
        let mut out = [0u8; 8];
        assert_eq!(r.read(&mut out).unwrap(), 4);
        assert_eq!(out[..4], [3, 4, 5, 6]);
        assert!(!r.read_ready().unwrap());
    }

    #[test]
    fn a_frame_that_does_not_fit_is_dropped_whole_and_counted() {
        let mut f = FrameRing::<8>::new();
        f.frame(&[1, 2, 3, 0]);
        f.frame(&[4, 5, 6, 7, 0]);
        assert_eq!((f.frames(), f.dropped_frames(), f.pending()), (1, 1, 4));
        let mut w = FrameBytesOut(ByteRing::<4>::new());
        assert!(w.write(&[1, 2, 3, 4, 5]).is_err());
        assert_eq!(w.write(&[1, 2]).unwrap(), 2);
        assert_eq!(w.0.refused(), 5);
    }
}
