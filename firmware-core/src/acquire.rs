//! Stage 2a — acquisition: find the transmitter's period and slot phase from detections alone.
//!
//! A cold receiver knows the nominal period T0 and a prior (±`prior_ppm`, up to ±1000 ppm); most
//! slots are empty (detection probability 1e-2 … 1e-6 per slot) and up to half the detections are
//! noise. Epoch folding finds the period: at the right frequency the detections pile up at their
//! expected positions in the slot, elsewhere they spread out. The statistic is Z²_n (Leahy et al.,
//! ApJ 266, 160, 1983; Buccheri et al., A&A 128, 245, 1983), computed in fixed point by
//! [`fold`]; n ≥ 2 keeps time-bin channels (two or three peaks per slot) detectable.
//!
//! ## Staged search
//! The buffer holds `F = first_stage·2^stages` detections spanning `span` ps. The search runs on a
//! lattice in frequency ν (cycles per ps, Q0.64) whose final step is `2^64 / (2·n·span)`: a half-step
//! error then drifts harmonic n by at most 1/4 turn across the span (power loss ≤ 19 %, sinc²);
//! for n = 2 this is a period step of T/(4·W) for a window of W slots. Stage s (0..=stages) uses
//! the first `first_stage·2^s` detections (about span/2^(stages−s)) on the lattice thinned by
//! 2^(stages−s), so every stage is matched to its window:
//! - stage 0 scans the whole prior and keeps the K best local maxima;
//! - each later stage evaluates each candidate and its ±1, ±2 neighbours on the twice finer lattice
//!   with the twice longer window, keeps the best, and drops candidates within two steps of a
//!   better one.
//!
//! A channel whose pattern is symmetric (time-bin Z: peaks half a slot apart) cannot tell the
//! two half-slot offsets apart by timing; another channel's asymmetric pattern (the X peaks)
//! resolves it, otherwise the later stages see the swap (bits inverted).
//!
//! The best final candidate must pass the threshold of [`thresholds`] for M = the number of final
//! lattice points (frequency × chirp) in the prior (Bonferroni over every point any stage could
//! have visited): a false lock per attempt below 1e-9. Its offset comes from the matched fold
//! ([`fold::Fold::best_offset`]); then a line fit of residual against slot index (the
//! least-squares period estimator, whose variance reaches the Cramér–Rao bound σ²/Σ(k_i − k̄)²,
//! Kay, Fundamentals of Statistical Signal Processing I, 1993) refines period and phase twice
//! over the detections within ±2w, then ±w of their nearest expected position
//! (w = `fit_half_window`).
//!
//! ## Drifting transmitter: the chirp dimension
//! A fold with one constant frequency over a span T misses a linear frequency drift ν̇ by
//! ½·ν̇·T² turns at harmonic 1 (n times that at harmonic n): at 1 GHz, 0.1 ppm/s is
//! ν̇ = 100 Hz/s, and 1024 detections at 200 per second span 5 s — 1,300 turns. With
//! `drift_ppb_per_s` > 0 the search folds with φ(t) = ν·t + a·t² (a = ν̇/2) on a chirp lattice
//! ([`chirp`]) whose final step 4·Δν/T keeps a half-step error under 1/16 turn at harmonic n.
//! Three ways to search it (n = 2, span T, G frequency points, P = n·ν̇_max·T²/2 chirp points):
//! - full period × period-rate grid: G·P trials over all F detections, G·P·F units;
//! - chirp refined stage by stage (chosen): stage s (window T/2^(S−s)) thins the chirp lattice
//!   by 4^(S−s), so stage 0 scans chirp rows only when its own window resolves the drift
//!   (rows ≈ P/4^S), and each later stage refines a candidate by ±2 chirp steps (its four-fold
//!   finer lattice covers the previous half step) along the frequency ridge, 25 trials instead
//!   of 5; cost (G/2^S)·rows·first_stage + 25·K·F;
//! - semi-coherent: segments short enough for the drift, T_c = 1/√(2n·ν̇) (50 ms at 100 Hz/s,
//!   ten detections at 200/s), their Z² summed along a linear frequency track. Summing M
//!   segments' powers needs about N_coh²/N_c detections instead of N_coh (the null's spread grows
//!   as √M), 100,000 instead of 1,000 here, and the per-segment spectra do not fit the board's
//!   RAM.
//!
//! The staged chirp keeps full coherence and adds work only where the window resolves the
//! drift; its cost grows as P/4^S at stage 0, which is what bounds its reach (at 1 GHz,
//! ±500 ppm, 50 % noise, 4096 units per detection: locks within seconds at 1e-6 per slot and
//! 0.1 ppm/s, minutes at 3e-7 and 0.02 ppm/s; 1e-7 with 0.02 ppm/s needs 2.9e9 units per attempt,
//! about an hour of detections — out of reach). The fit then refines the chirp from the
//! residuals' curvature (`acquire/fit.rs`) so that confirmation can extrapolate. The Bonferroni
//! count M is frequency × chirp points ([`thresholds::search_trials`]). The analysis, cost
//! table and measured curve are in `docs/acquisition.md`. With `drift_ppb_per_s` = 0 (or a span
//! too short to resolve one chirp step) the lattice has one point and the search is exactly the
//! constant-frequency one.
//!
//! ## Confirmation
//! The next `confirm` detections are an independent batch: Z²_n at the found frequency must pass
//! the single-trial threshold (false alarm 1e-6), and the matched fold at the predicted offset
//! must reach half its maximum (the phase carries over). A last fit over both batches gives the
//! period and the slot start nearest below the latest detection.
//!
//! ## Memory
//! The buffer dominates: `N` entries of five bytes (`acquire/buffer.rs`: a 32-bit time step from the
//! previous detection, three more step bits and the channel in one byte; a step beyond ±17 ms
//! takes a second, escape, entry). Against a `u64` time and a `u8` channel per detection this
//! is 5 instead of 9 bytes, exactly the same times, and at most one spare entry per long gap:
//! with the defaults (1024 + 512 detections) `N` = 2048 leaves 512 entries for gaps, about four
//! times what a 100-detections-per-second link needs. A buffer filled early by gaps searches
//! what it holds (and a confirmation decides on what it got), counted in
//! [`AcquireStats::dropped_full`]. The rest is `K` candidates with their folds and chirp index
//! (64 bytes each for n = 2), the search step (272 bytes: the fit keeps two half-span sums), the
//! chirp lattice (32 bytes) and a few words; the drift search added 208 bytes (224 on
//! thumbv7em). The buffer stays owned rather than borrowed from the caller: a `&'a mut` buffer
//! would put a lifetime into the clock, the marked clock and every receiver type built on them,
//! and it saves RAM only where the board has memory to lend that nothing else holds while the
//! clock acquires. The size report (`size_report` test) prints every part; `const` assertions next
//! to the types bound them for the host's and the HIL's capacities.
//!
//! ## Work bound
//! [`Acquirer::push`] stores one detection (during confirmation it also folds it: n harmonics).
//! [`Acquirer::work`] spends at most `budget` units; one unit is one detection at one trial
//! frequency (one multiply for the phase — with a chirp also one 64×64→128 square and two
//! multiplies — n rotations and table lookups) or one detection of a fit pass (one residual per
//! expected position); reading a stored detection back is one add and a zigzag decode (an escape
//! entry one more). Between stages it sorts K candidates (K² comparisons); twice per attempt it
//! searches the best offset (1024·n lookups). An attempt costs about
//! (G/2^stages + 1)·R0·first_stage + 10·K·F + 3·F + confirm units, G the final frequency lattice
//! and R0 = 1 the stage-0 chirp rows; with a chirp lattice of more than one point, R0 = 2·r + 1
//! rows (r = ⌈(P − 1 − 4^stages)/(2·4^stages)⌉ when P − 1 > 4^stages, else 0; P the final chirp
//! points), refinement up to 50·K·F, and (wherever the allowance reaches 1/32 chirp step) the
//! search-batch fits 2·[`CHIRP_FIT_ROUNDS`]·F more.
//! Detections that arrive while the search runs are not stored (counted in
//! [`AcquireStats::dropped_busy`]).

