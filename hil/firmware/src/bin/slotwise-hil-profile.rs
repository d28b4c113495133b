//! Where the instructions go: the stages of the pipeline measured one by one on the same events
//! of `events.bin` (with `setup.bin`); writes `profile-fw.txt`. A binary apart from the board
//! build, so its extra code never changes what the board build's figures measure.
//!
//! Stage by stage through the core's public API: counter unwrapping; delay and slot location;
//! gate lookup; the whole receiver with an in-RAM transmitter and no key sink; the same with the
//! frame writer; the difference to the full HIL run is the answer replay's own cost.
//!
//! With `board.bin` in the run directory (a run of `slotwise-hil-full`) it profiles the whole
//! receiver instead: the shared driver with its clock and link endpoint wrapped so that every
//! call is charged to its part (clock, link endpoint, the rest of the receiver, the monitor), the
//! harness's transport shim and semihosting I/O kept apart; writes `profile-full-fw.txt`.

#![no_std]
#![no_main]

// Shared with the board build, which uses all of it; the profile needs only the counter.
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
use core::hint::black_box;
use files::ShFile;
use slotwise::Summary;
use slotwise::{
    Announcement, Answer, Basis, FrameSink, KeySink, Located, Lookup, NullSink, SlotClock,
    TdcEvent, Transmitter, Unwrapper,
};
use slotwise_hil::board::BOARD_LEN;
use slotwise_hil::{
    build_clock, build_numbering, AnnounceOut, AnswersIn, BoardFrameOut, BoardReceiver,
    BoardSettings, EventSource, FullLink, FullMonitor, IoEvents, LinkShared, ProbedClock,
    ProbedLink, ProbedNumbering, Setup, BLOCK, FULL_PENDING,
};

/// Answers at once, in RAM: Z basis, signal, bit kept secret.
struct EchoTx(heapless::Deque<Answer, { slotwise::sift::ANNOUNCE_BATCH }>);

impl Transmitter for EchoTx {
    fn announce(&mut self, a: Announcement) {
        let _ = self.0.push_back(Answer {
            slot: a.slot,
            basis: if a.slot & 7 == 0 { Basis::X } else { Basis::Z },
            intensity: 0,
            bit: None,
        });
    }
    fn poll_answer(&mut self) -> Option<Answer> {
        self.0.pop_front()
    }
}

struct NullFrames;

impl FrameSink for NullFrames {
    fn frame(&mut self, bytes: &[u8]) {
        black_box(bytes);
    }
}

fn measured(total: &mut u64, f: impl FnOnce()) {
    let x0 = files::excluded();
    let t0 = arch::now();
    f();
    let dt = arch::now() - t0;
    *total += dt.saturating_sub(files::excluded() - x0);
}

fn for_each_block(mut f: impl FnMut(&[TdcEvent])) -> Result<u64, i32> {
    let file = ShFile::open(c"events.bin").map_err(|_| exit::IO)?;
    let mut events = IoEvents::new(file);
    let mut buf = [TdcEvent {
        count: 0,
        channel: 0,
    }; BLOCK];
    let mut n_total = 0u64;
    loop {
        let n = events.read_events(&mut buf).map_err(|_| exit::IO)?;
        if n == 0 {
            return Ok(n_total);
        }
        n_total += n as u64;
        f(buf.get(..n).unwrap_or(&[]));
    }
}

#[arch::entry]
fn main() -> ! {
    arch::init_counter();
    let whole = ShFile::open(c"board.bin").is_ok();
    let code = match read_setup().and_then(|s| if whole { profile_full(&s) } else { profile(&s) }) {
        Ok(()) => exit::OK,
        Err(code) => code,
    };
    semihosting::process::exit(code)
}

#[panic_handler]
fn panic(_info: &core::panic::PanicInfo<'_>) -> ! {
    semihosting::process::exit(exit::PANIC)
}

