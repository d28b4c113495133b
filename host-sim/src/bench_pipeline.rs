//! `slotwise bench` (also `slotwise bench pipeline`): throughput of the whole receiver pipeline.
//!
//! Three captures are simulated in memory ([`crate::sim::Simulator`]): the default bench link
//! (`scenarios/bench-100mhz-30km.toml`), a 1 GHz high-rate link
//! (`scenarios/highrate-1ghz-5km-snspd.toml`) and a sparse link at about 1e-6 detections per slot
//! (`scenarios/sparse-100mhz-1e-6-per-slot.toml`). Each is pushed through the core's
//! [`slotwise::Receiver`] as the demo builds it (recovered clock with marker alignment,
//! [`crate::setup::receiver_setup`]) until the clock is locked and the numbering aligned; the rest
//! of the capture is the steady state that is timed, on one core, with the clock recovered and
//! with the scenario's reference clock. The transmitter's answers are recorded once and replayed
//! from memory, so the transmitter costs a few nanoseconds, not the simulator's choice function.
//!
//! Figures, each the median of `reps` runs with min and max: the read floor (a checksum over the
//! same detection buffer, [`stages::read_floor`]), the whole pipeline (`Receiver::push_block`
//! in blocks of `block` events), and the truncated pipelines of [`stages`] whose differences
//! give each stage's share. The ratio pipeline / floor says how far the pipeline is from merely
//! reading its input. [`scaling`] adds cost per detection against the detection rate, the
//! pending-queue capacity, and the input length (with the receiver's memory, constant).

pub mod scaling;
pub mod stages;

use crate::clocks::{self, ClockMode, HostClock, HostRecovered};
use crate::replay::HOST_PENDING;
use crate::scenario::Scenario;
use crate::setup::{receiver_setup, ClockArgs};
use crate::sim::{SimTransmitter, Simulator};
use serde::Serialize;
use slotwise::{Answer, TdcEvent};
use stages::{CountSink, Depth, Recording, ReplayAnswers, StageState};
use std::error::Error;
use std::fmt;
use std::hint::black_box;
use std::time::Instant;

type AnyErr = Box<dyn Error>;

pub use crate::replay::HostReceiver;

/// The benchmark's captures.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum CaptureName {
    /// The default bench link: 100 MHz, 30 km, about 1.2e-2 detections per slot.
    Default,
    /// 1 GHz, 5 km, fast detectors: tens of millions of detections per second.
    Highrate,
    /// 100 MHz at about 1e-6 detections per slot, 1000 s.
    Sparse,
}

impl CaptureName {
    /// All three, in report order.
    pub const ALL: [CaptureName; 3] = [Self::Default, Self::Highrate, Self::Sparse];

    /// The scenario file's text and name.
    fn source(self) -> (&'static str, &'static str) {
        match self {
            Self::Default => (
                crate::scenario::DEFAULT_BENCH_TOML,
                "scenarios/bench-100mhz-30km.toml",
            ),
            Self::Highrate => (
                include_str!("../../scenarios/highrate-1ghz-5km-snspd.toml"),
                "scenarios/highrate-1ghz-5km-snspd.toml",
            ),
            Self::Sparse => (
                include_str!("../../scenarios/sparse-100mhz-1e-6-per-slot.toml"),
                "scenarios/sparse-100mhz-1e-6-per-slot.toml",
            ),
        }
    }

    /// The scenario, with the benchmark's duration (shorter with `quick`).
    pub fn scenario(self, quick: bool) -> Result<Scenario, AnyErr> {
        let (text, name) = self.source();
        let mut s = Scenario::from_toml_str(text, name)?;
        // The sparse link needs most of its 1000 s to lock and align: it is never shortened.
        s.duration_s = match (self, quick) {
            (Self::Default, false) => 1.0,
            (Self::Default, true) => 0.25,
            (Self::Highrate, false) => 0.012,
            (Self::Highrate, true) => 0.004,
            (Self::Sparse, _) => s.duration_s,
        };
        Ok(s)
    }

