//! Figure 3: false locks on noise-only streams.
//!
//! An attempt is a fresh cold clock fed the dark counts of a link whose signal is removed, until
//! its first search (and, if the search passes, its confirmation) has finished, or until
//! [`ATTEMPT_CAP`] detections. The core's thresholds promise a false lock per attempt below 1e-9
//! (χ² tail of Z²_n with a Bonferroni factor over the trial frequencies, Buccheri et al., A&A
//! 128, 245, 1983); with zero false locks in n attempts the one-sided 95 % upper limit on the rate
//! is −ln(0.05)/n ≈ 3/n (the "rule of three", common practice).
//!
//! Two noise links: the fast one (100 k detections/s, a short span, frequency lattice only) and
//! the enlarged search ([`NoiseLink::chirp`]: 2,100 detections/s over a 0.5 s span with a
//! 5 ppm/s drift allowance, so every search also runs the chirp lattice and its threshold counts
//! frequency × chirp points).

use super::link::{self, Feed};
use serde::Serialize;
use slotwise::track::LockState;
use slotwise::SlotClock;
use std::error::Error;
use std::time::Instant;

/// Most detections of one attempt.
pub const ATTEMPT_CAP: u64 = 8_192;

/// Attempts per work item handed to a thread.
const CHUNK: u64 = 50;

/// A noise-only link: dark counts per detector and the drift allowance it gives the search.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct NoiseLink {
    /// Dark-count rate per detector, Hz.
    pub dark_hz: f64,
    /// Transmitter drift of the scenario, ppm/s (the acquisition's drift allowance).
    pub drift_ppm_per_s: f64,
}

impl NoiseLink {
    /// The fast link: 100 k detections/s, the default bench drift (too short a span for chirps).
    pub const FAST: Self = Self {
        dark_hz: link::NOISE_ONLY_DARK_HZ,
        drift_ppm_per_s: super::BENCH_DRIFT_PPM_PER_S,
    };

    /// The enlarged search: 2,100 detections/s and a 5 ppm/s allowance (chirp lattice on).
    pub fn chirp() -> Self {
        Self {
            dark_hz: 700.0,
            drift_ppm_per_s: 5.0,
        }
    }
}

/// Figure 3: what the noise-only attempts did.
#[derive(Clone, Debug, Serialize)]
pub struct FalseLockReport {
    /// The noise link.
    pub link: NoiseLink,
    /// Attempts run to their end.
    pub attempts: u64,
    /// Attempts that ended locked (false locks).
    pub false_locks: u64,
    /// Attempts whose search passed its threshold (then confirmation decided).
    pub search_passed: u64,
    /// Attempts that hit the detection cap before their first search finished.
    pub capped: u64,
    /// Noise detections per attempt, mean.
    pub detections_per_attempt: f64,
    /// Noise rate of the stream, detections per second.
    pub noise_rate_hz: f64,
    /// Trials per search (frequency × chirp points, the Bonferroni count), mean over attempts.
    pub trials_mean: f64,
    /// Chirp points per search, mean (1: no chirp dimension).
    pub chirp_points_mean: f64,
    /// One-sided 95 % upper limit on the false-lock probability per attempt (when none occurred).
    pub upper_95: Option<f64>,
    /// The core's promise per attempt.
    pub promised: &'static str,
    /// Wall time, s.
    pub wall_s: f64,
}

#[derive(Clone, Copy, Debug, Default)]
struct Tally {
    attempts: u64,
    false_locks: u64,
    search_passed: u64,
    capped: u64,
    detections: u64,
    trials: f64,
    chirp_points: f64,
}

/// Frequency points of a search over `span_ps` with ±`prior_ppm` around 1/`period_ps`, as the
/// acquirer counts them (Z²_2, three doublings): the trial count divided by it is the chirp
/// factor.
fn freq_points(span_ps: f64, period_ps: f64, prior_ppm: u32) -> f64 {
    let step = 1.0 / (2.0 * 2.0 * span_ps);
    let half = f64::from(prior_ppm) * 1e-6 / period_ps;
    ((2.0 * half / step) / 8.0).ceil() * 8.0 + 1.0
}

