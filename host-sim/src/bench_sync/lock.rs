//! Figures 1 and 2: cold locks over a grid of links — detections needed to lock, the period
//! estimate at lock against the Cramér–Rao bound of the detections its fit used, and the tracking
//! loop's steady-state period error.
//!
//! ## The lock's bound
//! The final fit of an acquisition is a least-squares line through the residuals of the
//! attempt's stored detections (search buffer plus confirmation batch) that lie within ±w of an
//! expected position. With known slot indices k_i and Gaussian timing noise σ the period's
//! Cramér–Rao bound is Var(T̂) = σ²/Σ(k_i − k̄)² (Kay, Fundamentals of Statistical Signal
//! Processing I, 1993, line fitting), reached by least squares. The benchmark records which
//! detections the acquirer stored (a detection is stored unless `dropped_busy` grows; a failed
//! attempt discards its buffer) and evaluates the bound over the *signal* detections among them,
//! with σ² = jitter² + tick²/12 (TDC quantisation, common practice). Noise detections that fall
//! inside ±w enter the fit with a uniform residual (variance w²/3) and no information, so with
//! noise the ratio rms/√CRB exceeds one by about √(1 + n_w·w²/(3·N·σ²)) (derived here).
//!
//! ## The loop's bound
//! The loop's period is the integrator of a type-II PLL; with white phase noise of σ² per
//! detection at R detections/s its fractional variance is σ²·ω_n³/(4ζR)/f² (the integrator's
//! noise bandwidth, as in the recovered-clock tests) (derived here), σ² including the in-window noise
//! term of track.rs. The integrator lags a frequency ramp by 2ζ/ω_n seconds; a least-squares
//! fit over a window τ lags it by τ/2, so the window with the same drift lag is τ = 4ζ/ω_n. The
//! CRB of that window, 12σ_j²/(R·τ³)/f², is the "bound" quoted for the loop; loop theory sits at
//! √(4ζ²/3) = 0.82 of it for ζ = 0.707 (the loop also uses older detections) (derived here).

use super::link::{self, Feed, LinkPoint};
use serde::Serialize;
use slotwise::track::LockState;
use slotwise::SlotClock;
use std::error::Error;

/// Most detections fed to a cold clock before the run counts as not locked.
pub const LOCK_CAP: u64 = 60_000;

/// Steady-state samples of the loop per seed.
const TRACK_SAMPLES: usize = 4;

/// What one cold run measured.
#[derive(Clone, Debug, Default)]
pub struct LockRun {
    /// Locked within [`LOCK_CAP`] detections.
    pub locked: bool,
    /// Detections fed up to and including the one that locked.
    pub total: u64,
    /// Signal detections among them.
    pub signal: u64,
    /// Receiver time from the first detection to the lock, s.
    pub sim_s: f64,
    /// Acquisition attempts started.
    pub attempts: u32,
    /// Detections not stored while a search ran.
    pub dropped_busy: u64,
    /// Fractional period error of the lock, T̂/T − 1.
    pub lock_y: Option<f64>,
    /// CRB of the fractional period error for the lock's detections (variance).
    pub lock_crb: Option<f64>,
    /// Variance of the least-squares fit on the lock's actual fit set, fractional²: signal at
    /// σ², in-window noise uniform (w²/3).
    pub lock_ls_var: Option<f64>,
    /// Signal detections in the lock's fit set.
    pub fit_signal: u64,
    /// All detections the lock's attempt stored.
    pub fit_stored: u64,
    /// Slots spanned by the fit set's signal detections.
    pub fit_span_slots: f64,
    /// Loop steady state: fractional period errors sampled after settling.
    pub track_y: Vec<f64>,
    /// Loop theory variance of the fractional period, per run.
    pub track_theory: Option<f64>,
    /// CRB variance of the equal-lag window, per run.
    pub track_crb: Option<f64>,
    /// Natural frequency ω_n at the measured signal rate, rad/s.
    pub omega_n: Option<f64>,
    /// Lock lost while sampling the steady state.
    pub lost_while_tracking: bool,
}

