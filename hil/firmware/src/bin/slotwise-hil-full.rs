//! The whole receiver as a board runs it, under QEMU: the recovered clock from a cold start with
//! marker numbering and the classical channel's hint, the link endpoint as the transmitter, the
//! live-statistics monitor with its alarms — the shared driver [`slotwise_hil::FullRun`], the
//! same code `hil-host prepare --full` runs on the host.
//!
//! Inputs in the run directory: `setup.bin`, `board.bin` (clock, hint, link, monitor settings),
//! `events.bin`, `answers-link.bin` (the transmitter's answers frames, each with the index of the
//! announce frame it answers; read through the shim of `slotwise_hil::link`). Outputs:
//! `frames-fw.bin` (key blocks, alarms, statistics, summary), `announce-fw.bin` (the announce
//! frames the endpoint sent) and `report-fw.txt` (`key value` lines: instructions per part,
//! memory, counters).
//!
//! A binary of its own rather than a flag of the configured-clock build, so that each build's
//! flash and instruction figures show exactly its configuration.

#![no_std]
#![no_main]

#[cfg(target_arch = "arm")]
#[path = "../arch_arm.rs"]
#[allow(dead_code)]
mod arch;
#[cfg(target_arch = "riscv32")]
#[path = "../arch_riscv.rs"]
#[allow(dead_code)]
mod arch;
#[path = "../attrib.rs"]
mod attrib;
#[path = "../exit.rs"]
mod exit;
#[path = "../files.rs"]
mod files;

// The core logs through defmt when the feature is on; the logger is this binary's choice.
#[cfg(feature = "defmt")]
use defmt_semihosting as _;

use core::fmt::Write as _;
use files::ShFile;
use slotwise::track::LockState;
use slotwise_hil::board::BOARD_LEN;
use slotwise_hil::{
    build_receiver, ram_total_bytes, AnnounceOut, AnswersIn, BoardFrameOut, BoardSettings,
    FullClock, FullLink, FullMonitor, FullReceiver, FullRun, IoEvents, IoFrames, LinkShared, Setup,
};

type Link<'a> = FullLink<'a, ShFile, ShFile>;

#[arch::entry]
fn main() -> ! {
    arch::init_counter();
    let code = match run() {
        Ok(()) => exit::OK,
        Err(code) => code,
    };
    semihosting::process::exit(code)
}

#[panic_handler]
fn panic(_info: &core::panic::PanicInfo<'_>) -> ! {
    semihosting::process::exit(exit::PANIC)
}