    /// Short name for reports.
    pub fn label(self) -> &'static str {
        match self {
            Self::Default => "default",
            Self::Highrate => "highrate-1ghz",
            Self::Sparse => "sparse-1e-6",
        }
    }
}

/// Options of `slotwise bench` / `slotwise bench pipeline`.
#[derive(clap::Args, Debug, Clone, Default)]
pub struct PipelineArgs {
    /// Print the report as JSON instead of tables.
    #[arg(long)]
    pub json: bool,
    /// Shorter captures and fewer repetitions (a few seconds instead of about 15).
    #[arg(long)]
    pub quick: bool,
    /// Timed repetitions of every figure; median, min and max are reported [default: 7; 5 with
    /// --quick].
    #[arg(long)]
    pub reps: Option<usize>,
    /// Captures to run, comma-separated [default: all three].
    #[arg(long, value_enum, value_delimiter = ',')]
    pub capture: Vec<CaptureName>,
    /// Events per `Receiver::push_block` call (a DMA-sized block).
    #[arg(long, default_value_t = 1024)]
    pub block: usize,
    /// At most this many steady-state detections per capture (after lock and alignment).
    #[arg(long)]
    pub detections: Option<usize>,
    /// Skip the scaling tables (rate, pending capacity, input length).
    #[arg(long)]
    pub no_scaling: bool,
    /// Instruction-count mode for callgrind: no timing; per capture, run the whole pipeline once
    /// with the recovered clock, then once with the reference clock, each inside
    /// `stages::measured_pipeline`, and print one JSON line per run with the detections it took
    /// (see scripts/bench-pipeline-callgrind.sh).
    #[arg(long)]
    pub count_only: bool,
}

/// Median, min and max of repeated timings, per detection.
#[derive(Clone, Copy, Debug, Serialize, PartialEq)]
pub struct Timing {
    /// Median nanoseconds per detection.
    pub ns_per_detection: f64,
    /// Fastest repetition, ns per detection.
    pub min_ns: f64,
    /// Slowest repetition, ns per detection.
    pub max_ns: f64,
    /// Millions of detections per second at the median.
    pub mdet_per_s: f64,
}

/// One stage's cost: the difference between the truncated pipeline that ends with it and the one
/// before.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct StageRow {
    /// Stage name.
    pub stage: &'static str,
    /// Median ns per detection of the pipeline up to and including this stage.
    pub cumulative_ns: f64,
    /// This stage's ns per detection (difference of medians; may be slightly negative in noise).
    pub ns: f64,
    /// Share of the whole pipeline's median.
    pub share: f64,
}

/// One clock's figures on one capture.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct ClockRow {
    /// `recovered` (the demo's) or `reference`.
    pub clock: &'static str,
    /// The whole pipeline.
    pub pipeline: Timing,
    /// Pipeline median over read-floor median.
    pub ratio_to_floor: f64,
    /// Per-stage costs, in data-flow order; the last row is slot handling, sifting and tallies.
    pub stages: Vec<StageRow>,
    /// Sifted bits in one timed run.
    pub sifted_bits: u64,
    /// Bytes of receiver state (`size_of` of the receiver, plus the boxed recovered clock).
    pub state_bytes: usize,
    /// Announcements whose replayed answer was for another slot (0 when the replay is faithful).
    pub answer_mismatches: u64,
}

/// One capture's figures.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct CaptureReport {
    /// Capture label.
    pub capture: &'static str,
    /// Scenario name.
    pub scenario: String,
    /// Slot rate, Hz.
    pub rep_rate_hz: f64,
    /// Detections per second of link time.
    pub link_rate_per_s: f64,
    /// Detections simulated.
    pub detections: usize,
    /// Detections before the recovered clock was locked and aligned (not timed).
    pub warmup_detections: usize,
    /// Detections timed (steady state).
    pub timed_detections: usize,
    /// The read floor.
    pub floor: Timing,
    /// Figures per clock.
    pub clocks: Vec<ClockRow>,
}