/// Variance of a least-squares slope for abscissae `k` and noise `sigma2`: σ²/Σ(k − k̄)².
pub fn slope_crb(k: &[u64], sigma2: f64) -> Option<f64> {
    let first = *k.first()?;
    let x: Vec<f64> = k.iter().map(|&v| v.wrapping_sub(first) as f64).collect();
    let mean = x.iter().sum::<f64>() / x.len() as f64;
    let sxx: f64 = x.iter().map(|v| (v - mean).powi(2)).sum();
    (sxx > 0.0).then(|| sigma2 / sxx)
}

/// Variance of a least-squares slope through points (x, variance): Σ(x − x̄)²v/(Σ(x − x̄)²)².
pub fn ls_slope_var(points: &[(f64, f64)]) -> Option<f64> {
    let x0 = points.first()?.0;
    let mean = points.iter().map(|p| p.0 - x0).sum::<f64>() / points.len() as f64;
    let (num, sxx) = points.iter().fold((0.0, 0.0), |(n, s), &(x, v)| {
        let d2 = (x - x0 - mean).powi(2);
        (n + d2 * v, s + d2)
    });
    (sxx > 0.0).then(|| num / (sxx * sxx))
}

/// Drive one cold clock on the link until it locks, then sample the loop in steady state.
pub fn run_one(
    pt: &LinkPoint,
    seed: u64,
    prior_ppm: u32,
    track: bool,
) -> Result<LockRun, Box<dyn Error>> {
    let offset = link::offset_for_seed(seed, prior_ppm);
    let mut s = link::scenario(pt, seed, offset, LOCK_CAP as f64 * 1.5)?;
    // Room for the steady-state samples (25/(ζω_n) ≤ 2 s on this grid).
    s.duration_s = (s.duration_s + 5.0).min(1000.0);
    let gates = link::gate_table(&s)?;
    let mut clk = link::cold_clock(&s, &gates, prior_ppm)?;
    let mut feed = Feed::new(&s, &gates, vec![])?;
    let period = feed.true_period_ps();
    let sigma_ps2 = s.jitter_ps.powi(2) + f64::from(s.tdc_resolution_ps).powi(2) / 12.0;
    let mut out = LockRun::default();
    let w = clk.tracker().config().params().window.to_num::<f64>();
    let mut centres: Vec<Vec<f64>> = vec![Vec::new(); usize::from(crate::sim::channels(&s))];
    for g in crate::sim::gate_specs(&s) {
        if let Some(c) = centres.get_mut(usize::from(g.channel)) {
            c.push(g.centre);
        }
    }
    // The current attempt's stored detections: signal slots, and (position in slots, variance
    // in slots²) of every member of the final fit's window.
    let mut stored_slots: Vec<u64> = Vec::new();
    let mut fit_set: Vec<(f64, f64)> = Vec::new();
    let mut stored = 0u64;
    let mut first_t = None;
    let mut lock_t = 0u64;
    while let Some(d) = feed.next() {
        let before = *clk.acquire_stats();
        clk.observe(d.channel, d.t_ps);
        let after = *clk.acquire_stats();
        out.total += 1;
        out.signal += u64::from(d.slot.is_some());
        let t0 = *first_t.get_or_insert(d.t_ps);
        if after.dropped_busy == before.dropped_busy {
            stored += 1;
            stored_slots.extend(d.slot);
            match d.slot {
                Some(k) => fit_set.push((k as f64, sigma_ps2 / (period * period))),
                None => {
                    let x = feed.phase_slots(d.t_ps);
                    let frac = x - x.floor();
                    let near = centres.get(usize::from(d.channel)).and_then(|c| {
                        c.iter()
                            .map(|a| (frac - a + 0.5).rem_euclid(1.0) - 0.5)
                            .map(f64::abs)
                            .reduce(f64::min)
                    });
                    if near.is_some_and(|r| r <= w) {
                        fit_set.push((x, w * w / 3.0));
                    }
                }
            }
        }
        let failed =
            |a: &slotwise::acquire::AcquireStats| a.search_failed + a.confirm_failed + a.fit_failed;
        if failed(&after) > failed(&before) {
            stored_slots.clear();
            fit_set.clear();
            stored = 0;
        }
        if clk.state() == LockState::Locked {
            out.locked = true;
            out.sim_s = (d.t_ps - t0) as f64 * 1e-12;
            lock_t = d.t_ps;
            break;
        }
        if out.total >= LOCK_CAP {
            break;
        }
    }
    let stats = clk.acquire_stats();
    out.attempts = stats.attempts;
    out.dropped_busy = stats.dropped_busy;
    if !out.locked {
        return Ok(out);
    }
    if let Some(lock) = clk.last_lock() {
        let t_hat = 2f64.powi(64) / lock.nu_q64 as f64;
        out.lock_y = Some(t_hat / period - 1.0);
        out.lock_crb = slope_crb(&stored_slots, sigma_ps2).map(|v| v / period.powi(2));
        out.lock_ls_var = ls_slope_var(&fit_set);
        out.fit_signal = stored_slots.len() as u64;
        out.fit_stored = stored;
        let span = match (stored_slots.iter().min(), stored_slots.iter().max()) {
            (Some(a), Some(b)) => (b - a) as f64,
            _ => 0.0,
        };
        out.fit_span_slots = span;
    }
    if track {
        sample_loop(&mut clk, &mut feed, &mut out, lock_t, period, sigma_ps2);
    }
    Ok(out)
}