mod buffer;
pub mod chirp;
mod config;
mod fit;
pub mod fold;
#[cfg(test)]
pub(crate) mod synth;
pub mod thresholds;

use buffer::{Cursor, DetectionBuffer};
use chirp::ChirpLattice;
pub use config::{AcquireConfig, AcquireConfigError, AcquireParams};
use fit::LsSums;
use fixed::types::{U0F32, U32F32};
use fold::{ArrivalPattern, Fold};

/// A confirmed acquisition: the slot grid and the evidence for it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
// No defmt::Format: the fixed-point fields have none.
pub struct AcquiredLock {
    /// Period estimate in ps (Q32.32).
    pub period_ps: U32F32,
    /// Frequency in cycles per ps (Q0.64) at `anchor_t_ps`: the exact value behind `period_ps`.
    pub nu_q64: u64,
    /// Chirp found, a = ν̇/2 in Q0.128 cycles per ps² (0 when the drift search is off).
    pub chirp_q128: i64,
    /// Time (ps) at which a slot starts, at or just below `anchor_t_ps`.
    pub origin_ps: u64,
    /// Latest detection time used (ps).
    pub anchor_t_ps: u64,
    /// Position inside the slot at `anchor_t_ps`, Q0.64 slot fraction.
    pub anchor_phase_q64: u64,
    /// Z²_n of the winning frequency in the search.
    pub z2_search: U32F32,
    /// Search threshold it passed.
    pub z2_threshold: U32F32,
    /// Z²_n of the confirmation batch at the found frequency.
    pub z2_confirm: U32F32,
    /// Final lattice points (frequency × chirp) in the prior: the Bonferroni trial count.
    pub trials: u64,
    /// Detections in the final fit.
    pub detections: u32,
    /// Fraction of those within the fit window of an expected position (Q0.32).
    pub in_window: U0F32,
    /// The same fraction expected for uniform noise (Q0.32).
    pub null_window: U0F32,
    /// Mean squared residual of in-window detections, slot² (Q0.64).
    pub mean_r2_q64: u64,
}

