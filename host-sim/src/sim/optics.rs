//! Receiver optics: where each photon goes, and the gate table that matches it.
//!
//! Time-bin (three detectors): the early bin arrives at a = 0.2 T, the late bin Δ = T/4 later. A
//! passive splitter sends a photon to the arrival-time port (ch0) with probability p_z, else into
//! an unbalanced interferometer of delay Δ whose outputs A (ch1) and B (ch2) see three positions
//! E = a, M = a + Δ, L = a + 2Δ. Side peaks E/L are Z measurements (0/1); the middle peak carries
//! the phase: an X state with bit b leaves by output A (b = 0, "+") or B (b = 1, "−") with
//! probability 1 − e_d. A Z state's photon takes the short or the long arm with probability 1/2:
//! half lands in its side peak, half in the middle, at a random output. An X state's photon lands
//! in E or L with 1/4 each (random output, random Z bit) and in M with 1/2.
//!
//! Polarization (four detectors): ch0..3 = H, V, D, A behind a passive splitter (p_z to H/V);
//! every photon arrives at 0.3 T; e_d flips the bit within the measured basis, and a photon
//! measured in the other basis gives a random bit.
//!
//! Misalignment e_d acts per photon (a coherent state splits into independent Poisson parts).

use super::rng::Stream;
use super::tx::TxChoice;
pub use crate::scenario::layout::{
    channels, earliest_click_offset_ps, gate_half_width_ps, POLARIZATION_POSITION, TIME_BIN_EARLY,
    TIME_BIN_SEPARATION,
};
use crate::scenario::{Encoding, Scenario};
use slotwise::Basis;

/// Arrival position number `pos` (0 = E, 1 = M, 2 = L; polarization has only 0), fraction of T.
pub fn position_fraction(encoding: Encoding, pos: u8) -> f64 {
    match encoding {
        Encoding::TimeBin => TIME_BIN_EARLY + TIME_BIN_SEPARATION * f64::from(pos),
        Encoding::Polarization => POLARIZATION_POSITION,
    }
}

/// One gate in floating point: channel, window [lo, hi) as slot fractions, outcome.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct GateSpec {
    /// TDC channel.
    pub channel: u8,
    /// Expected arrival position, fraction of the slot.
    pub centre: f64,
    /// Window start (inclusive), fraction of the slot, clamped at 0.
    pub lo: f64,
    /// Window end (exclusive), fraction of the slot, clamped at 1.
    pub hi: f64,
    /// Basis measured.
    pub basis: Basis,
    /// Bit the window stands for.
    pub bit: u8,
}

/// The gates of the scenario's receiver, in floating point (its profile's `[[gates]]`).
pub fn gate_specs(s: &Scenario) -> Vec<GateSpec> {
    let w = gate_half_width_ps(s) / s.period_ps();
    let g = |channel: u8, pos: u8, basis: Basis, bit: u8| {
        let centre = position_fraction(s.encoding, pos);
        GateSpec {
            channel,
            centre,
            lo: (centre - w).max(0.0),
            hi: (centre + w).min(1.0),
            basis,
            bit,
        }
    };
    match s.encoding {
        Encoding::TimeBin => vec![
            g(0, 0, Basis::Z, 0),
            g(0, 1, Basis::Z, 1),
            g(1, 0, Basis::Z, 0),
            g(1, 1, Basis::X, 0),
            g(1, 2, Basis::Z, 1),
            g(2, 0, Basis::Z, 0),
            g(2, 1, Basis::X, 1),
            g(2, 2, Basis::Z, 1),
        ],
        Encoding::Polarization => vec![
            g(0, 0, Basis::Z, 0),
            g(1, 0, Basis::Z, 1),
            g(2, 0, Basis::X, 0),
            g(3, 0, Basis::X, 1),
        ],
    }
}

/// Where one detected photon ends up: detector and arrival position number.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub struct Hit {
    /// Detector (TDC channel).
    pub detector: u8,
    /// Arrival position number (see [`position_fraction`]).
    pub pos: u8,
}

