//! The simulator's optional tables of a scenario, as the scenario file states them: `[faults]`
//! (field faults to inject, `docs/scenario.md`, "Faults"), `[pnr]` (photon-number-resolving
//! detectors) and `[source]` (the light source). The simulator gives them their physics
//! (`sim::faults`, `sim::pnr`, `sim::source`); here they are only read, written and checked.

use serde::{Deserialize, Serialize};

/// Fibre cut: no transmitted light reaches the receiver for a while (dark counts go on).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Blackout {
    /// Start, s of transmitter time since slot 0.
    pub from_s: f64,
    /// Length, s.
    pub duration_s: f64,
}

/// Arrival phase jump: every slot from `at_s` on arrives `slots` periods later.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PhaseJump {
    /// Time of the jump, s of transmitter time since slot 0.
    pub at_s: f64,
    /// Size of the jump, slot periods (fraction of a slot allowed; positive = later).
    pub slots: f64,
}

/// Step of the transmitter's frequency offset.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrequencyStep {
    /// Time of the step, s of transmitter time since slot 0.
    pub at_s: f64,
    /// Change of the offset, ppm (positive = faster).
    pub ppm: f64,
}

/// Extra linear drift of the transmitter's offset for a while (the offset reached is kept).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DriftRamp {
    /// Start, s of transmitter time since slot 0.
    pub from_s: f64,
    /// Length, s.
    pub duration_s: f64,
    /// Drift added during the ramp, ppm per second.
    pub ppm_per_s: f64,
}

/// Bright light on one detector: clicks at `rate_hz` before dead time, so the detector is dead
/// for a fraction n·τ/(1 + n·τ) of the window (non-paralysable model, common practice).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Saturation {
    /// Detector (TDC channel).
    pub channel: u8,
    /// Start, s of receiver time since slot 0.
    pub from_s: f64,
    /// Length, s.
    pub duration_s: f64,
    /// Click rate the light would cause without dead time, Hz.
    pub rate_hz: f64,
}

/// Afterpulse probability raised on every detector for a while.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AfterpulseStorm {
    /// Start, s of receiver time since slot 0.
    pub from_s: f64,
    /// Length, s.
    pub duration_s: f64,
    /// Afterpulse probability per registered click during the storm.
    pub prob: f64,
}

/// Events on a channel number the receiver's gate table does not describe.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StrayChannel {
    /// Channel number (at least the scenario's detector count).
    pub channel: u8,
    /// Rate, Hz (Poisson, no dead time).
    pub rate_hz: f64,
}

/// Merging the detector channels: neighbours reordered and some events repeated exactly.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Merge {
    /// Each event is emitted late by a uniform delay in [0, reorder_ps) of merge order (its
    /// timestamp is unchanged), ps: events come out of order by less than this.
    pub reorder_ps: f64,
    /// Probability that an event is emitted twice (exact duplicate).
    pub duplicate_prob: f64,
}

/// All faults of a scenario (the `[faults]` table; every list may be empty).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct Faults {
    /// Merger of detector channels (at most one).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub merge: Option<Merge>,
    /// Fibre cuts.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub blackout: Vec<Blackout>,
    /// Arrival phase jumps.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub phase_jump: Vec<PhaseJump>,
    /// Frequency steps.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub frequency_step: Vec<FrequencyStep>,
    /// Drift ramps.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub drift_ramp: Vec<DriftRamp>,
    /// Detector saturation.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub saturation: Vec<Saturation>,
    /// Afterpulse storms.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub afterpulse_storm: Vec<AfterpulseStorm>,
    /// Stray channel numbers.
    #[serde(skip_serializing_if = "Vec::is_empty")]
    pub stray_channel: Vec<StrayChannel>,
}

impl Faults {
    /// Whether no fault is configured.
    pub fn is_empty(&self) -> bool {
        *self == Self::default()
    }

