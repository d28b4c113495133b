//! Figure 6: detections to a cold lock against detections per slot and transmitter drift.
//!
//! A 1 GHz variant of the bench link (three-state time-bin, 30 ps jitter, half the detections
//! dark counts, prior ±500 ppm, offset drawn per seed) at per-slot detection probabilities
//! 1e-2 … 1e-7 (with 3e-7) and drifts 0, 0.02 and 0.1 ppm/s; the profile's drift is the
//! acquisition's drift allowance ([`crate::clocks::recovered_params_for`]). Each run feeds a
//! cold clock at the host's `work_per_call` (4096 units per detection, no idle work) until it
//! locks or [`CURVE_CAP`] detections have passed, and checks the lock's period against the
//! simulator's period at that time.

use super::link::{self, Feed, LinkPoint};
use crate::scenario::Scenario;
use serde::Serialize;
use slotwise::track::LockState;
use slotwise::SlotClock;
use std::error::Error;

/// Detections per slot of the full curve.
pub const RATES: [f64; 7] = [1e-2, 1e-3, 1e-4, 1e-5, 1e-6, 3e-7, 1e-7];
/// Detections per slot with `--quick`.
pub const RATES_QUICK: [f64; 4] = [1e-2, 1e-4, 1e-6, 1e-7];
/// Transmitter drifts, ppm/s.
pub const DRIFTS: [f64; 3] = [0.0, 0.02, 0.1];
/// Repetition rate of the curve's link, Hz.
pub const REP_RATE_HZ: f64 = 1e9;
/// Noise fraction of the curve's link.
pub const NOISE_FRACTION: f64 = 0.5;
/// Prior of the curve, ppm.
pub const PRIOR_PPM: u32 = 500;
/// Most detections fed to one cold clock (500 s at 1e-7 per slot and 50 % noise).
pub const CURVE_CAP: u64 = 100_000;

/// One point of the curve.
#[derive(Clone, Debug, Serialize)]
pub struct CurveRow {
    /// Per-slot probability, noise fraction and drift.
    pub point: LinkPoint,
    /// Seeds run.
    pub seeds: usize,
    /// Seeds that locked within the cap.
    pub locked: usize,
    /// All detections to lock: median and max over locked seeds.
    pub total_median: Option<f64>,
    /// See `total_median`.
    pub total_max: Option<f64>,
    /// Receiver seconds to lock, median and max.
    pub secs_median: Option<f64>,
    /// See `secs_median`.
    pub secs_max: Option<f64>,
    /// Acquisition attempts per seed, mean (locked or not).
    pub attempts_mean: f64,
    /// Trials of the last search (frequency × chirp points), median.
    pub trials_median: Option<f64>,
    /// Largest |T̂/T − 1| at lock (period against the simulator's at the lock time).
    pub period_err_max: Option<f64>,
}

/// The curve's link at `pt` for seed `seed`.
pub fn scenario(pt: &LinkPoint, seed: u64) -> Result<Scenario, Box<dyn Error>> {
    let mut base = Scenario::default_bench();
    base.rep_rate_hz = REP_RATE_HZ;
    base.jitter_ps = 30.0;
    let offset = link::offset_for_seed(seed, PRIOR_PPM);
    link::scenario_from(base, pt, seed, offset, CURVE_CAP as f64 * 1.2)
}

#[derive(Clone, Copy, Debug, Default)]
struct Run {
    locked: bool,
    total: u64,
    secs: f64,
    attempts: u32,
    trials: u64,
    period_err: f64,
}

fn run_one(pt: &LinkPoint, seed: u64) -> Result<Run, Box<dyn Error>> {
    let s = scenario(pt, seed)?;
    let gates = link::gate_table(&s)?;
    let mut clk = link::cold_clock(&s, &gates, PRIOR_PPM)?;
    let mut feed = Feed::new(&s, &gates, vec![])?;
    let mut out = Run::default();
    let mut first_t = None;
    while let Some(d) = feed.next() {
        clk.observe(d.channel, d.t_ps);
        out.total += 1;
        let t0 = *first_t.get_or_insert(d.t_ps);
        if clk.state() == LockState::Locked {
            out.locked = true;
            out.secs = (d.t_ps - t0) as f64 * 1e-12;
            if let Some(lock) = clk.last_lock() {
                let t_hat = 2f64.powi(64) / lock.nu_q64 as f64;
                out.period_err = (t_hat / feed.period_at_ps(lock.anchor_t_ps) - 1.0).abs();
            }
            break;
        }
        if out.total >= CURVE_CAP {
            break;
        }
    }
    out.attempts = clk.acquire_stats().attempts;
    out.trials = clk.acquire_trials();
    Ok(out)
}

/// Run the curve over `rates` × [`DRIFTS`] with `seeds` seeds each on `threads` threads.
pub fn run(rates: &[f64], seeds: u64, threads: usize) -> Result<Vec<CurveRow>, Box<dyn Error>> {
    let points: Vec<LinkPoint> = rates
        .iter()
        .flat_map(|&p_slot| {
            DRIFTS.iter().map(move |&d| LinkPoint {
                p_slot,
                noise_fraction: NOISE_FRACTION,
                drift_ppm_per_s: d,
            })
        })
        .collect();
    // Slowest (lowest rate) cells first, so the threads finish together.
    let mut jobs: Vec<(usize, u64)> = (0..points.len())
        .flat_map(|c| (0..seeds).map(move |s| (c, 5_000 + s)))
        .collect();
    jobs.sort_by(|a, b| {
        let pa = points.get(a.0).map_or(1.0, |p| p.p_slot);
        let pb = points.get(b.0).map_or(1.0, |p| p.p_slot);
        pa.total_cmp(&pb)
    });
    let runs = link::par_map(&jobs, threads, |&(c, seed)| {
        let pt = points.get(c).ok_or("no such cell")?;
        run_one(pt, seed).map(|r| (c, r)).map_err(|e| e.to_string())
    });
    let mut by_cell: Vec<Vec<Run>> = vec![Vec::new(); points.len()];
    for r in runs {
        let (c, run) = r?;
        if let Some(v) = by_cell.get_mut(c) {
            v.push(run);
        }
    }
    Ok(points
        .iter()
        .zip(&by_cell)
        .map(|(pt, runs)| {
            let ok: Vec<&Run> = runs.iter().filter(|r| r.locked).collect();
            let total: Vec<f64> = ok.iter().map(|r| r.total as f64).collect();
            let secs: Vec<f64> = ok.iter().map(|r| r.secs).collect();
            let trials: Vec<f64> = runs.iter().map(|r| r.trials as f64).collect();
            let errs: Vec<f64> = ok.iter().map(|r| r.period_err).collect();
            CurveRow {
                point: *pt,
                seeds: runs.len(),
                locked: ok.len(),
                total_median: link::median(&total),
                total_max: link::max(&total),
                secs_median: link::median(&secs),
                secs_max: link::max(&secs),
                attempts_mean: runs.iter().map(|r| f64::from(r.attempts)).sum::<f64>()
                    / runs.len().max(1) as f64,
                trials_median: link::median(&trials),
                period_err_max: link::max(&errs),
            }
        })
        .collect())
}
