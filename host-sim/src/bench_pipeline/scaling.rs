//! Scaling tables of the pipeline benchmark, all with the scenario's reference clock (so every
//! detection is steady state from the first one) unless said otherwise:
//! - cost per detection against the detection rate, 1e3 … 1e8 per second: the 1 GHz high-rate
//!   link with 1 ns dead time, its added loss chosen from the channel model for each rate (the
//!   measured rate is reported beside the target);
//! - cost per detection against the pending-queue capacity (`Receiver<_, P>`), with answers held
//!   back for P/2 announcements so the queue is actually occupied;
//! - cost per detection and receiver state against the input length, on the default link at
//!   three lengths 10× apart, with both clocks (the recovered one from a cold start, acquisition
//!   included). The state is `size_of` the receiver: the core has no heap, so it cannot grow.

use super::stages::{self, CountSink, Recording, ReplayAnswers};
use super::{simulate, state_bytes, time_reps, warm_up, CaptureName, PipelineArgs, Timing};
use crate::clocks::{ClockMode, HostClock, HostNumbering};
use crate::scenario::Scenario;
use crate::setup::{receiver_setup, ClockArgs};
use crate::sim::{self, SimTransmitter};
use serde::Serialize;
use slotwise::{Receiver, TdcEvent};
use std::error::Error;
use std::fmt;

type AnyErr = Box<dyn Error>;

/// Target detection rates of the rate table, per second.
pub const RATES_PER_S: [f64; 6] = [1e3, 1e4, 1e5, 1e6, 1e7, 1e8];

/// One row of the rate table.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct RateRow {
    /// Target detections per second.
    pub target_per_s: f64,
    /// Simulated detections per second.
    pub measured_per_s: f64,
    /// Detections timed.
    pub detections: usize,
    /// The whole pipeline, reference clock.
    pub pipeline: Timing,
}

/// One row of the pending-capacity table.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct CapacityRow {
    /// Pending-queue capacity (slots).
    pub pending: usize,
    /// Announcements each answer is held back for.
    pub latency: usize,
    /// `size_of` the receiver, bytes.
    pub state_bytes: usize,
    /// The whole pipeline, reference clock.
    pub pipeline: Timing,
    /// Replayed answers that did not match their announcement (0 expected).
    pub answer_mismatches: u64,
}

/// One row of the input-length table.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct LengthRow {
    /// Link time simulated, s.
    pub duration_s: f64,
    /// Detections pushed.
    pub detections: usize,
    /// Recovered clock from a cold start (acquisition included).
    pub recovered: Timing,
    /// Reference clock.
    pub reference: Timing,
    /// Receiver state with the recovered clock, bytes.
    pub recovered_state_bytes: usize,
    /// Receiver state with the reference clock, bytes.
    pub reference_state_bytes: usize,
}

/// The scaling tables.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct ScalingReport {
    /// Cost against detection rate.
    pub rate: Vec<RateRow>,
    /// Cost against pending-queue capacity (default link).
    pub pending: Vec<CapacityRow>,
    /// Cost and memory against input length (default link).
    pub length: Vec<LengthRow>,
}

fn expected_rate(s: &Scenario) -> f64 {
    sim::signal_rate_per_s(s) + s.dark_count_hz * f64::from(sim::channels(s))
}

/// The high-rate link with its added loss set for `rate` detections per second.
fn rate_scenario(rate: f64, detections: usize) -> Result<Scenario, AnyErr> {
    let mut s = CaptureName::Highrate.scenario(false)?;
    s.dead_time_ns = 1.0;
    let (mut lo, mut hi) = (0.0, 100.0);
    for _ in 0..60 {
        s.extra_loss_db = 0.5 * (lo + hi);
        if expected_rate(&s) > rate {
            lo = s.extra_loss_db;
        } else {
            hi = s.extra_loss_db;
        }
    }
    s.duration_s = (detections as f64 / rate).min(1000.0);
    s.validate("bench rate scenario")?;
    Ok(s)
}

fn reference_timing(
    s: &Scenario,
    events: &[TdcEvent],
    reps: usize,
    block: usize,
    mode: ClockMode,
) -> Result<Timing, AnyErr> {
    let (warm, _) = warm_up(s, mode, events, Some(0), block)?;
    let state = (warm.rx.clone(), ReplayAnswers::new(&warm.answers, 0));
    Ok(time_reps(reps, events.len(), &state, |(rx, tx)| {
        stages::measured_pipeline(rx, tx, &mut CountSink::default(), events, block)
    }))
}

