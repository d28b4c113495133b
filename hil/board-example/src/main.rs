//! Example firmware for an invented receiver board with an STM32F411 (Cortex-M4F, 84 MHz here):
//! the TDC FIFO bridge's records arrive by SPI and DMA into a two-half ring, the main loop
//! decodes each finished half in place with the core's ingest stage and pushes the events
//! through the whole receiver, the classical channel runs over USART1 and the CRC-framed
//! records (key blocks, alarms, statistics) leave over USART2.
//!
//! Built by `hil/check.sh` to show that it links and how big it is; it has not been flashed
//! onto hardware (see the README for what to check first).

#![no_std]
#![no_main]

mod dma;
mod log;
mod regs;
mod spi;
mod uart;

#[cfg(feature = "defmt")]
use defmt_rtt as _;

use core::mem::MaybeUninit;
use cortex_m::interrupt::InterruptNumber;
use cortex_m::peripheral::NVIC;
use cortex_m_rt::{entry, exception};
use embedded_hal::spi::{Operation, SpiDevice};
use embedded_io::{Read, Write};
use regs::Usart;
use slotwise::ingest::spi::SpiFifoSource;
use slotwise::track::LockState;
use slotwise::TdcEvent;
use slotwise_board_example::fifo::{self, RECORD_BYTES};
use slotwise_board_example::profile::PROFILE;
use slotwise_hil::Station;
use spi::{CommandPort, DataReady};
use uart::{ByteRing, UartRx, UartTx};

/// Events one decoded half can hold: every record of the half plus one carried across halves.
const EVENTS: usize = dma::HALF_BYTES / RECORD_BYTES + 1;
/// Bytes read per poll on the fallback path.
const POLL_BYTES: usize = 512;
/// Halves between two counter reports in the log.
const REPORT_EVERY_HALVES: u32 = 256;

/// The classical channel's received bytes, filled by the USART1 interrupt.
static LINK_RX: ByteRing = ByteRing::new();

/// Bytes moved per call between the station's rings and a UART.
const MOVE_BYTES: usize = 256;

/// Build a value into a static of its own (`cortex_m::singleton!`) inside a function that is
/// never inlined, so the value's temporary lives in that function's frame only: the receiver
/// alone is tens of kilobytes, and inlined into `main` every part's temporary would stay on
/// the stack for the life of the firmware.
macro_rules! place {
    ($name:ident: $ty:ty = $init:expr) => {{
        #[inline(never)]
        fn place(init: impl FnOnce() -> $ty) -> &'static mut $ty {
            match cortex_m::singleton!($name: $ty = init()) {
                Some(r) => r,
                // Only reachable if main ran twice, which the reset handler never does.
                None => halt(),
            }
        }
        place(|| $init)
    }};
}

/// The interrupts this firmware unmasks.
#[derive(Clone, Copy)]
#[repr(u16)]
enum Irq {
    /// DMA1 stream 3: a half of the stream port's ring is finished.
    Dma1Stream3 = 14,
    /// USART1: a byte from the transmitter arrived.
    Usart1 = 37,
}

// SAFETY: 14 and 37 are the STM32F411's interrupt numbers of DMA1 stream 3 and USART1 (vector
// table of the reference manual), both below the part's 86 interrupt lines.
unsafe impl InterruptNumber for Irq {
    fn number(self) -> u16 {
        self as u16
    }
}

/// How the FIFO's words reach the decoder.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Path {
    /// The stream port's DMA ring.
    Dma,
    /// Read commands on the command port, after the DMA stream failed.
    Polled,
}

