//! The SPI FIFO source over `embedded-hal-async` 1.0: the same two commands as the blocking
//! source ([`super`]), with the data-ready line awaited (an interrupt-driven executor sleeps
//! until the bridge has data) instead of polled.

use embedded_hal_async::digital::Wait;
use embedded_hal_async::spi::{Operation, SpiDevice};

use super::{decode, read_length, Polled, SourceError, READ_COMMAND, STATUS_BYTES, STATUS_COMMAND};
use crate::ingest::Ingest;
use crate::timestamps::TdcEvent;

/// Reads a TDC word FIFO over SPI once its data-ready line is high, awaiting both.
#[derive(Debug)]
pub struct SpiFifoSourceAsync<SPI, DRDY> {
    spi: SPI,
    data_ready: DRDY,
}

impl<SPI: SpiDevice, DRDY: Wait> SpiFifoSourceAsync<SPI, DRDY> {
    /// A source on the FIFO bridge at `spi`, with its data-ready line on `data_ready`.
    pub const fn new(spi: SPI, data_ready: DRDY) -> Self {
        Self { spi, data_ready }
    }

    /// The bus and the pin back.
    pub fn release(self) -> (SPI, DRDY) {
        (self.spi, self.data_ready)
    }

    /// Wait until data is ready, then as [`super::SpiFifoSource::poll`]: read the status, report
    /// its FIFO-full flag and dropped words to `ingest`, read what waits (at most what `buf` and
    /// `out` hold) and decode it into `out`.
    pub async fn next(
        &mut self,
        ingest: &mut Ingest,
        buf: &mut [u8],
        out: &mut [TdcEvent],
    ) -> Result<Polled, SourceError<SPI::Error, DRDY::Error>> {
        self.data_ready
            .wait_for_high()
            .await
            .map_err(SourceError::Pin)?;
        let mut status = [0u8; STATUS_BYTES];
        self.spi
            .transaction(&mut [
                Operation::Write(&[STATUS_COMMAND]),
                Operation::Read(&mut status),
            ])
            .await
            .map_err(SourceError::Spi)?;
        let n = read_length(ingest, status, buf.len(), out.len());
        let Some(block) = buf.get_mut(..n).filter(|b| !b.is_empty()) else {
            return Ok(Polled::default());
        };
        self.spi
            .transaction(&mut [Operation::Write(&[READ_COMMAND]), Operation::Read(block)])
            .await
            .map_err(SourceError::Spi)?;
        Ok(decode(ingest, block, out))
    }
}
