//! The transmitter's side of the public frame marker (contract: `docs/marker.md`): which slots
//! carry the marker and what the simulated transmitter sends in them.
//!
//! Everything comes from the firmware core's [`MarkerSpec`] and its m-sequence tables; nothing is
//! reimplemented here. The simulated transmitter maps the marker onto its own choices:
//! [`MarkerState::Vacuum`] is a slot with no light (mean photon number 0) and
//! [`MarkerState::Pulse`] is the Z-basis state with that bit at the signal intensity. Marker slots
//! carry no key: the receiver never announces them and the transmitter must not answer them.

use serde::Deserialize;
use slotwise::frame::{
    FrameError, MarkerSpec, MarkerState, INNER_DEGREE, MARKER_SPACING, OUTER_DEGREE,
};

/// Marker parameters as written in a scenario file; the defaults are the standard marker.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct MarkerParams {
    /// Slots between marker slots (D, a power of two).
    pub spacing: u64,
    /// Register length of the pulse/vacuum sequence (7 or 9).
    pub inner_degree: u8,
    /// Register length of the Z-bit sequence (7 or 9, coprime with the inner), or none.
    pub outer_degree: Option<u8>,
}

impl Default for MarkerParams {
    fn default() -> Self {
        Self {
            spacing: MARKER_SPACING,
            inner_degree: INNER_DEGREE,
            outer_degree: Some(OUTER_DEGREE),
        }
    }
}

/// The marker as the simulated transmitter applies it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Marker {
    /// Slots between marker slots (D).
    pub d: u64,
    /// Register length of the inner (pulse/vacuum) sequence.
    pub degree: u8,
    /// Register length of the outer (Z bit) sequence, if any.
    pub outer_degree: Option<u8>,
    spec: MarkerSpec,
}

impl Marker {
    /// The standard marker: every 64th slot, PRBS7 pulse/vacuum, PRBS9 Z bit.
    pub fn standard() -> Self {
        Self {
            d: MARKER_SPACING,
            degree: INNER_DEGREE,
            outer_degree: Some(OUTER_DEGREE),
            spec: MarkerSpec::standard(),
        }
    }

    /// A marker from scenario parameters; the error names the offending field.
    pub fn new(p: MarkerParams) -> Result<Self, FrameError> {
        Ok(Self {
            d: p.spacing,
            degree: p.inner_degree,
            outer_degree: p.outer_degree,
            spec: MarkerSpec::new(p.spacing, p.inner_degree, p.outer_degree)?,
        })
    }

    /// The core's description of this marker (for the receiver's `FrameConfig`).
    pub fn spec(&self) -> &MarkerSpec {
        &self.spec
    }

    /// What to send in absolute slot `abs_slot`: `None` for a key slot, else the marker state.
    pub fn slot(&self, abs_slot: u64) -> Option<MarkerState> {
        self.spec.state(abs_slot)
    }

    /// Whether absolute slot `abs_slot` is a marker slot.
    pub fn is_marker_slot(&self, abs_slot: u64) -> bool {
        self.spec.is_marker_slot(abs_slot)
    }

    /// Marker period in slots (D · N1 · N2): absolute numbers are fixed modulo this.
    pub fn period_slots(&self) -> u64 {
        self.spec.period_slots()
    }

    /// Largest error of the classical-channel hint (slots) that still gives the right number.
    pub fn hint_tolerance_slots(&self) -> u64 {
        (self.period_slots() - 1) / 2
    }

    /// Share of slots left for key: 1 − 1/D.
    pub fn key_slot_share(&self) -> f64 {
        1.0 - 1.0 / self.d as f64
    }

    /// Share of all slots that carry a marker pulse: (N1 + 1) / (2 N1 D).
    pub fn pulse_slot_share(&self) -> f64 {
        let n1 = self.spec.inner_period() as f64;
        (n1 + 1.0) / (2.0 * n1 * self.d as f64)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use slotwise::frame::{AlignState, FrameConfig, SlotHint, StandardAligner};

    #[test]
    fn standard_shares_and_period() {
        let m = Marker::standard();
        assert_eq!(Marker::new(MarkerParams::default()), Ok(m));
        assert_eq!(m.period_slots(), 64 * 127 * 511);
        // One period of marker slots holds 2^(7-1) = 64 pulses among 127 (m-sequence balance).
        let pulses = (0..127u64)
            .filter(|j| matches!(m.slot(j * 64), Some(MarkerState::Pulse { .. })))
            .count();
        assert_eq!(pulses, 64);
        assert!((m.pulse_slot_share() - 64.0 / 127.0 / 64.0).abs() < 1e-15);
        assert!((m.key_slot_share() - 63.0 / 64.0).abs() < 1e-15);
        assert_eq!(m.slot(1), None);
        assert!(!m.is_marker_slot(65) && m.is_marker_slot(128));
    }

    #[test]
    fn parameters_from_toml_name_their_field() {
        let p: MarkerParams = toml::from_str("spacing = 32\nouter_degree = 7\ninner_degree = 9")
            .expect("valid marker table");
        let m = Marker::new(p).unwrap();
        assert_eq!(m.period_slots(), 32 * 511 * 127);
        let bad: MarkerParams = toml::from_str("inner_degree = 8").unwrap();
        let err = Marker::new(bad).unwrap_err().to_string();
        assert!(err.contains("inner_degree = 8"), "{err}");
        assert!(toml::from_str::<MarkerParams>("spacng = 64").is_err());
    }

    #[test]
    fn receiver_core_aligns_to_this_transmitter() {
        // Per-slot Bernoulli detections (p = 0.02 in key slots, 0.025 in marker pulses, none in
        // marker vacuum, 1e-6 darks) straight from `Marker::slot`; the core must find the offset.
        let m = Marker::standard();
        let offset = 3 * m.period_slots() + 1_234_567;
        let mut a = StandardAligner::new(FrameConfig::standard()).unwrap();
        a.set_hint(SlotHint {
            tx_slot: offset + 1_000_000,
            local_slot: 1_000_000 - 100_000,
        });
        let mut x = 0x0123_4567_89ab_cdefu64;
        let mut unit = || {
            // xorshift64* (Vigna, ACM TOMS 42(2), 2016).
            x ^= x >> 12;
            x ^= x << 25;
            x ^= x >> 27;
            (x.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11) as f64 / (1u64 << 53) as f64
        };
        for local in 0..20_000_000u64 {
            let (p, z) = match m.slot(local + offset) {
                None => (0.02, None),
                Some(MarkerState::Vacuum) => (0.0, None),
                Some(MarkerState::Pulse { z_bit }) => (0.025, Some(z_bit)),
            };
            if unit() < p + 1e-6 {
                let bit = z.unwrap_or(u8::from(unit() < 0.5));
                a.observe(local, Some(bit));
                if matches!(a.state(), AlignState::Aligned { .. }) {
                    break;
                }
            }
        }
        assert_eq!(
            a.state(),
            AlignState::Aligned {
                offset: offset as i64
            }
        );
    }
}
