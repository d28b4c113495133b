//! The counts an estimator needs, read from a summary's `tally` (counts per `tx basis, tx bit /
//! intensity / rx basis, rx bit`) or computed from the channel model for a curve.

use super::{X, Z};
use crate::scenario::{Protocol, Scenario};
use crate::sim;

/// Counts of one intensity class.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct ClassCounts {
    /// Mean photon number μ of the class.
    pub mu: f64,
    /// Probability p_μ that a (key-carrying) pulse is of this class.
    pub prob: f64,
    /// Pulses of this class sent, per preparation basis [Z, X].
    pub pulses: [f64; 2],
    /// Detections answered, per [tx basis][rx basis].
    pub detected: [[f64; 2]; 2],
    /// Matched-basis errors per basis [Z, X].
    pub errors: [f64; 2],
}

impl ClassCounts {
    /// n_b,k: matched-basis detections in basis `b`.
    pub fn n(&self, b: usize) -> f64 {
        self.detected[b][b]
    }

    /// Matched-basis gain Q_k^b = n_b,k / (pulses prepared in b), per pulse.
    pub fn gain(&self, b: usize) -> f64 {
        if self.pulses[b] > 0.0 {
            self.n(b) / self.pulses[b]
        } else {
            0.0
        }
    }

    /// Matched-basis error rate E_k^b, fraction (0 when nothing was detected).
    pub fn qber(&self, b: usize) -> f64 {
        if self.n(b) > 0.0 {
            self.errors[b] / self.n(b)
        } else {
            0.0
        }
    }
}

/// Everything an estimator reads: per-class counts and the pulses sent.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct Observed {
    /// Intensity classes, index 0 = signal.
    pub classes: Vec<ClassCounts>,
    /// Key-carrying pulses N over which the counts were gathered.
    pub pulses: f64,
    /// Probability that the transmitter prepares basis [Z, X].
    pub p_basis_tx: [f64; 2],
    /// Pulses per second (repetition rate × key-slot share), to turn bits per pulse into bits/s.
    pub pulses_per_s: f64,
}

impl Observed {
    /// n_b = Σ_k n_b,k, matched-basis detections in basis `b`.
    pub fn n(&self, b: usize) -> f64 {
        self.classes.iter().map(|c| c.n(b)).sum()
    }

    /// m_b = Σ_k m_b,k, matched-basis errors in basis `b`.
    pub fn m(&self, b: usize) -> f64 {
        self.classes.iter().map(|c| c.errors[b]).sum()
    }

    /// E_b = m_b / n_b, fraction.
    pub fn qber(&self, b: usize) -> f64 {
        let n = self.n(b);
        if n > 0.0 {
            self.m(b) / n
        } else {
            0.0
        }
    }
}

/// Share of slots that carry key (the public marker takes every 64th slot, `docs/marker.md`).
pub fn key_slot_share(s: &Scenario) -> f64 {
    if s.marker {
        63.0 / 64.0
    } else {
        1.0
    }
}

/// Preparation-basis probabilities [Z, X] of the scenario's protocol.
pub fn tx_basis_probs(s: &Scenario) -> [f64; 2] {
    match s.protocol {
        Protocol::Bb84 => [0.5, 0.5],
        Protocol::EfficientBb84 | Protocol::ThreeState => [s.p_z, 1.0 - s.p_z],
    }
}

/// An empty set of classes for the scenario, with `pulses` key-carrying pulses split over
/// classes and bases.
pub fn empty_for(s: &Scenario, pulses: f64) -> Observed {
    let pb = tx_basis_probs(s);
    let classes = s
        .intensities
        .iter()
        .zip(&s.intensity_probs)
        .map(|(&mu, &prob)| ClassCounts {
            mu,
            prob,
            pulses: [pulses * prob * pb[Z], pulses * prob * pb[X]],
            ..ClassCounts::default()
        })
        .collect();
    Observed {
        classes,
        pulses,
        p_basis_tx: pb,
        pulses_per_s: s.rep_rate_hz * key_slot_share(s),
    }
}

/// Expected counts of the channel model (`sim::channel_model`: no dead time, no afterpulses)
/// for scenario `s` over `pulses` key-carrying pulses.
pub fn expected(s: &Scenario, pulses: f64) -> Observed {
    let mut o = empty_for(s, pulses);
    let m = sim::channel_model(s);
    for (c, im) in o.classes.iter_mut().zip(&m.intensities) {
        for b in [Z, X] {
            let n = c.pulses[b] * im.matched_gain[b];
            c.detected[b][b] = n;
            c.errors[b] = n * im.qber[b];
        }
    }
    o
}

