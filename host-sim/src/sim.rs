//! The physical link simulator: from a [`Scenario`] to a time-ordered stream of TDC events, each
//! with its ground truth beside it.
//!
//! Per slot the transmitter prepares a state ([`TxChoices`]); the pulse's detected photon number is
//! Poisson(μη), each photon is routed independently through the passive receiver optics
//! ([`optics`]), and photons meeting on one detector at one arrival position make a single click
//! (threshold detectors). Clicks get Gaussian jitter and the channel's skew. Dark counts arrive
//! uniformly in time on every detector, every registered click is followed by an afterpulse with
//! probability p_ap after an exponential delay, and each detector ignores clicks within its
//! non-paralysable dead time after a registered one. The channels are merged in time order and
//! read out by a wrapping TDC counter.
//!
//! Slots are not visited one by one: the next slot with any detection is drawn by geometric
//! skipping with the largest per-slot detection probability p_max = 1 − e^(−μ_max η), and kept
//! with probability p(slot)/p_max (thinning; Lewis & Shedler, Naval Res. Logist. Q. 26, 403,
//! 1979). Both steps are exact. Memory stays bounded: only clicks not yet emitted are held.

pub mod answer_faults;
pub mod clock;
pub mod faults;
pub mod hbt;
mod merge;
pub mod model;
pub mod optics;
pub mod pnr;
pub mod rng;
pub mod source;
mod truth;
pub mod tx;

pub use clock::TxClock;
pub use model::{channel_model, signal_rate_per_s, ChannelModel, IntensityModel};
pub use optics::{channels, earliest_click_offset_ps, gate_half_width_ps, gate_specs, GateSpec};
pub use pnr::PnrSpec;
pub use source::{Source, SourceKind, SourceSpec};
pub use truth::{clock_truth, ClockTruth, ClockTruthError};
pub use tx::{SimTransmitter, TxChoice, TxChoices, TxSource};

use crate::scenario::Scenario;
use merge::{Held, Merger};
use rng::{splitmix_at, stream_key, Stream};
use slotwise::TdcEvent;
use std::cmp::Ordering;
use std::collections::BinaryHeap;

/// Stream number of the slot-skipping draws.
const STREAM_SKIP: u64 = 2;
/// Stream number whose outputs key the per-slot photon draws.
const STREAM_PHOTONS: u64 = 3;
/// First stream number of the per-detector dark counts.
const STREAM_DARK: u64 = 16;
/// First stream number of the per-detector afterpulses.
const STREAM_AFTERPULSE: u64 = 48;
/// Stream number of the channel merger's reordering and duplicates (faults).
const STREAM_MERGE: u64 = 96;
/// First stream number of the saturating lights (faults).
const STREAM_BRIGHT: u64 = 100;
/// First stream number of the stray channels (faults).
const STREAM_STRAY: u64 = 120;
/// `Candidate::source` of ordinary clicks.
const SOURCE_PLAIN: u8 = 0;
/// `Candidate::source` of saturation fault `i`: `SOURCE_BRIGHT + i`.
const SOURCE_BRIGHT: u8 = 1;
/// `Candidate::source` of stray-channel fault `i`: `SOURCE_STRAY + i`.
const SOURCE_STRAY: u8 = 128;

/// What caused a click.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Kind {
    /// A photon of a transmitted pulse.
    Signal = 0,
    /// A dark count.
    Dark = 1,
    /// An afterpulse of an earlier registered click.
    Afterpulse = 2,
}

/// Ground truth of one emitted detection (never fed to the core).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Truth {
    /// True arrival time since the capture start, ps (skew and jitter included).
    pub true_t_ps: f64,
    /// Slot whose pulse caused the click; `None` for dark counts and afterpulses.
    pub slot: Option<u64>,
    /// What caused the click.
    pub kind: Kind,
    /// Arrival position number of a signal photon (see [`optics::position_fraction`]); with the
    /// channel it gives the outcome the optics produced ([`optics::outcome`]). `None` for noise.
    pub position: Option<u8>,
}

/// One detection: the TDC event and its ground truth.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SimEvent {
    /// What the TDC reports.
    pub event: TdcEvent,
    /// What really happened.
    pub truth: Truth,
}