/// Acquisition counters.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AcquireStats {
    /// Searches started.
    pub attempts: u32,
    /// Searches whose best candidate stayed below the threshold.
    pub search_failed: u32,
    /// Searches that passed but failed confirmation.
    pub confirm_failed: u32,
    /// Fits that could not be solved (degenerate or overflowing sums).
    pub fit_failed: u32,
    /// Detections not stored because the search was busy.
    pub dropped_busy: u64,
    /// Detections not stored because long gaps had used up the buffer's spare entries.
    pub dropped_full: u64,
}

#[derive(Clone, Copy, Debug)]
struct Cand<const H: usize> {
    j: u64,
    c: i64,
    z: U32F32,
    fold: Fold<H>,
}

#[derive(Clone, Copy, Debug)]
struct Eval<const H: usize> {
    j: u64,
    c: i64,
    nu: u64,
    a: i64,
    cur: Cursor,
    end: usize,
    fold: Fold<H>,
}

/// Final fits repeated after the first one over both batches (each costs one unit per stored
/// detection).
pub const EXTRA_FINAL_PASSES: u8 = 3;

/// Repeats of each search-batch fit pass when the chirp lattice has more than one point (each
/// costs one unit per detection of the search batch).
pub const CHIRP_FIT_ROUNDS: u8 = 3;

#[derive(Clone, Copy, Debug)]
enum Step<const H: usize> {
    Collect,
    Scan {
        row: i64,
        eval: Eval<H>,
        prev: Option<Cand<H>>,
        prev_z: Option<U32F32>,
    },
    Refine {
        stage: u8,
        cand: usize,
        off: i64,
        eval: Eval<H>,
        best: Option<Cand<H>>,
    },
    Fit {
        pass: u8,
        cur: Cursor,
        sums: [LsSums; 2],
        xc: i128,
    },
    Confirm,
    Done,
    Idle,
}

