//! Field faults the simulator can inject, read from a scenario's `[faults]` table
//! (`docs/scenario.md`, "Faults").
//!
//! Transmitter-side faults are placed on the transmitter's slot axis (`at_s · rep_rate_hz` nominal
//! slots): a fibre cut removes the light of whole slots, a phase jump delays every later slot, a
//! frequency step or a drift ramp changes the oscillator. Receiver-side faults are placed on the
//! receiver's true time axis (seconds since the start of slot 0): a bright light saturating one
//! detector, an afterpulse storm, stray channel numbers, and a channel merger that reorders and
//! duplicates events. Every fault is seeded like the rest of the simulation.

pub use crate::scenario::specs::{
    AfterpulseStorm, Blackout, DriftRamp, Faults, FrequencyStep, Merge, PhaseJump, Saturation,
    StrayChannel,
};

/// A change of the transmitter clock at one slot.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct ClockChange {
    /// Slot at which it applies.
    pub slot: u64,
    /// Offset step, ppm.
    pub step_ppm: f64,
    /// Drift change, ppm per second.
    pub drift_ppm_per_s: f64,
    /// Phase jump, slot periods.
    pub jump_slots: f64,
}

impl Faults {
    /// Every clock change, sorted by slot.
    pub(crate) fn clock_changes(&self, rep_rate_hz: f64) -> Vec<ClockChange> {
        let slot = |s: f64| (s * rep_rate_hz) as u64;
        let none = ClockChange {
            slot: 0,
            step_ppm: 0.0,
            drift_ppm_per_s: 0.0,
            jump_slots: 0.0,
        };
        let mut v = Vec::new();
        for j in &self.phase_jump {
            v.push(ClockChange {
                slot: slot(j.at_s),
                jump_slots: j.slots,
                ..none
            });
        }
        for f in &self.frequency_step {
            v.push(ClockChange {
                slot: slot(f.at_s),
                step_ppm: f.ppm,
                ..none
            });
        }
        for r in &self.drift_ramp {
            v.push(ClockChange {
                slot: slot(r.from_s),
                drift_ppm_per_s: r.ppm_per_s,
                ..none
            });
            v.push(ClockChange {
                slot: slot(r.from_s + r.duration_s),
                drift_ppm_per_s: -r.ppm_per_s,
                ..none
            });
        }
        v.sort_by_key(|c| c.slot);
        v
    }
}