#[entry]
fn main() -> ! {
    regs::init_clocks();
    regs::enable_peripherals();
    regs::init_pins();
    uart::init(Usart::USART1, regs::APB2_HZ, true);
    uart::init(Usart::USART2, regs::APB1_HZ, false);

    // The whole receiver in one static, built where it lives, part by part, from the profile
    // blob in flash (setup, board settings, the bridge's word layout).
    let slot = place!(STATION: MaybeUninit<Station> = MaybeUninit::uninit());
    let st = match Station::init(slot, PROFILE) {
        Ok(st) => st,
        Err(e) => {
            log::error!("profile refused: {}", e);
            halt()
        }
    };
    let counter_bits = st.receiver().config().tdc().counter_bits();
    let events =
        place!(EVENT_BLOCK: [TdcEvent; EVENTS] = [TdcEvent { count: 0, channel: 0 }; EVENTS]);
    log::info!(
        "RAM bytes: station {}, events {}, DMA ring {}",
        core::mem::size_of::<Station>(),
        core::mem::size_of::<[TdcEvent; EVENTS]>(),
        dma::RING_BYTES
    );
    let mut link_rx = UartRx::new(&LINK_RX);
    let mut link_tx = UartTx::new(Usart::USART1);
    let mut host_tx = UartTx::new(Usart::USART2);

    let mut source = SpiFifoSource::new(CommandPort::new(), DataReady);
    // One status read before the DMA is armed: whatever the FIFO dropped or overflowed while the
    // board was booting is counted now, not blamed on the first half.
    if let Some(ingest) = st.ingest_mut() {
        if source.poll(ingest, &mut [], &mut []).is_err() {
            log::warning!("bridge status read failed before arming the DMA");
        }
    }
    dma::arm();
    spi::enable_stream_port();
    // SAFETY: unmasking only these two interrupts; their handlers share nothing with the main
    // loop but atomics, so no critical section of the main loop can be broken by them.
    unsafe {
        NVIC::unmask(Irq::Dma1Stream3);
        NVIC::unmask(Irq::Usart1);
    }
    let mut source = command(source, spi::STREAM_ON_COMMAND);
    log::info!("receiver up: {}-bit TDC counter", counter_bits);

    let mut path = Path::Dma;
    let mut halves = dma::Halves::new();
    let mut decoded_halves: u32 = 0;
    let mut last_state = LockState::Acquiring;
    let mut last_alarms = 0u8;
    let mut poll_buf = [0u8; POLL_BYTES];
    let mut moved = [0u8; MOVE_BYTES];
    let half_words = (dma::HALF_BYTES / RECORD_BYTES) as u64;
    loop {
        let mut worked = false;
        if path == Path::Dma {
            if let Some(ready) = halves.next() {
                if ready.lost_halves > 0 {
                    st.report_overrun(u64::from(ready.lost_halves) * half_words);
                }
                // Decoded where it lies, each counter cut to the receiver's width.
                if st.push_words(ready.bytes).is_err() {
                    log::error!("the profile has no word layout");
                }
                if halves.done() {
                    st.report_overrun(half_words);
                }
                // The bridge's own FIFO-full flag and dropped words, for this half's time.
                if let Some(ingest) = st.ingest_mut() {
                    let _ = source.poll(ingest, &mut [], &mut []);
                }
                decoded_halves = decoded_halves.wrapping_add(1);
                worked = true;
            } else if dma::transfer_errors() > 0 {
                log::error!("DMA transfer error: switching to polled reads");
                source = command(source, spi::STREAM_OFF_COMMAND);
                path = Path::Polled;
            }
        } else if let Some(ingest) = st.ingest_mut() {
            if let Ok(got) = source.poll(ingest, &mut poll_buf, events.as_mut_slice()) {
                push(st, events, got.events, counter_bits);
                decoded_halves = decoded_halves.wrapping_add(u32::from(got.bytes > 0));
                worked = got.bytes > 0;
            }
        }
        worked |= move_bytes(st, &mut link_rx, &mut link_tx, &mut host_tx, &mut moved);
        if !worked {
            // Answers may arrive while no detections do; they must not wait for the next half.
            let _ = st.push_events(&[]);
        }

        let state = st.receiver().clock().state();
        if state != last_state {
            log::info!("clock: {}", state);
            last_state = state;
        }
        let alarms = st.monitor().alarms().active();
        if alarms != last_alarms {
            log::warning!("active alarms now {=u8:#04x}", alarms);
            last_alarms = alarms;
        }
        if worked && decoded_halves.is_multiple_of(REPORT_EVERY_HALVES) {
            report(st);
        }
        if !worked && path == Path::Dma {
            // Sleep until the next half or link byte: every source of work is an interrupt.
            cortex_m::asm::wfi();
        }
    }
}

