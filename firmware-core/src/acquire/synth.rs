//! Synthetic detection streams for the clock tests (host floats; test builds only).
//!
//! Signal: each slot is detected with probability p (Bernoulli per slot, drawn as geometric
//! gaps); the detection lands at the slot start plus its channel's position plus Gaussian jitter.
//! Noise: a Poisson process, uniform in time. The transmitter's frequency is f0·(1 + y0 + D·t)
//! with optional frequency steps, arrival phase jumps, and blackouts.

use crate::gates::{Basis, Gate, GateTable};
use fixed::types::U0F32;

/// The time-bin receiver the clock tests use: channel 0 sees the early and late bins, channel 1
/// the three interferometer positions (every window tagged Z0: only positions matter here).
pub(crate) fn time_bin_table() -> GateTable {
    let g = |channel, a: f64, b: f64| Gate {
        channel,
        start: U0F32::from_num(a),
        end: U0F32::from_num(b),
        basis: Basis::Z,
        bit: 0,
    };
    let windows = [
        g(0, 0.05, 0.2),
        g(0, 0.55, 0.7),
        g(1, 0.05, 0.2),
        g(1, 0.3, 0.45),
        g(1, 0.55, 0.7),
    ];
    match GateTable::new(&[0, 0], &windows) {
        Ok(t) => t,
        Err(e) => panic!("test gate table: {e}"),
    }
}

/// Something that happens to the link at a given time.
#[derive(Clone, Copy, Debug)]
pub enum Event {
    /// From `at_ps` on, signal arrives `slots` of a slot later.
    PhaseJump { at_ps: f64, slots: f64 },
    /// At `at_ps` the transmitter frequency steps by `ppm` (phase continuous).
    FreqStep { at_ps: f64, ppm: f64 },
    /// No detections at all between the two times.
    Blackout { from_ps: f64, to_ps: f64 },
}

/// A link scenario.
#[derive(Clone, Debug)]
pub struct Scenario {
    /// Nominal period T0 in ps.
    pub period_ps: f64,
    /// Transmitter frequency offset from nominal, ppm.
    pub offset_ppm: f64,
    /// Linear frequency drift, ppm per second.
    pub drift_ppm_per_s: f64,
    /// Signal detection probability per slot.
    pub p_slot: f64,
    /// Fraction of all detections that are noise.
    pub noise_fraction: f64,
    /// Gaussian jitter RMS in ps.
    pub jitter_ps: f64,
    /// (channel, expected positions, relative signal weight).
    pub channels: Vec<(u8, Vec<f64>, f64)>,
    /// Per-channel extra delay in ps (a miscalibration the receiver should find).
    pub channel_skew_ps: Vec<f64>,
    /// Link events in time order.
    pub events: Vec<Event>,
    /// Time of slot 0's start in ps.
    pub start_ps: f64,
    /// Adjacent detections closer than this may be swapped (merge reordering), ps.
    pub reorder_ps: f64,
    /// RNG seed.
    pub seed: u64,
}

impl Scenario {
    /// A single-position (polarization-like) link on channel 0.
    pub fn simple(period_ps: f64, offset_ppm: f64, p_slot: f64, noise: f64, seed: u64) -> Self {
        Self {
            period_ps,
            offset_ppm,
            drift_ppm_per_s: 0.0,
            p_slot,
            noise_fraction: noise,
            jitter_ps: 35.0,
            channels: vec![(0, vec![0.5], 1.0)],
            channel_skew_ps: vec![0.0; 16],
            events: vec![],
            start_ps: 1.0e6,
            reorder_ps: 0.0,
            seed,
        }
    }
}

/// One generated detection with its truth.
#[derive(Clone, Copy, Debug)]
pub struct Det {
    /// Detection time in ps.
    pub t_ps: u64,
    /// Channel.
    pub channel: u8,
    /// True slot index for signal, `None` for noise.
    pub slot: Option<u64>,
}

/// Small deterministic RNG (xorshift64*).
#[derive(Clone, Debug)]
pub struct Rng(u64);

impl Rng {
    /// Seeded generator.
    pub fn new(seed: u64) -> Self {
        Self(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1)
    }
    /// Uniform u64.
    pub fn next_u64(&mut self) -> u64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        self.0.wrapping_mul(0x2545_F491_4F6C_DD1D)
    }
    /// Uniform in (0, 1).
    pub fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    /// Standard normal (Box–Muller).
    pub fn normal(&mut self) -> f64 {
        let (a, b) = (self.uniform(), self.uniform());
        (-2.0 * a.ln()).sqrt() * (2.0 * core::f64::consts::PI * b).cos()
    }
}

#[derive(Clone, Copy, Debug)]
struct Segment {
    t: f64,
    n: f64,
    y: f64,
}

/// Iterator over the detections of a scenario, in (nearly) time order.
#[derive(Clone, Debug)]
pub struct Stream {
    sc: Scenario,
    rng: Rng,
    segs: Vec<Segment>,
    d_per_ps: f64,
    slot: u64,
    next_sig: Option<Det>,
    next_noise: f64,
    noise_rate: f64,
    held: Option<Det>,
    weights: f64,
}

