//! The TDC FIFO bridge's two SPI ports.
//!
//! - The command port (SPI1, this board the master) answers the status and read commands of
//!   [`slotwise::ingest::spi`]; [`CommandPort`] and [`DataReady`] are the `embedded-hal` 1.0
//!   [`SpiDevice`] and [`InputPin`] that [`slotwise::ingest::spi::SpiFifoSource`] is generic over.
//!   The board reads the bridge's status through it before it arms the DMA and after every
//!   decoded half (FIFO-full flags and dropped words go to the ingest counters), and it carries
//!   the polled fallback when the stream port is off.
//! - The stream port (SPI2, this board a receive-only slave) is clocked by the bridge, which
//!   shifts out whole records only while it has them, so the DMA ring never holds filler bytes.
//!   Its DMA side is in [`crate::dma`].
//!
//! Polled byte transfers rather than a second DMA stream for the command port: its transactions
//! are a few bytes between halves, and a polled loop keeps the example readable.

use crate::regs::{Port, Spi};
use core::convert::Infallible;
use embedded_hal::digital::{ErrorType as PinErrorType, InputPin};
use embedded_hal::spi::{self, ErrorKind, ErrorType, Operation, SpiDevice};

/// Command byte that switches the bridge's stream port on (an invented bridge's command, beside
/// the status and read commands of [`slotwise::ingest::spi`]).
pub const STREAM_ON_COMMAND: u8 = 0x03;
/// Command byte that switches the stream port off; the FIFO is then read with the read command.
pub const STREAM_OFF_COMMAND: u8 = 0x04;

/// Status-register polls before a byte transfer is given up: far longer than one byte at the
/// command port's 5.25 MHz clock (about 13 bus cycles per bit), short enough that a dead bus is
/// reported rather than hanging the board.
const SPIN_LIMIT: u32 = 10_000;

const RXNE: u32 = 1 << 0;
const TXE: u32 = 1 << 1;
const OVR: u32 = 1 << 6;
const BSY: u32 = 1 << 7;

/// Why a command-port transfer failed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum CommandPortError {
    /// A received byte was not read before the next one arrived.
    Overrun,
    /// The peripheral did not finish a byte within the spin limit.
    Stalled,
}

impl spi::Error for CommandPortError {
    fn kind(&self) -> ErrorKind {
        match self {
            Self::Overrun => ErrorKind::Overrun,
            Self::Stalled => ErrorKind::Other,
        }
    }
}

/// SPI1 as master with a software chip select on PA4: the bridge's command port.
pub struct CommandPort {
    spi: Spi,
}

impl CommandPort {
    /// Configure SPI1: master, mode 0, APB2 / 16 (5.25 MHz), 8-bit frames, MSB first, software
    /// slave select (the chip select is a GPIO, so a transaction holds it across operations).
    pub fn new() -> Self {
        let spi = Spi::SPI1;
        const MSTR: u32 = 1 << 2;
        const BR_DIV16: u32 = 0b011 << 3;
        const SPE: u32 = 1 << 6;
        const SSI: u32 = 1 << 8;
        const SSM: u32 = 1 << 9;
        spi.cr1().write(MSTR | BR_DIV16 | SSI | SSM);
        spi.cr1().write(MSTR | BR_DIV16 | SSI | SSM | SPE);
        Self { spi }
    }

    fn select(&self, on: bool) {
        // PA4, active low: BSRR's high half resets the pin, the low half sets it.
        Port::A
            .bsrr()
            .write(if on { 1 << (4 + 16) } else { 1 << 4 });
    }

    fn wait(&self, mask: u32) -> Result<u32, CommandPortError> {
        for _ in 0..SPIN_LIMIT {
            let sr = self.spi.sr().read();
            if sr & OVR != 0 {
                // Reading DR then SR clears the overrun flag.
                let _ = self.spi.dr().read();
                let _ = self.spi.sr().read();
                return Err(CommandPortError::Overrun);
            }
            if sr & mask != 0 {
                return Ok(sr);
            }
        }
        Err(CommandPortError::Stalled)
    }

    /// Shift one byte out and the answering byte in.
    fn exchange(&mut self, out: u8) -> Result<u8, CommandPortError> {
        self.wait(TXE)?;
        self.spi.dr().write(u32::from(out));
        self.wait(RXNE)?;
        Ok(self.spi.dr().read() as u8)
    }

    fn operation(&mut self, op: &mut Operation<'_, u8>) -> Result<(), CommandPortError> {
        match op {
            Operation::Read(buf) => {
                for b in buf.iter_mut() {
                    *b = self.exchange(0)?;
                }
            }
            Operation::Write(buf) => {
                for &b in buf.iter() {
                    self.exchange(b)?;
                }
            }
            Operation::Transfer(read, write) => {
                // The longer of the two sets the length: missing writes send 0, extra reads
                // are dropped (embedded-hal's contract).
                let n = read.len().max(write.len());
                for i in 0..n {
                    let b = self.exchange(write.get(i).copied().unwrap_or(0))?;
                    if let Some(r) = read.get_mut(i) {
                        *r = b;
                    }
                }
            }
            Operation::TransferInPlace(buf) => {
                for b in buf.iter_mut() {
                    *b = self.exchange(*b)?;
                }
            }
            Operation::DelayNs(ns) => {
                // 84 cycles per microsecond; rounding up keeps at least the asked delay.
                cortex_m::asm::delay(ns.div_ceil(1000).saturating_mul(84).max(1));
            }
        }
        Ok(())
    }
}

impl ErrorType for CommandPort {
    type Error = CommandPortError;
}

impl SpiDevice for CommandPort {
    fn transaction(&mut self, ops: &mut [Operation<'_, u8>]) -> Result<(), CommandPortError> {
        self.select(true);
        let mut result = Ok(());
        for op in ops.iter_mut() {
            result = self.operation(op);
            if result.is_err() {
                break;
            }
        }
        // Let the last byte leave the shift register before the bridge sees the select rise.
        for _ in 0..SPIN_LIMIT {
            if self.spi.sr().read() & BSY == 0 {
                break;
            }
        }
        self.select(false);
        result
    }
}

/// The bridge's data-ready line on PA0: high while the bridge has status or words to report.
pub struct DataReady;

impl PinErrorType for DataReady {
    type Error = Infallible;
}

impl InputPin for DataReady {
    fn is_high(&mut self) -> Result<bool, Infallible> {
        Ok(Port::A.idr().read() & 1 != 0)
    }

    fn is_low(&mut self) -> Result<bool, Infallible> {
        Ok(Port::A.idr().read() & 1 == 0)
    }
}

/// Configure SPI2 as the stream port: slave, receive only, hardware slave select on PB12, mode
/// 0, 8-bit frames, receive DMA requests on. Call after the DMA stream is armed, so the first
/// byte already has somewhere to go.
pub fn enable_stream_port() {
    let spi = Spi::SPI2;
    const RXDMAEN: u32 = 1 << 0;
    const SPE: u32 = 1 << 6;
    const RXONLY: u32 = 1 << 10;
    spi.cr2().write(RXDMAEN);
    spi.cr1().write(RXONLY);
    spi.cr1().write(RXONLY | SPE);
}
