//! RISC-V RV32IMC (QEMU virt): `minstret` as the instruction counter, exception exit.
//!
//! With `-icount` QEMU derives `minstret` from its instruction count; [`calibrate`] checks it
//! against a loop of known length.

pub use riscv_rt::entry;

/// Target name in reports.
pub const NAME: &str = "riscv32imc-unknown-none-elf";
/// Counter name in reports.
pub const COUNTER: &str = "minstret";

/// Nothing to start: `minstret` always runs in machine mode.
pub fn init_counter() {}

/// Instructions retired (64-bit).
pub fn now() -> u64 {
    riscv::register::minstret::read64()
}

/// Run a loop of known length: returns (instructions executed in it, counts).
pub fn calibrate() -> (u64, u64) {
    const N: u32 = 1_000_000;
    let t0 = now();
    // Two instructions per iteration: addi, bnez.
    // SAFETY: register-only loop, no memory access, no stack use.
    unsafe {
        core::arch::asm!(
            "2:",
            "addi {n}, {n}, -1",
            "bnez {n}, 2b",
            n = inout(reg) N => _,
            options(nomem, nostack),
        );
    }
    let t1 = now();
    (2 * u64::from(N), t1 - t0)
}

/// Execute an undefined instruction (checks the fault exit).
pub fn undefined_instruction() -> ! {
    // SAFETY: traps at once; the exception handler exits QEMU.
    unsafe { core::arch::asm!("unimp", options(noreturn)) }
}

#[export_name = "ExceptionHandler"]
fn exception_handler(_frame: &riscv_rt::TrapFrame) -> ! {
    semihosting::process::exit(crate::exit::FAULT)
}