    /// Check ranges against the run; `Err((key, message))` names the offending key.
    pub fn check(
        &self,
        duration_s: f64,
        channels: u8,
        dead_time_ns: f64,
    ) -> Result<(), (&'static str, String)> {
        let window = |key: &'static str, from: f64, len: f64| {
            if !(from.is_finite() && len.is_finite() && from >= 0.0 && len > 0.0) {
                return Err((
                    key,
                    format!("needs from_s ≥ 0 and duration_s > 0, got {from}, {len}"),
                ));
            }
            if from + len > duration_s * 1.01 + 1.0 {
                return Err((key, format!("{from} s + {len} s lies beyond the run")));
            }
            Ok(())
        };
        let instant = |key: &'static str, at: f64| {
            if at.is_finite() && at >= 0.0 && at <= duration_s {
                Ok(())
            } else {
                Err((key, format!("at_s must lie in [0, duration_s], got {at}")))
            }
        };
        if let Some(m) = self.merge {
            if !(m.reorder_ps.is_finite() && (0.0..=1e6).contains(&m.reorder_ps)) {
                return Err((
                    "faults.merge",
                    format!("reorder_ps must lie in [0,1e6], got {}", m.reorder_ps),
                ));
            }
            if !(m.duplicate_prob.is_finite() && (0.0..0.5).contains(&m.duplicate_prob)) {
                return Err((
                    "faults.merge",
                    format!(
                        "duplicate_prob must lie in [0,0.5), got {}",
                        m.duplicate_prob
                    ),
                ));
            }
        }
        for b in &self.blackout {
            window("faults.blackout", b.from_s, b.duration_s)?;
        }
        for j in &self.phase_jump {
            instant("faults.phase_jump", j.at_s)?;
            if !(j.slots.is_finite() && j.slots.abs() <= 1e6) {
                return Err((
                    "faults.phase_jump",
                    format!("slots must lie in ±1e6, got {}", j.slots),
                ));
            }
        }
        for f in &self.frequency_step {
            instant("faults.frequency_step", f.at_s)?;
            if !(f.ppm.is_finite() && f.ppm.abs() <= 1000.0) {
                return Err((
                    "faults.frequency_step",
                    format!("ppm must lie in ±1000, got {}", f.ppm),
                ));
            }
        }
        for r in &self.drift_ramp {
            window("faults.drift_ramp", r.from_s, r.duration_s)?;
            if !(r.ppm_per_s.is_finite() && (r.ppm_per_s * r.duration_s).abs() <= 1000.0) {
                return Err((
                    "faults.drift_ramp",
                    "ppm_per_s times duration_s must stay within ±1000 ppm".into(),
                ));
            }
        }
        for s in &self.saturation {
            window("faults.saturation", s.from_s, s.duration_s)?;
            if s.channel >= channels {
                return Err((
                    "faults.saturation",
                    format!("channel {} is not a detector", s.channel),
                ));
            }
            if !(s.rate_hz.is_finite() && s.rate_hz > 0.0 && s.rate_hz <= 1e13) {
                return Err((
                    "faults.saturation",
                    format!("rate_hz must lie in (0,1e13], got {}", s.rate_hz),
                ));
            }
            if dead_time_ns <= 0.0 {
                return Err(("faults.saturation", "needs a dead time above 0".into()));
            }
        }
        for s in &self.afterpulse_storm {
            window("faults.afterpulse_storm", s.from_s, s.duration_s)?;
            if !(s.prob.is_finite() && (0.0..1.0).contains(&s.prob)) {
                return Err((
                    "faults.afterpulse_storm",
                    format!("prob must lie in [0,1), got {}", s.prob),
                ));
            }
        }
        for s in &self.stray_channel {
            if s.channel < channels {
                return Err((
                    "faults.stray_channel",
                    format!(
                        "channel {} is a detector (stray channels start at {channels})",
                        s.channel
                    ),
                ));
            }
            if !(s.rate_hz.is_finite() && s.rate_hz > 0.0 && s.rate_hz <= 1e8) {
                return Err((
                    "faults.stray_channel",
                    format!("rate_hz must lie in (0,1e8], got {}", s.rate_hz),
                ));
            }
        }
        Ok(())
    }

    /// Fibre cuts as half-open slot ranges, sorted.
    pub fn blackout_slots(&self, rep_rate_hz: f64) -> Vec<(u64, u64)> {
        let mut v: Vec<(u64, u64)> = self
            .blackout
            .iter()
            .map(|b| {
                let a = (b.from_s * rep_rate_hz) as u64;
                (a, a + (b.duration_s * rep_rate_hz) as u64)
            })
            .collect();
        v.sort_unstable();
        v
    }
}

/// The `[pnr]` table of a scenario: every detector is a pixelated photon-number-resolving one.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PnrSpec {
    /// Pixels per detector (1..=64).
    pub pixels: u32,
    /// Detection efficiency of each pixel (fraction); replaces `detector_efficiency` in η.
    pub pixel_efficiency: f64,
    /// Recovery time of a pixel after it fires, ns.
    pub pixel_recovery_ns: f64,
}

/// The `[source]` table of a scenario.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SourceSpec {
    /// What emits the pulses.
    pub kind: SourceKind,
    /// g2(0) of a single-photon source (dimensionless, [0, 1]); ignored by the laser.
    #[serde(default)]
    pub g2: f64,
    /// Emission wavelength, nm (recorded for the reader; fibre loss and detector figures are
    /// given by their own keys).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub wavelength_nm: Option<f64>,
}

/// Source kinds.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SourceKind {
    /// Attenuated laser: Poisson photon numbers (g2(0) = 1).
    Laser,
    /// Sub-Poissonian source with the given g2(0).
    SinglePhoton,
}
