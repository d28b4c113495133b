//! Light sources: the attenuated laser (Poisson photon numbers) and a sub-Poissonian
//! single-photon source characterised by its second-order correlation g2(0).
//!
//! Single-photon source model: a pulse of mean photon number μ (the brightness into the fibre)
//! holds two photons with probability p2 = μ²·g2(0)/2, one with p1 = μ − 2·p2, none with
//! p0 = 1 − p1 − p2. Then its mean is μ and g2(0) = Σ n(n − 1)·p_n / μ² = 2·p2/μ² exactly (the
//! definition of g2(0) for pulsed light, common practice); it needs μ·g2(0) ≤ 1. Each photon
//! survives loss η independently (binomial thinning, common practice).

use super::rng::Stream;

pub use crate::scenario::specs::{SourceKind, SourceSpec};

/// Photon-number statistics of the pulses, as the simulator draws them.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Source {
    /// Poisson photon numbers.
    Laser,
    /// At most two photons per pulse with p2 = μ²·g2/2.
    SinglePhoton {
        /// g2(0) of the source.
        g2: f64,
    },
}

impl Source {
    /// The source a scenario describes (the laser when it has no `[source]` table).
    pub fn from_spec(spec: Option<&SourceSpec>) -> Self {
        match spec {
            Some(SourceSpec {
                kind: SourceKind::SinglePhoton,
                g2,
                ..
            }) => Self::SinglePhoton { g2: *g2 },
            _ => Self::Laser,
        }
    }

    /// (p1, p2) of a single-photon source pulse of mean `mu` (clamped to a valid distribution).
    pub fn sps_probs(mu: f64, g2: f64) -> (f64, f64) {
        let p2 = (0.5 * mu * mu * g2).clamp(0.0, 1.0);
        ((mu - 2.0 * p2).clamp(0.0, 1.0 - p2), p2)
    }

    /// Probability that at least one photon of a pulse of mean `mu` survives transmittance
    /// `eta`: 1 − e^(−μη) for the laser, p1·η + p2·(1 − (1 − η)²) for the single-photon source.
    pub fn click_prob(&self, mu: f64, eta: f64) -> f64 {
        match *self {
            Self::Laser => -(-mu * eta).exp_m1(),
            Self::SinglePhoton { g2 } => {
                let (p1, p2) = Self::sps_probs(mu, g2);
                p1 * eta + p2 * eta * (2.0 - eta)
            }
        }
    }

    /// Photon number surviving `eta`, drawn on the condition that it is at least one.
    pub fn draw_nonzero(&self, mu: f64, eta: f64, rng: &mut Stream) -> u32 {
        match *self {
            Self::Laser => rng.poisson_nonzero(mu * eta),
            Self::SinglePhoton { g2 } => {
                let (_, p2) = Self::sps_probs(mu, g2);
                let both = p2 * eta * eta;
                let any = self.click_prob(mu, eta);
                if any > 0.0 && rng.uniform() * any < both {
                    2
                } else {
                    1
                }
            }
        }
    }

    /// Photon number of a pulse before any loss.
    pub fn draw(&self, mu: f64, rng: &mut Stream) -> u32 {
        match *self {
            Self::Laser => rng.poisson(mu),
            Self::SinglePhoton { g2 } => {
                let (p1, p2) = Self::sps_probs(mu, g2);
                let u = rng.uniform();
                if u < p2 {
                    2
                } else if u < p2 + p1 {
                    1
                } else {
                    0
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn single_photon_moments_match_mu_and_g2() {
        // g2(0) = Σ n(n−1)p_n / μ² (definition, common practice).
        for (mu, g2) in [(0.3, 0.02), (0.6, 0.5), (0.1, 1.0)] {
            let (p1, p2) = Source::sps_probs(mu, g2);
            assert!((p1 + 2.0 * p2 - mu).abs() < 1e-15);
            assert!((2.0 * p2 / (mu * mu) - g2).abs() < 1e-12);
        }
        let s = Source::SinglePhoton { g2: 0.02 };
        let mut rng = Stream::new(7, 1);
        let n = 400_000;
        let (mut sum, mut pairs) = (0u64, 0u64);
        for _ in 0..n {
            let k = u64::from(s.draw(0.3, &mut rng));
            sum += k;
            pairs += k * k.saturating_sub(1);
        }
        let mean = sum as f64 / n as f64;
        assert!(
            (mean - 0.3).abs() < 4.0 * (0.3f64 * 0.7 / n as f64).sqrt(),
            "{mean}"
        );
        assert!(pairs > 0);
    }

    #[test]
    fn laser_click_prob_is_poisson() {
        let p = Source::Laser.click_prob(0.5, 0.1);
        assert!((p - (1.0 - (-0.05f64).exp())).abs() < 1e-15);
    }

    #[test]
    fn source_table_round_trips_and_is_checked() {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../scenarios/sps-80mhz-850nm-2km.toml"
        );
        let s = crate::scenario::Scenario::load(path).unwrap();
        let back = crate::scenario::Scenario::from_toml_str(&s.to_toml_string(), "rt").unwrap();
        assert_eq!(back, s);
        let text = std::fs::read_to_string(path)
            .unwrap()
            .replace("g2 = 0.02", "g2 = 1.5");
        let e = crate::scenario::Scenario::from_toml_str(&text, "x.toml").unwrap_err();
        assert!(e.to_string().contains("g2"), "{e}");
    }
}
