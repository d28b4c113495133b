//! `slotwise bench sync`: the clock-recovery benchmark.
//!
//! Drives the core's [`slotwise::RecoveredClock`] (configured by [`crate::clocks::build`], as the
//! host does) directly with `locate_on(channel, t_ps)` on delay-corrected times from the link
//! simulator ([`crate::sim::Simulator`]), over variants of the default bench link (BRIEF §6) with
//! a chosen per-slot detection probability and noise fraction ([`link`]). It reports:
//! 1. the period estimate at lock against the Cramér–Rao bound of the detections its fit used,
//!    and the tracking loop's steady state against loop theory and an equal-lag window's bound
//!    ([`lock`]);
//! 2. detections (signal and total) and receiver time to a cold lock over a grid of detection
//!    probabilities and noise fractions, prior ±`prior_ppm` ([`lock`]);
//! 3. false locks on noise-only streams ([`false_lock`]);
//! 4. relocking after a 1 s blackout, a 0.37-slot phase jump and a 5 ms blackout, with the slot
//!    numbering checked against the truth ([`relock`]);
//! 5. host time per detection while acquiring and while locked ([`cost`]);
//! 6. detections to a cold lock on a 1 GHz link against detections per slot (1e-2 … 1e-7) and
//!    transmitter drift (0, 0.02, 0.1 ppm/s), prior ±500 ppm ([`curve`]).
//!
//! Every figure is over `seeds` seeds (the transmitter offset is drawn per seed, uniform within
//! the prior less 10 ppm); the runs are spread over std threads. Speed figures come from this
//! benchmark only, never from tests.

pub mod cost;
pub mod curve;
pub mod false_lock;
pub mod link;
pub mod lock;
pub mod relock;

use cost::CostRow;
use curve::CurveRow;
use false_lock::{FalseLockReport, NoiseLink};
use link::LinkPoint;
use lock::{AcquisitionRow, PeriodRow};
use relock::{RelockEvent, RelockRow};
use serde::Serialize;
use std::error::Error;
use std::fmt;
use std::time::Instant;

/// Per-slot detection probabilities of the grid.
pub const P_SLOT: [f64; 5] = [1e-2, 1e-3, 1e-4, 1e-5, 1e-6];
/// Noise fractions of the grid (of all detections).
pub const NOISE: [f64; 3] = [0.0, 0.25, 0.5];
/// Per-slot detection probabilities of the cost links.
pub const COST_P_SLOT: [f64; 2] = [1e-3, 1e-5];
/// Transmitter drift of the drift rows and the relock link, ppm/s (the bench link's, BRIEF §6).
pub const BENCH_DRIFT_PPM_PER_S: f64 = 0.02;

/// Which parts of the benchmark to run.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, Serialize)]
pub enum Figure {
    /// Figures 1 and 2: cold locks over the grid, period error against its bounds.
    Lock,
    /// Figure 3: false locks on noise-only streams.
    FalseLock,
    /// Figure 4: relock after a blackout and a phase jump.
    Relock,
    /// Figure 5: time per detection.
    Cost,
    /// Figure 6: detections to lock against detections per slot and drift at 1 GHz.
    Curve,
}

/// Options of `slotwise bench sync`.
#[derive(clap::Args, Debug, Clone)]
pub struct BenchSyncArgs {
    /// Seeds per figure cell [default: 100; 10 with --quick].
    #[arg(long)]
    pub seeds: Option<u64>,
    /// Noise-only acquisition attempts for the false-lock count [default: 10000; 2000 with
    /// --quick].
    #[arg(long)]
    pub false_lock_attempts: Option<u64>,
    /// Noise-only attempts at the enlarged (frequency × chirp) search [default: 10000; 200
    /// with --quick].
    #[arg(long)]
    pub chirp_false_lock_attempts: Option<u64>,
    /// Seeds per cell of the detections-to-lock curve [default: 10; 2 with --quick].
    #[arg(long)]
    pub curve_seeds: Option<u64>,
    /// Timed repetitions of each cost buffer (the median is reported) [default: 7; 5 with
    /// --quick].
    #[arg(long)]
    pub reps: Option<usize>,
    /// Prior on the transmitter's period: nominal ± this many ppm (1..=1000).
    #[arg(long, default_value_t = 200)]
    pub prior_ppm: u32,
    /// Worker threads [default: available cores, at most 2].
    #[arg(long)]
    pub threads: Option<usize>,
    /// Per-slot detection probabilities of the cost links (25 % noise, comma-separated)
    /// [default: 1e-3,1e-5]
    #[arg(long, value_delimiter = ',')]
    pub cost_p_slot: Vec<f64>,
    /// Run only these parts (comma-separated); all when omitted.
    #[arg(long, value_enum, value_delimiter = ',')]
    pub only: Vec<Figure>,
    /// Fewer seeds, attempts and curve points: a smoke run of about a minute (release build).
    #[arg(long)]
    pub quick: bool,
    /// Print the report as JSON instead of tables.
    #[arg(long)]
    pub json: bool,
}

