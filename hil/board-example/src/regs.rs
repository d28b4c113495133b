//! The few STM32F411 registers this board touches, by address, and the clock and pin setup.
//!
//! Raw addresses instead of a peripheral-access crate keep the example's build to seconds: a
//! generated crate for the whole family costs more compile time than the receiver itself. The
//! addresses, bit positions, DMA request mapping and alternate-function numbers below are written
//! from memory of the STM32F411 reference manual and datasheet; check each against the current
//! manual of your part before flashing.

use core::ptr::{read_volatile, write_volatile};

/// A 32-bit peripheral register at a fixed address. Only this module makes them (the field and
/// the constructor are private), so every `Reg` is one of the registers listed here.
#[derive(Clone, Copy)]
pub struct Reg(usize);

impl Reg {
    /// The register `offset` bytes after a peripheral's base address.
    const fn at(base: usize, offset: usize) -> Self {
        Self(base + offset)
    }

    /// Read the register.
    #[inline(always)]
    pub fn read(self) -> u32 {
        // SAFETY: every `Reg` in this crate names a memory-mapped register of the STM32F411
        // (4-byte aligned, always mapped); a volatile read has no effect beyond the documented
        // read side effects (e.g. clearing a status flag), which the callers rely on.
        unsafe { read_volatile(self.0 as *const u32) }
    }

    /// Write the register.
    #[inline(always)]
    pub fn write(self, value: u32) {
        // SAFETY: as in `read`; the callers write only field values the manual allows.
        unsafe { write_volatile(self.0 as *mut u32, value) }
    }

    /// Read, change, write back. Not atomic: used only before interrupts are enabled, or on
    /// registers no interrupt handler writes.
    #[inline(always)]
    pub fn modify(self, f: impl FnOnce(u32) -> u32) {
        self.write(f(self.read()));
    }

    /// Set the bits of `mask`.
    #[inline(always)]
    pub fn set(self, mask: u32) {
        self.modify(|v| v | mask);
    }

    /// The register's address, for a DMA stream's peripheral address register.
    pub const fn addr(self) -> u32 {
        self.0 as u32
    }
}

/// Reset and clock control.
pub mod rcc {
    use super::Reg;
    const BASE: usize = 0x4002_3800;
    /// Clock control: oscillator and PLL enables and ready flags.
    pub const CR: Reg = Reg::at(BASE, 0x00);
    /// PLL configuration.
    pub const PLLCFGR: Reg = Reg::at(BASE, 0x04);
    /// Clock configuration: system clock switch and bus prescalers.
    pub const CFGR: Reg = Reg::at(BASE, 0x08);
    /// AHB1 peripheral clock enables (GPIO ports, DMA controllers).
    pub const AHB1ENR: Reg = Reg::at(BASE, 0x30);
    /// APB1 peripheral clock enables (SPI2, USART2).
    pub const APB1ENR: Reg = Reg::at(BASE, 0x40);
    /// APB2 peripheral clock enables (USART1, SPI1).
    pub const APB2ENR: Reg = Reg::at(BASE, 0x44);
}

/// Flash interface: wait states for the system clock.
pub mod flash {
    use super::Reg;
    /// Access control: latency, prefetch and caches.
    pub const ACR: Reg = Reg::at(0x4002_3C00, 0x00);
}

/// One GPIO port's registers (only the ports listed here can be named).
#[derive(Clone, Copy)]
pub struct Port(usize);

impl Port {
    /// Port A.
    pub const A: Self = Self(0x4002_0000);
    /// Port B.
    pub const B: Self = Self(0x4002_0400);
    /// Mode: input, output, alternate function, analog; two bits per pin.
    pub const fn moder(self) -> Reg {
        Reg::at(self.0, 0x00)
    }
    /// Output speed, two bits per pin.
    pub const fn ospeedr(self) -> Reg {
        Reg::at(self.0, 0x08)
    }
    /// Pull-up / pull-down, two bits per pin.
    pub const fn pupdr(self) -> Reg {
        Reg::at(self.0, 0x0C)
    }
    /// Input data.
    pub const fn idr(self) -> Reg {
        Reg::at(self.0, 0x10)
    }
    /// Bit set (low half) and reset (high half): one write, no read-modify-write race.
    pub const fn bsrr(self) -> Reg {
        Reg::at(self.0, 0x18)
    }
    /// Alternate function of pins 0..8 (low) or 8..16 (high), four bits per pin.
    pub const fn afr(self, pin: u32) -> Reg {
        Reg::at(self.0, if pin < 8 { 0x20 } else { 0x24 })
    }

