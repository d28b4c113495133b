//! The receiver layout a scenario implies: where the simulated optics put the arrival positions,
//! how many detectors there are, how wide the gates are, and how early a click can come. The
//! simulator's optics (`sim::optics`) build on these; the scenario's checks read them.

use super::{Encoding, Scenario};

/// Largest |z| a normal draw of the simulator's random streams can reach: √(−2 ln 2^−53) ≈ 8.572
/// (53-bit uniforms).
pub const NORMAL_BOUND: f64 = 8.58;

/// Time-bin early-bin arrival position, fraction of the slot.
pub const TIME_BIN_EARLY: f64 = 0.2;
/// Time-bin separation Δ (and interferometer delay), fraction of the slot.
pub const TIME_BIN_SEPARATION: f64 = 0.25;
/// Polarization arrival position, fraction of the slot.
pub const POLARIZATION_POSITION: f64 = 0.3;

/// Number of detectors (TDC channels) of the scenario's receiver: 3 (time-bin) or 4 (polarization).
pub fn channels(s: &Scenario) -> u8 {
    match s.encoding {
        Encoding::TimeBin => 3,
        Encoding::Polarization => 4,
    }
}

/// Gate half-width w, ps: time-bin min(0.45 Δ, max(4σ, 0.02 T)), polarization
/// min(0.45 T, max(4σ, 0.05 T)).
pub fn gate_half_width_ps(s: &Scenario) -> f64 {
    let t = s.period_ps();
    let sigma4 = 4.0 * s.jitter_ps;
    match s.encoding {
        Encoding::TimeBin => (0.45 * TIME_BIN_SEPARATION * t).min(sigma4.max(0.02 * t)),
        Encoding::Polarization => (0.45 * t).min(sigma4.max(0.05 * t)),
    }
}

/// Lower bound on (click time − slot start) over every detector and position, ps.
pub fn earliest_click_offset_ps(s: &Scenario) -> f64 {
    let min_skew = s
        .channel_delays_ps
        .as_ref()
        .and_then(|d| d.iter().min().copied())
        .unwrap_or(0)
        .min(0);
    min_skew as f64 - NORMAL_BOUND * s.jitter_ps - 1.0
}
