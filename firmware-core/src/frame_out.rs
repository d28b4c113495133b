//! Stage 8 — wire frames out: sifted bits and the final counters, framed for the
//! post-processing host.
//!
//! [`FrameOut`] is a [`KeySink`] that packs sifted bits into key blocks of `BITS` bits
//! ([`crate::formats::key_block`]), emitted every `BITS` bits and at the end, then writes the
//! [`Summary`] of every counter; [`FrameOut::record`] sends an alarm or a statistics snapshot
//! between key blocks. Each finished frame (CRC-32C, COBS, 0x00 delimiter: [`crate::formats`])
//! goes to a [`FrameSink`] (a UART, a USB endpoint, a file). The byte layouts live in
//! [`crate::formats`]; this stage only decides when a frame is sent and keeps its two fixed
//! buffers and sequence number.

use crate::formats::framing::{
    encode_frame, seal_in_place, RecordType, CRC_LEN, HEADER_LEN, MAX_FRAME, MAX_RAW,
};
use crate::formats::key_block::{self, KeyBit, MAX_BITS};
use crate::formats::Summary;
use crate::sift::{KeySink, SiftedBit};

/// Largest payload [`FrameOut::record`] frames, in bytes (alarm and statistics records fit).
pub const SMALL_RECORD: usize = 256;

const _: () = assert!(crate::formats::alarm::LEN <= SMALL_RECORD);
const _: () = assert!(crate::formats::statistics::LEN <= SMALL_RECORD);

/// Where finished frames go: one call per frame, delimiter included.
pub trait FrameSink {
    /// Take one complete frame (COBS bytes followed by 0x00).
    fn frame(&mut self, bytes: &[u8]);
}

/// A [`KeySink`] that packs sifted bits into key-block frames of `BITS` bits and writes the
/// summary at the end, in two fixed buffers (about 2.1 KiB).
pub struct FrameOut<S: FrameSink, const BITS: usize> {
    sink: S,
    raw: [u8; MAX_RAW],
    enc: [u8; MAX_FRAME],
    n_bits: usize,
    first_slot: u64,
    last_slot: u64,
    seq: u16,
    key_blocks: u64,
    frame_errors: u64,
}

impl<S: FrameSink, const BITS: usize> FrameOut<S, BITS> {
    /// A frame writer handing its frames to `sink`.
    pub const fn new(sink: S) -> Self {
        const { assert!(BITS > 0 && BITS <= MAX_BITS, "BITS must lie in 1..=1024") };
        Self {
            sink,
            raw: [0; MAX_RAW],
            enc: [0; MAX_FRAME],
            n_bits: 0,
            first_slot: u64::MAX,
            last_slot: 0,
            seq: 0,
            key_blocks: 0,
            frame_errors: 0,
        }
    }

    /// The sink the frames go to.
    pub const fn sink(&self) -> &S {
        &self.sink
    }

    /// The sink, mutably (to flush or inspect a transport).
    pub fn sink_mut(&mut self) -> &mut S {
        &mut self.sink
    }

    /// Give the sink back.
    pub fn into_sink(self) -> S {
        self.sink
    }

    /// Key-block frames emitted so far.
    pub const fn key_blocks(&self) -> u64 {
        self.key_blocks
    }

    /// Frames that could not be built (0 unless a buffer is misconfigured).
    pub const fn frame_errors(&self) -> u64 {
        self.frame_errors
    }

    /// Bits waiting for the next key block.
    pub const fn buffered_bits(&self) -> usize {
        self.n_bits
    }

    /// Emit the buffered bits as a key block now (nothing when no bit is buffered).
    pub fn flush(&mut self) {
        let n = self.n_bits;
        if n == 0 {
            return;
        }
        let area = self.raw.get_mut(HEADER_LEN..).unwrap_or_default();
        let sealed = key_block::seal(area, BITS, n, self.first_slot, self.last_slot);
        match sealed {
            Ok(len) => self.emit(RecordType::KeyBlock, len),
            Err(_) => self.frame_errors += 1,
        }
        self.key_blocks += 1;
        self.n_bits = 0;
        self.first_slot = u64::MAX;
        self.last_slot = 0;
        let end = HEADER_LEN + key_block::len(BITS);
        if let Some(area) = self.raw.get_mut(HEADER_LEN..end) {
            area.fill(0);
        }
    }

    /// Header, CRC, COBS and delimiter around the payload already in `raw`, then to the sink.
    fn emit(&mut self, record: RecordType, len: usize) {
        match seal_in_place(record, self.seq, len, &mut self.raw, &mut self.enc) {
            Ok(n) => {
                self.seq = self.seq.wrapping_add(1);
                self.sink.frame(self.enc.get(..n).unwrap_or(&[]));
            }
            Err(_) => self.frame_errors += 1,
        }
    }

    /// Emit one small record (payload at most [`SMALL_RECORD`] bytes: alarms, statistics) now,
    /// between key blocks; key bits buffered so far stay buffered.
    pub fn record(&mut self, record: RecordType, payload: &[u8]) {
        let mut raw = [0u8; HEADER_LEN + SMALL_RECORD + CRC_LEN];
        match encode_frame(record, self.seq, payload, &mut raw, &mut self.enc) {
            Ok(n) => {
                self.seq = self.seq.wrapping_add(1);
                self.sink.frame(self.enc.get(..n).unwrap_or(&[]));
            }
            Err(_) => self.frame_errors += 1,
        }
    }

    /// Flush the buffered bits, then emit `summary` (its frame counters filled in here).
    pub fn finish(&mut self, summary: &Summary) {
        self.flush();
        let s = Summary {
            key_blocks: self.key_blocks,
            frame_errors: self.frame_errors,
            ..*summary
        };
        let area = self.raw.get_mut(HEADER_LEN..).unwrap_or_default();
        match s.emit(area) {
            Ok(len) => self.emit(RecordType::Summary, len),
            Err(_) => self.frame_errors += 1,
        }
    }
}

impl<S: FrameSink, const BITS: usize> KeySink for FrameOut<S, BITS> {
    fn sifted(&mut self, bit: SiftedBit) {
        let i = self.n_bits;
        let kb = KeyBit {
            bit: bit.bit,
            basis: bit.basis,
            intensity: bit.intensity,
            multi_click: bit.multi_click,
            revealed: bit.tx_bit.is_some(),
        };
        let area = self.raw.get_mut(HEADER_LEN..).unwrap_or_default();
        if key_block::put_bit(area, BITS, i, &kb).is_err() {
            self.frame_errors += 1;
        }
        self.first_slot = self.first_slot.min(bit.slot);
        self.last_slot = self.last_slot.max(bit.slot);
        self.n_bits = i + 1;
        if self.n_bits >= BITS {
            self.flush();
        }
    }
}

#[cfg(test)]
mod tests;
