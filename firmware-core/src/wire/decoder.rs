//! A streaming frame decoder: bytes in, in any chunking; whole checked frames out.
//!
//! Bytes collect until a 0x00 delimiter; the collected piece is then unstuffed and checked by
//! [`decode_frame`]. A piece longer than the largest frame is given
//! up on at once (counted as [`FrameError::Overlong`] when its delimiter arrives), so garbage on
//! the line costs at most one frame and the decoder resynchronises at the next 0x00.

use crate::formats::{decode_frame, Frame, FrameError, MAX_FRAME, MAX_RAW};

/// Streaming decoder with fixed buffers (about 2.1 KiB: [`MAX_FRAME`] + [`MAX_RAW`] bytes).
#[derive(Debug)]
pub struct FrameDecoder {
    buf: [u8; MAX_FRAME],
    len: usize,
    dropped: usize,
    scratch: [u8; MAX_RAW],
}

impl Default for FrameDecoder {
    fn default() -> Self {
        Self::new()
    }
}

impl FrameDecoder {
    /// A decoder waiting for the first byte.
    pub const fn new() -> Self {
        Self {
            buf: [0; MAX_FRAME],
            len: 0,
            dropped: 0,
            scratch: [0; MAX_RAW],
        }
    }

    /// Stuffed bytes held for the frame in progress.
    pub const fn pending_bytes(&self) -> usize {
        self.len + self.dropped
    }

    /// Take one byte. At a delimiter that ends a non-empty piece, returns the decoded frame or
    /// why it was refused; empty pieces (idle delimiters) return `None`.
    pub fn push(&mut self, byte: u8) -> Option<Result<Frame<'_>, FrameError>> {
        if byte != 0 {
            if self.dropped > 0 {
                self.dropped += 1;
            } else if let Some(d) = self.buf.get_mut(self.len) {
                *d = byte;
                self.len += 1;
            } else {
                self.dropped = self.len + 1;
                self.len = 0;
            }
            return None;
        }
        let (len, dropped) = (self.len, self.dropped);
        self.len = 0;
        self.dropped = 0;
        if dropped > 0 {
            return Some(Err(FrameError::Overlong { bytes: dropped }));
        }
        if len == 0 {
            return None;
        }
        let piece = self.buf.get(..len).unwrap_or_default();
        Some(decode_frame(piece, &mut self.scratch))
    }
}
