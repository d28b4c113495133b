//! The stream port's DMA ring: DMA1 stream 3 (channel 0, SPI2 receive) fills one static buffer
//! in circular mode, and its half-transfer and transfer-complete interrupts mark each half
//! ready in turn.
//!
//! The main loop decodes a ready half where it lies while the DMA fills the other one. Halves
//! are numbered by a counter the interrupt advances, so the loop can tell how far the DMA got:
//! one half ahead is the normal case; two or more means the DMA lapped the loop and wrote over
//! halves nobody decoded. Those words are reported to the ingest stage as an overrun instead of
//! being decoded half-old, half-new.

use crate::regs::{dma1, Spi};
use core::cell::UnsafeCell;
use core::sync::atomic::{AtomicU32, Ordering};

/// Bytes per half of the ring: 256 records of 8 bytes, about 0.2 ms of detections at a
/// million per second.
pub const HALF_BYTES: usize = 2048;
/// Bytes of the whole ring.
pub const RING_BYTES: usize = 2 * HALF_BYTES;

/// The ring the DMA writes. Aligned to a record so a half starts on a record boundary.
#[repr(C, align(8))]
pub struct Ring(UnsafeCell<[u8; RING_BYTES]>);

// SAFETY: the main loop only reads the ring, only the half the DMA has finished (see
// `Halves::next`), and the interrupt handler never touches it; the only writer is the DMA.
unsafe impl Sync for Ring {}

/// The DMA ring itself (in `.bss`).
pub static RING: Ring = Ring(UnsafeCell::new([0; RING_BYTES]));
/// Halves the DMA has filled since it was armed (wrapping), in halves.
static HALVES_FILLED: AtomicU32 = AtomicU32::new(0);
/// Transfer errors the stream reported, in errors (the hardware stops the stream on one).
static TRANSFER_ERRORS: AtomicU32 = AtomicU32::new(0);

// Stream 3's flags in LISR / LIFCR.
const FEIF3: u32 = 1 << 22;
const DMEIF3: u32 = 1 << 24;
const TEIF3: u32 = 1 << 25;
const HTIF3: u32 = 1 << 26;
const TCIF3: u32 = 1 << 27;
const ALL3: u32 = FEIF3 | DMEIF3 | TEIF3 | HTIF3 | TCIF3;

/// Arm stream 3: SPI2's data register into the ring, bytes, circular, half-transfer,
/// transfer-complete and error interrupts on. Call before the stream port is enabled.
pub fn arm() {
    const EN: u32 = 1 << 0;
    const TEIE: u32 = 1 << 2;
    const HTIE: u32 = 1 << 3;
    const TCIE: u32 = 1 << 4;
    const CIRC: u32 = 1 << 8;
    const MINC: u32 = 1 << 10;
    const PL_HIGH: u32 = 0b10 << 16;
    const CHSEL_0: u32 = 0 << 25;
    dma1::S3CR.write(0);
    while dma1::S3CR.read() & EN != 0 {}
    dma1::LIFCR.write(ALL3);
    dma1::S3PAR.write(Spi::SPI2.dr().addr());
    dma1::S3M0AR.write(RING.0.get() as u32);
    dma1::S3NDTR.write(RING_BYTES as u32);
    // Direct mode (no DMA FIFO): each byte lands as soon as SPI2 has it.
    dma1::S3FCR.write(0);
    let cr = CHSEL_0 | PL_HIGH | MINC | CIRC | TCIE | HTIE | TEIE;
    dma1::S3CR.write(cr);
    dma1::S3CR.write(cr | EN);
}

/// The DMA1 stream 3 interrupt: count the finished halves, then clear the flags.
///
/// Both flags set at once means the handler ran late by a whole half; both halves count, and
/// the main loop sees the lap.
pub fn on_interrupt() {
    let flags = dma1::LISR.read();
    dma1::LIFCR.write(flags & ALL3);
    let halves = u32::from(flags & HTIF3 != 0) + u32::from(flags & TCIF3 != 0);
    if halves > 0 {
        HALVES_FILLED.fetch_add(halves, Ordering::Release);
    }
    if flags & TEIF3 != 0 {
        TRANSFER_ERRORS.fetch_add(1, Ordering::Relaxed);
    }
}

/// Transfer errors the DMA stream reported so far.
pub fn transfer_errors() -> u32 {
    TRANSFER_ERRORS.load(Ordering::Relaxed)
}

/// A half ready to decode.
pub struct Ready {
    /// The half's bytes, in place in the ring.
    pub bytes: &'static [u8],
    /// Halves the DMA wrote over before the loop could decode them, in halves.
    pub lost_halves: u32,
}

/// The main loop's side of the ring: which half comes next.
pub struct Halves {
    /// Number of the half to decode next (wrapping like `HALVES_FILLED`).
    next: u32,
}

impl Halves {
    /// At the start: nothing decoded, nothing filled.
    pub const fn new() -> Self {
        Self { next: 0 }
    }

    /// The newest finished half, if one is waiting; older finished halves are already being
    /// overwritten and are counted in [`Ready::lost_halves`].
    pub fn next(&mut self) -> Option<Ready> {
        let filled = HALVES_FILLED.load(Ordering::Acquire);
        let waiting = filled.wrapping_sub(self.next);
        if waiting == 0 {
            return None;
        }
        let lost_halves = waiting - 1;
        self.next = filled.wrapping_sub(1);
        let offset = (self.next % 2) as usize * HALF_BYTES;
        // SAFETY: `offset + HALF_BYTES <= RING_BYTES`, so the slice lies inside the static ring.
        // Half `self.next` is finished and the DMA is writing the other half; it comes back to
        // this one only after finishing that, which `done` detects, so the slice is not written
        // while it is read unless the loop is a whole half late, and then it is counted.
        let bytes = unsafe {
            core::slice::from_raw_parts(RING.0.get().cast::<u8>().add(offset), HALF_BYTES)
        };
        Some(Ready { bytes, lost_halves })
    }

    /// The half from [`Halves::next`] is decoded: true if the DMA came back into it meanwhile
    /// (what was decoded may mix old and new words).
    pub fn done(&mut self) -> bool {
        let filled = HALVES_FILLED.load(Ordering::Acquire);
        let torn = filled.wrapping_sub(self.next) >= 2;
        self.next = self.next.wrapping_add(1);
        torn
    }
}