/// Cold and warm acquisition with a buffer of `N` detections, `K` candidates and Z²_`H`.
#[derive(Clone, Debug)]
pub struct Acquirer<const N: usize, const K: usize, const H: usize> {
    cfg: AcquireConfig,
    buf: DetectionBuffer<N>,
    t0: u64,
    t_max: u64,
    prior_centre: u64,
    prior_half: u64,
    lo: u64,
    step_nu: u64,
    points: u64,
    chirp: ChirpLattice,
    a: i64,
    fit_rounds: u8,
    cands: [Cand<H>; K],
    ncand: usize,
    step: Step<H>,
    nu: u64,
    phi0: i128,
    confirm: Fold<H>,
    n_confirm: u32,
    z2_search: U32F32,
    z2_threshold: U32F32,
    z2_confirm: U32F32,
    lock: Option<AcquiredLock>,
    stats: AcquireStats,
}

// The host's and the HIL's capacities: 11,440 bytes on x86_64, 11,424 on thumbv7em. The drift
// search added 208 (224) bytes: the chirp index of each candidate and trial, the chirp lattice
// and the fit's second half-span sums (which read the curvature).
const _: () = assert!(core::mem::size_of::<Acquirer<2048, 8, 2>>() <= 11_456);

impl<const N: usize, const K: usize, const H: usize> Acquirer<N, K, H> {
    /// An acquirer with the cold prior, collecting.
    pub fn new(cfg: AcquireConfig) -> Result<Self, AcquireConfigError> {
        const { assert!(K >= 1 && H >= 1 && H <= fold::MAX_HARMONICS) };
        let need = cfg.search_len() + u64::from(cfg.p.confirm);
        if need > N as u64 {
            return Err(AcquireConfigError::Capacity(need));
        }
        let empty = Cand {
            j: 0,
            c: 0,
            z: U32F32::ZERO,
            fold: Fold::new(),
        };
        let mut a = Self {
            cfg,
            buf: DetectionBuffer::new(),
            t0: 0,
            t_max: 0,
            prior_centre: cfg.nu0,
            prior_half: 0,
            lo: 0,
            step_nu: 1,
            points: 1,
            chirp: ChirpLattice::default(),
            a: 0,
            fit_rounds: 0,
            cands: [empty; K],
            ncand: 0,
            step: Step::Collect,
            nu: cfg.nu0,
            phi0: 0,
            confirm: Fold::new(),
            n_confirm: 0,
            z2_search: U32F32::ZERO,
            z2_threshold: U32F32::ZERO,
            z2_confirm: U32F32::ZERO,
            lock: None,
            stats: AcquireStats::default(),
        };
        a.restart(cfg.nu0, cfg.p.prior_ppm);
        Ok(a)
    }

    /// The settings.
    pub const fn config(&self) -> &AcquireConfig {
        &self.cfg
    }

    /// Counters since construction.
    pub const fn stats(&self) -> &AcquireStats {
        &self.stats
    }

    /// Trial count of the latest search: frequency × chirp lattice points (the Bonferroni M).
    pub fn search_trials(&self) -> u64 {
        thresholds::search_trials(self.points, self.chirp.points())
    }

    /// Whether the acquirer is filling its buffer for a new search (nothing in progress).
    pub const fn is_collecting(&self) -> bool {
        matches!(self.step, Step::Collect) && self.buf.len() == 0
    }

    /// Whether a confirmed lock waits in [`Self::take_lock`].
    pub const fn has_lock(&self) -> bool {
        self.lock.is_some()
    }

    /// Start over around `centre_nu_q64` (cycles per ps, Q0.64) with a ±`prior_ppm` prior.
    pub fn restart(&mut self, centre_nu_q64: u64, prior_ppm: u32) {
        self.prior_centre = centre_nu_q64;
        self.prior_half =
            (u128::from(centre_nu_q64) * u128::from(prior_ppm.max(1)) / 1_000_000).max(1) as u64;
        self.lock = None;
        self.reset_collect();
    }

    /// Take the confirmed lock; the acquirer then idles until [`Self::restart`].
    pub fn take_lock(&mut self) -> Option<AcquiredLock> {
        let l = self.lock.take();
        if l.is_some() {
            self.step = Step::Idle;
        }
        l
    }

    fn reset_collect(&mut self) {
        self.buf.clear();
        self.ncand = 0;
        self.step = Step::Collect;
    }