/// The whole report.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct PipelineReport {
    /// Repetitions per figure.
    pub reps: usize,
    /// Events per `push_block`.
    pub block: usize,
    /// Whether --quick was given.
    pub quick: bool,
    /// Per capture.
    pub captures: Vec<CaptureReport>,
    /// Scaling tables (absent with --no-scaling).
    pub scaling: Option<scaling::ScalingReport>,
    /// Wall time of the whole benchmark, s.
    pub wall_s: f64,
}

/// Time `f` on a fresh clone of `state`, `reps` times; `n` detections per run.
pub fn time_reps<S: Clone>(
    reps: usize,
    n: usize,
    state: &S,
    mut f: impl FnMut(&mut S) -> u64,
) -> Timing {
    let mut ns: Vec<f64> = (0..reps.max(1))
        .map(|_| {
            let mut st = state.clone();
            let t0 = Instant::now();
            black_box(f(&mut st));
            let dt = t0.elapsed().as_secs_f64();
            drop(st);
            dt * 1e9 / n.max(1) as f64
        })
        .collect();
    ns.sort_by(f64::total_cmp);
    let median = ns[ns.len() / 2];
    Timing {
        ns_per_detection: median,
        min_ns: ns[0],
        max_ns: ns[ns.len() - 1],
        mdet_per_s: 1e3 / median,
    }
}

/// A receiver at the start of the timed part, with the answers its transmitter will give.
pub struct Warm {
    /// The receiver's state.
    pub rx: Box<HostReceiver>,
    /// Its stages, for the truncated pipelines.
    pub stages: StageState,
    /// The answers of the timed part, in announcement order.
    pub answers: Vec<Answer>,
}

fn aligned(rx: &HostReceiver) -> bool {
    match rx.clock() {
        HostClock::Reference(_) => true,
        HostClock::Recovered(_) => rx.clock().locked() && rx.numbering().aligned(),
    }
}

/// Build the demo's receiver for `s` with `mode`, push `events` until it is locked and aligned
/// (or up to `cut` when given), and record the answers of the rest. Returns the cut too.
pub fn warm_up(
    s: &Scenario,
    mode: ClockMode,
    events: &[TdcEvent],
    cut: Option<usize>,
    block: usize,
) -> Result<(Warm, usize), AnyErr> {
    let (cfg, stages) = receiver_setup(
        s,
        &ClockArgs {
            clock: mode,
            prior_ppm: Some(500),
        },
    )?;
    let mut rx = stages.receiver::<HOST_PENDING>(cfg);
    let (hint_t, hint_slot) = clocks::simulated_hint(s)?;
    rx.hint(hint_t, hint_slot);
    let mut tx = SimTransmitter::new(s);
    let mut sink = CountSink::default();
    let cut = match cut {
        Some(c) => {
            for b in events[..c].chunks(block.max(1)) {
                rx.push_block(b, &mut tx, &mut sink);
            }
            c
        }
        None => {
            let mut i = 0;
            while i < events.len() && !aligned(&rx) {
                rx.push(events[i], &mut tx, &mut sink);
                i += 1;
            }
            rx.service(&mut tx, &mut sink);
            if !aligned(&rx) {
                return Err(format!(
                    "scenario '{}': the recovered clock was not locked and aligned after all {} \
                     detections; nothing to time",
                    s.name,
                    events.len()
                )
                .into());
            }
            i
        }
    };
    let stages = StageState::of(&rx);
    let mut rec_rx = rx.clone();
    let mut rec = Recording {
        inner: tx,
        log: Vec::new(),
    };
    for b in events[cut..].chunks(block.max(1)) {
        rec_rx.push_block(b, &mut rec, &mut sink);
    }
    Ok((
        Warm {
            rx,
            stages,
            answers: rec.log,
        },
        cut,
    ))
}