fn read_setup() -> Result<Setup, i32> {
    let mut b = [0u8; slotwise_hil::setup::MAX_SETUP_LEN + 1];
    let n = ShFile::open(c"setup.bin")
        .and_then(|mut f| f.read_all(&mut b))
        .map_err(|_| exit::SETUP)?;
    Setup::decode(b.get(..n).unwrap_or(&[])).map_err(|_| exit::SETUP)
}

/// Measure each stage over every event of `events.bin`.
fn profile(setup: &Setup) -> Result<(), i32> {
    let cfg = setup.receiver_config().map_err(|_| exit::SETUP)?;
    let clock = setup.clock().map_err(|_| exit::SETUP)?;
    let gates = *cfg.gates();
    let (mut unwrap, mut locate, mut lookup) = (0u64, 0u64, 0u64);
    let mut u = Unwrapper::new(*cfg.tdc());
    let n = for_each_block(|block| {
        let mut times = [None::<(u64, u8)>; BLOCK];
        measured(&mut unwrap, || {
            for (ev, t) in block.iter().zip(times.iter_mut()) {
                *t = u.unwrap(*ev).ok().map(|d| (d.t_ps, d.channel));
            }
        });
        let mut pos = [None::<(u8, slotwise::SlotPos)>; BLOCK];
        measured(&mut locate, || {
            for (t, p) in times.iter().zip(pos.iter_mut()) {
                *p = t.and_then(|(t, ch)| {
                    let d = gates.delay_ps(ch)?;
                    match clock.locate(t.checked_add_signed(d.wrapping_neg())?) {
                        Located::At(sp) => Some((ch, sp)),
                        _ => None,
                    }
                });
            }
        });
        measured(&mut lookup, || {
            for &(ch, sp) in pos.iter().take(block.len()).flatten() {
                black_box(matches!(gates.lookup(ch, sp.phase), Lookup::Gate(_)));
            }
        });
    })?;

    let clock0 = setup.clock().map_err(|_| exit::SETUP)?;
    let mut receiver = 0u64;
    let mut rx = BoardReceiver::new(cfg, clock0);
    let mut tx = EchoTx(heapless::Deque::new());
    for_each_block(|block| {
        measured(&mut receiver, || {
            rx.push_block(block, &mut tx, &mut NullSink)
        });
    })?;
    let sifted_null = rx.sifted_bits();

    let mut with_frames = 0u64;
    let mut rx = BoardReceiver::new(cfg, clock0);
    let mut out = BoardFrameOut::new(NullFrames);
    for_each_block(|block| {
        measured(&mut with_frames, || rx.push_block(block, &mut tx, &mut out));
    })?;
    let mut finish = 0u64;
    measured(&mut finish, || {
        rx.finish(&mut tx, &mut out);
        out.finish(&Summary::of(&rx));
    });
    black_box(out.key_blocks());

    let mut sift_only = 0u64;
    let mut out = BoardFrameOut::new(NullFrames);
    measured(&mut sift_only, || {
        for k in 0..sifted_null {
            out.sifted(slotwise::SiftedBit {
                slot: k,
                basis: Basis::Z,
                bit: (k & 1) as u8,
                intensity: 0,
                multi_click: false,
                tx_bit: None,
            });
        }
    });

    let (calib_instructions, calib_counts) = arch::calibrate();
    let mut r: heapless::String<1024> = heapless::String::new();
    let rows: [(&str, u64); 11] = [
        ("calib_instructions", calib_instructions),
        ("calib_counts", calib_counts),
        ("events", n),
        ("sifted_bits_echo", sifted_null),
        ("unwrap_counts", unwrap),
        ("delay_and_locate_counts", locate),
        ("gate_lookup_counts", lookup),
        ("receiver_echo_tx_null_sink_counts", receiver),
        ("receiver_echo_tx_frames_counts", with_frames),
        ("finish_and_summary_counts", finish),
        ("frame_out_sifted_only_counts", sift_only),
    ];
    let mut ok = writeln!(r, "counter {}", arch::COUNTER).is_ok();
    for (k, v) in rows {
        ok &= writeln!(r, "{k} {v}").is_ok();
    }
    if !ok {
        return Err(exit::REPORT);
    }
    ShFile::create(c"profile-fw.txt")
        .and_then(|mut f| f.write_all_bytes(r.as_bytes()))
        .map_err(|_| exit::REPORT)
}