    fn store(&mut self, t_ps: u64, channel: Option<u8>) -> bool {
        if !self.buf.push(t_ps, channel) {
            self.stats.dropped_full += 1;
            return false;
        }
        if self.buf.len() == 1 {
            self.t0 = t_ps;
            self.t_max = t_ps;
        }
        self.t_max = self.t_max.max(t_ps);
        true
    }

    #[cfg(test)]
    pub(crate) fn stored_len(&self) -> usize {
        self.buf.len()
    }

    /// Take one delay-corrected detection (`channel` selects its expected positions).
    pub fn push(&mut self, t_ps: u64, channel: Option<u8>, pat: &ArrivalPattern) {
        match self.step {
            Step::Collect => {
                // A buffer filled early by long gaps searches what it holds.
                let full = !self.store(t_ps, channel);
                if full || self.buf.len() as u64 >= self.cfg.search_len() {
                    self.start_search();
                }
            }
            Step::Confirm => {
                if !self.store(t_ps, channel) {
                    self.decide_confirmation();
                    return;
                }
                let dt = t_ps.wrapping_sub(self.t0);
                let ph = dt
                    .wrapping_mul(self.nu)
                    .wrapping_add(chirp::phase_q64(dt, self.a));
                self.confirm.add(ph, pat.channel(channel));
                self.n_confirm += 1;
                if self.n_confirm >= self.cfg.p.confirm {
                    self.decide_confirmation();
                }
            }
            Step::Done | Step::Idle => {}
            _ => self.stats.dropped_busy += 1,
        }
    }

    fn nu_at(&self, j: u64) -> u64 {
        self.lo.saturating_add(j.saturating_mul(self.step_nu))
    }

    fn stage_end(&self, stage: u8) -> usize {
        (u64::from(self.cfg.p.first_stage) << stage).min(self.buf.len() as u64) as usize
    }

    fn eval_at(&self, j: u64, c: i64, stage: u8) -> Eval<H> {
        Eval {
            j,
            c,
            nu: self.nu_at(j),
            a: self.chirp.value(c),
            cur: DetectionBuffer::<N>::cursor(self.t0),
            end: self.stage_end(stage),
            fold: Fold::new(),
        }
    }

    fn start_search(&mut self) {
        self.stats.attempts += 1;
        let span = self.t_max.saturating_sub(self.t0).max(1);
        self.step_nu = ((1u128 << 63) / (H as u128 * u128::from(span))).max(1) as u64;
        let stride = 1u64 << self.cfg.p.stages;
        self.lo = self.prior_centre.saturating_sub(self.prior_half);
        let raw = (2 * self.prior_half).div_ceil(self.step_nu);
        self.points = raw
            .div_ceil(stride)
            .saturating_mul(stride)
            .saturating_add(1);
        self.chirp = ChirpLattice::new(
            self.cfg.chirp_max_q128,
            self.step_nu,
            span,
            self.cfg.p.stages,
        );
        let trials = thresholds::search_trials(self.points, self.chirp.points());
        let Some(thr) = thresholds::search_threshold(H, trials) else {
            self.stats.search_failed += 1;
            self.reset_collect();
            return;
        };
        self.z2_threshold = thr;
        self.ncand = 0;
        let row = -(self.chirp.rows0() as i64);
        self.step = Step::Scan {
            row,
            eval: self.eval_at(0, self.row_chirp(row), 0),
            prev: None,
            prev_z: None,
        };
    }

    fn insert(&mut self, c: Cand<H>) {
        if let Some(slot) = self.cands.get_mut(self.ncand) {
            *slot = c;
            self.ncand += 1;
            return;
        }
        if let Some(min) = self.cands.iter_mut().min_by_key(|c| c.z) {
            if c.z > min.z {
                *min = c;
            }
        }
    }

    /// Final chirp index of stage-0 row `row`.
    fn row_chirp(&self, row: i64) -> i64 {
        row.saturating_mul(self.chirp.stride(0) as i64)
    }