/// Counters of what the simulator generated and where it went (indices by [`Kind`]).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct SimStats {
    /// Slots in the run.
    pub slots: u64,
    /// Candidate slots drawn by geometric skipping.
    pub candidate_slots: u64,
    /// Slots with at least one detected photon (after thinning).
    pub detected_pulses: u64,
    /// Detected photons (before merging into clicks).
    pub photons: u64,
    /// Clicks generated, per kind.
    pub generated: [u64; 3],
    /// Clicks lost to dead time, per kind.
    pub dead_time_lost: [u64; 3],
    /// Clicks emitted as TDC events, per kind.
    pub emitted: [u64; 3],
    /// Afterpulses that would fall after the end of the run (not generated).
    pub afterpulses_after_end: u64,
    /// Exact duplicates emitted by the channel merger (faults; not in `emitted`).
    pub duplicates: u64,
    /// Events emitted after a later-stamped one by the channel merger (faults).
    pub reordered: u64,
    /// Clicks of saturating lights emitted (faults; also counted as dark in `emitted`).
    pub bright: u64,
    /// Events on stray channel numbers emitted (faults; also counted as dark in `emitted`).
    pub stray: u64,
    /// Photons lost on recovering pixels of photon-number-resolving detectors.
    pub pixel_recovery_lost: u64,
}

#[derive(Clone, Copy, Debug)]
struct Candidate {
    t_ps: f64,
    detector: u8,
    kind: Kind,
    slot: Option<u64>,
    position: Option<u8>,
    /// Which process made it: plain, a saturating light or a stray channel (faults).
    source: u8,
    /// Photon-number level (1 unless the detector resolves photon numbers).
    level: u8,
}

impl PartialEq for Candidate {
    fn eq(&self, other: &Self) -> bool {
        self.cmp(other) == Ordering::Equal
    }
}
impl Eq for Candidate {}
impl PartialOrd for Candidate {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}
impl Ord for Candidate {
    /// Reversed, so that `BinaryHeap` pops the earliest click first.
    fn cmp(&self, other: &Self) -> Ordering {
        other
            .t_ps
            .total_cmp(&self.t_ps)
            .then(other.detector.cmp(&self.detector))
            .then(other.kind.cmp(&self.kind))
            .then(other.slot.cmp(&self.slot))
            .then(other.source.cmp(&self.source))
    }
}

/// The streaming link simulator; iterate it (or call [`Simulator::next_block`]) for events in
/// time order.
#[derive(Clone, Debug)]
pub struct Simulator {
    scenario: Scenario,
    tx: TxChoices,
    clock: TxClock,
    slots: u64,
    end_ps: f64,
    /// μ·η per intensity class.
    mean_detected: Vec<f64>,
    /// Photon-number statistics of the source.
    source: Source,
    /// Mean photon number μ per intensity class and the transmittance η.
    mus: Vec<f64>,
    eta: f64,
    /// Per intensity class: probability that a pulse has at least one detected photon.
    click_prob: Vec<f64>,
    /// −ln(1 − p_max) with p_max the largest of `click_prob` (μ_max·η for the laser).
    mean_max: f64,
    skews_ps: Vec<f64>,
    dead_ps: f64,
    ap_mean_ps: f64,
    dark_mean_ps: Option<f64>,
    tdc_mask: u64,
    /// Next candidate slot of the photon process.
    next_slot: u64,
    /// No photon click from `next_slot` onwards can come earlier than this, ps.
    frontier_ps: f64,
    earliest_offset_ps: f64,
    skip_rng: Stream,
    photon_key: u64,
    dark_rng: Vec<Stream>,
    ap_rng: Vec<Stream>,
    last_registered_ps: Vec<f64>,
    heap: BinaryHeap<Candidate>,
    stats: SimStats,
    /// Scratch for merging the photons of one pulse into clicks.
    hits: Vec<optics::Hit>,
    /// Fibre cuts as sorted half-open slot ranges (faults).
    blackouts: Vec<(u64, u64)>,
    /// Saturation windows (faults): detector, start and end in true time (ps), mean gap (ps).
    bright: Vec<(u8, f64, f64, f64)>,
    bright_rng: Vec<Stream>,
    /// Stray channels (faults): channel and mean gap (ps).
    stray: Vec<(u8, f64)>,
    stray_rng: Vec<Stream>,
    /// Afterpulse storms (faults): start, end (true time, ps), probability.
    storms: Vec<(f64, f64, f64)>,
    merger: Option<Merger>,
    /// Pixel states per detector, for photon-number-resolving detectors.
    pixels: Option<Vec<pnr::Pixels>>,
}

