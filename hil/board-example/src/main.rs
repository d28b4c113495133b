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

use cortex_m::interrupt::InterruptNumber;
use cortex_m::peripheral::NVIC;
use cortex_m_rt::{entry, exception};
use embedded_hal::spi::{Operation, SpiDevice};
use regs::Usart;
use slotwise::ingest::spi::SpiFifoSource;
use slotwise::ingest::Ingest;
use slotwise::TdcEvent;
use slotwise_board_example::fifo::{self, RECORD_BYTES};
use slotwise_board_example::profile::{self, PROFILE};
use slotwise_board_example::receiver::{self, FrameOut, Link, Pipeline};
use slotwise_hil::{FullMonitor, FullReceiver, IoFrames};
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

/// The frame stream to the post-processing host.
type HostFrames = IoFrames<UartTx>;
/// The link endpoint over USART1.
type BoardLink = Link<UartRx, UartTx>;

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

    let p = match profile::decode(PROFILE) {
        Ok(p) => p,
        Err(e) => {
            log::error!("profile refused: {}", e);
            halt()
        }
    };
    let counter_bits = p.setup.tdc.counter_bits();
    // Each part in a static of its own: a symbol listing of the ELF shows its RAM, and each is
    // built in a stack frame of its own that is gone before the next one is built.
    let rx = place!(RECEIVER: FullReceiver = match receiver::receiver(&p) {
        Ok(rx) => rx,
        Err(e) => {
            log::error!("receiver settings refused: {}", e);
            halt()
        }
    });
    let monitor = place!(MONITOR: FullMonitor = match receiver::monitor(&p) {
        Ok(m) => m,
        Err(e) => {
            log::error!("monitor settings refused: {}", e);
            halt()
        }
    });
    let link = place!(LINK: BoardLink = receiver::link(
        &p,
        UartRx::new(&LINK_RX),
        UartTx::new(Usart::USART1)
    ));
    let out = place!(FRAME_OUT: FrameOut<HostFrames> =
        FrameOut::new(IoFrames::new(UartTx::new(Usart::USART2))));
    let events =
        place!(EVENT_BLOCK: [TdcEvent; EVENTS] = [TdcEvent { count: 0, channel: 0 }; EVENTS]);
    log::info!(
        "RAM bytes: receiver {}, link {}, monitor {}, frame writer {}, events {}, DMA ring {}",
        core::mem::size_of::<FullReceiver>(),
        core::mem::size_of::<BoardLink>(),
        core::mem::size_of::<FullMonitor>(),
        core::mem::size_of::<FrameOut<HostFrames>>(),
        core::mem::size_of::<[TdcEvent; EVENTS]>(),
        dma::RING_BYTES
    );
    let mut pipe = Pipeline::new(&p, rx, link, monitor, out);

    let mut ingest = Ingest::new(fifo::FORMAT);
    let mut source = SpiFifoSource::new(CommandPort::new(), DataReady);
    // One status read before the DMA is armed: whatever the FIFO dropped or overflowed while the
    // board was booting is counted now, not blamed on the first half.
    if source.poll(&mut ingest, &mut [], &mut []).is_err() {
        log::warning!("bridge status read failed before arming the DMA");
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
    log::info!(
        "receiver up: {}-bit TDC counter, hint at {} ps",
        counter_bits,
        p.board.hint_t_ps
    );

    let mut path = Path::Dma;
    let mut halves = dma::Halves::new();
    let mut decoded_halves: u32 = 0;
    let mut last_state = pipe.lock_state();
    let mut last_alarms = 0;
    let mut poll_buf = [0u8; POLL_BYTES];
    let half_words = (dma::HALF_BYTES / RECORD_BYTES) as u64;
    loop {
        let mut worked = false;
        if path == Path::Dma {
            if let Some(ready) = halves.next() {
                if ready.lost_halves > 0 {
                    ingest.report_overrun(u64::from(ready.lost_halves) * half_words);
                }
                decode(&mut ingest, ready.bytes, events, counter_bits, &mut pipe);
                if halves.done() {
                    ingest.report_overrun(half_words);
                }
                // The bridge's own FIFO-full flag and dropped words, for this half's time.
                let _ = source.poll(&mut ingest, &mut [], &mut []);
                decoded_halves = decoded_halves.wrapping_add(1);
                worked = true;
            } else if dma::transfer_errors() > 0 {
                log::error!("DMA transfer error: switching to polled reads");
                source = command(source, spi::STREAM_OFF_COMMAND);
                path = Path::Polled;
            }
        } else if let Ok(got) = source.poll(&mut ingest, &mut poll_buf, events.as_mut_slice()) {
            push(events, got.events, counter_bits, &mut pipe);
            decoded_halves = decoded_halves.wrapping_add(u32::from(got.bytes > 0));
            worked = got.bytes > 0;
        }
        if !worked {
            // Answers may arrive while no detections do; they must not wait for the next half.
            pipe.service();
        }

        let state = pipe.lock_state();
        if state != last_state {
            log::info!("clock: {}", state);
            last_state = state;
        }
        let alarms = pipe.counts().alarm_frames;
        if alarms != last_alarms {
            if let Some(a) = pipe.last_alarm() {
                log::warning!(
                    "alarm {} raised={} value {} ppm",
                    a.kind,
                    a.raised,
                    a.value_ppm
                );
            }
            last_alarms = alarms;
        }
        if worked && decoded_halves.is_multiple_of(REPORT_EVERY_HALVES) {
            report(&ingest, &pipe);
        }
        if !worked && path == Path::Dma {
            // Sleep until the next half or link byte: every source of work is an interrupt.
            cortex_m::asm::wfi();
        }
    }
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

/// Decode one half in place and push its events.
fn decode(
    ingest: &mut Ingest,
    bytes: &[u8],
    events: &mut [TdcEvent],
    counter_bits: u8,
    pipe: &mut Pipeline<'_, UartRx, UartTx, HostFrames>,
) {
    let mut rest = bytes;
    while !rest.is_empty() {
        let done = ingest.push(rest, events);
        push(events, done.events, counter_bits, pipe);
        if done.consumed == 0 {
            // The event buffer holds a whole half, so this never happens; if it did, stopping
            // is better than spinning on the same bytes.
            break;
        }
        rest = rest.get(done.consumed..).unwrap_or(&[]);
    }
}

/// Cut the first `n` events to the receiver's counter width and push them.
fn push(
    events: &mut [TdcEvent],
    n: usize,
    counter_bits: u8,
    pipe: &mut Pipeline<'_, UartRx, UartTx, HostFrames>,
) {
    let block = events.get_mut(..n).unwrap_or(&mut []);
    for ev in block.iter_mut() {
        *ev = fifo::to_receiver(*ev, counter_bits);
    }
    pipe.push_block(block);
}

/// The ingest, receiver, link and line counters, in the log.
fn report(ingest: &Ingest, pipe: &Pipeline<'_, UartRx, UartTx, HostFrames>) {
    log::info!("ingest: {}", ingest.counts());
    log::info!(
        "receiver: {} detections, {} sifted bits, {} alarms, {} stats records",
        pipe.counts().detections,
        pipe.sifted_bits(),
        pipe.counts().alarm_frames,
        pipe.counts().stats_frames
    );
    log::info!(
        "link: {} announce frames, {} answers frames, {} rejected; uart losses {}; DMA errors {}",
        pipe.link_counters().frames_out,
        pipe.link_counters().answered_frames,
        pipe.link_counters().rejected.total(),
        LINK_RX.losses(),
        dma::transfer_errors()
    );
    log::info!(
        "host stream: {} frames, {} write errors",
        pipe.frame_out().sink().frames(),
        pipe.frame_out().sink().errors()
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