    /// Sort candidates by Z² (best first) and drop those near a better one: within two
    /// frequency steps of `stage`, or on a neighbouring chirp within the ridge's reach (a
    /// chirp step moves the compensating frequency by up to four steps, see [`chirp`]).
    fn sort_and_suppress(&mut self, stage: u8) {
        let stride = 1u64 << (self.cfg.p.stages - stage);
        let cs = self.chirp.stride(stage);
        let n = self.ncand;
        if let Some(c) = self.cands.get_mut(..n) {
            c.sort_unstable_by_key(|c| core::cmp::Reverse(c.z));
        }
        let mut kept = 0;
        for i in 0..n {
            let Some(&c) = self.cands.get(i) else { break };
            let near = self.cands.get(..kept).unwrap_or(&[]).iter().any(|k| {
                let dc = k.c.abs_diff(c.c);
                dc <= cs && k.j.abs_diff(c.j) <= 2 * stride + 4 * stride * (dc / cs)
            });
            if !near {
                if let Some(slot) = self.cands.get_mut(kept) {
                    *slot = c;
                }
                kept += 1;
            }
        }
        self.ncand = kept;
    }

    /// Next neighbour index ≥ `from` (0..25: chirp offset k = idx/5 − 2, frequency offset
    /// idx%5 − 2 around the ridge centre −2k) whose lattice point `stage` may visit.
    fn next_offset(&self, cand: usize, stage: u8, from: i64) -> Option<(i64, u64, i64)> {
        let c = self.cands.get(cand)?;
        let stride = 1i64 << (self.cfg.p.stages - stage);
        let cs = self.chirp.stride(stage) as i64;
        (from.max(0)..25).find_map(|idx| {
            let (k, dj) = (idx / 5 - 2, idx % 5 - 2);
            let chirp = c.c.checked_add(k.checked_mul(cs)?)?;
            if !self.chirp.allowed(chirp, stage) {
                return None;
            }
            let j = c.j.checked_add_signed((dj - 2 * k) * stride)?;
            (j < self.points).then_some((idx, j, chirp))
        })
    }

    fn begin_candidate(&mut self, stage: u8, cand: usize) {
        if cand >= self.ncand {
            self.sort_and_suppress(stage);
            if stage < self.cfg.p.stages {
                self.begin_candidate(stage + 1, 0);
            } else {
                self.finish_search();
            }
            return;
        }
        match self.next_offset(cand, stage, 0) {
            Some((off, j, c)) => {
                self.step = Step::Refine {
                    stage,
                    cand,
                    off,
                    eval: self.eval_at(j, c, stage),
                    best: None,
                }
            }
            None => self.begin_candidate(stage, cand + 1),
        }
    }

    fn finish_search(&mut self) {
        let best = self.cands.first().copied().filter(|_| self.ncand > 0);
        let Some(best) = best.filter(|b| b.z >= self.z2_threshold) else {
            self.stats.search_failed += 1;
            self.reset_collect();
            return;
        };
        self.z2_search = best.z;
        self.nu = self.nu_at(best.j);
        self.a = self.chirp.value(best.c);
        self.fit_rounds = 0;
        self.phi0 = i128::from(best.fold.best_offset().0);
        self.begin_fit(0);
    }

    fn eval_step(&self, e: &mut Eval<H>, budget: &mut u32, pat: &ArrivalPattern) -> bool {
        // One loop per case, so the constant-frequency fold pays nothing for the chirp.
        if e.a == 0 {
            self.eval_loop::<false>(e, budget, pat)
        } else {
            self.eval_loop::<true>(e, budget, pat)
        }
    }

    fn eval_loop<const CHIRP: bool>(
        &self,
        e: &mut Eval<H>,
        budget: &mut u32,
        pat: &ArrivalPattern,
    ) -> bool {
        let (nu, a, mut fold, mut cur) = (e.nu, e.a, e.fold, e.cur);
        let mut left = *budget;
        while cur.read < e.end && left > 0 {
            let Some((t, channel)) = self.buf.next(&mut cur) else {
                cur.read = e.end;
                break;
            };
            let dt = t.wrapping_sub(self.t0);
            let mut ph = dt.wrapping_mul(nu);
            if CHIRP {
                ph = ph.wrapping_add(chirp::phase_q64(dt, a));
            }
            fold.add(ph, pat.channel(channel));
            left -= 1;
        }
        (e.fold, e.cur, *budget) = (fold, cur, left);
        e.cur.read >= e.end
    }