impl Simulator {
    /// A simulator at the start of the run (the scenario must be valid).
    pub fn new(s: &Scenario) -> Self {
        let clock = TxClock::from_scenario(s);
        let slots = s.slots();
        let eta = s.eta();
        let mean_detected: Vec<f64> = s.intensities.iter().map(|mu| mu * eta).collect();
        let source = Source::from_spec(s.source.as_ref());
        let click_prob: Vec<f64> = s
            .intensities
            .iter()
            .map(|&mu| source.click_prob(mu, eta))
            .collect();
        let mean_max = match source {
            Source::Laser => mean_detected.iter().copied().fold(0.0, f64::max),
            Source::SinglePhoton { .. } => {
                -(-click_prob.iter().copied().fold(0.0, f64::max)).ln_1p()
            }
        };
        let channels = channels(s);
        let skews_ps = s.delays_ps().iter().map(|&d| d as f64).collect();
        let mut sim = Self {
            tx: TxChoices::new(s),
            end_ps: clock.slot_start_ps(slots),
            clock,
            slots,
            mean_detected,
            source,
            mus: s.intensities.clone(),
            eta,
            click_prob,
            mean_max,
            skews_ps,
            dead_ps: s.dead_time_ns * 1e3,
            ap_mean_ps: s.afterpulse_delay_ns * 1e3,
            dark_mean_ps: (s.dark_count_hz > 0.0).then(|| 1e12 / s.dark_count_hz),
            tdc_mask: if s.tdc_bits >= 64 {
                u64::MAX
            } else {
                (1u64 << s.tdc_bits) - 1
            },
            next_slot: 0,
            frontier_ps: 0.0,
            earliest_offset_ps: earliest_click_offset_ps(s),
            skip_rng: Stream::new(s.seed, STREAM_SKIP),
            photon_key: stream_key(s.seed, STREAM_PHOTONS),
            dark_rng: (0..channels)
                .map(|d| Stream::new(s.seed, STREAM_DARK + u64::from(d)))
                .collect(),
            ap_rng: (0..channels)
                .map(|d| Stream::new(s.seed, STREAM_AFTERPULSE + u64::from(d)))
                .collect(),
            last_registered_ps: vec![f64::NEG_INFINITY; usize::from(channels)],
            heap: BinaryHeap::new(),
            stats: SimStats {
                slots,
                ..SimStats::default()
            },
            hits: Vec::new(),
            blackouts: s.faults.blackout_slots(s.rep_rate_hz),
            bright: Vec::new(),
            bright_rng: Vec::new(),
            stray: Vec::new(),
            stray_rng: Vec::new(),
            storms: Vec::new(),
            merger: s.faults.merge.map(|m| Merger {
                reorder_ps: m.reorder_ps,
                duplicate_prob: m.duplicate_prob,
                rng: Stream::new(s.seed, STREAM_MERGE),
                held: BinaryHeap::new(),
                next: None,
                done: false,
                seq: 0,
                newest_out_ps: f64::NEG_INFINITY,
            }),
            pixels: s
                .pnr
                .as_ref()
                .map(|p| (0..channels).map(|_| pnr::Pixels::new(p)).collect()),
            scenario: s.clone(),
        };
        let t0 = sim.clock.start_ps();
        for (i, b) in s.faults.saturation.iter().enumerate() {
            let from = t0 + b.from_s * 1e12;
            sim.bright.push((
                b.channel,
                from,
                from + b.duration_s * 1e12,
                1e12 / b.rate_hz,
            ));
            sim.bright_rng
                .push(Stream::new(s.seed, STREAM_BRIGHT + i as u64));
            sim.schedule_bright(i, from);
        }
        for (i, st) in s.faults.stray_channel.iter().enumerate() {
            sim.stray.push((st.channel, 1e12 / st.rate_hz));
            sim.stray_rng
                .push(Stream::new(s.seed, STREAM_STRAY + i as u64));
            sim.schedule_stray(i, 0.0);
        }
        sim.storms = s
            .faults
            .afterpulse_storm
            .iter()
            .map(|a| {
                let from = t0 + a.from_s * 1e12;
                (from, from + a.duration_s * 1e12, a.prob)
            })
            .collect();
        for d in 0..channels {
            sim.schedule_dark(d, 0.0);
        }
        sim.next_slot = sim.skip_from(0);
        sim.update_frontier();
        sim
    }

