//! Links for the clock benchmark: variants of the default bench scenario with a chosen per-slot
//! detection probability and noise fraction, and the feed of delay-corrected detections that the
//! receiver would hand its clock (the core's unwrapper, then the gate table's channel delays).

use crate::clocks::{self, ClockMode, ClockStages, HostClock, HostRecovered};
use crate::scenario::Scenario;
use crate::sim::{self, Kind, SimEvent, Simulator};
use serde::Serialize;
use slotwise::{GateTable, UnwrapConfig, Unwrapper};
use std::error::Error;

/// Per-channel skews of the benchmark links, ps (invented; the gate table subtracts them).
pub const SKEWS_PS: [i64; 3] = [0, 140, -90];

/// Noise-only links: every detector's dark-count rate, Hz (100 k detections/s in all).
pub const NOISE_ONLY_DARK_HZ: f64 = 33_333.0;

/// One point of the link grid.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct LinkPoint {
    /// Per-slot probability of a signal detection.
    pub p_slot: f64,
    /// Dark counts as a fraction of all detections.
    pub noise_fraction: f64,
    /// Transmitter clock drift, ppm per second.
    pub drift_ppm_per_s: f64,
}

/// Something done to the detection stream at a given time on the receiver's time base.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum LinkEvent {
    /// No detections at all in `[from_ps, to_ps)`.
    Blackout {
        /// Start, ps.
        from_ps: u64,
        /// End (exclusive), ps.
        to_ps: u64,
    },
    /// From `at_ps` on, every detection arrives `shift_ps` later (an arrival phase jump).
    PhaseJump {
        /// Time of the jump, ps.
        at_ps: u64,
        /// Delay added, ps.
        shift_ps: u64,
    },
}