impl Default for BenchSyncArgs {
    /// The command line's defaults (the full run).
    fn default() -> Self {
        Self {
            seeds: None,
            false_lock_attempts: None,
            chirp_false_lock_attempts: None,
            curve_seeds: None,
            reps: None,
            prior_ppm: 200,
            threads: None,
            cost_p_slot: Vec::new(),
            only: Vec::new(),
            quick: false,
            json: false,
        }
    }
}

/// The settings a report was made with.
#[derive(Clone, Debug, Serialize)]
pub struct Settings {
    /// Scenario the links are derived from.
    pub base_scenario: &'static str,
    /// Seeds per cell.
    pub seeds: u64,
    /// Noise-only attempts.
    pub false_lock_attempts: u64,
    /// Noise-only attempts at the enlarged search.
    pub chirp_false_lock_attempts: u64,
    /// Seeds per curve cell.
    pub curve_seeds: u64,
    /// Timed repetitions.
    pub reps: usize,
    /// Prior half-width, ppm.
    pub prior_ppm: u32,
    /// Threads used.
    pub threads: usize,
    /// Quick mode.
    pub quick: bool,
}

/// Everything `slotwise bench sync` measured.
#[derive(Clone, Debug, Serialize)]
pub struct BenchSyncReport {
    /// How it was run.
    pub settings: Settings,
    /// Figure 1: period error at lock and in steady state against the bounds.
    pub period: Vec<PeriodRow>,
    /// Figure 2: detections to lock over the grid (no drift).
    pub acquisition: Vec<AcquisitionRow>,
    /// Figure 2, continued: the same with the bench link's drift.
    pub acquisition_with_drift: Vec<AcquisitionRow>,
    /// Figure 3: false locks on noise-only streams.
    pub false_lock: Option<FalseLockReport>,
    /// Figure 3, continued: false locks at the enlarged (frequency × chirp) search.
    pub false_lock_chirp: Option<FalseLockReport>,
    /// Figure 4: relocks.
    pub relock: Vec<RelockRow>,
    /// Figure 5: cost per detection.
    pub cost: Vec<CostRow>,
    /// Figure 6: detections to lock against detections per slot and drift (1 GHz).
    pub curve: Vec<CurveRow>,
    /// Wall time of the whole benchmark, s.
    pub wall_s: f64,
}

fn progress(what: &str, since: Instant) {
    eprintln!(
        "bench sync: {what} done ({:.1} s)",
        since.elapsed().as_secs_f64()
    );
}