    /// The scenario being simulated.
    pub fn scenario(&self) -> &Scenario {
        &self.scenario
    }

    /// Number of slots in the run.
    pub fn slots(&self) -> u64 {
        self.slots
    }

    /// True time at which the run ends (start of slot `slots()`), ps.
    pub fn end_ps(&self) -> f64 {
        self.end_ps
    }

    /// The transmitter clock in use.
    pub fn clock(&self) -> &TxClock {
        &self.clock
    }

    /// What has been generated so far.
    pub fn stats(&self) -> &SimStats {
        &self.stats
    }

    /// Clear `out` and fill it with up to `max` events; returns how many (0 at the end).
    pub fn next_block(&mut self, out: &mut Vec<SimEvent>, max: usize) -> usize {
        out.clear();
        while out.len() < max {
            match self.next_event() {
                Some(e) => out.push(e),
                None => break,
            }
        }
        out.len()
    }

    /// First slot ≥ `from` whose geometric skip lands (p_max per slot).
    fn skip_from(&mut self, from: u64) -> u64 {
        if self.mean_max <= 0.0 {
            return u64::MAX;
        }
        // P(skip = g) = (1 − p_max)^g·p_max with ln(1 − p_max) = −μ_max·η.
        let mut from = from;
        loop {
            let g = (-self.skip_rng.uniform_nonzero().ln() / self.mean_max).floor();
            if g >= (self.slots - from.min(self.slots)) as f64 {
                return u64::MAX;
            }
            let k = from + g as u64;
            // A fibre cut: no light from these slots. The skip is memoryless, so drawing afresh
            // from the end of the cut is exact.
            match self.blackouts.iter().find(|&&(a, b)| a <= k && k < b) {
                Some(&(_, b)) => from = b,
                None => return k,
            }
        }
    }

    fn update_frontier(&mut self) {
        self.frontier_ps = if self.next_slot < self.slots {
            self.clock.slot_start_ps(self.next_slot) + self.earliest_offset_ps
        } else {
            f64::INFINITY
        };
    }

    /// Handle the candidate slot `next_slot`: thin it, generate its clicks, draw the next one.
    fn advance_photons(&mut self) {
        let k = self.next_slot;
        self.stats.candidate_slots += 1;
        let choice = self.tx.choice(k);
        let i = usize::from(choice.intensity);
        let p = match self.source {
            Source::Laser => -(-self.mean_detected.get(i).copied().unwrap_or(0.0)).exp_m1(),
            Source::SinglePhoton { .. } => self.click_prob.get(i).copied().unwrap_or(0.0),
        };
        let keep = p / -(-self.mean_max).exp_m1();
        if self.skip_rng.uniform() < keep {
            let mu = self.mus.get(i).copied().unwrap_or(0.0);
            self.emit_pulse(k, choice, mu);
        }
        self.next_slot = self.skip_from(k + 1);
        self.update_frontier();
    }

    fn emit_pulse(&mut self, k: u64, choice: TxChoice, mu: f64) {
        self.stats.detected_pulses += 1;
        let (encoding, p_z, e_d) = (
            self.scenario.encoding,
            self.scenario.p_z,
            self.scenario.misalignment,
        );
        let jitter_ps = self.scenario.jitter_ps;
        let mut rng = Stream::from_state(splitmix_at(self.photon_key, k));
        let n = self.source.draw_nonzero(mu, self.eta, &mut rng);
        self.stats.photons += u64::from(n);
        self.hits.clear();
        let resolving = self.pixels.is_some();
        for _ in 0..n {
            let h = optics::route(encoding, p_z, e_d, choice, &mut rng);
            // Threshold detectors merge photons at one outcome; pixels need every photon.
            if resolving || !self.hits.contains(&h) {
                self.hits.push(h);
            }
        }
        self.hits.sort_unstable();
        let start = self.clock.slot_start_ps(k);
        let period = self.clock.period_at_ps(start);
        for i in 0..self.hits.len() {
            let Some(h) = self.hits.get(i).copied() else {
                continue;
            };
            let mut level = 1u8;
            if let Some(px) = self.pixels.as_mut() {
                if i > 0 && self.hits.get(i - 1) == Some(&h) {
                    continue;
                }
                let photons = self.hits.iter().skip(i).take_while(|&&x| x == h).count() as u32;
                let t_nominal = start + optics::position_fraction(encoding, h.pos) * period;
                let fired = px
                    .get_mut(usize::from(h.detector))
                    .map_or(photons, |p| p.fire(photons, t_nominal, &mut rng));
                self.stats.pixel_recovery_lost += u64::from(photons - fired);
                if fired == 0 {
                    continue;
                }
                level = fired.min(u32::from(slotwise::gates::MAX_LEVEL)) as u8;
            }
            let skew = self
                .skews_ps
                .get(usize::from(h.detector))
                .copied()
                .unwrap_or(0.0);
            let jitter = jitter_ps * rng.normal();
            let pos = optics::position_fraction(encoding, h.pos) * period;
            self.push(Candidate {
                t_ps: start + pos + skew + jitter,
                detector: h.detector,
                kind: Kind::Signal,
                slot: Some(k),
                position: Some(h.pos),
                source: SOURCE_PLAIN,
                level,
            });
        }
    }