/// Splitmix64 of `x` (Steele, Lea, Flood, OOPSLA 2014; common practice as a seed mixer).
pub fn mix(x: u64) -> u64 {
    let mut z = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Transmitter offset of seed `seed`, ppm: uniform in ±(`prior_ppm` − 10).
pub fn offset_for_seed(seed: u64, prior_ppm: u32) -> f64 {
    let u = (mix(seed ^ 0x000F_F5E7) >> 11) as f64 / (1u64 << 53) as f64;
    (2.0 * u - 1.0) * (f64::from(prior_ppm) - 10.0).max(0.0)
}

/// Per-slot detection probability Σ_c prob_c·(1 − e^(−μ_c·η)) of a scenario at transmittance η.
fn p_slot_at(s: &Scenario, eta: f64) -> f64 {
    s.intensities
        .iter()
        .zip(&s.intensity_probs)
        .map(|(mu, p)| p * -(-mu * eta).exp_m1())
        .sum()
}

/// The default bench link (BRIEF §6) changed to the grid point: attenuation for `p_slot`, dark
/// counts for the noise fraction, no afterpulses (noise is dark counts only), skewed channels,
/// the given offset and drift, and a duration long enough for `detections` detections.
pub fn scenario(
    pt: &LinkPoint,
    seed: u64,
    offset_ppm: f64,
    detections: f64,
) -> Result<Scenario, Box<dyn Error>> {
    scenario_from(Scenario::default_bench(), pt, seed, offset_ppm, detections)
}

/// [`scenario`] starting from `base` instead of the default bench link (its repetition rate,
/// jitter and protocol kept).
pub fn scenario_from(
    base: Scenario,
    pt: &LinkPoint,
    seed: u64,
    offset_ppm: f64,
    detections: f64,
) -> Result<Scenario, Box<dyn Error>> {
    let mut s = base;
    s.name = format!(
        "bench-sync-p{:.0e}-noise{:.0}",
        pt.p_slot,
        pt.noise_fraction * 100.0
    );
    s.seed = seed;
    s.afterpulse_prob = 0.0;
    s.clock_offset_ppm = offset_ppm;
    s.clock_drift_ppm_per_s = pt.drift_ppm_per_s;
    s.channel_delays_ps = Some(SKEWS_PS.to_vec());
    // p_slot is monotone in η: bisection on log η.
    let (mut lo, mut hi) = (1e-12f64, 1.0f64);
    for _ in 0..200 {
        let mid = (lo * hi).sqrt();
        if p_slot_at(&s, mid) < pt.p_slot {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let loss_db = -10.0 * (hi / s.detector_efficiency).log10();
    s.extra_loss_db = (loss_db - s.fiber_km * s.fiber_db_per_km).max(0.0);
    let signal_hz = pt.p_slot * s.rep_rate_hz;
    let noise_hz = signal_hz * pt.noise_fraction / (1.0 - pt.noise_fraction);
    s.dark_count_hz = noise_hz / f64::from(sim::channels(&s));
    s.duration_s = (detections / (signal_hz + noise_hz)).clamp(1e-3, 1000.0);
    s.validate(&s.name)?;
    Ok(s)
}

/// A link with dark counts only (signal attenuated by 100 dB and dropped from the feed).
pub fn noise_only_scenario(seed: u64, duration_s: f64) -> Result<Scenario, Box<dyn Error>> {
    noise_only_with(seed, duration_s, NOISE_ONLY_DARK_HZ, None)
}

/// [`noise_only_scenario`] with `dark_hz` per detector and, when given, the transmitter clock's
/// drift in ppm/s (which sets the acquisition's drift allowance, [`clocks::recovered_params`]).
pub fn noise_only_with(
    seed: u64,
    duration_s: f64,
    dark_hz: f64,
    drift_ppm_per_s: Option<f64>,
) -> Result<Scenario, Box<dyn Error>> {
    let mut s = Scenario::default_bench();
    s.name = "bench-sync-noise-only".into();
    s.seed = seed;
    s.afterpulse_prob = 0.0;
    s.extra_loss_db = 100.0;
    s.dark_count_hz = dark_hz;
    if let Some(d) = drift_ppm_per_s {
        s.clock_drift_ppm_per_s = d;
    }
    s.channel_delays_ps = Some(SKEWS_PS.to_vec());
    s.duration_s = duration_s;
    s.validate(&s.name)?;
    Ok(s)
}

/// The core's gate table for a scenario's receiver.
pub fn gate_table(s: &Scenario) -> Result<GateTable, Box<dyn Error>> {
    Ok(*crate::setup::ReceiverSetup::from_scenario(s)?
        .checked
        .receiver
        .gates())
}

/// Environment variable that sets the tracking loop's `update_every` for this benchmark only.
pub const UPDATE_EVERY_VAR: &str = "SLOTWISE_BENCH_UPDATE_EVERY";

/// A cold recovered clock configured from the scenario as the host does ([`clocks::build`]),
/// with the loop decimated when [`UPDATE_EVERY_VAR`] is set.
pub fn cold_clock(
    s: &Scenario,
    gates: &GateTable,
    prior_ppm: u32,
) -> Result<HostRecovered, Box<dyn Error>> {
    if let Ok(n) = std::env::var(UPDATE_EVERY_VAR) {
        let (a, mut t) = clocks::recovered_params(s, prior_ppm);
        t.update_every = n.parse()?;
        // Links whose loop is already near B_n·T_u = 0.1 get the largest N that keeps it.
        let track = loop {
            match slotwise::TrackConfig::new(t) {
                Err(slotwise::track::TrackConfigError::TooWide) if t.update_every > 1 => {
                    t.update_every /= 2;
                }
                r => break r?,
            }
        };
        let cfg = slotwise::recovered::RecoveredConfig::new(
            slotwise::AcquireConfig::new(a)?,
            track,
            clocks::REACQUIRE_PPM,
        )?;
        let pattern = slotwise::acquire::fold::ArrivalPattern::from_gates(gates);
        return Ok(HostRecovered::new(cfg, pattern)?);
    }
    match clocks::build(s, gates, ClockMode::Recovered, prior_ppm)? {
        ClockStages {
            clock: HostClock::Recovered(c),
            ..
        } => Ok(*c),
        _ => Err("clocks::build returned a reference clock".into()),
    }
}

/// One detection as the clock sees it, with the simulator's truth beside it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Det {
    /// Delay-corrected time on the unwrapped time base, ps.
    pub t_ps: u64,
    /// TDC channel.
    pub channel: u8,
    /// Slot of the pulse behind a signal detection; `None` for noise.
    pub slot: Option<u64>,
}

/// Simulator → unwrapper → link events → channel delays, as an iterator of [`Det`].
#[derive(Debug)]
pub struct Feed {
    sim: Simulator,
    unwrapper: Unwrapper,
    gates: GateTable,
    events: Vec<LinkEvent>,
    noise_only: bool,
    block: Vec<SimEvent>,
    next: usize,
    /// Events the time base or the delay subtraction refused.
    pub rejected: u64,
    /// Detections removed by blackouts.
    pub blacked_out: u64,
    /// Signal detections removed from a noise-only feed.
    pub signal_removed: u64,
}

impl Feed {
    /// A feed of the scenario's detections with `events` applied.
    pub fn new(
        s: &Scenario,
        gates: &GateTable,
        events: Vec<LinkEvent>,
    ) -> Result<Self, Box<dyn Error>> {
        Ok(Self {
            sim: Simulator::new(s),
            unwrapper: Unwrapper::new(UnwrapConfig::new(s.tdc_bits, s.tdc_resolution_ps)?),
            gates: *gates,
            events,
            noise_only: false,
            block: Vec::with_capacity(4096),
            next: 0,
            rejected: 0,
            blacked_out: 0,
            signal_removed: 0,
        })
    }

    /// Drop every signal detection (a noise-only stream).
    pub fn noise_only(mut self) -> Self {
        self.noise_only = true;
        self
    }

    /// True period at slot 0, ps.
    pub fn true_period_ps(&self) -> f64 {
        self.sim.clock().initial_period_ps()
    }

    /// True period at receiver time `t_ps` (time base ≈ true time: 1 ps ticks from 0), ps.
    pub fn period_at_ps(&self, t_ps: u64) -> f64 {
        self.sim.clock().period_at_ps(t_ps as f64)
    }

    /// Transmitter phase at receiver time `t_ps`, slots since the start of slot 0.
    pub fn phase_slots(&self, t_ps: u64) -> f64 {
        self.sim.clock().phase_slots(t_ps as f64)
    }

    fn next_sim(&mut self) -> Option<SimEvent> {
        if self.next >= self.block.len() {
            self.next = 0;
            if self.sim.next_block(&mut self.block, 4096) == 0 {
                return None;
            }
        }
        let e = self.block.get(self.next).copied();
        self.next += 1;
        e
    }
}

impl Iterator for Feed {
    type Item = Det;

    fn next(&mut self) -> Option<Det> {
        'events: loop {
            let e = self.next_sim()?;
            if self.noise_only && e.truth.kind == Kind::Signal {
                self.signal_removed += 1;
                continue;
            }
            let Ok(d) = self.unwrapper.unwrap(e.event) else {
                self.rejected += 1;
                continue;
            };
            let mut t = d.t_ps;
            for ev in &self.events {
                match *ev {
                    LinkEvent::Blackout { from_ps, to_ps } if (from_ps..to_ps).contains(&t) => {
                        self.blacked_out += 1;
                        continue 'events;
                    }
                    LinkEvent::PhaseJump { at_ps, shift_ps } if t >= at_ps => t += shift_ps,
                    _ => {}
                }
            }
            let corrected = self
                .gates
                .delay_ps(d.channel)
                .and_then(|delay| t.checked_add_signed(delay.wrapping_neg()));
            let Some(t_ps) = corrected else {
                self.rejected += 1;
                continue;
            };
            return Some(Det {
                t_ps,
                channel: d.channel,
                slot: e.truth.slot,
            });
        }
    }
}

/// Map `f` over `items` on `threads` scoped threads; results keep the input order.
pub fn par_map<T: Sync, R: Send>(
    items: &[T],
    threads: usize,
    f: impl Fn(&T) -> R + Sync,
) -> Vec<R> {
    use std::sync::atomic::{AtomicUsize, Ordering};
    let next = AtomicUsize::new(0);
    let mut parts: Vec<Vec<(usize, R)>> = std::thread::scope(|sc| {
        let workers: Vec<_> = (0..threads.max(1))
            .map(|_| {
                sc.spawn(|| {
                    let mut mine = Vec::new();
                    loop {
                        let i = next.fetch_add(1, Ordering::Relaxed);
                        let Some(item) = items.get(i) else { break };
                        mine.push((i, f(item)));
                    }
                    mine
                })
            })
            .collect();
        workers
            .into_iter()
            .map(|w| w.join().unwrap_or_else(|e| std::panic::resume_unwind(e)))
            .collect()
    });
    let mut all: Vec<(usize, R)> = parts.drain(..).flatten().collect();
    all.sort_by_key(|(i, _)| *i);
    all.into_iter().map(|(_, r)| r).collect()
}

/// Median of a sample (mean of the middle two for even sizes); `None` when empty.
pub fn median(xs: &[f64]) -> Option<f64> {
    let mut v: Vec<f64> = xs.iter().copied().filter(|x| !x.is_nan()).collect();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    match n {
        0 => None,
        _ if n % 2 == 1 => v.get(n / 2).copied(),
        _ => Some((v.get(n / 2 - 1)? + v.get(n / 2)?) / 2.0),
    }
}

/// Largest value of a sample; `None` when empty.
pub fn max(xs: &[f64]) -> Option<f64> {
    xs.iter().copied().filter(|x| !x.is_nan()).reduce(f64::max)
}

/// Root mean square of a sample; `None` when empty.
pub fn rms(xs: &[f64]) -> Option<f64> {
    (!xs.is_empty()).then(|| (xs.iter().map(|x| x * x).sum::<f64>() / xs.len() as f64).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grid_point_sets_the_detection_probability_and_noise() {
        let pt = LinkPoint {
            p_slot: 1e-3,
            noise_fraction: 0.25,
            drift_ppm_per_s: 0.0,
        };
        let s = scenario(&pt, 3, 12.0, 20_000.0).unwrap();
        let gates = gate_table(&s).unwrap();
        let dets: Vec<Det> = Feed::new(&s, &gates, vec![]).unwrap().collect();
        let n = dets.len() as f64;
        let noise = dets.iter().filter(|d| d.slot.is_none()).count() as f64;
        let signal = n - noise;
        // Binomial proportions within 4 standard deviations (common practice); dead time
        // removes about 0.1 % of the clicks at this rate.
        let sd = (0.25 * 0.75 / n).sqrt();
        assert!((noise / n - 0.25).abs() < 4.0 * sd + 2e-3, "{}", noise / n);
        let slots = s.slots() as f64;
        let sd = (1e-3 / slots).sqrt();
        assert!((signal / slots - 1e-3).abs() < 4.0 * sd + 2e-6, "{signal}");
    }

    #[test]
    fn events_shift_and_remove_detections() {
        let pt = LinkPoint {
            p_slot: 1e-2,
            noise_fraction: 0.0,
            drift_ppm_per_s: 0.0,
        };
        let s = scenario(&pt, 4, 0.0, 5_000.0).unwrap();
        let gates = gate_table(&s).unwrap();
        let plain: Vec<Det> = Feed::new(&s, &gates, vec![]).unwrap().collect();
        let ev = vec![
            LinkEvent::Blackout {
                from_ps: 1_000_000_000,
                to_ps: 2_000_000_000,
            },
            LinkEvent::PhaseJump {
                at_ps: 3_000_000_000,
                shift_ps: 3_700,
            },
        ];
        let mut feed = Feed::new(&s, &gates, ev).unwrap();
        let changed: Vec<Det> = feed.by_ref().collect();
        let dark = plain
            .iter()
            .filter(|d| {
                let raw = d.t_ps as i64 + s.delays_ps()[usize::from(d.channel)];
                (1_000_000_000..2_000_000_000).contains(&raw)
            })
            .count();
        assert!(dark > 0);
        assert_eq!(feed.blacked_out as usize, dark);
        assert_eq!(changed.len() + dark, plain.len());
        let kept: Vec<&Det> = plain
            .iter()
            .filter(|d| {
                let raw = d.t_ps as i64 + s.delays_ps()[usize::from(d.channel)];
                !(1_000_000_000..2_000_000_000).contains(&raw)
            })
            .collect();
        for (a, b) in kept.iter().zip(&changed) {
            let raw = a.t_ps as i64 + s.delays_ps()[usize::from(a.channel)];
            let shift = if raw >= 3_000_000_000 { 3_700 } else { 0 };
            assert_eq!(b.t_ps, a.t_ps + shift);
        }
    }

    #[test]
    fn helpers() {
        assert_eq!(median(&[3.0, 1.0, 2.0]), Some(2.0));
        assert_eq!(median(&[4.0, 1.0, 2.0, 3.0]), Some(2.5));
        assert_eq!(median(&[]), None);
        assert_eq!(max(&[1.0, 5.0, 2.0]), Some(5.0));
        assert_eq!(rms(&[3.0, 4.0]), Some(12.5f64.sqrt()));
        let squares = par_map(&[1u64, 2, 3, 4, 5], 2, |x| x * x);
        assert_eq!(squares, vec![1, 4, 9, 16, 25]);
        let a = offset_for_seed(1, 200);
        assert!(a.abs() <= 190.0 && a != offset_for_seed(2, 200));
    }
}
