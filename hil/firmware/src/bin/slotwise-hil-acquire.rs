//! Clock acquisition on the board: the receiver with the core's recovered clock
//! (`RecoveredClock<2048, 8, 2>`, the host replay's capacities) takes the events of `events.bin`
//! one at a time (with `setup.bin` and the clock settings of `acquire.bin`) and the instructions
//! are counted from the first event until the clock first reports `LockState::Locked`; writes
//! `acquire-fw.txt`. A binary apart from the board build, so the board build stays what its
//! figures measure.

#![no_std]
#![no_main]

// Shared with the board build, which uses all of it; this run needs only the counter.
#[cfg(target_arch = "arm")]
#[path = "../arch_arm.rs"]
#[allow(dead_code)]
mod arch;
#[cfg(target_arch = "riscv32")]
#[path = "../arch_riscv.rs"]
#[allow(dead_code)]
mod arch;
#[path = "../exit.rs"]
mod exit;
#[path = "../files.rs"]
#[allow(dead_code)]
mod files;

use core::fmt::Write as _;
use files::ShFile;
use slotwise::acquire::fold::ArrivalPattern;
use slotwise::acquire::{AcquireConfig, AcquireParams};
use slotwise::fixed::types::U32F32;
use slotwise::recovered::{RecoveredClock, RecoveredConfig};
use slotwise::track::{LockState, TrackConfig, TrackParams};
use slotwise::{Announcement, Answer, Basis, NullSink, Receiver, TdcEvent, Transmitter};
use slotwise_hil::{EventSource, IoEvents, Setup, BLOCK, PENDING};

/// The recovered clock with the host replay's capacities: 2048 detections, 8 candidates, Z²_2.
type AcqClock = RecoveredClock<2048, 8, 2>;

/// Bytes of `acquire.bin` (layout in `host-runner/src/simulated.rs`).
const ACQUIRE_LEN: usize = 44;

/// Answers at once, in RAM (the answers do not reach the clock).
struct EchoTx(heapless::Deque<Answer, { slotwise::sift::ANNOUNCE_BATCH }>);

impl Transmitter for EchoTx {
    fn announce(&mut self, a: Announcement) {
        let _ = self.0.push_back(Answer {
            slot: a.slot,
            basis: Basis::Z,
            intensity: 0,
            bit: None,
        });
    }
    fn poll_answer(&mut self) -> Option<Answer> {
        self.0.pop_front()
    }
}

#[arch::entry]
fn main() -> ! {
    arch::init_counter();
    let code = match acquire() {
        Ok(()) => exit::OK,
        Err(code) => code,
    };
    semihosting::process::exit(code)
}

#[panic_handler]
fn panic(_info: &core::panic::PanicInfo<'_>) -> ! {
    semihosting::process::exit(exit::PANIC)
}

fn le<const N: usize>(b: &[u8], at: usize) -> Result<[u8; N], i32> {
    let mut a = [0u8; N];
    a.copy_from_slice(b.get(at..at + N).ok_or(exit::SETUP)?);
    Ok(a)
}

fn clock_config(b: &[u8]) -> Result<RecoveredConfig, i32> {
    let period = U32F32::from_bits(u64::from_le_bytes(le(b, 0)?));
    let mut a = AcquireParams::new(period, u32::from_le_bytes(le(b, 8)?));
    a.work_per_call = u32::from_le_bytes(le(b, 12)?);
    a.drift_ppb_per_s = u32::from_le_bytes(le(b, 40)?);
    let t = TrackParams::new(
        u32::from_le_bytes(le(b, 16)?),
        u64::from_le_bytes(le(b, 20)?),
        u64::from_le_bytes(le(b, 28)?),
    );
    let acq = AcquireConfig::new(a).map_err(|_| exit::SETUP)?;
    let trk = TrackConfig::new(t).map_err(|_| exit::SETUP)?;
    RecoveredConfig::new(acq, trk, u32::from_le_bytes(le(b, 36)?)).map_err(|_| exit::SETUP)
}

fn acquire() -> Result<(), i32> {
    let (s, n) = files::read_file::<{ slotwise_hil::setup::MAX_SETUP_LEN + 1 }>(c"setup.bin")?;
    let setup = Setup::decode(s.get(..n).unwrap_or(&[])).map_err(|_| exit::SETUP)?;
    let (a, n) = files::read_file::<{ ACQUIRE_LEN + 1 }>(c"acquire.bin")?;
    if n != ACQUIRE_LEN {
        return Err(exit::SETUP);
    }
    let cfg = setup.receiver_config().map_err(|_| exit::SETUP)?;
    let pattern = ArrivalPattern::from_gates(cfg.gates());
    let clock = AcqClock::new(clock_config(&a)?, pattern).map_err(|_| exit::SETUP)?;
    let mut rx: Receiver<AcqClock, PENDING> = Receiver::new(cfg, clock);
    let mut tx = EchoTx(heapless::Deque::new());

    let file = ShFile::open(c"events.bin").map_err(|_| exit::IO)?;
    let mut events = IoEvents::new(file);
    let mut buf = [TdcEvent {
        count: 0,
        channel: 0,
    }; BLOCK];
    let (mut counts, mut taken) = (0u64, 0u64);
    let mut locked = false;
    while !locked {
        let n = events.read_events(&mut buf).map_err(|_| exit::IO)?;
        if n == 0 {
            break;
        }
        for ev in buf.iter().take(n) {
            let t0 = arch::now();
            rx.push_block(core::slice::from_ref(ev), &mut tx, &mut NullSink);
            counts += arch::now() - t0;
            taken += 1;
            if rx.clock().state() == LockState::Locked {
                locked = true;
                break;
            }
        }
    }

    let (calib_instructions, calib_counts) = arch::calibrate();
    let mut r: heapless::String<512> = heapless::String::new();
    let period_bits = rx.clock().period_ps().map_or(0, |p| p.to_bits());
    let rows: [(&str, u64); 7] = [
        ("calib_instructions", calib_instructions),
        ("calib_counts", calib_counts),
        ("locked", u64::from(locked)),
        ("events_to_lock", taken),
        ("acquisition_counts", counts),
        ("locked_period_ps_q32", period_bits),
        (
            "recovered_clock_bytes",
            core::mem::size_of::<AcqClock>() as u64,
        ),
    ];
    let mut ok = writeln!(r, "counter {}", arch::COUNTER).is_ok();
    for (k, v) in rows {
        ok &= writeln!(r, "{k} {v}").is_ok();
    }
    if !ok {
        return Err(exit::REPORT);
    }
    ShFile::create(c"acquire-fw.txt")
        .and_then(|mut f| f.write_all_bytes(r.as_bytes()))
        .map_err(|_| exit::REPORT)
}