    /// Put `pin` in mode `mode` (0 input, 1 output, 2 alternate `af`), fast edges, pull `pull`
    /// (0 none, 1 up, 2 down).
    pub fn configure(self, pin: u32, mode: u32, af: u32, pull: u32) {
        let two = pin * 2;
        self.moder().modify(|v| (v & !(3 << two)) | (mode << two));
        self.ospeedr().modify(|v| v | (2 << two));
        self.pupdr().modify(|v| (v & !(3 << two)) | (pull << two));
        let four = (pin % 8) * 4;
        self.afr(pin)
            .modify(|v| (v & !(0xF << four)) | (af << four));
    }
}

/// System clock in Hz after [`init_clocks`].
pub const SYSCLK_HZ: u32 = 84_000_000;
/// APB1 bus clock in Hz (USART2, SPI2): SYSCLK / 2, the bus's limit is 50 MHz.
pub const APB1_HZ: u32 = SYSCLK_HZ / 2;
/// APB2 bus clock in Hz (USART1, SPI1).
pub const APB2_HZ: u32 = SYSCLK_HZ;

/// Run from the 25 MHz crystal through the PLL at 84 MHz: the highest clock the reset-default
/// voltage scale allows, so no power-controller setup is needed.
pub fn init_clocks() {
    const HSEON: u32 = 1 << 16;
    const HSERDY: u32 = 1 << 17;
    const PLLON: u32 = 1 << 24;
    const PLLRDY: u32 = 1 << 25;
    rcc::CR.set(HSEON);
    while rcc::CR.read() & HSERDY == 0 {}
    // 25 MHz / M 25 = 1 MHz into the VCO, x N 336 = 336 MHz, / P 4 = 84 MHz, / Q 7 = 48 MHz.
    let (m, n, p_code, q) = (25u32, 336u32, 1u32, 7u32);
    const PLLSRC_HSE: u32 = 1 << 22;
    // Only the fields set here change: the register has reserved bits whose reset value
    // must be kept.
    let fields = 0x3F | (0x1FF << 6) | (3 << 16) | PLLSRC_HSE | (0xF << 24);
    rcc::PLLCFGR.modify(|v| (v & !fields) | m | (n << 6) | (p_code << 16) | PLLSRC_HSE | (q << 24));
    rcc::CR.set(PLLON);
    while rcc::CR.read() & PLLRDY == 0 {}
    // 2 wait states for 64..90 MHz at 2.7..3.6 V; prefetch and both caches on.
    flash::ACR.write(2 | (1 << 8) | (1 << 9) | (1 << 10));
    while flash::ACR.read() & 0xF != 2 {}
    // APB1 / 2 (code 0b100 in PPRE1), APB2 / 1, AHB / 1, then switch to the PLL.
    rcc::CFGR.modify(|v| (v & !((7 << 10) | (7 << 13) | (0xF << 4) | 3)) | (0b100 << 10) | 2);
    while (rcc::CFGR.read() >> 2) & 3 != 2 {}
}

/// Clocks of every peripheral this board uses: GPIOA, GPIOB, DMA1, SPI1, SPI2, USART1, USART2.
pub fn enable_peripherals() {
    rcc::AHB1ENR.set((1 << 0) | (1 << 1) | (1 << 21));
    rcc::APB1ENR.set((1 << 14) | (1 << 17));
    rcc::APB2ENR.set((1 << 4) | (1 << 12));
    // The enable takes a couple of bus cycles to reach the peripheral: read back once.
    let _ = rcc::APB2ENR.read();
}

/// Input mode.
pub const MODE_INPUT: u32 = 0;
/// General-purpose output mode.
pub const MODE_OUTPUT: u32 = 1;
/// Alternate-function mode.
pub const MODE_AF: u32 = 2;
/// No pull resistor.
pub const PULL_NONE: u32 = 0;
/// Pull-up.
pub const PULL_UP: u32 = 1;
/// Pull-down.
pub const PULL_DOWN: u32 = 2;