fn run() -> Result<(), i32> {
    let (s, n) = files::read_file::<{ slotwise_hil::setup::MAX_SETUP_LEN + 1 }>(c"setup.bin")?;
    let setup = Setup::decode(s.get(..n).unwrap_or(&[])).map_err(|_| exit::SETUP)?;
    let (b, n) = files::read_file::<{ BOARD_LEN + 1 }>(c"board.bin")?;
    let board = BoardSettings::decode(b.get(..n).unwrap_or(&[])).map_err(|_| exit::SETUP)?;
    let cfg = setup.receiver_config().map_err(|_| exit::SETUP)?;
    let stats = board.stats_config(cfg.gates()).map_err(|_| exit::SETUP)?;
    let open = |name: &core::ffi::CStr| ShFile::open(name).map_err(|_| exit::IO);
    let create = |name: &core::ffi::CStr| ShFile::create(name).map_err(|_| exit::IO);

    let mut events = IoEvents::new(open(c"events.bin")?);
    let mut out = BoardFrameOut::new(IoFrames::new(create(c"frames-fw.bin")?));
    let mut rx = build_receiver(&setup, &board).map_err(|_| exit::SETUP)?;
    let mut monitor = FullMonitor::new(stats, board.alarms);
    let shared = LinkShared::new(attrib::PROBE);
    let mut link: Link<'_> = FullLink::new(
        board.link,
        AnswersIn::new(open(c"answers-link.bin")?, &shared),
        AnnounceOut::new(create(c"announce-fw.bin")?, &shared),
    );

    let (calib_instructions, calib_counts) = arch::calibrate();
    let (mark_own, mark_parent) = attrib::calibrate(10_000);
    let io_before = files::excluded();
    let totals = FullRun {
        rx: &mut rx,
        link: &mut link,
        monitor: &mut monitor,
        out: &mut out,
        probe: attrib::PROBE,
    }
    .run(&mut events, board.hint_t_ps, board.hint_tx_slot)
    .map_err(|_| exit::IO)?;
    out.sink_mut().flush();
    let io = files::excluded() - io_before;

    let mut r: heapless::String<4096> = heapless::String::new();
    let mut ok = writeln!(r, "mode full").is_ok();
    ok &= writeln!(r, "arch {}", arch::NAME).is_ok();
    ok &= writeln!(r, "counter {}", arch::COUNTER).is_ok();
    for (name, counts, calls, nested) in attrib::totals() {
        ok &= writeln!(r, "part_{name}_counts {counts}").is_ok();
        ok &= writeln!(r, "part_{name}_calls {calls}").is_ok();
        ok &= writeln!(r, "part_{name}_nested {nested}").is_ok();
    }
    for (name, counts, calls, nested) in attrib::steady_totals() {
        ok &= writeln!(r, "steady_{name}_counts {counts}").is_ok();
        ok &= writeln!(r, "steady_{name}_calls {calls}").is_ok();
        ok &= writeln!(r, "steady_{name}_nested {nested}").is_ok();
    }
    ok &= writeln!(
        r,
        "steady_from {}",
        totals.steady_from.unwrap_or(totals.detections)
    )
    .is_ok();
    let c = link.counters();
    let size = core::mem::size_of::<FullReceiver>;
    let lines: [(&str, u64); 34] = [
        ("detections", totals.detections),
        ("blocks", totals.blocks),
        ("io_excluded_counts", io),
        ("mark_pair_own_counts_10000", mark_own),
        ("mark_pair_parent_counts_10000", mark_parent),
        ("calib_instructions", calib_instructions),
        ("calib_counts", calib_counts),
        ("receiver_bytes", size() as u64),
        ("clock_bytes", core::mem::size_of::<FullClock>() as u64),
        ("link_bytes", core::mem::size_of::<Link<'static>>() as u64),
        ("monitor_bytes", core::mem::size_of::<FullMonitor>() as u64),
        (
            "frame_out_bytes",
            core::mem::size_of::<BoardFrameOut<IoFrames<ShFile>>>() as u64,
        ),
        (
            "ram_total_bytes",
            ram_total_bytes::<ShFile, ShFile, IoFrames<ShFile>>() as u64,
        ),
        ("pending_capacity", slotwise_hil::PENDING as u64),
        ("sifted_bits", rx.sifted_bits()),
        ("alarm_frames", totals.alarm_frames),
        ("stats_frames", totals.stats_frames),
        ("aligned", u64::from(rx.numbering().aligned())),
        ("locked", u64::from(rx.clock().state() == LockState::Locked)),
        ("announce_frames", c.frames_out),
        ("announcements", c.announcements),
        ("answers_frames", c.answered_frames),
        ("answers_in", c.answers_in),
        ("expired_frames", c.expired_frames),
        ("link_rejected", c.rejected.total()),
        ("link_read_errors", c.read_errors),
        ("link_write_errors", c.write_errors),
        ("shim_answers_frames", link.reader_mut().frames()),
        ("shim_read_errors", link.reader_mut().errors()),
        ("frames_written", out.sink().frames()),
        ("frame_bytes", out.sink().bytes()),
        ("frame_write_errors", out.sink().errors()),
        ("frame_build_errors", out.frame_errors()),
        ("unaligned", rx.accounting()[slotwise::Fate::Unaligned]),
    ];
    for (k, v) in lines {
        ok &= writeln!(r, "{k} {v}").is_ok();
    }
    if !ok {
        return Err(exit::REPORT);
    }
    ShFile::create(c"report-fw.txt")
        .and_then(|mut f| f.write_all_bytes(r.as_bytes()))
        .map_err(|_| exit::REPORT)
}