    /// Spend at most `budget` work units on the search and fits.
    pub fn work(&mut self, mut budget: u32, pat: &ArrivalPattern) {
        while budget > 0 {
            let step = core::mem::replace(&mut self.step, Step::Idle);
            match step {
                Step::Scan {
                    row,
                    mut eval,
                    prev,
                    prev_z,
                } => {
                    if !self.eval_step(&mut eval, &mut budget, pat) {
                        self.step = Step::Scan {
                            row,
                            eval,
                            prev,
                            prev_z,
                        };
                        return;
                    }
                    self.scan_point(row, eval, prev, prev_z);
                }
                Step::Refine {
                    stage,
                    cand,
                    off,
                    mut eval,
                    best,
                } => {
                    if !self.eval_step(&mut eval, &mut budget, pat) {
                        self.step = Step::Refine {
                            stage,
                            cand,
                            off,
                            eval,
                            best,
                        };
                        return;
                    }
                    self.refine_point(stage, cand, off, eval, best);
                }
                Step::Fit {
                    pass,
                    mut cur,
                    mut sums,
                    xc,
                } => {
                    let end = if pass < 2 {
                        self.stage_end(self.cfg.p.stages)
                    } else {
                        self.buf.len()
                    };
                    let w = self.cfg.p.fit_half_window.to_bits();
                    let w = u64::from(if pass == 0 {
                        w.saturating_mul(2).min(1 << 30)
                    } else {
                        w
                    });
                    let win = U0F32::from_bits(w as u32);
                    while cur.read < end && budget > 0 {
                        let Some((t, channel)) = self.buf.next(&mut cur) else {
                            cur.read = end;
                            break;
                        };
                        self.fit_one(t, channel, &mut sums, xc, w << 32, win, pat);
                        budget -= 1;
                    }
                    if cur.read < end {
                        self.step = Step::Fit {
                            pass,
                            cur,
                            sums,
                            xc,
                        };
                        return;
                    }
                    self.finish_fit(pass, &sums, xc);
                }
                other => {
                    self.step = other;
                    return;
                }
            }
        }
    }

    fn scan_point(
        &mut self,
        row: i64,
        eval: Eval<H>,
        prev: Option<Cand<H>>,
        prev_z: Option<U32F32>,
    ) {
        let cur = Cand {
            j: eval.j,
            c: eval.c,
            z: eval.fold.z2(),
            fold: eval.fold,
        };
        if let Some(p) = prev {
            if prev_z.is_none_or(|z| p.z >= z) && p.z > cur.z {
                self.insert(p);
            }
        }
        let next = cur.j + (1 << self.cfg.p.stages);
        if next >= self.points {
            if prev.is_none_or(|p| cur.z >= p.z) {
                self.insert(cur);
            }
            if row < self.chirp.rows0() as i64 {
                self.step = Step::Scan {
                    row: row + 1,
                    eval: self.eval_at(0, self.row_chirp(row + 1), 0),
                    prev: None,
                    prev_z: None,
                };
            } else {
                self.begin_candidate(0, self.ncand);
            }
            return;
        }
        self.step = Step::Scan {
            row,
            eval: self.eval_at(next, eval.c, 0),
            prev: Some(cur),
            prev_z: prev.map(|p| p.z),
        };
    }

    fn refine_point(
        &mut self,
        stage: u8,
        cand: usize,
        off: i64,
        eval: Eval<H>,
        best: Option<Cand<H>>,
    ) {
        let cur = Cand {
            j: eval.j,
            c: eval.c,
            z: eval.fold.z2(),
            fold: eval.fold,
        };
        let best = match best {
            Some(b) if b.z >= cur.z => b,
            _ => cur,
        };
        if let Some((off, j, c)) = self.next_offset(cand, stage, off + 1) {
            self.step = Step::Refine {
                stage,
                cand,
                off,
                eval: self.eval_at(j, c, stage),
                best: Some(best),
            };
            return;
        }
        if let Some(slot) = self.cands.get_mut(cand) {
            *slot = best;
        }
        self.begin_candidate(stage, cand + 1);
    }
}

#[cfg(test)]
mod tests;