/// Simulate a scenario into memory.
pub fn simulate(s: &Scenario) -> Vec<TdcEvent> {
    let mut sim = Simulator::new(s);
    let mut out = Vec::new();
    let mut block = Vec::with_capacity(4096);
    while sim.next_block(&mut block, 4096) > 0 {
        out.extend(block.iter().map(|e| e.event));
    }
    out
}

/// Receiver state in bytes: the receiver itself plus the boxed recovered clock.
pub fn state_bytes(mode: ClockMode) -> usize {
    std::mem::size_of::<HostReceiver>()
        + match mode {
            ClockMode::Recovered => {
                std::mem::size_of::<HostRecovered>()
                    + std::mem::size_of::<slotwise::MarkerNumbering>()
            }
            ClockMode::Reference => 0,
        }
}

fn clock_row(
    mode: ClockMode,
    warm: &Warm,
    timed: &[TdcEvent],
    floor: &Timing,
    reps: usize,
    block: usize,
) -> ClockRow {
    let n = timed.len();
    let state = (warm.rx.clone(), ReplayAnswers::new(&warm.answers, 0));
    let mut sifted = 0;
    let mut mismatches = 0;
    let pipeline = time_reps(reps, n, &state, |(rx, tx)| {
        let mut key = CountSink::default();
        let r = stages::measured_pipeline(rx, tx, &mut key, timed, block);
        sifted = key.sifted;
        mismatches = tx.mismatched;
        r
    });
    let mut rows = Vec::new();
    let mut prev = 0.0;
    for d in Depth::ALL {
        let t = time_reps(reps, n, &warm.stages, |st| stages::truncated(st, timed, d));
        rows.push(StageRow {
            stage: d.stage(),
            cumulative_ns: t.ns_per_detection,
            ns: t.ns_per_detection - prev,
            share: (t.ns_per_detection - prev) / pipeline.ns_per_detection,
        });
        prev = t.ns_per_detection;
    }
    rows.push(StageRow {
        stage: "slots+sift+tally",
        cumulative_ns: pipeline.ns_per_detection,
        ns: pipeline.ns_per_detection - prev,
        share: (pipeline.ns_per_detection - prev) / pipeline.ns_per_detection,
    });
    ClockRow {
        clock: match mode {
            ClockMode::Recovered => "recovered",
            ClockMode::Reference => "reference",
        },
        ratio_to_floor: pipeline.ns_per_detection / floor.ns_per_detection,
        pipeline,
        stages: rows,
        sifted_bits: sifted,
        state_bytes: state_bytes(mode),
        answer_mismatches: mismatches,
    }
}

/// One capture, simulated and warmed up, ready to be timed or counted.
pub struct Prepared {
    /// Which capture.
    pub name: CaptureName,
    /// Its scenario.
    pub scenario: Scenario,
    /// Every detection.
    pub events: Vec<TdcEvent>,
    /// First timed detection.
    pub cut: usize,
    /// End of the timed detections.
    pub end: usize,
}

/// Simulate `name` and find where the recovered clock is locked and aligned.
pub fn prepare(name: CaptureName, args: &PipelineArgs) -> Result<(Prepared, Warm), AnyErr> {
    let s = name.scenario(args.quick)?;
    let events = simulate(&s);
    let (warm, cut) = warm_up(&s, ClockMode::Recovered, &events, None, args.block)?;
    let end = args
        .detections
        .map_or(events.len(), |d| (cut + d).min(events.len()));
    Ok((
        Prepared {
            name,
            scenario: s,
            events,
            cut,
            end,
        },
        warm,
    ))
}

