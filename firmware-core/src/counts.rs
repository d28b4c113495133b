//! What live statistics count: the counts of one block (or a window, or since start) and the
//! validated settings that turn them into rates.
//!
//! `stats` fills these while detections pass and `alarms` judges them; both
//! read them from here, so neither imports the other to learn a type. The quantities and the
//! methods behind them (dead time of a non-paralysable detector, off-gate noise over 1 − duty)
//! are described in `stats`.

use crate::gates::{Basis, GateTable, MAX_CHANNELS};
use crate::tally::Tally;
use core::fmt;

/// Why a statistics configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum StatsConfigError {
    /// Block length of zero ps.
    ZeroBlock,
    /// Dead time not shorter than one block (ps).
    DeadTime(u64),
}

impl fmt::Display for StatsConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::ZeroBlock => write!(f, "block_ps must be positive"),
            Self::DeadTime(d) => write!(f, "dead_time_ps {d} must be shorter than one block"),
        }
    }
}

impl core::error::Error for StatsConfigError {}

/// Validated statistics settings: block length, detector dead time, per-channel gate duty.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StatsConfig {
    block_ps: u64,
    dead_time_ps: u64,
    channels: u8,
    duty_ppm: [u32; MAX_CHANNELS],
}

impl StatsConfig {
    /// Blocks of `block_ps` receiver time; `dead_time_ps` is the detectors' dead time; the gate
    /// duty per channel is read from `gates`.
    pub fn new(
        block_ps: u64,
        dead_time_ps: u64,
        gates: &GateTable,
    ) -> Result<Self, StatsConfigError> {
        if block_ps == 0 {
            return Err(StatsConfigError::ZeroBlock);
        }
        if dead_time_ps >= block_ps {
            return Err(StatsConfigError::DeadTime(dead_time_ps));
        }
        let mut duty = [0u64; MAX_CHANNELS];
        for g in gates.gates() {
            if let Some(d) = duty.get_mut(usize::from(g.channel)) {
                *d += u64::from(g.end.to_bits().saturating_sub(g.start.to_bits()));
            }
        }
        let mut duty_ppm = [0u32; MAX_CHANNELS];
        for (p, d) in duty_ppm.iter_mut().zip(duty) {
            *p = ((u128::from(d) * 1_000_000) >> 32).min(1_000_000) as u32;
        }
        Ok(Self {
            block_ps,
            dead_time_ps,
            channels: gates.channels(),
            duty_ppm,
        })
    }

    /// Block length in ps of receiver time.
    pub const fn block_ps(&self) -> u64 {
        self.block_ps
    }

    /// Detector dead time in ps.
    pub const fn dead_time_ps(&self) -> u64 {
        self.dead_time_ps
    }

    /// Channels described by the gate table.
    pub const fn channels(&self) -> u8 {
        self.channels
    }

    /// Summed gate width of `channel` as a fraction of the slot, ppm (0 for unknown channels).
    pub fn duty_ppm(&self, channel: u8) -> u32 {
        self.duty_ppm
            .get(usize::from(channel))
            .copied()
            .unwrap_or(0)
    }
}

/// Counts of one block, of the window, or since start.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Counts {
    /// Receiver time covered, ps.
    pub span_ps: u64,
    /// Time the clock was locked, ps.
    pub locked_ps: u64,
    /// Sifted bits by (basis, tx bit, intensity, basis, rx bit); unrevealed bits in `untested`.
    pub tally: Tally,
    /// Sifted bits.
    pub sifted: u64,
    /// Detections taken in (every fate, every channel).
    pub detections_in: u64,
    /// Detections per channel (channels ≥ [`MAX_CHANNELS`] are in `detections_in` only).
    pub detections: [u64; MAX_CHANNELS],
    /// Detections outside every gate, per channel.
    pub off_gate: [u64; MAX_CHANNELS],
    /// Slots with at least one gated detection.
    pub gated_slots: u64,
    /// Slots with two or more gated detections.
    pub multi_click_slots: u64,
    /// Gated detections in multi-click slots.
    pub multi_click_detections: u64,
}

impl Counts {
    /// All counts at zero.
    pub const fn new() -> Self {
        Self {
            span_ps: 0,
            locked_ps: 0,
            tally: Tally::new(),
            sifted: 0,
            detections_in: 0,
            detections: [0; MAX_CHANNELS],
            off_gate: [0; MAX_CHANNELS],
            gated_slots: 0,
            multi_click_slots: 0,
            multi_click_detections: 0,
        }
    }