    fn push(&mut self, c: Candidate) {
        if let Some(g) = self.stats.generated.get_mut(c.kind as usize) {
            *g += 1;
        }
        self.heap.push(c);
    }

    /// Queue a click at `t_ps` on `detector` with no slot behind it (dark count or fault light),
    /// tagged with its `source`.
    fn push_dark(&mut self, t_ps: f64, detector: u8, source: u8) {
        self.push(Candidate {
            t_ps,
            detector,
            kind: Kind::Dark,
            slot: None,
            position: None,
            source,
            level: 1,
        });
    }

    fn schedule_dark(&mut self, d: u8, after_ps: f64) {
        let Some(mean) = self.dark_mean_ps else {
            return;
        };
        let Some(rng) = self.dark_rng.get_mut(usize::from(d)) else {
            return;
        };
        let t = after_ps + rng.exponential(mean);
        if t < self.end_ps {
            self.push_dark(t, d, SOURCE_PLAIN);
        }
    }

    /// Next click of saturating light `i` at or after `after_ps` (faults). Clicks falling in the
    /// detector's dead time are never registered, so the draw starts where the dead time ends;
    /// for a Poisson light that is exact (memoryless).
    fn schedule_bright(&mut self, i: usize, after_ps: f64) {
        let Some(&(d, from, to, gap)) = self.bright.get(i) else {
            return;
        };
        let dead_end = self
            .last_registered_ps
            .get(usize::from(d))
            .copied()
            .unwrap_or(f64::NEG_INFINITY)
            + self.dead_ps;
        let Some(rng) = self.bright_rng.get_mut(i) else {
            return;
        };
        let t = after_ps.max(from).max(dead_end) + rng.exponential(gap);
        if t < to && t < self.end_ps {
            self.push_dark(t, d, SOURCE_BRIGHT + i as u8);
        }
    }

    /// Next event of stray channel `i` after `after_ps` (faults).
    fn schedule_stray(&mut self, i: usize, after_ps: f64) {
        let Some(&(ch, gap)) = self.stray.get(i) else {
            return;
        };
        let Some(rng) = self.stray_rng.get_mut(i) else {
            return;
        };
        let t = after_ps + rng.exponential(gap);
        if t < self.end_ps {
            self.push_dark(t, ch, SOURCE_STRAY + i as u8);
        }
    }

    /// The next detection in merge order (time order unless a merger fault reorders), or `None`
    /// at the end of the run.
    pub fn next_event(&mut self) -> Option<SimEvent> {
        let Some(mut m) = self.merger.take() else {
            return self.next_in_time();
        };
        let out = self.next_merged(&mut m);
        self.merger = Some(m);
        out
    }

    /// The merger fault: each event is let out at its time plus a uniform delay in
    /// [0, reorder_ps); one is released once no later detection can be let out before it.
    fn next_merged(&mut self, m: &mut Merger) -> Option<SimEvent> {
        loop {
            if m.next.is_none() && !m.done {
                m.next = self.next_in_time();
                m.done = m.next.is_none();
            }
            let release = match (m.held.peek(), m.next) {
                (Some(h), Some(e)) => h.out_ps <= e.truth.true_t_ps,
                (Some(_), None) => true,
                (None, _) => false,
            };
            if release {
                let h = m.held.pop()?;
                if h.event.truth.true_t_ps < m.newest_out_ps {
                    self.stats.reordered += 1;
                }
                m.newest_out_ps = m.newest_out_ps.max(h.event.truth.true_t_ps);
                return Some(h.event);
            }
            let e = m.next.take()?;
            let copies = if m.rng.bernoulli(m.duplicate_prob) {
                self.stats.duplicates += 1;
                2
            } else {
                1
            };
            let out_ps = e.truth.true_t_ps + m.rng.uniform() * m.reorder_ps;
            for _ in 0..copies {
                m.seq += 1;
                m.held.push(Held {
                    out_ps,
                    seq: m.seq,
                    event: e,
                });
            }
        }
    }

