//! Figure 5: core work per detection, acquiring and locked, measured on the host.
//!
//! One buffer of delay-corrected detections per link is recorded first; every repetition then
//! clones the same clock state (cold, or locked right after acquisition) and feeds it the same
//! buffer, timed with the monotonic clock around the whole loop. The figure is the median over
//! the repetitions. A separate pass per repetition times every call on its own (timer overhead,
//! tens of ns, included): the 99.9th percentile and the slowest call, each as the median over
//! repetitions. While acquiring, the slowest calls are those that spend the whole search budget
//! (`work_per_call` units); while locked, the slowest call is usually an OS preemption, so the
//! percentile is the figure to read.
//! `scripts/bench-sync-callgrind.sh` counts instructions of the same two loops under callgrind.

use super::link::{self, Det, Feed, LinkPoint};
use crate::clocks::HostRecovered;
use serde::Serialize;
use slotwise::track::LockState;
use slotwise::{Located, SlotClock};
use std::error::Error;
use std::hint::black_box;
use std::time::Instant;

/// Figure 5 row: one link's cost figures.
#[derive(Clone, Debug, Serialize)]
pub struct CostRow {
    /// The link.
    pub point: LinkPoint,
    /// Repetitions timed.
    pub reps: usize,
    /// Detections from cold start to lock.
    pub acquire_detections: usize,
    /// Acquiring: wall time per detection, ns (median over repetitions).
    pub acquire_ns_per_detection: f64,
    /// Acquiring: whole acquisition, µs (median).
    pub acquire_total_us: f64,
    /// Acquiring: 99.9th percentile of single calls, µs (median over repetitions).
    pub acquire_p999_call_us: f64,
    /// Acquiring: slowest single call, µs (median over repetitions).
    pub acquire_slowest_call_us: f64,
    /// Detections fed while locked.
    pub locked_detections: usize,
    /// Locked: wall time per detection, ns (median).
    pub locked_ns_per_detection: f64,
    /// Locked: 99.9th percentile of single calls, µs (median over repetitions).
    pub locked_p999_call_us: f64,
    /// Locked: slowest single call, µs (median over repetitions).
    pub locked_slowest_call_us: f64,
}

/// Feed `buf` to a cold clock until it locks; returns how many detections it took.
#[inline(never)]
pub fn feed_until_locked(clk: &mut HostRecovered, buf: &[Det]) -> usize {
    for (i, d) in buf.iter().enumerate() {
        black_box(clk.observe(d.channel, d.t_ps));
        if clk.state() == LockState::Locked {
            return i + 1;
        }
    }
    buf.len()
}

/// Feed all of `buf` to a locked clock; returns the sum of located slots (kept alive).
#[inline(never)]
pub fn feed_locked(clk: &mut HostRecovered, buf: &[Det]) -> u64 {
    let mut sum = 0u64;
    for d in buf {
        if let Located::At(p) = clk.observe(d.channel, d.t_ps) {
            sum = sum.wrapping_add(p.slot);
        }
    }
    black_box(sum)
}

/// 99.9th percentile and maximum of single-call times over `buf`, µs.
fn call_times(clk: &mut HostRecovered, buf: &[Det]) -> (f64, f64) {
    let mut us: Vec<f64> = buf
        .iter()
        .map(|d| {
            let t = Instant::now();
            black_box(clk.observe(d.channel, d.t_ps));
            t.elapsed().as_secs_f64() * 1e6
        })
        .collect();
    us.sort_by(f64::total_cmp);
    let at = |q: f64| {
        let i = ((us.len() as f64 - 1.0) * q).round() as usize;
        us.get(i).copied().unwrap_or(f64::NAN)
    };
    (at(0.999), at(1.0))
}

fn med(xs: &[(f64, f64)], f: impl Fn(&(f64, f64)) -> f64) -> f64 {
    link::median(&xs.iter().map(f).collect::<Vec<_>>()).unwrap_or(f64::NAN)
}

/// Record the buffers of one link and time them `reps` times.
pub fn run(
    pt: &LinkPoint,
    seed: u64,
    prior_ppm: u32,
    locked_len: usize,
    reps: usize,
) -> Result<CostRow, Box<dyn Error>> {
    let offset = link::offset_for_seed(seed, prior_ppm);
    let s = link::scenario(pt, seed, offset, 200_000.0 + locked_len as f64)?;
    let gates = link::gate_table(&s)?;
    let cold = link::cold_clock(&s, &gates, prior_ppm)?;
    let mut feed = Feed::new(&s, &gates, vec![])?;
    let mut probe = cold.clone();
    let mut acquire: Vec<Det> = Vec::new();
    for d in feed.by_ref() {
        probe.observe(d.channel, d.t_ps);
        acquire.push(d);
        if probe.state() == LockState::Locked {
            break;
        }
    }
    if probe.state() != LockState::Locked {
        return Err(format!("{}: no lock within the recorded stream", s.name).into());
    }
    let locked: Vec<Det> = feed.by_ref().take(locked_len).collect();
    let mut acq_ns = Vec::new();
    let mut lock_ns = Vec::new();
    let (mut acq_calls, mut lock_calls) = (Vec::new(), Vec::new());
    for _ in 0..reps.max(1) {
        acq_calls.push(call_times(&mut cold.clone(), &acquire));
        lock_calls.push(call_times(&mut probe.clone(), &locked));
        let mut c = cold.clone();
        let t = Instant::now();
        let n = feed_until_locked(&mut c, &acquire);
        acq_ns.push(t.elapsed().as_secs_f64() * 1e9 / n.max(1) as f64);
        let mut c = probe.clone();
        let t = Instant::now();
        feed_locked(&mut c, &locked);
        lock_ns.push(t.elapsed().as_secs_f64() * 1e9 / locked.len().max(1) as f64);
        if c.state() != LockState::Locked {
            return Err(format!("{}: lock lost in the timed buffer", s.name).into());
        }
    }
    let acq_med = link::median(&acq_ns).unwrap_or(f64::NAN);
    Ok(CostRow {
        point: *pt,
        reps: reps.max(1),
        acquire_detections: acquire.len(),
        acquire_ns_per_detection: acq_med,
        acquire_total_us: acq_med * acquire.len() as f64 * 1e-3,
        acquire_p999_call_us: med(&acq_calls, |c| c.0),
        acquire_slowest_call_us: med(&acq_calls, |c| c.1),
        locked_detections: locked.len(),
        locked_ns_per_detection: link::median(&lock_ns).unwrap_or(f64::NAN),
        locked_p999_call_us: med(&lock_calls, |c| c.0),
        locked_slowest_call_us: med(&lock_calls, |c| c.1),
    })
}