fn chunk(first: u64, n: u64, prior_ppm: u32, nl: NoiseLink) -> Result<Tally, String> {
    let mut t = Tally::default();
    let duration_s = ATTEMPT_CAP as f64 / (3.0 * nl.dark_hz) * 1.2;
    for seed in first..first + n {
        let s = link::noise_only_with(seed, duration_s, nl.dark_hz, Some(nl.drift_ppm_per_s))
            .map_err(|e| e.to_string())?;
        let gates = link::gate_table(&s).map_err(|e| e.to_string())?;
        let mut clk = link::cold_clock(&s, &gates, prior_ppm).map_err(|e| e.to_string())?;
        let feed = Feed::new(&s, &gates, vec![])
            .map_err(|e| e.to_string())?
            .noise_only();
        let mut used = 0u64;
        let mut first_t = None;
        let mut span_ps = 0.0;
        let mut done = false;
        for d in feed {
            clk.observe(d.channel, d.t_ps);
            used += 1;
            let t0 = *first_t.get_or_insert(d.t_ps);
            let st = *clk.acquire_stats();
            if st.attempts >= 1 && span_ps == 0.0 {
                span_ps = (d.t_ps - t0) as f64;
            }
            if clk.state() == LockState::Locked {
                t.false_locks += 1;
                t.search_passed += 1;
                done = true;
            } else if st.confirm_failed + st.fit_failed > 0 {
                t.search_passed += 1;
                done = true;
            } else if st.search_failed > 0 {
                done = true;
            }
            if done || used >= ATTEMPT_CAP {
                break;
            }
        }
        if !done {
            t.capped += 1;
        }
        t.attempts += 1;
        t.detections += used;
        let trials = clk.acquire_trials() as f64;
        t.trials += trials;
        t.chirp_points += trials / freq_points(span_ps.max(1.0), s.period_ps(), prior_ppm);
    }
    Ok(t)
}

/// Run `attempts` noise-only attempts on `threads` threads on the link `nl`.
pub fn run(
    attempts: u64,
    prior_ppm: u32,
    threads: usize,
    nl: NoiseLink,
) -> Result<FalseLockReport, Box<dyn Error>> {
    let start = Instant::now();
    let chunks: Vec<(u64, u64)> = (0..attempts.div_ceil(CHUNK))
        .map(|c| {
            let first = c * CHUNK;
            (first, CHUNK.min(attempts - first))
        })
        .collect();
    // Seeds of the noise-only attempts start far from the grid's seeds.
    let base = 1 << 40;
    let parts = link::par_map(&chunks, threads, |&(first, n)| {
        chunk(base + first, n, prior_ppm, nl)
    });
    let mut t = Tally::default();
    for p in parts {
        let p = p?;
        t.attempts += p.attempts;
        t.false_locks += p.false_locks;
        t.search_passed += p.search_passed;
        t.capped += p.capped;
        t.detections += p.detections;
        t.trials += p.trials;
        t.chirp_points += p.chirp_points;
    }
    let n = t.attempts.max(1) as f64;
    Ok(FalseLockReport {
        link: nl,
        attempts: t.attempts,
        false_locks: t.false_locks,
        search_passed: t.search_passed,
        capped: t.capped,
        detections_per_attempt: t.detections as f64 / n,
        noise_rate_hz: 3.0 * nl.dark_hz,
        trials_mean: t.trials / n,
        chirp_points_mean: t.chirp_points / n,
        upper_95: (t.false_locks == 0).then(|| -(0.05f64.ln()) / n),
        promised: slotwise::acquire::thresholds::SEARCH_FALSE_LOCK_PER_ATTEMPT,
        wall_s: start.elapsed().as_secs_f64(),
    })
}