/// Run the benchmark.
pub fn run(args: &BenchSyncArgs) -> Result<BenchSyncReport, Box<dyn Error>> {
    let start = Instant::now();
    if args.prior_ppm == 0 || args.prior_ppm > 1000 {
        return Err(format!("--prior-ppm {} outside 1..=1000", args.prior_ppm).into());
    }
    let settings = Settings {
        base_scenario: crate::scenario::DEFAULT_BENCH_PATH,
        seeds: args
            .seeds
            .unwrap_or(if args.quick { 10 } else { 100 })
            .max(1),
        false_lock_attempts: args.false_lock_attempts.unwrap_or(if args.quick {
            2_000
        } else {
            10_000
        }),
        chirp_false_lock_attempts: args.chirp_false_lock_attempts.unwrap_or(if args.quick {
            200
        } else {
            10_000
        }),
        curve_seeds: args
            .curve_seeds
            .unwrap_or(if args.quick { 2 } else { 10 })
            .max(1),
        reps: args.reps.unwrap_or(if args.quick { 5 } else { 7 }).max(1),
        prior_ppm: args.prior_ppm,
        threads: args
            .threads
            .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get().min(2))),
        quick: args.quick,
    };
    let wants = |f: Figure| args.only.is_empty() || args.only.contains(&f);
    let mut report = BenchSyncReport {
        settings,
        period: vec![],
        acquisition: vec![],
        acquisition_with_drift: vec![],
        false_lock: None,
        false_lock_chirp: None,
        relock: vec![],
        cost: vec![],
        curve: vec![],
        wall_s: 0.0,
    };
    let st = report.settings.clone();
    if wants(Figure::Lock) {
        run_grid(&st, &mut report)?;
        progress("figures 1-2 (cold locks)", start);
    }
    if wants(Figure::FalseLock) {
        report.false_lock = Some(false_lock::run(
            st.false_lock_attempts,
            st.prior_ppm,
            st.threads,
            NoiseLink::FAST,
        )?);
        if st.chirp_false_lock_attempts > 0 {
            report.false_lock_chirp = Some(false_lock::run(
                st.chirp_false_lock_attempts,
                st.prior_ppm,
                st.threads,
                NoiseLink::chirp(),
            )?);
        }
        progress("figure 3 (false locks)", start);
    }
    if wants(Figure::Relock) {
        let pt = LinkPoint {
            p_slot: 1e-3,
            noise_fraction: 0.25,
            drift_ppm_per_s: BENCH_DRIFT_PPM_PER_S,
        };
        for ev in [
            RelockEvent::Blackout {
                length_ps: 1_000_000_000_000,
            },
            RelockEvent::PhaseJump { slots: 0.37 },
            RelockEvent::Blackout {
                length_ps: 5_000_000_000,
            },
        ] {
            report
                .relock
                .push(relock::run(&pt, ev, st.seeds, st.prior_ppm, st.threads)?);
        }
        progress("figure 4 (relock)", start);
    }
    if wants(Figure::Cost) {
        let locked_len = if st.quick { 50_000 } else { 200_000 };
        let links = if args.cost_p_slot.is_empty() {
            COST_P_SLOT.to_vec()
        } else {
            args.cost_p_slot.clone()
        };
        for p_slot in links {
            if !(p_slot > 0.0 && p_slot <= 0.1) {
                return Err(format!("--cost-p-slot {p_slot} outside (0, 0.1]").into());
            }
            let pt = LinkPoint {
                p_slot,
                noise_fraction: 0.25,
                drift_ppm_per_s: 0.0,
            };
            report
                .cost
                .push(cost::run(&pt, 11, st.prior_ppm, locked_len, st.reps)?);
        }
        progress("figure 5 (cost)", start);
    }
    if wants(Figure::Curve) {
        let rates: &[f64] = if st.quick {
            &curve::RATES_QUICK
        } else {
            &curve::RATES
        };
        report.curve = curve::run(rates, st.curve_seeds, st.threads)?;
        progress("figure 6 (detections-to-lock curve)", start);
    }
    report.wall_s = start.elapsed().as_secs_f64();
    Ok(report)
}