/// The (basis, bit) a click on `detector` at arrival position `pos` stands for, as the gate table
/// of [`gate_specs`] reads it.
pub fn outcome(encoding: Encoding, detector: u8, pos: u8) -> Option<(Basis, u8)> {
    match (encoding, detector, pos) {
        (Encoding::TimeBin, 0, 0) => Some((Basis::Z, 0)),
        (Encoding::TimeBin, 0, 1) => Some((Basis::Z, 1)),
        (Encoding::TimeBin, 1 | 2, 0) => Some((Basis::Z, 0)),
        (Encoding::TimeBin, 1 | 2, 2) => Some((Basis::Z, 1)),
        (Encoding::TimeBin, 1, 1) => Some((Basis::X, 0)),
        (Encoding::TimeBin, 2, 1) => Some((Basis::X, 1)),
        (Encoding::Polarization, 0..=3, 0) => {
            Some((if detector < 2 { Basis::Z } else { Basis::X }, detector & 1))
        }
        _ => None,
    }
}

/// Route one detected photon of the prepared state `tx` through the passive optics.
pub fn route(encoding: Encoding, p_z: f64, e_d: f64, tx: TxChoice, rng: &mut Stream) -> Hit {
    let z_port = rng.bernoulli(p_z);
    let flip = |rng: &mut Stream, bit: u8| bit ^ u8::from(rng.bernoulli(e_d));
    match encoding {
        Encoding::TimeBin => {
            if z_port {
                let bin = match tx.basis {
                    Basis::Z => flip(rng, tx.bit),
                    Basis::X => rng.bit(),
                };
                return Hit {
                    detector: 0,
                    pos: bin,
                };
            }
            let output = 1 + rng.bit();
            match tx.basis {
                Basis::Z => {
                    if rng.bit() == 0 {
                        // Side peak: E for an early photon, L for a late one.
                        Hit {
                            detector: output,
                            pos: 2 * flip(rng, tx.bit),
                        }
                    } else {
                        Hit {
                            detector: output,
                            pos: 1,
                        }
                    }
                }
                Basis::X => match rng.uniform() {
                    u if u < 0.25 => Hit {
                        detector: output,
                        pos: 0,
                    },
                    u if u < 0.5 => Hit {
                        detector: output,
                        pos: 2,
                    },
                    _ => Hit {
                        detector: 1 + flip(rng, tx.bit),
                        pos: 1,
                    },
                },
            }
        }
        Encoding::Polarization => {
            let basis = if z_port { Basis::Z } else { Basis::X };
            let bit = if basis == tx.basis {
                flip(rng, tx.bit)
            } else {
                rng.bit()
            };
            Hit {
                detector: 2 * basis as u8 + bit,
                pos: 0,
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn outcome_reads_the_positions_as_the_gate_table_does() {
        for encoding in [Encoding::TimeBin, Encoding::Polarization] {
            let s = Scenario {
                encoding,
                ..Scenario::default_bench()
            };
            for g in gate_specs(&s) {
                let pos = (0..3u8)
                    .find(|&p| (position_fraction(encoding, p) - g.centre).abs() < 1e-12)
                    .unwrap();
                assert_eq!(outcome(encoding, g.channel, pos), Some((g.basis, g.bit)));
            }
        }
        assert_eq!(outcome(Encoding::TimeBin, 0, 2), None);
    }

    #[test]
    fn routing_fractions_follow_the_optics() {
        let mut s = Scenario::default_bench();
        s.misalignment = 0.0;
        let mut rng = Stream::new(1, 1);
        let n = 100_000;
        let x0 = TxChoice {
            basis: Basis::X,
            bit: 0,
            intensity: 0,
        };
        let mut counts = std::collections::BTreeMap::new();
        for _ in 0..n {
            let h = route(s.encoding, 0.5, 0.0, x0, &mut rng);
            *counts.entry((h.detector, h.pos)).or_insert(0u32) += 1;
        }
        // X+ with e_d = 0, p_z = 1/2: never in output B's middle peak; output A's middle gets 1/2
        // of the interferometer light (1/4 of all), each side peak 1/4 of it split over two
        // outputs (1/16 of all per output); the Z port sees either bin with 1/4.
        assert_eq!(counts.get(&(2, 1)), None);
        let frac = |k| f64::from(*counts.get(&k).unwrap_or(&0)) / f64::from(n);
        assert!((frac((1, 1)) - 0.25).abs() < 0.006);
        assert!((frac((1, 0)) - 0.0625).abs() < 0.004);
        assert!((frac((2, 2)) - 0.0625).abs() < 0.004);
        assert!((frac((0, 0)) - 0.25).abs() < 0.006);
    }
}