/// Move bytes between the station's rings and the UARTs: received link bytes in, announce frames
/// out on USART1, records out on USART2. True when anything moved.
fn move_bytes(
    st: &mut Station,
    link_rx: &mut UartRx,
    link_tx: &mut UartTx,
    host_tx: &mut UartTx,
    buf: &mut [u8; MOVE_BYTES],
) -> bool {
    let mut moved = false;
    // Received bytes the station's ring refuses stay counted there (`link_in_refused_bytes`).
    let Ok(n) = link_rx.read(buf);
    st.push_link(buf.get(..n).unwrap_or(&[]));
    moved |= n > 0;
    let n = st.drain_link(buf);
    if link_tx.write_all(buf.get(..n).unwrap_or(&[])).is_err() {
        log::warning!("classical channel write failed");
    }
    moved |= n > 0;
    let n = st.drain_frames(buf);
    if host_tx.write_all(buf.get(..n).unwrap_or(&[])).is_err() {
        log::warning!("host link write failed");
    }
    moved | (n > 0)
}

/// Send one command byte on the bridge's command port.
fn command(
    source: SpiFifoSource<CommandPort, DataReady>,
    byte: u8,
) -> SpiFifoSource<CommandPort, DataReady> {
    let (mut port, pin) = source.release();
    if port.transaction(&mut [Operation::Write(&[byte])]).is_err() {
        log::warning!("bridge command {=u8:#x} failed", byte);
    }
    SpiFifoSource::new(port, pin)
}

/// Cut the first `n` events (decoded by the polled source) to the receiver's counter width and
/// push them.
fn push(st: &mut Station, events: &mut [TdcEvent], n: usize, counter_bits: u8) {
    let block = events.get_mut(..n).unwrap_or(&mut []);
    for ev in block.iter_mut() {
        *ev = fifo::to_receiver(*ev, counter_bits);
    }
    let _ = st.push_events(block);
}

/// The ingest, receiver, link and line counters, in the log.
fn report(st: &Station) {
    let c = st.counts();
    let l = st.link().counters();
    log::info!("ingest: {}", c.ingest);
    log::info!(
        "receiver: {} detections, {} sifted bits, {} alarms, {} stats records",
        c.totals.detections,
        st.receiver().sifted_bits(),
        c.totals.alarm_frames,
        c.totals.stats_frames
    );
    log::info!(
        "link: {} announce frames, {} answers frames, {} rejected; uart losses {}; DMA errors {}",
        l.frames_out,
        l.answered_frames,
        l.rejected.total(),
        LINK_RX.losses(),
        dma::transfer_errors()
    );
    log::info!(
        "host stream: {} records, {} dropped",
        c.frames_out,
        c.frames_dropped
    );
}

/// Stop with interrupts off: the DMA and the links stop being serviced, and a debug probe can
/// inspect the state. A board with a watchdog resets from here.
fn halt() -> ! {
    cortex_m::interrupt::disable();
    loop {
        cortex_m::asm::nop();
    }
}

/// Every device interrupt lands here (cortex-m-rt's table without a device crate); `irqn` is
/// the interrupt number, so two arms route the two interrupts this firmware unmasks.
#[exception]
unsafe fn DefaultHandler(irqn: i16) {
    const DMA1_STREAM3: i16 = Irq::Dma1Stream3 as i16;
    const USART1: i16 = Irq::Usart1 as i16;
    match irqn {
        DMA1_STREAM3 => dma::on_interrupt(),
        USART1 => uart::on_rx_interrupt(Usart::USART1, &LINK_RX),
        _ => {}
    }
}

/// No message, no formatting machinery in flash: stop as [`halt`] does.
#[panic_handler]
fn panic(_info: &core::panic::PanicInfo<'_>) -> ! {
    halt()
}
