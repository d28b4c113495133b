//! The board's byte streams: TDC events in, transmitter answers in, frames out.
//!
//! Two input record formats, no header, little-endian:
//!
//! - event, 9 bytes: TDC counter value u64 (ticks), channel u8;
//! - answer, 11 bytes: slot u64, basis u8 (0 = Z, 1 = X), intensity class u8, bit u8
//!   (0xFF = not revealed).
//!
//! [`Transport`] is what a board implements. Any three `embedded-io` streams make one
//! ([`IoTransport`]): under QEMU they are semihosting files; on a board the events come from the
//! TDC's or FPGA's FIFO over SPI, the answers from the classical link (UART, Ethernet), and the
//! frames go to the post-processing host (UART, USB).

use embedded_io::{ErrorKind, Read, Write};
use slotwise::{Answer, Basis, FrameSink, TdcEvent};

/// Bytes per event record.
pub const EVENT_LEN: usize = 9;
/// Bytes per answer record.
pub const ANSWER_LEN: usize = 11;
/// Bit byte of an answer whose bit the transmitter keeps secret.
pub const NOT_REVEALED: u8 = 0xFF;

/// One event as 9 record bytes.
pub fn encode_event(ev: &TdcEvent) -> [u8; EVENT_LEN] {
    let mut b = [0u8; EVENT_LEN];
    for (d, s) in b
        .iter_mut()
        .zip(ev.count.to_le_bytes().iter().chain([&ev.channel]))
    {
        *d = *s;
    }
    b
}

/// One event from 9 record bytes.
pub fn decode_event(b: &[u8; EVENT_LEN]) -> TdcEvent {
    let [c0, c1, c2, c3, c4, c5, c6, c7, channel] = *b;
    TdcEvent {
        count: u64::from_le_bytes([c0, c1, c2, c3, c4, c5, c6, c7]),
        channel,
    }
}

/// One answer record as stored (fields unchecked).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AnswerRecord {
    /// Slot index.
    pub slot: u64,
    /// Basis byte: 0 = Z, 1 = X.
    pub basis: u8,
    /// Intensity class index.
    pub intensity: u8,
    /// Revealed bit, or [`NOT_REVEALED`].
    pub bit: u8,
}

impl AnswerRecord {
    /// The record of a core answer.
    pub fn of(a: &Answer) -> Self {
        Self {
            slot: a.slot,
            basis: a.basis as u8,
            intensity: a.intensity,
            bit: a.bit.unwrap_or(NOT_REVEALED),
        }
    }

    /// The core answer, or `None` for a basis byte other than 0 or 1 (range of intensity and bit
    /// is the core's to check, and it counts what it refuses).
    pub fn answer(&self) -> Option<Answer> {
        let basis = match self.basis {
            0 => Basis::Z,
            1 => Basis::X,
            _ => return None,
        };
        Some(Answer {
            slot: self.slot,
            basis,
            intensity: self.intensity,
            bit: (self.bit != NOT_REVEALED).then_some(self.bit),
        })
    }

    /// The 11 record bytes.
    pub fn encode(&self) -> [u8; ANSWER_LEN] {
        let mut b = [0u8; ANSWER_LEN];
        let tail = [self.basis, self.intensity, self.bit];
        for (d, s) in b
            .iter_mut()
            .zip(self.slot.to_le_bytes().iter().chain(&tail))
        {
            *d = *s;
        }
        b
    }

    /// A record from its 11 bytes.
    pub fn decode(b: &[u8; ANSWER_LEN]) -> Self {
        let [s0, s1, s2, s3, s4, s5, s6, s7, basis, intensity, bit] = *b;
        Self {
            slot: u64::from_le_bytes([s0, s1, s2, s3, s4, s5, s6, s7]),
            basis,
            intensity,
            bit,
        }
    }
}

/// Where TDC events come from.
pub trait EventSource {
    /// Transport error.
    type Error;
    /// Fill the front of `buf` with the next events; `Ok(0)` is the end of the stream.
    fn read_events(&mut self, buf: &mut [TdcEvent]) -> Result<usize, Self::Error>;
}

/// Where the transmitter's answers come from, in announcement order.
pub trait AnswerSource {
    /// Transport error.
    type Error;
    /// The next answer record; `Ok(None)` when the stream has ended.
    fn next_answer(&mut self) -> Result<Option<AnswerRecord>, Self::Error>;
}

/// A board's three streams.
pub trait Transport {
    /// TDC events in.
    type Events: EventSource;
    /// Transmitter answers in.
    type Answers: AnswerSource;
    /// Frames out.
    type Frames: FrameSink;
    /// Hand the three streams to the run loop.
    fn split(self) -> (Self::Events, Self::Answers, Self::Frames);
}

/// Why a record stream stopped.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum StreamError {
    /// The transport failed.
    Io(ErrorKind),
    /// The stream ended inside a record.
    PartialRecord {
        /// Byte offset of the incomplete record in the stream.
        offset: u64,
    },
}

impl core::fmt::Display for StreamError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Io(kind) => write!(f, "transport error ({kind:?})"),
            Self::PartialRecord { offset } => {
                write!(f, "stream ends inside the record at byte {offset}")
            }
        }
    }
}

impl core::error::Error for StreamError {}