/// Parse a `tally` key `"Z0/1/X1"` into (tx basis, tx bit, intensity, rx basis, rx bit).
pub fn parse_tally_key(k: &str) -> Option<(usize, u8, usize, usize, u8)> {
    let mut parts = k.split('/');
    let (tx, int, rx) = (parts.next()?, parts.next()?, parts.next()?);
    if parts.next().is_some() {
        return None;
    }
    let basis_bit = |p: &str| -> Option<(usize, u8)> {
        let mut ch = p.chars();
        let b = match ch.next()? {
            'Z' => Z,
            'X' => X,
            _ => return None,
        };
        let bit = match ch.as_str() {
            "0" => 0,
            "1" => 1,
            _ => return None,
        };
        Some((b, bit))
    };
    let (tb, tbit) = basis_bit(tx)?;
    let (rb, rbit) = basis_bit(rx)?;
    Some((tb, tbit, int.parse().ok()?, rb, rbit))
}

/// Counts from a summary's `tally` object for scenario `s`, over `pulses` key-carrying pulses.
/// `source` names the file in errors.
pub fn from_tally(
    tally: &serde_json::Map<String, serde_json::Value>,
    s: &Scenario,
    pulses: f64,
    source: &str,
) -> Result<Observed, String> {
    let mut o = empty_for(s, pulses);
    for (k, v) in tally {
        let (tb, tbit, i, rb, rbit) = parse_tally_key(k).ok_or_else(|| {
            format!("{source}: field 'tally.{k}': expected a key like \"Z0/0/X1\"")
        })?;
        let n = v
            .as_u64()
            .ok_or_else(|| format!("{source}: field 'tally.{k}': expected a count, got {v}"))?;
        let n_classes = o.classes.len();
        let c = o.classes.get_mut(i).ok_or_else(|| {
            format!(
                "{source}: field 'tally.{k}': intensity class {i}, but the scenario has {n_classes}"
            )
        })?;
        c.detected[tb][rb] += n as f64;
        if tb == rb && tbit != rbit {
            c.errors[tb] += n as f64;
        }
    }
    Ok(o)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tally_keys_parse() {
        assert_eq!(parse_tally_key("Z0/1/X1"), Some((Z, 0, 1, X, 1)));
        assert_eq!(parse_tally_key("X1/0/Z0"), Some((X, 1, 0, Z, 0)));
        assert_eq!(parse_tally_key("Y0/0/Z0"), None);
        assert_eq!(parse_tally_key("Z0/0/Z0/1"), None);
    }

    #[test]
    fn tally_fills_matched_and_error_counts() {
        let s = Scenario::default_bench();
        let j: serde_json::Value =
            serde_json::from_str(r#"{"Z0/0/Z0": 90, "Z0/0/Z1": 10, "X0/1/X1": 4, "X0/1/Z0": 7}"#)
                .unwrap();
        let o = from_tally(j.as_object().unwrap(), &s, 1000.0, "t.json").unwrap();
        assert_eq!(o.classes[0].n(Z), 100.0);
        assert_eq!(o.classes[0].errors[Z], 10.0);
        assert_eq!(o.classes[1].errors[X], 4.0);
        assert_eq!(o.classes[1].detected[X][Z], 7.0);
        let bad: serde_json::Value = serde_json::from_str(r#"{"Z0/5/Z0": 1}"#).unwrap();
        let e = from_tally(bad.as_object().unwrap(), &s, 1.0, "t.json").unwrap_err();
        assert!(e.contains("t.json") && e.contains("tally.Z0/5/Z0"), "{e}");
    }
}

/// Hand-made counts for tests.
#[cfg(test)]
pub(crate) mod tests_support {
    use super::*;

    /// One class of mean photon number `mu`, BB84 with both bases 1/2, error rate `e` in both,
    /// a gain of 1 % per matched basis, over `pulses` pulses.
    pub fn symmetric(mu: f64, e: f64, pulses: f64) -> Observed {
        let p = pulses / 2.0;
        let n = p * 0.01;
        Observed {
            classes: vec![ClassCounts {
                mu,
                prob: 1.0,
                pulses: [p, p],
                detected: [[n, n], [n, n]],
                errors: [n * e, n * e],
            }],
            pulses,
            p_basis_tx: [0.5, 0.5],
            pulses_per_s: 1e6,
        }
    }
}