fn run_grid(st: &Settings, report: &mut BenchSyncReport) -> Result<(), Box<dyn Error>> {
    let mut cells: Vec<(LinkPoint, bool)> = Vec::new();
    for &p_slot in &P_SLOT {
        for &noise_fraction in &NOISE {
            let pt = LinkPoint {
                p_slot,
                noise_fraction,
                drift_ppm_per_s: 0.0,
            };
            cells.push((pt, true));
        }
    }
    for p_slot in [1e-4, 1e-5, 1e-6] {
        let pt = LinkPoint {
            p_slot,
            noise_fraction: 0.25,
            drift_ppm_per_s: BENCH_DRIFT_PPM_PER_S,
        };
        cells.push((pt, false));
    }
    // Slowest cells first, so the threads finish together.
    let mut jobs: Vec<(usize, u64)> = (0..cells.len())
        .flat_map(|c| (0..st.seeds).map(move |s| (c, 1_000 + s)))
        .collect();
    jobs.sort_by(|a, b| {
        let pa = cells.get(a.0).map_or(1.0, |c| c.0.p_slot);
        let pb = cells.get(b.0).map_or(1.0, |c| c.0.p_slot);
        pa.total_cmp(&pb)
    });
    let runs = link::par_map(&jobs, st.threads, |&(c, seed)| {
        let Some(&(pt, track)) = cells.get(c) else {
            return Err("no such cell".to_string());
        };
        lock::run_one(&pt, seed, st.prior_ppm, track)
            .map(|r| (c, r))
            .map_err(|e| e.to_string())
    });
    let mut by_cell: Vec<Vec<lock::LockRun>> = vec![Vec::new(); cells.len()];
    for r in runs {
        let (c, run) = r?;
        if let Some(v) = by_cell.get_mut(c) {
            v.push(run);
        }
    }
    for ((pt, track), runs) in cells.iter().zip(&by_cell) {
        let (acq, per) = lock::summarize(pt, runs);
        if *track {
            report.acquisition.push(acq);
            report.period.push(per);
        } else {
            report.acquisition_with_drift.push(acq);
        }
    }
    Ok(())
}

/// `x` in scientific notation with `d` decimals, or "-".
fn e(x: Option<f64>, d: usize) -> String {
    x.map_or("-".into(), |v| format!("{v:.d$e}"))
}

/// `x` in fixed notation with `d` decimals, or "-".
fn f(x: Option<f64>, d: usize) -> String {
    x.map_or("-".into(), |v| format!("{v:.d$}"))
}

fn cell(pt: &LinkPoint) -> String {
    format!("{:.0e} {:>3.0}%", pt.p_slot, pt.noise_fraction * 100.0)
}