/// Feed the locked clock, measure the signal and in-window noise rates, and sample the
/// integrator's period after 10/(ζω_n), then every 5/(ζω_n).
fn sample_loop(
    clk: &mut crate::clocks::HostRecovered,
    feed: &mut Feed,
    out: &mut LockRun,
    lock_t: u64,
    period: f64,
    sigma_ps2: f64,
) {
    let p = *clk.tracker().config().params();
    let zeta = f64::from(p.damping_milli) / 1000.0;
    let b_n = f64::from(p.bandwidth_mhz) / 1000.0;
    let wn_cfg = 2.0 * b_n / (zeta + 1.0 / (4.0 * zeta));
    let r_cfg = p.rate_per_s as f64;
    let w = p.window.to_num::<f64>();
    let settle_ps = |k: f64| (k / (zeta * wn_cfg) * 1e12) as u64;
    let mut next_sample = lock_t + settle_ps(10.0);
    let (mut sig, updates0) = (0u64, clk.tracker().updates());
    let mut last_t = lock_t;
    for d in feed.by_ref() {
        clk.observe(d.channel, d.t_ps);
        if clk.state() != LockState::Locked {
            out.lost_while_tracking = true;
            return;
        }
        sig += u64::from(d.slot.is_some());
        last_t = d.t_ps;
        if d.t_ps >= next_sample {
            let nu = clk.tracker().model().nu_q96 as f64 / 2f64.powi(96);
            out.track_y.push(1.0 / (nu * period) - 1.0);
            next_sample += settle_ps(5.0);
            if out.track_y.len() >= TRACK_SAMPLES {
                break;
            }
        }
    }
    let secs = (last_t.saturating_sub(lock_t)) as f64 * 1e-12;
    if secs <= 0.0 || out.track_y.len() < TRACK_SAMPLES {
        return;
    }
    let updates = clk.tracker().updates() - updates0;
    let r = sig as f64 / secs;
    let n_w = (updates as f64 - sig as f64).max(0.0) / secs;
    let f = 1.0 / (period * 1e-12);
    let sj2 = sigma_ps2 / period.powi(2);
    let s2 = sj2 + n_w / r * w * w / 3.0;
    // The gains were set for r_cfg; at the measured rate ω_n scales with R (track.rs).
    let wn = wn_cfg * r / r_cfg;
    out.omega_n = Some(wn);
    out.track_theory = Some(s2 * wn.powi(3) / (4.0 * zeta * r) / (f * f));
    let tau = 4.0 * zeta / wn;
    out.track_crb = Some(12.0 * sj2 / (r * tau.powi(3)) / (f * f));
}