fn capture_report(
    args: &PipelineArgs,
    reps: usize,
) -> impl Fn(CaptureName) -> Result<CaptureReport, AnyErr> + '_ {
    move |name| {
        let (p, rec_warm) = prepare(name, args)?;
        let timed = &p.events[p.cut..p.end];
        let (ref_warm, _) = warm_up(
            &p.scenario,
            ClockMode::Reference,
            &p.events[..p.end],
            Some(p.cut),
            args.block,
        )?;
        let floor = time_reps(reps, timed.len(), &(), |_| stages::read_floor(timed));
        let clocks = vec![
            clock_row(
                ClockMode::Recovered,
                &rec_warm,
                timed,
                &floor,
                reps,
                args.block,
            ),
            clock_row(
                ClockMode::Reference,
                &ref_warm,
                timed,
                &floor,
                reps,
                args.block,
            ),
        ];
        Ok(CaptureReport {
            capture: name.label(),
            scenario: p.scenario.name.clone(),
            rep_rate_hz: p.scenario.rep_rate_hz,
            link_rate_per_s: p.events.len() as f64 / p.scenario.duration_s,
            detections: p.events.len(),
            warmup_detections: p.cut,
            timed_detections: timed.len(),
            floor,
            clocks,
        })
    }
}

fn selected(args: &PipelineArgs) -> Vec<CaptureName> {
    if args.capture.is_empty() {
        CaptureName::ALL.to_vec()
    } else {
        args.capture.clone()
    }
}

/// The pipeline with the recovered clock, under its own name for callgrind's inclusive costs.
#[inline(never)]
fn count_recovered(
    rx: &mut HostReceiver,
    tx: &mut ReplayAnswers<'_>,
    key: &mut CountSink,
    events: &[TdcEvent],
    block: usize,
) -> u64 {
    // Distinct bodies, so the two wrappers are never merged into one symbol.
    black_box(1u32);
    stages::measured_pipeline(rx, tx, key, events, block)
}

/// The pipeline with the reference clock, under its own name for callgrind's inclusive costs.
#[inline(never)]
fn count_reference(
    rx: &mut HostReceiver,
    tx: &mut ReplayAnswers<'_>,
    key: &mut CountSink,
    events: &[TdcEvent],
    block: usize,
) -> u64 {
    black_box(2u32);
    stages::measured_pipeline(rx, tx, key, events, block)
}

/// Instruction-count mode: per capture, one untimed pass of the whole pipeline inside
/// [`stages::measured_pipeline`] with the recovered clock, then one with the reference clock;
/// one JSON line per pass with the detections it took.
pub fn count_only(args: &PipelineArgs) -> Result<Vec<String>, AnyErr> {
    let mut lines = Vec::new();
    for name in selected(args) {
        let (p, rec_warm) = prepare(name, args)?;
        let ref_warm = warm_up(
            &p.scenario,
            ClockMode::Reference,
            &p.events[..p.end],
            Some(p.cut),
            args.block,
        )?
        .0;
        let timed = &p.events[p.cut..p.end];
        for (mode, warm) in [
            (ClockMode::Recovered, rec_warm),
            (ClockMode::Reference, ref_warm),
        ] {
            let mut rx = warm.rx.clone();
            let mut tx = ReplayAnswers::new(&warm.answers, 0);
            let mut key = CountSink::default();
            let count = match mode {
                ClockMode::Recovered => count_recovered,
                ClockMode::Reference => count_reference,
            };
            count(&mut rx, &mut tx, &mut key, timed, args.block);
            lines.push(serde_json::to_string(&serde_json::json!({
                "capture": name.label(),
                "clock": format!("{mode:?}").to_lowercase(),
                "detections": timed.len(),
                "sifted_bits": key.sifted,
                "answer_mismatches": tx.mismatched,
            }))?);
        }
    }
    Ok(lines)
}