/// The whole receiver through the shared driver, each part charged on its own.
fn profile_full(setup: &Setup) -> Result<(), i32> {
    let (b, n) = files::read_file::<{ BOARD_LEN + 1 }>(c"board.bin")?;
    let board = BoardSettings::decode(b.get(..n).unwrap_or(&[])).map_err(|_| exit::SETUP)?;
    let cfg = setup.receiver_config().map_err(|_| exit::SETUP)?;
    let stats = board.stats_config(cfg.gates()).map_err(|_| exit::SETUP)?;
    let clock = ProbedClock {
        inner: build_clock(setup, &board).map_err(|_| exit::SETUP)?,
        probe: attrib::PROBE,
    };
    let open = |name: &core::ffi::CStr| ShFile::open(name).map_err(|_| exit::IO);
    let mut events = IoEvents::new(open(c"events.bin")?);
    let mut out = BoardFrameOut::new(NullFrames);
    let numbering = ProbedNumbering {
        inner: build_numbering().map_err(|_| exit::SETUP)?,
        probe: attrib::PROBE,
    };
    let mut rx: slotwise::Receiver<_, FULL_PENDING, _> =
        slotwise::Receiver::with_numbering(cfg, clock, numbering);
    let mut monitor = FullMonitor::new(stats, board.alarms);
    let shared = LinkShared::new(attrib::PROBE);
    let mut link = ProbedLink {
        inner: FullLink::new(
            board.link,
            AnswersIn::new(open(c"answers-link.bin")?, &shared),
            AnnounceOut::new(NullWriter, &shared),
        ),
        probe: attrib::PROBE,
    };
    let (calib_instructions, calib_counts) = arch::calibrate();
    let (mark_own, mark_parent) = attrib::calibrate(10_000);
    let io_before = files::excluded();
    let totals = slotwise_hil::FullRun {
        rx: &mut rx,
        link: &mut link,
        monitor: &mut monitor,
        out: &mut out,
        probe: attrib::PROBE,
    }
    .run(&mut events, board.hint_t_ps, board.hint_tx_slot)
    .map_err(|_| exit::IO)?;
    let io = files::excluded() - io_before;
    black_box(out.key_blocks());

    let mut r: heapless::String<2048> = heapless::String::new();
    let mut ok = writeln!(r, "counter {}", arch::COUNTER).is_ok();
    for (name, counts, calls, nested) in attrib::totals() {
        ok &= writeln!(r, "part_{name}_counts {counts}").is_ok();
        ok &= writeln!(r, "part_{name}_calls {calls}").is_ok();
        ok &= writeln!(r, "part_{name}_nested {nested}").is_ok();
    }
    let rows: [(&str, u64); 7] = [
        ("calib_instructions", calib_instructions),
        ("calib_counts", calib_counts),
        ("detections", totals.detections),
        ("sifted_bits", rx.sifted_bits()),
        ("io_excluded_counts", io),
        ("mark_pair_own_counts_10000", mark_own),
        ("mark_pair_parent_counts_10000", mark_parent),
    ];
    for (k, v) in rows {
        ok &= writeln!(r, "{k} {v}").is_ok();
    }
    if !ok {
        return Err(exit::REPORT);
    }
    ShFile::create(c"profile-full-fw.txt")
        .and_then(|mut f| f.write_all_bytes(r.as_bytes()))
        .map_err(|_| exit::REPORT)
}

/// Announce frames dropped in RAM (the transmitter's side is the prepared answers file).
struct NullWriter;

impl embedded_io::ErrorType for NullWriter {
    type Error = core::convert::Infallible;
}

impl embedded_io::Write for NullWriter {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Self::Error> {
        black_box(buf);
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Self::Error> {
        Ok(())
    }
}