    /// Add `o` into `self`, field by field.
    pub fn add(&mut self, o: &Counts) {
        self.span_ps += o.span_ps;
        self.locked_ps += o.locked_ps;
        let dst = self.tally.counts.iter_mut().flatten().flatten().flatten();
        let src = o.tally.counts.iter().flatten().flatten().flatten();
        for (d, s) in dst.flatten().zip(src.flatten()) {
            *d += s;
        }
        let dst = self.tally.untested.iter_mut().flatten();
        for (d, s) in dst.zip(o.tally.untested.iter().flatten()) {
            *d += s;
        }
        self.sifted += o.sifted;
        self.detections_in += o.detections_in;
        for (d, s) in self.detections.iter_mut().zip(o.detections) {
            *d += s;
        }
        for (d, s) in self.off_gate.iter_mut().zip(o.off_gate) {
            *d += s;
        }
        self.gated_slots += o.gated_slots;
        self.multi_click_slots += o.multi_click_slots;
        self.multi_click_detections += o.multi_click_detections;
    }

    /// (errors, tested) of one basis; `intensity = None` sums every class.
    pub fn errors(&self, basis: Basis, intensity: Option<u8>) -> (u64, u64) {
        self.tally.errors(basis, intensity)
    }

    /// QBER in ppm, `None` when nothing was tested.
    pub fn qber_ppm(&self, basis: Basis, intensity: Option<u8>) -> Option<u32> {
        self.tally.qber_ppm(basis, intensity)
    }

    /// Detection rate of `channel` in mHz (0 over an empty span).
    pub fn rate_mhz(&self, channel: u8) -> u64 {
        per_second_milli(get(&self.detections, channel), self.span_ps)
    }

    /// Fraction of time `channel` was dead, ppm: detections × τ over the span (capped at 1e6).
    pub fn dead_fraction_ppm(&self, channel: u8, dead_time_ps: u64) -> u32 {
        if self.span_ps == 0 {
            return 0;
        }
        let busy = u128::from(get(&self.detections, channel)) * u128::from(dead_time_ps);
        (busy * 1_000_000 / u128::from(self.span_ps)).min(1_000_000) as u32
    }

    /// Detections outside every gate of `channel` per second locked, mHz.
    pub fn off_gate_rate_mhz(&self, channel: u8) -> u64 {
        per_second_milli(get(&self.off_gate, channel), self.locked_ps)
    }

    /// Noise rate of `channel` estimated from its off-gate rate: off-gate / (1 − duty), mHz.
    pub fn noise_rate_mhz(&self, channel: u8, duty_ppm: u32) -> u64 {
        let outside = 1_000_000u128.saturating_sub(u128::from(duty_ppm));
        if outside == 0 {
            return 0;
        }
        (u128::from(self.off_gate_rate_mhz(channel)) * 1_000_000 / outside)
            .min(u128::from(u64::MAX)) as u64
    }

    /// Noise counts expected inside `channel`'s gates per second: noise rate × duty, mHz.
    pub fn in_gate_noise_mhz(&self, channel: u8, duty_ppm: u32) -> u64 {
        let n = u128::from(self.noise_rate_mhz(channel, duty_ppm));
        (n * u128::from(duty_ppm) / 1_000_000) as u64
    }

    /// Multi-click slots over slots with a gated detection, ppm.
    pub fn multi_click_ppm(&self) -> u32 {
        crate::bounds::fraction_ppm(self.multi_click_slots, self.gated_slots)
    }

    /// Multi-click slots per second, mHz.
    pub fn multi_click_rate_mhz(&self) -> u64 {
        per_second_milli(self.multi_click_slots, self.span_ps)
    }
}

fn get(a: &[u64; MAX_CHANNELS], channel: u8) -> u64 {
    a.get(usize::from(channel)).copied().unwrap_or(0)
}

/// `count` per `span_ps` as mHz: count × 1e15 / span (0 over an empty span).
fn per_second_milli(count: u64, span_ps: u64) -> u64 {
    if span_ps == 0 {
        return 0;
    }
    (u128::from(count) * 1_000_000_000_000_000 / u128::from(span_ps)).min(u128::from(u64::MAX))
        as u64
}