/// Run the benchmark.
pub fn run(args: &PipelineArgs) -> Result<PipelineReport, AnyErr> {
    let started = Instant::now();
    let reps = args.reps.unwrap_or(if args.quick { 5 } else { 7 }).max(1);
    let captures = selected(args)
        .into_iter()
        .map(capture_report(args, reps))
        .collect::<Result<Vec<_>, _>>()?;
    let scaling = if args.no_scaling {
        None
    } else {
        Some(scaling::run(args, reps)?)
    };
    Ok(PipelineReport {
        reps,
        block: args.block,
        quick: args.quick,
        captures,
        scaling,
        wall_s: started.elapsed().as_secs_f64(),
    })
}

impl fmt::Display for PipelineReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "Receiver pipeline throughput, one core, steady state (median of {} runs, [min–max]; \
             push_block of {} events){}",
            self.reps,
            self.block,
            if self.quick { " (quick)" } else { "" }
        )?;
        writeln!(
            f,
            "{:<14} {:<9} {:>9} {:>22} {:>10} {:>10} {:>9}",
            "capture", "clock", "timed", "ns/det [min–max]", "M det/s", "floor ns", "×floor"
        )?;
        for c in &self.captures {
            for k in &c.clocks {
                writeln!(
                    f,
                    "{:<14} {:<9} {:>9} {:>8.2} [{:>5.2}–{:>5.2}] {:>10.1} {:>10.3} {:>9.1}",
                    c.capture,
                    k.clock,
                    c.timed_detections,
                    k.pipeline.ns_per_detection,
                    k.pipeline.min_ns,
                    k.pipeline.max_ns,
                    k.pipeline.mdet_per_s,
                    c.floor.ns_per_detection,
                    k.ratio_to_floor
                )?;
            }
        }
        writeln!(
            f,
            "\nStage shares (truncated pipelines; ns per detection, share):"
        )?;
        for c in &self.captures {
            for k in &c.clocks {
                write!(f, "{:<14} {:<9}", c.capture, k.clock)?;
                for s in &k.stages {
                    write!(f, "  {} {:.2} ({:.0} %)", s.stage, s.ns, s.share * 100.0)?;
                }
                writeln!(f)?;
            }
        }
        writeln!(f, "\nCaptures:")?;
        for c in &self.captures {
            writeln!(
                f,
                "{:<14} {} — {:.3e} slots/s, {:.3e} detections/s, {} detections ({} before lock \
                 and alignment), receiver state {} B recovered / {} B reference",
                c.capture,
                c.scenario,
                c.rep_rate_hz,
                c.link_rate_per_s,
                c.detections,
                c.warmup_detections,
                c.clocks.first().map_or(0, |k| k.state_bytes),
                c.clocks.get(1).map_or(0, |k| k.state_bytes),
            )?;
        }
        if let Some(s) = &self.scaling {
            write!(f, "\n{s}")?;
        }
        writeln!(f, "\nwall time {:.1} s", self.wall_s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    #[test]
    fn bench_scenarios_are_valid_and_named_after_what_they_are() {
        for c in CaptureName::ALL {
            let s = c.scenario(false).unwrap();
            s.validate(c.label()).unwrap();
            assert!(c.source().1.contains(&s.name), "{}", s.name);
        }
    }

    #[test]
    fn replayed_answers_wait_for_their_latency() {
        use slotwise::{Announcement, Basis, Transmitter};
        let a = |slot| Answer {
            slot,
            basis: Basis::Z,
            intensity: 0,
            bit: Some(0),
        };
        let log = [a(3), a(5), a(9)];
        let mut tx = ReplayAnswers::new(&log, 1);
        let ann = |slot| Announcement {
            slot,
            basis: Basis::Z,
        };
        tx.announce(ann(3));
        assert_eq!(tx.poll_answer(), None);
        tx.announce(ann(5));
        assert_eq!(tx.poll_answer(), Some(a(3)));
        tx.announce(ann(8));
        assert_eq!(tx.mismatched, 1);
    }
}