    /// The next detection in time order, or `None` at the end of the run.
    fn next_in_time(&mut self) -> Option<SimEvent> {
        loop {
            while self.next_slot < self.slots
                && self.heap.peek().is_none_or(|c| self.frontier_ps <= c.t_ps)
            {
                self.advance_photons();
            }
            let c = self.heap.pop()?;
            let d = usize::from(c.detector);
            match c.source {
                SOURCE_PLAIN if c.kind == Kind::Dark => self.schedule_dark(c.detector, c.t_ps),
                s if s >= SOURCE_STRAY => {
                    self.schedule_stray(usize::from(s - SOURCE_STRAY), c.t_ps)
                }
                // Signal and afterpulses need no follow-up; the next bright click is drawn once
                // this one's fate is known (below).
                _ => {}
            }
            let last = self
                .last_registered_ps
                .get(d)
                .copied()
                .unwrap_or(f64::NEG_INFINITY);
            let bright = (SOURCE_BRIGHT..SOURCE_STRAY)
                .contains(&c.source)
                .then(|| usize::from(c.source - SOURCE_BRIGHT));
            if c.t_ps < last + self.dead_ps {
                if let Some(x) = self.stats.dead_time_lost.get_mut(c.kind as usize) {
                    *x += 1;
                }
                if let Some(i) = bright {
                    self.schedule_bright(i, c.t_ps);
                }
                continue;
            }
            if let Some(l) = self.last_registered_ps.get_mut(d) {
                *l = c.t_ps;
            }
            if let Some(i) = bright {
                self.schedule_bright(i, c.t_ps);
            }
            self.maybe_afterpulse(c);
            if let Some(x) = self.stats.emitted.get_mut(c.kind as usize) {
                *x += 1;
            }
            if bright.is_some() {
                self.stats.bright += 1;
            } else if c.source >= SOURCE_STRAY {
                self.stats.stray += 1;
            }
            return Some(SimEvent {
                event: TdcEvent {
                    count: self.tdc_count(c.t_ps),
                    channel: if self.pixels.is_some() {
                        slotwise::gates::level_channel(c.detector, c.level)
                    } else {
                        c.detector
                    },
                },
                truth: Truth {
                    true_t_ps: c.t_ps,
                    slot: c.slot,
                    kind: c.kind,
                    position: c.position,
                },
            });
        }
    }

    fn maybe_afterpulse(&mut self, c: Candidate) {
        let p = self
            .storms
            .iter()
            .find(|&&(a, b, _)| a <= c.t_ps && c.t_ps < b)
            .map_or(self.scenario.afterpulse_prob, |&(_, _, p)| p);
        let mean = self.ap_mean_ps;
        let Some(rng) = self.ap_rng.get_mut(usize::from(c.detector)) else {
            return;
        };
        if p <= 0.0 || !rng.bernoulli(p) {
            return;
        }
        let t = c.t_ps + rng.exponential(mean);
        if t < self.end_ps {
            self.push(Candidate {
                t_ps: t,
                detector: c.detector,
                kind: Kind::Afterpulse,
                slot: None,
                position: None,
                source: SOURCE_PLAIN,
                level: 1,
            });
        } else {
            self.stats.afterpulses_after_end += 1;
        }
    }

    /// Unbounded TDC tick count at true time `t_ps`: start + floor(t / resolution).
    fn ticks(&self, t_ps: f64) -> u128 {
        let res = f64::from(self.scenario.tdc_resolution_ps);
        u128::from(self.scenario.tdc_start_ticks) + (t_ps.max(0.0) / res).floor() as u128
    }

    /// The counter value the TDC reports at true time `t_ps`.
    pub fn tdc_count(&self, t_ps: f64) -> u64 {
        (self.ticks(t_ps) as u64) & self.tdc_mask
    }
}

impl Iterator for Simulator {
    type Item = SimEvent;

    fn next(&mut self) -> Option<SimEvent> {
        self.next_event()
    }
}

#[cfg(test)]
mod tests;