fn capacity_row<const P: usize>(
    s: &Scenario,
    events: &[TdcEvent],
    reps: usize,
    block: usize,
) -> Result<CapacityRow, AnyErr> {
    let (cfg, stages) = receiver_setup(
        s,
        &ClockArgs {
            clock: ClockMode::Reference,
            prior_ppm: Some(500),
        },
    )?;
    let rx = stages.receiver::<P>(cfg);
    let mut rec = Recording {
        inner: SimTransmitter::new(s),
        log: Vec::new(),
    };
    let mut rec_rx = rx.clone();
    for b in events.chunks(block.max(1)) {
        rec_rx.push_block(b, &mut rec, &mut CountSink::default());
    }
    let latency = P / 2;
    let state = (rx, ReplayAnswers::new(&rec.log, latency));
    let mut mismatches = 0;
    let pipeline = time_reps(reps, events.len(), &state, |(rx, tx)| {
        let r = stages::measured_pipeline(rx, tx, &mut CountSink::default(), events, block);
        mismatches = tx.mismatched;
        r
    });
    Ok(CapacityRow {
        pending: P,
        latency,
        state_bytes: std::mem::size_of::<Receiver<HostClock, P, HostNumbering>>(),
        pipeline,
        answer_mismatches: mismatches,
    })
}

/// Run the three tables.
pub fn run(args: &PipelineArgs, reps: usize) -> Result<ScalingReport, AnyErr> {
    let n = if args.quick { 50_000 } else { 200_000 };
    let block = args.block;
    let mut rate = Vec::new();
    for r in RATES_PER_S {
        let s = rate_scenario(r, n)?;
        let events = simulate(&s);
        rate.push(RateRow {
            target_per_s: r,
            measured_per_s: events.len() as f64 / s.duration_s,
            detections: events.len(),
            pipeline: reference_timing(&s, &events, reps, block, ClockMode::Reference)?,
        });
    }
    let mut s = CaptureName::Default.scenario(args.quick)?;
    s.duration_s = if args.quick { 0.05 } else { 0.2 };
    let events = simulate(&s);
    let pending = vec![
        capacity_row::<16>(&s, &events, reps, block)?,
        capacity_row::<256>(&s, &events, reps, block)?,
        capacity_row::<4096>(&s, &events, reps, block)?,
        capacity_row::<32768>(&s, &events, reps, block)?,
    ];
    let base = if args.quick { 0.005 } else { 0.01 };
    let mut length = Vec::new();
    for k in [1.0, 10.0, 100.0] {
        let mut s = CaptureName::Default.scenario(args.quick)?;
        s.duration_s = base * k;
        let events = simulate(&s);
        length.push(LengthRow {
            duration_s: s.duration_s,
            detections: events.len(),
            recovered: reference_timing(&s, &events, reps, block, ClockMode::Recovered)?,
            reference: reference_timing(&s, &events, reps, block, ClockMode::Reference)?,
            recovered_state_bytes: state_bytes(ClockMode::Recovered),
            reference_state_bytes: state_bytes(ClockMode::Reference),
        });
    }
    Ok(ScalingReport {
        rate,
        pending,
        length,
    })
}

impl fmt::Display for ScalingReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "Cost against detection rate (1 GHz link, 1 ns dead time, reference clock):"
        )?;
        writeln!(
            f,
            "{:>10} {:>12} {:>10} {:>22} {:>9}",
            "target/s", "measured/s", "detections", "ns/det [min–max]", "M det/s"
        )?;
        for r in &self.rate {
            writeln!(
                f,
                "{:>10.0e} {:>12.3e} {:>10} {:>8.2} [{:>5.2}–{:>5.2}] {:>9.1}",
                r.target_per_s,
                r.measured_per_s,
                r.detections,
                r.pipeline.ns_per_detection,
                r.pipeline.min_ns,
                r.pipeline.max_ns,
                r.pipeline.mdet_per_s
            )?;
        }
        writeln!(
            f,
            "\nCost against pending-queue capacity (default link, reference clock, answers held \
             back for capacity/2 announcements):"
        )?;
        writeln!(
            f,
            "{:>8} {:>8} {:>12} {:>22} {:>11}",
            "pending", "latency", "state bytes", "ns/det [min–max]", "mismatches"
        )?;
        for r in &self.pending {
            writeln!(
                f,
                "{:>8} {:>8} {:>12} {:>8.2} [{:>5.2}–{:>5.2}] {:>11}",
                r.pending,
                r.latency,
                r.state_bytes,
                r.pipeline.ns_per_detection,
                r.pipeline.min_ns,
                r.pipeline.max_ns,
                r.answer_mismatches
            )?;
        }
        writeln!(
            f,
            "\nCost and memory against input length (default link; recovered clock from a cold \
             start, acquisition included):"
        )?;
        writeln!(
            f,
            "{:>10} {:>10} {:>14} {:>14} {:>16} {:>16}",
            "link s",
            "detections",
            "recovered ns",
            "reference ns",
            "recovered bytes",
            "reference bytes"
        )?;
        for r in &self.length {
            writeln!(
                f,
                "{:>10.3} {:>10} {:>14.2} {:>14.2} {:>16} {:>16}",
                r.duration_s,
                r.detections,
                r.recovered.ns_per_detection,
                r.reference.ns_per_detection,
                r.recovered_state_bytes,
                r.reference_state_bytes
            )?;
        }
        Ok(())
    }
}
