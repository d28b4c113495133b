//! Cortex-M4F (QEMU mps2-an386): SysTick as an instruction counter, fault exit.
//!
//! With `-icount shift=0` QEMU advances virtual time by 1 ns per executed instruction, and the
//! SysTick counter runs from the 25 MHz core clock: one tick per 40 instructions (measured by
//! [`calibrate`], never assumed). The 24-bit counter wraps every 2^24 ticks; the SysTick
//! exception counts the wraps.

use core::cell::Cell;
use cortex_m::peripheral::syst::SystClkSource;
use cortex_m::peripheral::{SCB, SYST};
use cortex_m_rt::{exception, ExceptionFrame};
use critical_section::Mutex;

pub use cortex_m_rt::entry;

/// Target name in reports.
pub const NAME: &str = "thumbv7em-none-eabihf";
/// Counter name in reports.
pub const COUNTER: &str = "systick";

const RELOAD: u32 = 0x00FF_FFFF;
static WRAPS: Mutex<Cell<u64>> = Mutex::new(Cell::new(0));

/// Start SysTick from the core clock, full 24-bit range, wrap interrupt on.
pub fn init_counter() {
    let Some(mut p) = cortex_m::Peripherals::take() else {
        return;
    };
    p.SYST.set_clock_source(SystClkSource::Core);
    p.SYST.set_reload(RELOAD);
    p.SYST.clear_current();
    p.SYST.enable_interrupt();
    p.SYST.enable_counter();
}

/// SysTick ticks since [`init_counter`].
pub fn now() -> u64 {
    critical_section::with(|cs| {
        let mut wraps = WRAPS.borrow(cs).get();
        let mut cvr = SYST::get_current();
        // A wrap that happened since interrupts were masked is pending, not yet counted; read
        // the counter again after seeing the flag so the value is the post-wrap one.
        if SCB::is_pendst_pending() {
            wraps += 1;
            cvr = SYST::get_current();
        }
        wraps * (u64::from(RELOAD) + 1) + u64::from(RELOAD - cvr)
    })
}

/// Run a loop of known length: returns (instructions executed in it, ticks counted).
pub fn calibrate() -> (u64, u64) {
    const N: u32 = 1_000_000;
    let t0 = now();
    // Two instructions per iteration: subs, bne.
    // SAFETY: register-only loop, no memory access, no stack use.
    unsafe {
        core::arch::asm!(
            "2:",
            "subs {n}, {n}, #1",
            "bne 2b",
            n = inout(reg) N => _,
            options(nomem, nostack),
        );
    }
    let t1 = now();
    (2 * u64::from(N), t1 - t0)
}

/// Execute an undefined instruction (checks the fault exit).
pub fn undefined_instruction() -> ! {
    // SAFETY: traps at once; the HardFault handler exits QEMU.
    unsafe { core::arch::asm!("udf #0", options(noreturn)) }
}

#[exception]
fn SysTick() {
    critical_section::with(|cs| {
        let w = WRAPS.borrow(cs);
        w.set(w.get() + 1);
    });
}

#[exception]
unsafe fn HardFault(_frame: &ExceptionFrame) -> ! {
    semihosting::process::exit(crate::exit::FAULT)
}

#[exception]
unsafe fn DefaultHandler(_irqn: i16) {
    semihosting::process::exit(crate::exit::FAULT)
}
