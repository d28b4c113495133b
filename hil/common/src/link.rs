//! The classical link of a HIL run: the core's [`ReceiverLink`](slotwise::ReceiverLink) writes
//! announce frames to [`AnnounceOut`] and reads the transmitter's answers frames from
//! [`AnswersIn`], two `embedded-io` halves that share one [`LinkShared`].
//!
//! The answers come from a prepared stream of records, each an answers frame with the index of
//! the announce frame it answers:
//!
//! | size | field |
//! |---|---|
//! | 4 | index of the announce frame answered (u32 LE, 0 = the first one written) |
//! | n | the answers frame as sent: COBS bytes and the 0x00 delimiter |
//!
//! **When an answers frame becomes readable** is one rule, the same on the host and on every
//! target: the frame answering announce frame k is readable once the receiver has written announce
//! frame k + [`ANSWER_LAG_FRAMES`] (so the receiver always has a few frames in flight, as a link
//! with latency gives it), or once the input has ended ([`LinkShared::end_of_input`]: every frame
//! in flight arrives, as a link settles before the receiver finishes) — never before announce
//! frame k itself was written.

use crate::probe::{Part, Probe};
use core::cell::Cell;
use core::convert::Infallible;
use embedded_io::{ErrorKind, ErrorType, Read, ReadReady, Write};

/// Announce frames the receiver writes after frame k before the answers to frame k arrive.
pub const ANSWER_LAG_FRAMES: u32 = 2;
/// Bytes of a record's header (the announce index).
pub const ANSWER_HEADER_LEN: usize = 4;
/// Bytes the answers reader buffers from its source.
const IN_BUF: usize = 64;

/// State both halves of the link see: frames written, end of input, the probe.
pub struct LinkShared {
    announce_frames: Cell<u32>,
    ended: Cell<bool>,
    probe: Probe,
}

impl LinkShared {
    /// Nothing written yet; `probe` measures the shim's own work.
    pub const fn new(probe: Probe) -> Self {
        Self {
            announce_frames: Cell::new(0),
            ended: Cell::new(false),
            probe,
        }
    }

    /// Announce frames written so far (counted by their delimiters).
    pub fn announce_frames(&self) -> u32 {
        self.announce_frames.get()
    }

    /// The input has ended: every answers frame still held becomes readable.
    pub fn end_of_input(&self) {
        self.ended.set(true);
    }

    /// Whether the frame answering announce frame `index` (0 = the first written) may be read
    /// now.
    pub fn released(&self, index: u32) -> bool {
        let written = self.announce_frames.get();
        // Never before the frame it answers was sent, even at the end.
        written > index && (self.ended.get() || written - index > ANSWER_LAG_FRAMES)
    }
}

/// The writing half: announce frames to `inner`, each delimiter counted.
pub struct AnnounceOut<'a, W: Write> {
    inner: W,
    shared: &'a LinkShared,
}

impl<'a, W: Write> AnnounceOut<'a, W> {
    /// Announce frames to `inner`.
    pub const fn new(inner: W, shared: &'a LinkShared) -> Self {
        Self { inner, shared }
    }

    /// The stream the frames go to.
    pub fn inner_mut(&mut self) -> &mut W {
        &mut self.inner
    }
}

impl<W: Write> ErrorType for AnnounceOut<'_, W> {
    type Error = ErrorKind;
}

impl<W: Write> Write for AnnounceOut<'_, W> {
    fn write(&mut self, buf: &[u8]) -> Result<usize, ErrorKind> {
        let _shim = self.shared.probe.part(Part::Shim);
        let n = self
            .inner
            .write(buf)
            .map_err(|e| embedded_io::Error::kind(&e))?;
        let delimiters = buf.get(..n).unwrap_or(&[]).iter().filter(|&&b| b == 0);
        let frames = delimiters.count() as u32;
        let s = &self.shared.announce_frames;
        s.set(s.get().wrapping_add(frames));
        Ok(n)
    }

    fn flush(&mut self) -> Result<(), ErrorKind> {
        let _shim = self.shared.probe.part(Part::Shim);
        self.inner.flush().map_err(|e| embedded_io::Error::kind(&e))
    }
}

/// The reading half: answers frames from a record stream, each once [`LinkShared::released`].
pub struct AnswersIn<'a, R: Read> {
    inner: R,
    shared: &'a LinkShared,
    buf: [u8; IN_BUF],
    pos: usize,
    len: usize,
    header: [u8; ANSWER_HEADER_LEN],
    header_len: usize,
    in_frame: bool,
    frames: u64,
    errors: u64,
}

impl<'a, R: Read> AnswersIn<'a, R> {
    /// Answers frames from the record stream `inner`.
    pub const fn new(inner: R, shared: &'a LinkShared) -> Self {
        Self {
            inner,
            shared,
            buf: [0; IN_BUF],
            pos: 0,
            len: 0,
            header: [0; ANSWER_HEADER_LEN],
            header_len: 0,
            in_frame: false,
            frames: 0,
            errors: 0,
        }
    }

    /// Answers frames handed to the endpoint (whole or begun).
    pub const fn frames(&self) -> u64 {
        self.frames
    }

    /// Read errors of the record stream.
    pub const fn errors(&self) -> u64 {
        self.errors
    }

    /// The input has ended: every answers frame still held becomes readable.
    pub fn end_of_input(&self) {
        self.shared.end_of_input();
    }

    /// Whether the record stream holds nothing more now (no header begun, no frame open).
    pub fn idle(&self) -> bool {
        self.header_len == 0 && !self.in_frame && self.pos == self.len
    }

    /// The next buffered byte, refilling from the source; `None` when it has nothing now (a
    /// stream that grows later is read again at the next call).
    fn byte(&mut self) -> Option<u8> {
        if self.pos == self.len {
            match self.inner.read(&mut self.buf) {
                Ok(0) => return None,
                Ok(n) => {
                    self.pos = 0;
                    self.len = n.min(IN_BUF);
                }
                Err(_) => {
                    self.errors += 1;
                    return None;
                }
            }
        }
        let b = self.buf.get(self.pos).copied()?;
        self.pos += 1;
        Some(b)
    }

    /// Read the next record's header when needed; true when a released frame is open.
    fn open_frame(&mut self) -> bool {
        if self.in_frame {
            return true;
        }
        while self.header_len < ANSWER_HEADER_LEN {
            let Some(b) = self.byte() else {
                return false;
            };
            if let Some(h) = self.header.get_mut(self.header_len) {
                *h = b;
            }
            self.header_len += 1;
        }
        if self.shared.released(u32::from_le_bytes(self.header)) {
            self.header_len = 0;
            self.in_frame = true;
            self.frames += 1;
        }
        self.in_frame
    }
}

impl<R: Read> ErrorType for AnswersIn<'_, R> {
    type Error = Infallible;
}

impl<R: Read> ReadReady for AnswersIn<'_, R> {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        let _shim = self.shared.probe.part(Part::Shim);
        Ok(self.open_frame())
    }
}

impl<R: Read> Read for AnswersIn<'_, R> {
    /// Bytes of the open frame, up to and including its delimiter (never past it); 0 when no
    /// released frame is open.
    fn read(&mut self, out: &mut [u8]) -> Result<usize, Infallible> {
        let _shim = self.shared.probe.part(Part::Shim);
        if !self.open_frame() {
            return Ok(0);
        }
        let mut n = 0;
        for o in out.iter_mut() {
            let Some(b) = self.byte() else {
                break;
            };
            *o = b;
            n += 1;
            if b == 0 {
                self.in_frame = false;
                break;
            }
        }
        Ok(n)
    }
}