/// Figure 2 row: detections needed to lock at one grid point.
#[derive(Clone, Debug, Serialize)]
pub struct AcquisitionRow {
    /// The link.
    pub point: LinkPoint,
    /// Seeds run.
    pub seeds: usize,
    /// Seeds that locked within the cap.
    pub locked: usize,
    /// Signal detections to lock: median and max over locked seeds.
    pub signal_median: Option<f64>,
    /// See `signal_median`.
    pub signal_max: Option<f64>,
    /// All detections to lock: median and max.
    pub total_median: Option<f64>,
    /// See `total_median`.
    pub total_max: Option<f64>,
    /// Receiver time to lock, s: median and max.
    pub sim_s_median: Option<f64>,
    /// See `sim_s_median`.
    pub sim_s_max: Option<f64>,
    /// Acquisition attempts per locked seed, mean.
    pub attempts_mean: f64,
    /// Detections fed while a search ran (not stored), median.
    pub dropped_busy_median: Option<f64>,
    /// Locks lost again within 25/(ζω_n) (grid rows with loop sampling; 0 otherwise).
    pub lost_after_lock: usize,
}

/// Figure 1 row: period error at lock and in steady state against their bounds.
#[derive(Clone, Debug, Serialize)]
pub struct PeriodRow {
    /// The link.
    pub point: LinkPoint,
    /// Locks measured.
    pub locks: usize,
    /// Signal detections in the lock's fit set, median.
    pub fit_signal_median: Option<f64>,
    /// Slots spanned by them, median.
    pub fit_span_median: Option<f64>,
    /// √(mean CRB) of the fractional period at lock.
    pub lock_crb_sqrt: Option<f64>,
    /// rms fractional period error at lock.
    pub lock_rms: Option<f64>,
    /// rms over seeds of error/√CRB (each seed against its own bound): the efficiency ratio.
    pub lock_ratio: Option<f64>,
    /// √(mean variance) of a least-squares fit on the same fit set, in-window noise included
    /// (what the hard ±w window alone costs).
    pub lock_ls_sqrt: Option<f64>,
    /// rms over seeds of error/√(that variance): above one, the fit keeps error from the search.
    pub lock_fit_ratio: Option<f64>,
    /// Steady-state samples of the loop.
    pub track_samples: usize,
    /// rms fractional period error of the loop in steady state.
    pub track_rms: Option<f64>,
    /// Loop theory σ_y.
    pub track_theory: Option<f64>,
    /// √CRB of the window with the loop's drift lag, 4ζ/ω_n.
    pub track_crb_sqrt: Option<f64>,
    /// track_rms / √CRB (each sample against its run's bound).
    pub track_ratio: Option<f64>,
    /// track_rms / loop theory.
    pub track_vs_theory: Option<f64>,
    /// Runs that lost the lock while the steady state was sampled.
    pub lost_while_tracking: usize,
}

fn mean(xs: impl Iterator<Item = f64>) -> Option<f64> {
    let (s, n) = xs.fold((0.0, 0usize), |(s, n), x| (s + x, n + 1));
    (n > 0).then(|| s / n as f64)
}