/// The invented board's pins (see the README's wiring table).
pub fn init_pins() {
    let (a, b) = (Port::A, Port::B);
    // SPI1, the bridge's command port, master: PA5 SCK, PA6 MISO, PA7 MOSI (AF5); PA4 chip
    // select as a plain output, idle high, so one transaction spans both of its operations.
    a.bsrr().write(1 << 4);
    a.configure(4, MODE_OUTPUT, 0, PULL_NONE);
    for pin in [5, 6, 7] {
        a.configure(pin, MODE_AF, 5, PULL_NONE);
    }
    // PA0: the bridge's data-ready line, pulled down so an unplugged bridge reads "nothing".
    a.configure(0, MODE_INPUT, 0, PULL_DOWN);
    // SPI2, the bridge's stream port, slave receive-only: PB12 NSS, PB13 SCK, PB15 MOSI (AF5).
    for pin in [12, 13, 15] {
        b.configure(pin, MODE_AF, 5, PULL_NONE);
    }
    // USART1 to the transmitter: PA9 TX, PA10 RX (AF7). USART2 to the host: PA2 TX, PA3 RX (AF7).
    // RX lines pulled up: an idle UART line is high, a loose cable must not read as a break.
    a.configure(9, MODE_AF, 7, PULL_NONE);
    a.configure(10, MODE_AF, 7, PULL_UP);
    a.configure(2, MODE_AF, 7, PULL_NONE);
    a.configure(3, MODE_AF, 7, PULL_UP);
}

/// One SPI peripheral's registers.
#[derive(Clone, Copy)]
pub struct Spi(usize);

impl Spi {
    /// SPI1 on APB2: the bridge's command port.
    pub const SPI1: Self = Self(0x4001_3000);
    /// SPI2 on APB1: the bridge's stream port.
    pub const SPI2: Self = Self(0x4000_3800);
    /// Control 1: mode, baud divider, enable.
    pub const fn cr1(self) -> Reg {
        Reg::at(self.0, 0x00)
    }
    /// Control 2: DMA request enables.
    pub const fn cr2(self) -> Reg {
        Reg::at(self.0, 0x04)
    }
    /// Status: RXNE bit 0, TXE bit 1, OVR bit 6, BSY bit 7.
    pub const fn sr(self) -> Reg {
        Reg::at(self.0, 0x08)
    }
    /// Data.
    pub const fn dr(self) -> Reg {
        Reg::at(self.0, 0x0C)
    }
}

/// One USART's registers.
#[derive(Clone, Copy)]
pub struct Usart(usize);

impl Usart {
    /// USART1 on APB2: the classical channel to the transmitter.
    pub const USART1: Self = Self(0x4001_1000);
    /// USART2 on APB1: the record stream to the post-processing host.
    pub const USART2: Self = Self(0x4000_4400);
    /// Status: ORE bit 3, RXNE bit 5, TC bit 6, TXE bit 7.
    pub const fn sr(self) -> Reg {
        Reg::at(self.0, 0x00)
    }
    /// Data.
    pub const fn dr(self) -> Reg {
        Reg::at(self.0, 0x04)
    }
    /// Baud-rate divider (16x oversampling: the bus clock over the baud rate).
    pub const fn brr(self) -> Reg {
        Reg::at(self.0, 0x08)
    }
    /// Control 1: enable, transmitter, receiver, receive interrupt.
    pub const fn cr1(self) -> Reg {
        Reg::at(self.0, 0x0C)
    }
}

/// DMA controller 1: stream 3, channel 0 carries SPI2's receive requests.
pub mod dma1 {
    use super::Reg;
    const BASE: usize = 0x4002_6000;
    /// Stream used for the stream port.
    const STREAM: usize = 3;
    /// Interrupt status of streams 0..4 (stream 3: bits 22..28).
    pub const LISR: Reg = Reg::at(BASE, 0x00);
    /// Interrupt flag clear of streams 0..4, write 1 to clear.
    pub const LIFCR: Reg = Reg::at(BASE, 0x08);
    /// Stream 3 configuration.
    pub const S3CR: Reg = Reg::at(BASE, 0x10 + 0x18 * STREAM);
    /// Stream 3 number of data items left.
    pub const S3NDTR: Reg = Reg::at(BASE, 0x14 + 0x18 * STREAM);
    /// Stream 3 peripheral address.
    pub const S3PAR: Reg = Reg::at(BASE, 0x18 + 0x18 * STREAM);
    /// Stream 3 memory address.
    pub const S3M0AR: Reg = Reg::at(BASE, 0x1C + 0x18 * STREAM);
    /// Stream 3 FIFO control (direct mode when 0).
    pub const S3FCR: Reg = Reg::at(BASE, 0x24 + 0x18 * STREAM);
}
