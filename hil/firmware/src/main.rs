//! The slotwise receiver pipeline as bare-metal firmware, run under QEMU.
//!
//! Reads `setup.bin`, `events.bin` and `answers.bin` through semihosting files (the run directory
//! is QEMU's working directory), pushes every event through the `slotwise` core with the shared
//! [`slotwise_hil::run`] loop, writes the frames to `frames-fw.bin`, and its own measurements
//! (instruction counter, memory, replay counters) to `report-fw.txt`. The exit code says how it
//! ended: see [`exit`]. With `fault.trigger` in the run directory it checks the fault exit
//! instead. The stage-by-stage profile is a binary of its own (`slotwise-hil-profile`), so that
//! this one is exactly the board build that is measured.
#![no_std]
#![no_main]

#[cfg(target_arch = "arm")]
#[path = "arch_arm.rs"]
mod arch;
#[cfg(target_arch = "riscv32")]
#[path = "arch_riscv.rs"]
mod arch;
mod files;
mod log;

use core::fmt::Write as _;
use files::ShFile;
use slotwise::TdcEvent;
use slotwise_hil::{
    BoardFrameOut, BoardReceiver, IoAnswers, IoEvents, IoFrames, Meter, ReplayTx, Setup, BLOCK,
};

#[cfg(feature = "defmt")]
use defmt_semihosting as _;

mod exit;

/// Instruction meter: the architecture's counter around the receiver calls, with time spent in
/// semihosting I/O subtracted.
struct InstrMeter {
    start: u64,
    excluded_at_start: u64,
    total: u64,
}

impl Meter for InstrMeter {
    fn start(&mut self) {
        self.excluded_at_start = files::excluded();
        self.start = arch::now();
    }

    fn stop(&mut self) {
        let end = arch::now();
        let io = files::excluded() - self.excluded_at_start;
        self.total += (end - self.start).saturating_sub(io);
    }
}

#[arch::entry]
fn main() -> ! {
    arch::init_counter();
    if ShFile::open(c"fault.trigger").is_ok() {
        log::info!("fault.trigger present: executing an undefined instruction");
        arch::undefined_instruction();
    }
    let code = match run() {
        Ok(()) => exit::OK,
        Err(code) => code,
    };
    semihosting::process::exit(code)
}

fn run() -> Result<(), i32> {
    let mut setup_bytes = [0u8; slotwise_hil::setup::MAX_SETUP_LEN + 1];
    let n = ShFile::open(c"setup.bin")
        .and_then(|mut f| f.read_all(&mut setup_bytes))
        .map_err(|_| {
            log::error!("setup.bin: cannot read");
            exit::SETUP
        })?;
    let setup = Setup::decode(setup_bytes.get(..n).unwrap_or(&[])).map_err(|e| {
        log::error!("setup.bin: {}", e);
        exit::SETUP
    })?;
    let (cfg, clock) = match (setup.receiver_config(), setup.clock()) {
        (Ok(c), Ok(k)) => (c, k),
        _ => return Err(exit::SETUP),
    };
    let open = |name: &core::ffi::CStr| {
        ShFile::open(name).map_err(|_| {
            log::error!("cannot open an input file");
            exit::IO
        })
    };
    let mut events = IoEvents::new(open(c"events.bin")?);
    let mut tx = ReplayTx::new(IoAnswers::new(open(c"answers.bin")?));
    let frames = ShFile::create(c"frames-fw.bin").map_err(|_| exit::IO)?;
    let mut out = BoardFrameOut::new(IoFrames::new(frames));
    let mut rx = BoardReceiver::new(cfg, clock);

    let (calib_instructions, calib_counts) = arch::calibrate();
    let mut meter = InstrMeter {
        start: 0,
        excluded_at_start: 0,
        total: 0,
    };
    meter.start();
    meter.stop();
    let meter_overhead = meter.total;
    meter.total = 0;

    log::info!("running");
    let totals =
        slotwise_hil::run(&mut rx, &mut events, &mut tx, &mut out, &mut meter).map_err(|e| {
            log::error!("event stream: {}", e);
            exit::IO
        })?;
    out.sink_mut().flush();
    let unused = tx.drain_unused();
    let replay = *tx.stats();
    log::info!(
        "done: {} detections, {} sifted bits, {} frames",
        totals.detections,
        rx.sifted_bits(),
        out.sink().frames()
    );

    let mut r: heapless::String<2048> = heapless::String::new();
    let lines: [(&str, u64); 25] = [
        ("detections", totals.detections),
        ("blocks", totals.blocks),
        ("push_counts", meter.total),
        ("io_excluded_counts", files::excluded()),
        ("meter_overhead_counts", meter_overhead),
        ("calib_instructions", calib_instructions),
        ("calib_counts", calib_counts),
        (
            "receiver_bytes",
            core::mem::size_of::<BoardReceiver>() as u64,
        ),
        (
            "frame_out_bytes",
            core::mem::size_of::<BoardFrameOut<IoFrames<ShFile>>>() as u64,
        ),
        (
            "event_buffer_bytes",
            (BLOCK * core::mem::size_of::<TdcEvent>()) as u64,
        ),
        // What the recovered clock would add, with the host replay's capacities (not yet run
        // here: the board build uses the configured clock).
        (
            "recovered_clock_bytes",
            core::mem::size_of::<slotwise::RecoveredClock<2048, 8, 2>>() as u64,
        ),
        ("pending_capacity", slotwise_hil::PENDING as u64),
        ("key_bits_per_block", slotwise_hil::KEY_BITS as u64),
        ("sifted_bits", rx.sifted_bits()),
        ("replay_announced", replay.announced),
        ("replay_mismatched", replay.mismatched),
        ("replay_missing", replay.missing),
        ("replay_bad_records", replay.bad_records),
        ("replay_queue_full", replay.queue_full),
        ("replay_io_errors", replay.io_errors),
        ("answers_unused", unused),
        ("frames_written", out.sink().frames()),
        ("frame_bytes", out.sink().bytes()),
        ("frame_write_errors", out.sink().errors()),
        ("frame_build_errors", out.frame_errors()),
    ];
    let mut ok = writeln!(r, "arch {}", arch::NAME).is_ok();
    ok &= writeln!(r, "counter {}", arch::COUNTER).is_ok();
    for (k, v) in lines {
        ok &= writeln!(r, "{k} {v}").is_ok();
    }
    if !ok {
        return Err(exit::REPORT);
    }
    ShFile::create(c"report-fw.txt")
        .and_then(|mut f| f.write_all_bytes(r.as_bytes()))
        .map_err(|_| exit::REPORT)?;
    Ok(())
}

#[panic_handler]
fn panic(_info: &core::panic::PanicInfo<'_>) -> ! {
    semihosting::process::exit(exit::PANIC)
}