/// Summaries of one grid point's runs.
pub fn summarize(pt: &LinkPoint, runs: &[LockRun]) -> (AcquisitionRow, PeriodRow) {
    let ok: Vec<&LockRun> = runs.iter().filter(|r| r.locked).collect();
    let col = |f: &dyn Fn(&LockRun) -> f64| ok.iter().map(|r| f(r)).collect::<Vec<f64>>();
    let signal = col(&|r| r.signal as f64);
    let total = col(&|r| r.total as f64);
    let secs = col(&|r| r.sim_s);
    let acq = AcquisitionRow {
        point: *pt,
        seeds: runs.len(),
        locked: ok.len(),
        signal_median: link::median(&signal),
        signal_max: link::max(&signal),
        total_median: link::median(&total),
        total_max: link::max(&total),
        sim_s_median: link::median(&secs),
        sim_s_max: link::max(&secs),
        attempts_mean: mean(ok.iter().map(|r| f64::from(r.attempts))).unwrap_or(0.0),
        dropped_busy_median: link::median(&col(&|r| r.dropped_busy as f64)),
        lost_after_lock: ok.iter().filter(|r| r.lost_while_tracking).count(),
    };
    let with_crb: Vec<(f64, f64)> = ok
        .iter()
        .filter_map(|r| Some((r.lock_y?, r.lock_crb?)))
        .collect();
    let lock_y: Vec<f64> = with_crb.iter().map(|p| p.0).collect();
    let norm: Vec<f64> = with_crb.iter().map(|(y, c)| y / c.sqrt()).collect();
    let with_ls: Vec<(f64, f64)> = ok
        .iter()
        .filter_map(|r| Some((r.lock_y?, r.lock_ls_var?)))
        .collect();
    let ls_norm: Vec<f64> = with_ls.iter().map(|(y, v)| y / v.sqrt()).collect();
    let tracked: Vec<&&LockRun> = ok
        .iter()
        .filter(|r| r.track_theory.is_some() && r.track_crb.is_some())
        .collect();
    let track_y: Vec<f64> = tracked.iter().flat_map(|r| r.track_y.clone()).collect();
    let track_norm: Vec<f64> = tracked
        .iter()
        .flat_map(|r| {
            let c = r.track_crb.unwrap_or(f64::NAN).sqrt();
            r.track_y.iter().map(move |y| y / c)
        })
        .collect();
    let track_theory_norm: Vec<f64> = tracked
        .iter()
        .flat_map(|r| {
            let c = r.track_theory.unwrap_or(f64::NAN).sqrt();
            r.track_y.iter().map(move |y| y / c)
        })
        .collect();
    let per = PeriodRow {
        point: *pt,
        locks: with_crb.len(),
        fit_signal_median: link::median(&col(&|r| r.fit_signal as f64)),
        fit_span_median: link::median(&col(&|r| r.fit_span_slots)),
        lock_crb_sqrt: mean(with_crb.iter().map(|p| p.1)).map(f64::sqrt),
        lock_rms: link::rms(&lock_y),
        lock_ratio: link::rms(&norm),
        lock_ls_sqrt: mean(with_ls.iter().map(|p| p.1)).map(f64::sqrt),
        lock_fit_ratio: link::rms(&ls_norm),
        track_samples: track_y.len(),
        track_rms: link::rms(&track_y),
        track_theory: mean(tracked.iter().filter_map(|r| r.track_theory)).map(f64::sqrt),
        track_crb_sqrt: mean(tracked.iter().filter_map(|r| r.track_crb)).map(f64::sqrt),
        track_ratio: link::rms(&track_norm),
        track_vs_theory: link::rms(&track_theory_norm),
        lost_while_tracking: ok.iter().filter(|r| r.lost_while_tracking).count(),
    };
    (acq, per)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn slope_bound_matches_the_uniform_spacing_formula() {
        // N equally spaced abscissae over W: Σ(k − k̄)² = N(N² − 1)/12·(W/N)² ≈ N·W²/12, so
        // Var = 12σ²/(N·W²) (BRIEF §4, derived from Kay 1993).
        let k: Vec<u64> = (0..1000u64).map(|i| 5 + i * 1000).collect();
        let v = slope_crb(&k, 30.0f64.powi(2)).unwrap();
        let n = 1000.0f64;
        let exact = 900.0 * 12.0 / (n * (n * n - 1.0) * 1e6);
        assert!((v / exact - 1.0).abs() < 1e-9);
        // BRIEF §4's example: T = 1 ns, σ = 30 ps, W = 1e6, N = 1e3 → σ_T = 3.29e-18 s.
        let sigma_t_s = (12.0f64 * 900.0 / (1e3 * 1e12)).sqrt() * 1e-12;
        assert!((sigma_t_s / 3.29e-18 - 1.0).abs() < 2e-3);
        assert_eq!(slope_crb(&[7, 7], 1.0), None);
    }
}
