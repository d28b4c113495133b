//! `embedded-io` streams over the two USARTs.
//!
//! Receiving is interrupt-driven into a byte ring, so the classical channel loses nothing while
//! the main loop decodes a DMA half; [`UartRx`] reads the ring without blocking and returns 0
//! when it is empty. The link endpoint asks [`ReadReady`] before it reads, so it never waits on
//! the line (this is how the core's `ReceiverLink` expects its reader to behave: a read that has
//! nothing now says so at once).
//!
//! Sending polls the transmit-empty flag byte by byte. A frame of a few hundred bytes at
//! 921 600 baud takes a few milliseconds; a board that cannot spend that in the main loop moves
//! the writer to a DMA stream, behind the same [`Write`] trait.

use crate::regs::Usart;
use core::convert::Infallible;
use core::sync::atomic::{AtomicU32, AtomicU8, AtomicUsize, Ordering};
use embedded_io::{ErrorKind, ErrorType, Read, ReadReady, Write};

/// Line rate of both links, in baud.
pub const BAUD: u32 = 921_600;
/// Bytes the receive ring holds: more than the largest frame the transmitter sends between two
/// services of the link.
pub const RX_RING: usize = 1024;
/// Status polls before a byte send is given up: many byte times at the slowest clock, short
/// enough that a stuck transmitter is reported rather than hanging the board.
const SPIN_LIMIT: u32 = 100_000;

const ORE: u32 = 1 << 3;
const RXNE: u32 = 1 << 5;
const TC: u32 = 1 << 6;
const TXE: u32 = 1 << 7;

/// Enable a USART at [`BAUD`] from its bus clock `bus_hz`: 8 data bits, no parity, one stop bit,
/// 16x oversampling; `rx_interrupt` turns the receive interrupt on.
pub fn init(usart: Usart, bus_hz: u32, rx_interrupt: bool) {
    const RE: u32 = 1 << 2;
    const TE: u32 = 1 << 3;
    const RXNEIE: u32 = 1 << 5;
    const UE: u32 = 1 << 13;
    // With 16x oversampling the divider register holds bus_hz / baud in 12.4 fixed point,
    // which is the plain quotient; rounded to the nearest.
    usart.brr().write((bus_hz + BAUD / 2) / BAUD);
    let irq = if rx_interrupt { RXNEIE } else { 0 };
    usart.cr1().write(UE | TE | RE | irq);
}

/// A single-producer, single-consumer byte ring: the interrupt handler writes, the main loop
/// reads. Atomics throughout, so neither side needs a critical section.
pub struct ByteRing {
    buf: [AtomicU8; RX_RING],
    /// Bytes written so far (wrapping), by the interrupt handler only.
    head: AtomicUsize,
    /// Bytes read so far (wrapping), by the main loop only.
    tail: AtomicUsize,
    /// Bytes dropped because the ring was full, in bytes.
    dropped: AtomicU32,
    /// Hardware overruns (a byte arrived before the previous one was read), in events.
    overruns: AtomicU32,
}

impl ByteRing {
    /// An empty ring.
    pub const fn new() -> Self {
        Self {
            buf: [const { AtomicU8::new(0) }; RX_RING],
            head: AtomicUsize::new(0),
            tail: AtomicUsize::new(0),
            dropped: AtomicU32::new(0),
            overruns: AtomicU32::new(0),
        }
    }

    fn push(&self, b: u8) {
        let head = self.head.load(Ordering::Relaxed);
        if head.wrapping_sub(self.tail.load(Ordering::Acquire)) >= RX_RING {
            self.dropped.fetch_add(1, Ordering::Relaxed);
            return;
        }
        if let Some(slot) = self.buf.get(head % RX_RING) {
            slot.store(b, Ordering::Relaxed);
        }
        self.head.store(head.wrapping_add(1), Ordering::Release);
    }

    fn pop(&self) -> Option<u8> {
        let tail = self.tail.load(Ordering::Relaxed);
        if self.head.load(Ordering::Acquire) == tail {
            return None;
        }
        let b = self.buf.get(tail % RX_RING)?.load(Ordering::Relaxed);
        self.tail.store(tail.wrapping_add(1), Ordering::Release);
        Some(b)
    }

    fn is_empty(&self) -> bool {
        self.head.load(Ordering::Acquire) == self.tail.load(Ordering::Relaxed)
    }

    /// Bytes dropped on a full ring and hardware overruns so far.
    pub fn losses(&self) -> (u32, u32) {
        (
            self.dropped.load(Ordering::Relaxed),
            self.overruns.load(Ordering::Relaxed),
        )
    }
}

/// The receive interrupt of `usart`: move the received byte into `ring`, count an overrun.
pub fn on_rx_interrupt(usart: Usart, ring: &ByteRing) {
    let sr = usart.sr().read();
    if sr & (RXNE | ORE) != 0 {
        // Reading DR after SR takes the byte and clears the overrun flag.
        let b = usart.dr().read() as u8;
        if sr & ORE != 0 {
            ring.overruns.fetch_add(1, Ordering::Relaxed);
        }
        ring.push(b);
    }
}

/// The receiving half of a USART: reads its interrupt-filled ring.
pub struct UartRx {
    ring: &'static ByteRing,
}

impl UartRx {
    /// Read from `ring` (filled by [`on_rx_interrupt`]).
    pub const fn new(ring: &'static ByteRing) -> Self {
        Self { ring }
    }
}

impl ErrorType for UartRx {
    type Error = Infallible;
}

impl Read for UartRx {
    /// The bytes the ring holds now, up to `buf.len()`; 0 when it is empty (never waits).
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        let mut n = 0;
        for slot in buf.iter_mut() {
            let Some(b) = self.ring.pop() else {
                break;
            };
            *slot = b;
            n += 1;
        }
        Ok(n)
    }
}

impl ReadReady for UartRx {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        Ok(!self.ring.is_empty())
    }
}

/// The sending half of a USART.
pub struct UartTx {
    usart: Usart,
}

impl UartTx {
    /// Send on `usart` (already enabled by [`init`]).
    pub const fn new(usart: Usart) -> Self {
        Self { usart }
    }

    fn wait(&self, mask: u32) -> Result<(), ErrorKind> {
        for _ in 0..SPIN_LIMIT {
            if self.usart.sr().read() & mask != 0 {
                return Ok(());
            }
        }
        Err(ErrorKind::TimedOut)
    }
}

impl ErrorType for UartTx {
    type Error = ErrorKind;
}

impl Write for UartTx {
    /// Every byte of `buf`, each once the data register is free.
    fn write(&mut self, buf: &[u8]) -> Result<usize, ErrorKind> {
        for &b in buf {
            self.wait(TXE)?;
            self.usart.dr().write(u32::from(b));
        }
        Ok(buf.len())
    }

    /// Wait until the last byte has left the shift register.
    fn flush(&mut self) -> Result<(), ErrorKind> {
        self.wait(TC)
    }
}