impl fmt::Display for BenchSyncReport {
    fn fmt(&self, w: &mut fmt::Formatter<'_>) -> fmt::Result {
        let s = &self.settings;
        writeln!(
            w,
            "slotwise bench sync — links from {}, prior ±{} ppm, {} seeds per cell, {} threads{}",
            s.base_scenario,
            s.prior_ppm,
            s.seeds,
            s.threads,
            if s.quick { " (quick)" } else { "" }
        )?;
        if !self.period.is_empty() {
            writeln!(
                w,
                "\n1. Period error (fractional) at lock and in steady state"
            )?;
            writeln!(
                w,
                "   lock: rms vs √CRB of the fit's signal detections (Kay 1993); ratio = rms of error/√CRB per seed;"
            )?;
            writeln!(
                w,
                "         √LS_fit = least squares on the same set with its in-window noise (w²/3 each); /LS = rms of error/√LS_fit"
            )?;
            writeln!(
                w,
                "   loop: rms vs loop theory and vs √CRB of the equal-lag window 4ζ/ω_n (theory ratio 0.82)"
            )?;
            writeln!(
                w,
                "   {:<10} {:>5} {:>6} {:>8} {:>9} {:>9} {:>6} {:>9} {:>6} | {:>5} {:>9} {:>9} {:>6} {:>9} {:>6}",
                "p   noise", "locks", "N_fit", "span", "√CRB", "rms", "ratio", "√LS_fit", "/LS",
                "n", "loop rms", "theory", "/theo", "√CRB_τ", "ratio"
            )?;
            for r in &self.period {
                writeln!(
                    w,
                    "   {:<10} {:>5} {:>6} {:>8} {:>9} {:>9} {:>6} {:>9} {:>6} | {:>5} {:>9} {:>9} {:>6} {:>9} {:>6}",
                    cell(&r.point),
                    r.locks,
                    f(r.fit_signal_median, 0),
                    e(r.fit_span_median, 1),
                    e(r.lock_crb_sqrt, 2),
                    e(r.lock_rms, 2),
                    f(r.lock_ratio, 2),
                    e(r.lock_ls_sqrt, 2),
                    f(r.lock_fit_ratio, 2),
                    r.track_samples,
                    e(r.track_rms, 2),
                    e(r.track_theory, 2),
                    f(r.track_vs_theory, 2),
                    e(r.track_crb_sqrt, 2),
                    f(r.track_ratio, 2),
                )?;
            }
        }
        let acq_table = |w: &mut fmt::Formatter<'_>, rows: &[AcquisitionRow]| -> fmt::Result {
            writeln!(
                w,
                "   {:<10} {:>6} {:>7} | {:>7} {:>7} | {:>7} {:>7} | {:>8} {:>8} | {:>8} {:>7} {:>5}",
                "p   noise", "drift", "locked", "sig med", "sig max", "all med", "all max",
                "s med", "s max", "attempts", "busy", "lost"
            )?;
            for r in rows {
                writeln!(
                    w,
                    "   {:<10} {:>6} {:>3}/{:<3} | {:>7} {:>7} | {:>7} {:>7} | {:>8} {:>8} | {:>8.2} {:>7} {:>5}",
                    cell(&r.point),
                    format!("{}", r.point.drift_ppm_per_s),
                    r.locked,
                    r.seeds,
                    f(r.signal_median, 0),
                    f(r.signal_max, 0),
                    f(r.total_median, 0),
                    f(r.total_max, 0),
                    e(r.sim_s_median, 2),
                    e(r.sim_s_max, 2),
                    r.attempts_mean,
                    f(r.dropped_busy_median, 0),
                    r.lost_after_lock,
                )?;
            }
            Ok(())
        };
        if !self.acquisition.is_empty() {
            writeln!(
                w,
                "\n2. Detections to a cold lock (drift ppm/s; s = receiver seconds; busy = fed while searching;"
            )?;
            writeln!(
                w,
                "   lost = locks lost again while the loop settled, 25/(ζω_n))"
            )?;
            acq_table(w, &self.acquisition)?;
            acq_table(w, &self.acquisition_with_drift)?;
        }
        let false_locks = [&self.false_lock, &self.false_lock_chirp];
        if false_locks.iter().any(|r| r.is_some()) {
            writeln!(w, "\n3. False locks on noise-only streams")?;
        }
        for r in false_locks.into_iter().flatten() {
            writeln!(
                w,
                "   {} attempts at {:.0} noise detections/s, drift allowance {} ppm/s ({:.0} detections, \
                 {:.0} trials = {:.1} chirps × frequencies each): \
                 {} false locks, {} searches passed, {} capped; 95 % upper limit {}; promised < {} ({:.1} s)",
                r.attempts,
                r.noise_rate_hz,
                r.link.drift_ppm_per_s,
                r.detections_per_attempt,
                r.trials_mean,
                r.chirp_points_mean,
                r.false_locks,
                r.search_passed,
                r.capped,
                e(r.upper_95, 1),
                r.promised,
                r.wall_s
            )?;
        }
        if !self.relock.is_empty() {
            writeln!(
                w,
                "\n4. Relock (p 1e-3, 25 % noise, 0.02 ppm/s); counted from the end of the event"
            )?;
            writeln!(
                w,
                "   {:<20} {:>7} | {:>8} {:>8} | {:>7} {:>7} | {:>7} {:>7} | {:>8} {:>8} | {:>7} {:>6} {:>9}",
                "event", "relock", "loss med", "loss max", "all med", "all max", "sig med",
                "sig max", "s med", "s max", "bridged", "epoch+", "ok/wrong"
            )?;
            for r in &self.relock {
                writeln!(
                    w,
                    "   {:<20} {:>3}/{:<3} | {:>8} {:>8} | {:>7} {:>7} | {:>7} {:>7} | {:>8} {:>8} | {:>7} {:>6} {:>4}/{:<4}",
                    r.name,
                    r.relocked,
                    r.seeds,
                    f(r.to_loss_median, 0),
                    f(r.to_loss_max, 0),
                    f(r.total_median, 0),
                    f(r.total_max, 0),
                    f(r.signal_median, 0),
                    f(r.signal_max, 0),
                    e(r.secs_median, 2),
                    e(r.secs_max, 2),
                    r.bridged,
                    r.new_epoch,
                    r.bridged_correct,
                    r.bridged_wrong,
                )?;
            }
        }
        if !self.cost.is_empty() {
            writeln!(
                w,
                "\n5. Host time per detection (median of {} repetitions over the same buffer; single calls timed on their own)",
                s.reps
            )?;
            writeln!(
                w,
                "   {:<10} | {:>8} {:>9} {:>10} {:>9} {:>9} | {:>8} {:>9} {:>9} {:>9}",
                "p   noise",
                "acq dets",
                "ns/det",
                "total µs",
                "p99.9 µs",
                "max µs",
                "locked",
                "ns/det",
                "p99.9 µs",
                "max µs"
            )?;
            for r in &self.cost {
                writeln!(
                    w,
                    "   {:<10} | {:>8} {:>9.1} {:>10.0} {:>9.2} {:>9.1} | {:>8} {:>9.1} {:>9.3} {:>9.1}",
                    cell(&r.point),
                    r.acquire_detections,
                    r.acquire_ns_per_detection,
                    r.acquire_total_us,
                    r.acquire_p999_call_us,
                    r.acquire_slowest_call_us,
                    r.locked_detections,
                    r.locked_ns_per_detection,
                    r.locked_p999_call_us,
                    r.locked_slowest_call_us,
                )?;
            }
        }
        if !self.curve.is_empty() {
            writeln!(
                w,
                "\n6. Detections to a cold lock at 1 GHz, {:.0} % noise, prior ±{} ppm, drift allowance = drift \
                 (cap {} detections; s = receiver seconds; trials of the last search; err = max |T̂/T − 1| at lock)",
                curve::NOISE_FRACTION * 100.0,
                curve::PRIOR_PPM,
                curve::CURVE_CAP
            )?;
            writeln!(
                w,
                "   {:<6} {:>6} {:>7} | {:>7} {:>7} | {:>8} {:>8} | {:>8} {:>8} {:>8}",
                "p",
                "drift",
                "locked",
                "all med",
                "all max",
                "s med",
                "s max",
                "attempts",
                "trials",
                "err"
            )?;
            for r in &self.curve {
                writeln!(
                    w,
                    "   {:<6} {:>6} {:>3}/{:<3} | {:>7} {:>7} | {:>8} {:>8} | {:>8.2} {:>8} {:>8}",
                    format!("{:.0e}", r.point.p_slot),
                    format!("{}", r.point.drift_ppm_per_s),
                    r.locked,
                    r.seeds,
                    f(r.total_median, 0),
                    f(r.total_max, 0),
                    e(r.secs_median, 2),
                    e(r.secs_max, 2),
                    r.attempts_mean,
                    e(r.trials_median, 1),
                    e(r.period_err_max, 1),
                )?;
            }
        }
        writeln!(w, "\nwall time {:.1} s", self.wall_s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::{Parser, Subcommand};

    /// The shape `slotwise bench sync` takes in the command line.
    #[derive(Parser, Debug)]
    struct Cli {
        #[command(subcommand)]
        command: Command,
    }

    #[derive(Subcommand, Debug)]
    enum Command {
        /// Benchmarks of the core on simulated links.
        #[command(subcommand)]
        Bench(BenchCommand),
    }

    #[derive(Subcommand, Debug)]
    enum BenchCommand {
        /// Clock recovery.
        Sync(BenchSyncArgs),
    }

    #[test]
    fn parses_as_a_bench_subcommand() {
        let cli = Cli::try_parse_from([
            "slotwise",
            "bench",
            "sync",
            "--quick",
            "--json",
            "--seeds",
            "3",
            "--only",
            "lock,false-lock",
            "--cost-p-slot",
            "1e-4",
        ])
        .unwrap();
        let Command::Bench(BenchCommand::Sync(a)) = cli.command;
        assert!(a.quick && a.json);
        assert_eq!(a.seeds, Some(3));
        assert_eq!(a.only, vec![Figure::Lock, Figure::FalseLock]);
        assert_eq!(a.cost_p_slot, vec![1e-4]);
        assert_eq!(a.prior_ppm, BenchSyncArgs::default().prior_ppm);
    }

    #[test]
    fn refuses_a_prior_outside_the_core_range() {
        let a = BenchSyncArgs {
            prior_ppm: 0,
            ..BenchSyncArgs::default()
        };
        assert!(run(&a).unwrap_err().to_string().contains("--prior-ppm"));
    }
}
