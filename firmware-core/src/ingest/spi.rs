//! A FIFO of raw TDC words behind an `embedded-hal` 1.0 [`SpiDevice`], read when a data-ready
//! [`InputPin`] is high.
//!
//! It exists so a board gets from the bus to [`TdcEvent`]s with one call per data-ready edge,
//! with every lost word counted. The FIFO bridge speaks two commands, each one SPI transaction:
//!
//! - status: write [`STATUS_COMMAND`], read [`STATUS_BYTES`] bytes — flags (bit 0: the FIFO was
//!   full since the last status read; reading clears it), words dropped since the last status
//!   read (saturating at 255), and the bytes waiting as a big-endian `u16`. Flag, drop count and
//!   level come from one transaction, so no word can slip between reading the level and its
//!   overflow flag;
//! - data: write [`READ_COMMAND`], read that many bytes (or fewer, to fit the caller's buffers).
//!
//! A level need not be a whole number of records: a record cut by a short read is completed by
//! the next one (the decoder carries it).
//!
//! With the `embedded-hal-async` feature, `asynch::SpiFifoSourceAsync` speaks the same two
//! commands over `embedded-hal-async` 1.0 and awaits the data-ready line instead of polling it.

use core::fmt;

use embedded_hal::digital::InputPin;
use embedded_hal::spi::{Operation, SpiDevice};

use super::Ingest;
use crate::timestamps::TdcEvent;

#[cfg(feature = "embedded-hal-async")]
pub mod asynch;

#[cfg(test)]
mod tests;

/// Command byte that reads the FIFO bridge's status.
pub const STATUS_COMMAND: u8 = 0x01;
/// Command byte that reads bytes from the FIFO.
pub const READ_COMMAND: u8 = 0x02;
/// Length of the status reply, in bytes.
pub const STATUS_BYTES: usize = 4;
/// Bit of the status flags byte set when the FIFO was full since the last status read.
pub const FLAG_FIFO_FULL: u8 = 0x01;

/// Why a poll failed; the ingest counters are unchanged by a failed transfer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SourceError<S, P> {
    /// The SPI transaction failed.
    Spi(S),
    /// Reading the data-ready pin failed.
    Pin(P),
}

impl<S: fmt::Debug, P: fmt::Debug> fmt::Display for SourceError<S, P> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Spi(e) => write!(f, "SPI transfer from the TDC FIFO failed: {e:?}"),
            Self::Pin(e) => write!(f, "reading the FIFO data-ready pin failed: {e:?}"),
        }
    }
}

impl<S: fmt::Debug, P: fmt::Debug> core::error::Error for SourceError<S, P> {}

/// What one [`SpiFifoSource::poll`] did.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Polled {
    /// Bytes read from the FIFO, in bytes.
    pub bytes: usize,
    /// Events written to the front of the caller's event buffer, in events.
    pub events: usize,
}

/// Reads a TDC word FIFO over SPI when its data-ready pin is high.
#[derive(Debug)]
pub struct SpiFifoSource<SPI, DRDY> {
    spi: SPI,
    data_ready: DRDY,
}

impl<SPI: SpiDevice, DRDY: InputPin> SpiFifoSource<SPI, DRDY> {
    /// A source on the FIFO bridge at `spi`, with its data-ready line on `data_ready`.
    pub const fn new(spi: SPI, data_ready: DRDY) -> Self {
        Self { spi, data_ready }
    }

    /// The bus and the pin back.
    pub fn release(self) -> (SPI, DRDY) {
        (self.spi, self.data_ready)
    }

    /// If data is ready: read the status, report its FIFO-full flag and dropped words to `ingest`,
    /// read what waits (at most what `buf` and `out` hold) and decode it into `out`.
    ///
    /// The read is limited to `out.len() * record_bytes - (record_bytes - 1)` bytes, so every byte
    /// read is decoded even with a carried partial record; with an empty `out` only the status is
    /// read.
    pub fn poll(
        &mut self,
        ingest: &mut Ingest,
        buf: &mut [u8],
        out: &mut [TdcEvent],
    ) -> Result<Polled, SourceError<SPI::Error, DRDY::Error>> {
        if !self.data_ready.is_high().map_err(SourceError::Pin)? {
            return Ok(Polled::default());
        }
        let mut status = [0u8; STATUS_BYTES];
        self.spi
            .transaction(&mut [
                Operation::Write(&[STATUS_COMMAND]),
                Operation::Read(&mut status),
            ])
            .map_err(SourceError::Spi)?;
        let n = read_length(ingest, status, buf.len(), out.len());
        let Some(block) = buf.get_mut(..n).filter(|b| !b.is_empty()) else {
            return Ok(Polled::default());
        };
        self.spi
            .transaction(&mut [Operation::Write(&[READ_COMMAND]), Operation::Read(block)])
            .map_err(SourceError::Spi)?;
        Ok(decode(ingest, block, out))
    }
}

/// After a status read: report its FIFO-full flag and dropped words to `ingest`, and give the
/// bytes to read next — the level, at most what `buf_len` bytes and `out_len` events take (so
/// every byte read is decoded, even after a carried partial record).
pub(crate) fn read_length(
    ingest: &mut Ingest,
    [flags, dropped, level_hi, level_lo]: [u8; STATUS_BYTES],
    buf_len: usize,
    out_len: usize,
) -> usize {
    if flags & FLAG_FIFO_FULL != 0 {
        ingest.report_fifo_full();
    }
    if dropped > 0 {
        ingest.report_overrun(u64::from(dropped));
    }
    let size = ingest.format().record_bytes();
    let room = out_len
        .saturating_mul(size)
        .saturating_sub(size.saturating_sub(1));
    let level = usize::from(u16::from_be_bytes([level_hi, level_lo]));
    level.min(buf_len).min(room)
}

/// Decode the bytes just read into `out`.
pub(crate) fn decode(ingest: &mut Ingest, block: &[u8], out: &mut [TdcEvent]) -> Polled {
    let done = ingest.push(block, out);
    Polled {
        bytes: block.len(),
        events: done.events,
    }
}