impl Stream {
    /// Start generating.
    pub fn new(sc: Scenario) -> Self {
        let d_per_ps = sc.drift_ppm_per_s * 1e-6 / 1e12;
        let mut segs = vec![Segment {
            t: sc.start_ps,
            n: 0.0,
            y: sc.offset_ppm * 1e-6,
        }];
        for e in &sc.events {
            if let Event::FreqStep { at_ps, ppm } = *e {
                let s = *segs.last().unwrap();
                let tau = at_ps - s.t;
                let n = s.n + ((1.0 + s.y) * tau + d_per_ps * tau * tau / 2.0) / sc.period_ps;
                let y = s.y + d_per_ps * tau + ppm * 1e-6;
                segs.push(Segment { t: at_ps, n, y });
            }
        }
        let sig_rate = sc.p_slot / sc.period_ps;
        let noise_rate = sig_rate * sc.noise_fraction / (1.0 - sc.noise_fraction);
        let weights = sc.channels.iter().map(|c| c.2).sum();
        let mut s = Self {
            rng: Rng::new(sc.seed),
            sc,
            segs,
            d_per_ps,
            slot: 0,
            next_sig: None,
            next_noise: 0.0,
            noise_rate,
            held: None,
            weights,
        };
        s.next_noise = s.sc.start_ps + s.exp_gap();
        s.next_sig = s.gen_signal();
        s
    }

    fn exp_gap(&mut self) -> f64 {
        if self.noise_rate <= 0.0 {
            return f64::INFINITY;
        }
        -self.rng.uniform().ln() / self.noise_rate
    }

    /// Start time (ps) of slot `n`.
    pub fn slot_time(&self, n: f64) -> f64 {
        let s = self
            .segs
            .iter()
            .rev()
            .find(|s| s.n <= n)
            .copied()
            .unwrap_or(self.segs[0]);
        let dn = (n - s.n) * self.sc.period_ps;
        let a = 1.0 + s.y;
        s.t + 2.0 * dn / (a + (a * a + 2.0 * self.d_per_ps * dn).sqrt())
    }

    /// True period (ps) at time `t`.
    pub fn period_at(&self, t: f64) -> f64 {
        let s = self
            .segs
            .iter()
            .rev()
            .find(|s| s.t <= t)
            .copied()
            .unwrap_or(self.segs[0]);
        self.sc.period_ps / (1.0 + s.y + self.d_per_ps * (t - s.t))
    }

    fn pick_channel(&mut self) -> usize {
        let mut u = self.rng.uniform() * self.weights;
        for (i, c) in self.sc.channels.iter().enumerate() {
            u -= c.2;
            if u <= 0.0 {
                return i;
            }
        }
        self.sc.channels.len() - 1
    }

    fn gen_signal(&mut self) -> Option<Det> {
        let p = self.sc.p_slot;
        let gap = if p >= 1.0 {
            0.0
        } else {
            ((1.0 - self.rng.uniform()).ln() / (1.0 - p).ln()).floor()
        };
        self.slot += 1 + gap as u64;
        let ts = self.slot_time(self.slot as f64);
        let ci = self.pick_channel();
        let (ch, ref pos, _) = self.sc.channels[ci];
        let a = pos[(self.rng.next_u64() % pos.len() as u64) as usize];
        let jump: f64 = self
            .sc
            .events
            .iter()
            .filter_map(|e| match *e {
                Event::PhaseJump { at_ps, slots } if at_ps <= ts => Some(slots),
                _ => None,
            })
            .sum();
        let period = self.period_at(ts);
        let skew = self
            .sc
            .channel_skew_ps
            .get(usize::from(ch))
            .copied()
            .unwrap_or(0.0);
        let t = ts + (a + jump) * period + skew + self.sc.jitter_ps * self.rng.normal();
        Some(Det {
            t_ps: t.round().max(0.0) as u64,
            channel: ch,
            slot: Some(self.slot),
        })
    }

    fn merged(&mut self) -> Det {
        loop {
            let sig = self.next_sig.unwrap();
            let d = if (sig.t_ps as f64) <= self.next_noise {
                self.next_sig = self.gen_signal();
                sig
            } else {
                let t = self.next_noise;
                self.next_noise += self.exp_gap();
                let ci = (self.rng.next_u64() % self.sc.channels.len() as u64) as usize;
                Det {
                    t_ps: t.round() as u64,
                    channel: self.sc.channels[ci].0,
                    slot: None,
                }
            };
            let tf = d.t_ps as f64;
            let dark = self.sc.events.iter().any(
                |e| matches!(*e, Event::Blackout { from_ps, to_ps } if tf >= from_ps && tf < to_ps),
            );
            if !dark {
                return d;
            }
        }
    }
}

impl Iterator for Stream {
    type Item = Det;
    fn next(&mut self) -> Option<Det> {
        let d = self.held.take().unwrap_or_else(|| self.merged());
        if self.sc.reorder_ps > 0.0 {
            let n = self.merged();
            if n.t_ps.abs_diff(d.t_ps) as f64 <= self.sc.reorder_ps && self.rng.uniform() < 0.5 {
                self.held = Some(d);
                return Some(n);
            }
            self.held = Some(n);
        }
        Some(d)
    }
}