/// Fixed-size records read from an `embedded-io` byte stream through a buffer of `B` bytes.
pub struct RecordReader<R: Read, const B: usize> {
    inner: R,
    buf: [u8; B],
    start: usize,
    end: usize,
    consumed: u64,
    eof: bool,
}

impl<R: Read, const B: usize> RecordReader<R, B> {
    /// Read records from `inner`.
    pub const fn new(inner: R) -> Self {
        Self {
            inner,
            buf: [0; B],
            start: 0,
            end: 0,
            consumed: 0,
            eof: false,
        }
    }

    /// Bytes handed out as records so far.
    pub const fn consumed(&self) -> u64 {
        self.consumed
    }

    /// The next record of `N` bytes; `Ok(None)` at a clean end of stream.
    pub fn record<const N: usize>(&mut self) -> Result<Option<[u8; N]>, StreamError> {
        const { assert!(N <= B, "record larger than the buffer") };
        while self.end - self.start < N && !self.eof {
            self.buf.copy_within(self.start..self.end, 0);
            self.end -= self.start;
            self.start = 0;
            let room = self.buf.get_mut(self.end..).unwrap_or_default();
            let n = self
                .inner
                .read(room)
                .map_err(|e| StreamError::Io(embedded_io::Error::kind(&e)))?;
            if n == 0 {
                self.eof = true;
            }
            self.end += n;
        }
        let avail = self.end - self.start;
        if avail == 0 {
            return Ok(None);
        }
        if avail < N {
            return Err(StreamError::PartialRecord {
                offset: self.consumed,
            });
        }
        let mut rec = [0u8; N];
        rec.copy_from_slice(self.buf.get(self.start..self.start + N).unwrap_or(&[0; N]));
        self.start += N;
        self.consumed += N as u64;
        Ok(Some(rec))
    }
}

/// TDC events from a byte stream of 9-byte records.
pub struct IoEvents<R: Read>(pub RecordReader<R, { 64 * EVENT_LEN }>);

impl<R: Read> IoEvents<R> {
    /// Events from `inner`.
    pub const fn new(inner: R) -> Self {
        Self(RecordReader::new(inner))
    }
}

impl<R: Read> EventSource for IoEvents<R> {
    type Error = StreamError;
    fn read_events(&mut self, buf: &mut [TdcEvent]) -> Result<usize, StreamError> {
        let mut n = 0;
        for slot in buf.iter_mut() {
            match self.0.record::<EVENT_LEN>()? {
                Some(rec) => *slot = decode_event(&rec),
                None => break,
            }
            n += 1;
        }
        Ok(n)
    }
}

/// Answers from a byte stream of 11-byte records.
pub struct IoAnswers<R: Read>(pub RecordReader<R, { 32 * ANSWER_LEN }>);

impl<R: Read> IoAnswers<R> {
    /// Answers from `inner`.
    pub const fn new(inner: R) -> Self {
        Self(RecordReader::new(inner))
    }
}

impl<R: Read> AnswerSource for IoAnswers<R> {
    type Error = StreamError;
    fn next_answer(&mut self) -> Result<Option<AnswerRecord>, StreamError> {
        Ok(self
            .0
            .record::<ANSWER_LEN>()?
            .map(|b| AnswerRecord::decode(&b)))
    }
}

/// Frames written to an `embedded-io` byte stream; failed writes are counted, never dropped
/// silently.
pub struct IoFrames<W: Write> {
    inner: W,
    frames: u64,
    bytes: u64,
    errors: u64,
}

impl<W: Write> IoFrames<W> {
    /// Frames to `inner`.
    pub const fn new(inner: W) -> Self {
        Self {
            inner,
            frames: 0,
            bytes: 0,
            errors: 0,
        }
    }

    /// Frames written.
    pub const fn frames(&self) -> u64 {
        self.frames
    }

    /// Bytes written.
    pub const fn bytes(&self) -> u64 {
        self.bytes
    }

    /// Frames whose write failed.
    pub const fn errors(&self) -> u64 {
        self.errors
    }

    /// Flush the stream; a failure counts as an error.
    pub fn flush(&mut self) {
        if self.inner.flush().is_err() {
            self.errors += 1;
        }
    }
}

impl<W: Write> FrameSink for IoFrames<W> {
    fn frame(&mut self, bytes: &[u8]) {
        match self.inner.write_all(bytes) {
            Ok(()) => {
                self.frames += 1;
                self.bytes += bytes.len() as u64;
            }
            Err(_) => self.errors += 1,
        }
    }
}

/// Any three `embedded-io` streams as a [`Transport`].
pub struct IoTransport<E: Read, A: Read, F: Write> {
    /// TDC event records in.
    pub events: E,
    /// Answer records in.
    pub answers: A,
    /// Frames out.
    pub frames: F,
}

impl<E: Read, A: Read, F: Write> Transport for IoTransport<E, A, F> {
    type Events = IoEvents<E>;
    type Answers = IoAnswers<A>;
    type Frames = IoFrames<F>;
    fn split(self) -> (IoEvents<E>, IoAnswers<A>, IoFrames<F>) {
        (
            IoEvents::new(self.events),
            IoAnswers::new(self.answers),
            IoFrames::new(self.frames),
        )
    }
}
