//! Expected gains and error rates from the standard channel model.
//!
//! Lo, Ma, Chen, PRL 94, 230504 (2005) and Ma, Qi, Zhao, Lo, PRA 72, 012326 (2005): with overall
//! transmittance η, a coherent pulse of mean photon number μ is detected with probability
//! Q_μ = Y0 + 1 − e^(−ημ), and its error rate obeys E_μ·Q_μ = e0·Y0 + e_d·(1 − e^(−ημ)), e0 = 1/2.
//!
//! Applied per basis to this project's receiver optics (see `optics`): a photon prepared in basis
//! b is measured in the same basis with probability r_b (time-bin r_Z = p_z + (1 − p_z)/2,
//! r_X = (1 − p_z)/2; polarization r_Z = p_z, r_X = 1 − p_z), so the matched-basis gain is
//! Q_μ^b = Y0_b + 1 − e^(−η' r_b μ) and E_μ^b·Q_μ^b = e0·Y0_b + e_d·(1 − e^(−η' r_b μ)), where Y0_b
//! is the dark-count probability per slot inside the basis-b gates and η' = η × the fraction of
//! the Gaussian jitter that falls inside a gate window.
//!
//! A single-photon source (`[source]` table) replaces 1 − e^(−xμ) by its own click probability
//! (`source::Source::click_prob`).
//!
//! Assumptions: no dead time, no afterpulses, no clock error; photons never jitter into a
//! neighbouring window; multi-photon slots that click in several outcomes (squashed by the core)
//! are counted as if they had the same error rate (a second-order effect, O(ημ·e_d)).

use super::optics::gate_specs;
use crate::scenario::{Encoding, Protocol, Scenario};
use slotwise::Basis;

/// Expected values for one intensity class.
#[derive(Clone, Debug, PartialEq)]
pub struct IntensityModel {
    /// Mean photon number μ.
    pub mu: f64,
    /// Probability that a slot uses this class.
    pub prob: f64,
    /// Q_μ = Y0 + 1 − e^(−η'μ): probability that a slot of this class has a gated detection.
    pub gain: f64,
    /// Q_μ^b, per basis b (index Z = 0, X = 1): probability that a b-prepared slot is detected in
    /// basis b.
    pub matched_gain: [f64; 2],
    /// E_μ^b, per basis: error rate among b-prepared slots detected in basis b.
    pub qber: [f64; 2],
    /// Per detector: probability that a slot of this class gives at least one photon click on it
    /// (averaged over the prepared states; no dark counts).
    pub detector_click_prob: Vec<f64>,
}

/// The channel model of one scenario.
#[derive(Clone, Debug, PartialEq)]
pub struct ChannelModel {
    /// Overall transmittance η = detector_efficiency·10^(−loss/10).
    pub eta: f64,
    /// Fraction of a photon click's Gaussian jitter inside its gate window.
    pub gate_acceptance: f64,
    /// Y0: dark-count probability per slot inside all gate windows, summed over detectors.
    pub y0: f64,
    /// Y0_b: the same inside the windows of basis b only (index Z = 0, X = 1).
    pub y0_basis: [f64; 2],
    /// Per detector: dark-count probability per slot inside its windows.
    pub y0_detector: Vec<f64>,
    /// Per detector and basis (Z = 0, X = 1): fraction of the slot covered by its windows.
    pub gate_duty: Vec<[f64; 2]>,
    /// r_b: probability that a b-prepared photon is measured in basis b.
    pub basis_share: [f64; 2],
    /// Per intensity class, index 0 = signal.
    pub intensities: Vec<IntensityModel>,
}

/// erf(x) by Abramowitz & Stegun 7.1.26 (|error| ≤ 1.5e-7).
fn erf(x: f64) -> f64 {
    let s = x.signum();
    let x = x.abs();
    let t = 1.0 / (1.0 + 0.327_591_1 * x);
    let poly = t
        * (0.254_829_592
            + t * (-0.284_496_736
                + t * (1.421_413_741 + t * (-1.453_152_027 + t * 1.061_405_429))));
    s * (1.0 - poly * (-x * x).exp())
}

/// P(lo ≤ J < hi) for J ~ N(0, σ²), bounds in ps.
fn normal_mass(lo: f64, hi: f64, sigma: f64) -> f64 {
    if sigma <= 0.0 {
        return if lo <= 0.0 && 0.0 < hi { 1.0 } else { 0.0 };
    }
    let r = std::f64::consts::SQRT_2 * sigma;
    0.5 * (erf(hi / r) - erf(lo / r))
}

/// The prepared states with their probabilities: (basis, bit, probability).
fn states(s: &Scenario) -> Vec<(Basis, u8, f64)> {
    let pz = s.p_z;
    match s.protocol {
        Protocol::ThreeState => vec![
            (Basis::Z, 0, pz / 2.0),
            (Basis::Z, 1, pz / 2.0),
            (Basis::X, 0, 1.0 - pz),
        ],
        Protocol::Bb84 | Protocol::EfficientBb84 => vec![
            (Basis::Z, 0, pz / 2.0),
            (Basis::Z, 1, pz / 2.0),
            (Basis::X, 0, (1.0 - pz) / 2.0),
            (Basis::X, 1, (1.0 - pz) / 2.0),
        ],
    }
}

/// Fraction of a prepared state's detected photons that reach each detector.
pub fn detector_shares(s: &Scenario, basis: Basis, bit: u8) -> Vec<f64> {
    let (pz, ed) = (s.p_z, s.misalignment);
    let right = |b: u8| if b == bit { 1.0 - ed } else { ed };
    match (s.encoding, basis) {
        (Encoding::TimeBin, Basis::Z) => vec![pz, (1.0 - pz) / 2.0, (1.0 - pz) / 2.0],
        (Encoding::TimeBin, Basis::X) => vec![
            pz,
            (1.0 - pz) * (0.25 + 0.5 * right(0)),
            (1.0 - pz) * (0.25 + 0.5 * right(1)),
        ],
        (Encoding::Polarization, Basis::Z) => {
            let x = (1.0 - pz) / 2.0;
            vec![pz * right(0), pz * right(1), x, x]
        }
        (Encoding::Polarization, Basis::X) => {
            let z = pz / 2.0;
            vec![z, z, (1.0 - pz) * right(0), (1.0 - pz) * right(1)]
        }
    }
}

/// The standard channel model's expected values for a scenario (assumptions in the module doc).
pub fn channel_model(s: &Scenario) -> ChannelModel {
    let t_ps = s.period_ps();
    let gates = gate_specs(s);
    let channels = usize::from(super::optics::channels(s));
    let gate_acceptance = gates
        .first()
        .map(|g| {
            normal_mass(
                (g.lo - g.centre) * t_ps,
                (g.hi - g.centre) * t_ps,
                s.jitter_ps,
            )
        })
        .unwrap_or(1.0);
    let dark_in = |keep: &dyn Fn(&super::optics::GateSpec) -> bool| {
        let width_s: f64 = gates
            .iter()
            .filter(|g| keep(g))
            .map(|g| (g.hi - g.lo) * t_ps * 1e-12)
            .sum();
        -(-s.dark_count_hz * width_s).exp_m1()
    };
    let y0_basis = [
        dark_in(&|g| g.basis == Basis::Z),
        dark_in(&|g| g.basis == Basis::X),
    ];
    let y0_detector = (0..channels)
        .map(|d| dark_in(&|g| usize::from(g.channel) == d))
        .collect();
    let gate_duty = (0..channels)
        .map(|d| {
            let mut duty = [0.0; 2];
            for g in gates.iter().filter(|g| usize::from(g.channel) == d) {
                if let Some(x) = duty.get_mut(g.basis.index()) {
                    *x += g.hi - g.lo;
                }
            }
            duty
        })
        .collect();
    let y0 = y0_basis[0] + y0_basis[1];
    let pz = s.p_z;
    let basis_share = match s.encoding {
        Encoding::TimeBin => [pz + (1.0 - pz) / 2.0, (1.0 - pz) / 2.0],
        Encoding::Polarization => [pz, 1.0 - pz],
    };
    let eta = s.eta();
    let eta_g = eta * gate_acceptance;
    let e0 = 0.5;
    let e_d = s.misalignment;
    let st = states(s);
    // Attenuated laser: 1 − e^(−xμ) (exactly as before); single-photon source: its own law.
    let source = super::Source::from_spec(s.source.as_ref());
    let click = |poisson: f64, mu: f64, x: f64| match source {
        super::Source::Laser => poisson,
        super::Source::SinglePhoton { .. } => source.click_prob(mu, x),
    };
    let intensities = s
        .intensities
        .iter()
        .zip(&s.intensity_probs)
        .map(|(&mu, &prob)| {
            let signal = click(-(-eta_g * mu).exp_m1(), mu, eta_g);
            let mut matched_gain = [0.0; 2];
            let mut qber = [0.0; 2];
            for b in 0..2 {
                let sig_b = click(
                    -(-eta_g * basis_share[b] * mu).exp_m1(),
                    mu,
                    eta_g * basis_share[b],
                );
                matched_gain[b] = y0_basis[b] + sig_b;
                qber[b] = (e0 * y0_basis[b] + e_d * sig_b) / matched_gain[b];
            }
            let mut detector_click_prob = vec![0.0; channels];
            for &(basis, bit, p_state) in &st {
                for (acc, share) in detector_click_prob
                    .iter_mut()
                    .zip(detector_shares(s, basis, bit))
                {
                    *acc += p_state * click(-(-eta_g * mu * share).exp_m1(), mu, eta_g * share);
                }
            }
            IntensityModel {
                mu,
                prob,
                gain: y0 + signal,
                matched_gain,
                qber,
                detector_click_prob,
            }
        })
        .collect();
    ChannelModel {
        eta,
        gate_acceptance,
        y0,
        y0_basis,
        y0_detector,
        gate_duty,
        basis_share,
        intensities,
    }
}

impl ChannelModel {
    /// Per detector: rate of photon clicks plus dark counts without dead time, Hz.
    fn raw_rate_hz(&self, s: &Scenario, d: usize) -> f64 {
        let photon: f64 = self
            .intensities
            .iter()
            .map(|m| m.prob * m.detector_click_prob.get(d).copied().unwrap_or(0.0))
            .sum();
        photon * s.rep_rate_hz + s.dark_count_hz
    }

    /// Per detector: fraction of time it is live, m/n = 1/(1 + n·τ) for the non-paralysable
    /// dead-time model (common practice, radiation-detection textbooks), with n the rate of
    /// photon clicks, dark counts and afterpulses (approximated as n·(1 + p_ap)), in Hz.
    pub fn live_fraction(&self, s: &Scenario) -> Vec<f64> {
        let tau_s = s.dead_time_ns * 1e-9;
        (0..self.y0_detector.len())
            .map(|d| 1.0 / (1.0 + self.raw_rate_hz(s, d) * (1.0 + s.afterpulse_prob) * tau_s))
            .collect()
    }

    /// Afterpulses per slot inside the windows of each basis (Z = 0, X = 1): registered click
    /// rate × p_ap × the windows' share of the slot × the live fraction (the microsecond delay
    /// spreads afterpulses evenly over the slot). They act like extra dark counts.
    pub fn afterpulse_yield(&self, s: &Scenario) -> [f64; 2] {
        let live = self.live_fraction(s);
        let mut y = [0.0; 2];
        for (d, duty) in self.gate_duty.iter().enumerate() {
            let l = live.get(d).copied().unwrap_or(1.0);
            let registered_per_slot = l * self.raw_rate_hz(s, d) / s.rep_rate_hz;
            for (acc, share) in y.iter_mut().zip(duty) {
                // The afterpulse itself is only registered if it finds the detector live.
                *acc += registered_per_slot * s.afterpulse_prob * share * l;
            }
        }
        y
    }

    /// Gain of intensity class `i` corrected for dead time (each detector live with probability
    /// [`Self::live_fraction`], independently) and for afterpulses falling into gate windows.
    pub fn gain_with_dead_time(&self, s: &Scenario, i: usize) -> f64 {
        let Some(m) = self.intensities.get(i) else {
            return 0.0;
        };
        let live = self.live_fraction(s);
        let eta_g = self.eta * self.gate_acceptance;
        let mut miss = 0.0;
        for (basis, bit, p_state) in states(s) {
            let shares = detector_shares(s, basis, bit);
            let none: f64 = shares
                .iter()
                .zip(&live)
                .map(|(&sh, &l)| 1.0 - l * -(-eta_g * m.mu * sh).exp_m1())
                .product();
            miss += p_state * none;
        }
        let dark: f64 = self.y0_detector.iter().zip(&live).map(|(y, l)| y * l).sum();
        let ap = self.afterpulse_yield(s);
        1.0 - miss + dark + ap[0] + ap[1]
    }

    /// E_μ^b with afterpulses counted as dark counts in the windows (Y0_b → Y0_b + Y_ap,b, same
    /// e0 = 1/2); dead time scales signal and noise alike and drops out.
    pub fn qber_with_afterpulses(&self, s: &Scenario, i: usize) -> [f64; 2] {
        let Some(m) = self.intensities.get(i) else {
            return [0.0; 2];
        };
        let ap = self.afterpulse_yield(s);
        let eta_g = self.eta * self.gate_acceptance;
        let mut e = [0.0; 2];
        for (b, out) in e.iter_mut().enumerate() {
            let share = self.basis_share.get(b).copied().unwrap_or(0.0);
            let noise =
                self.y0_basis.get(b).copied().unwrap_or(0.0) + ap.get(b).copied().unwrap_or(0.0);
            let sig = -(-eta_g * share * m.mu).exp_m1();
            *out = (0.5 * noise + s.misalignment * sig) / (noise + sig);
        }
        e
    }
}

/// Expected rate of in-gate signal detections per second, from the channel model.
pub fn signal_rate_per_s(s: &Scenario) -> f64 {
    let m = channel_model(s);
    let gain: f64 = m.intensities.iter().map(|i| i.prob * i.gain).sum();
    (gain - m.y0).max(1e-12) * s.rep_rate_hz
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn erf_reference_values() {
        // erf(1) = 0.8427007929, erf(2) = 0.9953222650 (A&S Table 7.1).
        assert!((erf(1.0) - 0.842_700_792_9).abs() < 2e-7);
        assert!((erf(2.0) - 0.995_322_265_0).abs() < 2e-7);
        assert!((erf(-0.5) + 0.520_499_877_8).abs() < 2e-7);
    }

    #[test]
    fn default_bench_numbers() {
        let s = Scenario::default_bench();
        let m = channel_model(&s);
        // η = 0.8·10^(−1.4) = 0.031848; Q_0.5 ≈ 1 − e^(−0.015924) = 0.015798.
        assert!((m.eta - 0.031_848).abs() < 1e-6, "{}", m.eta);
        assert!((m.intensities[0].gain - 0.015_798).abs() < 2e-6);
        // w = 200 ps = 5.71σ: acceptance 1 − 1.1e-8.
        assert!(m.gate_acceptance > 1.0 - 1e-7);
        // 8 windows of 400 ps at 100 Hz: Y0 = 3.2e-7.
        assert!((m.y0 - 3.2e-7).abs() < 1e-12);
        // Dark counts are negligible here, so E ≈ e_d in both bases.
        assert!((m.intensities[1].qber[0] - 0.01).abs() < 1e-3);
        let shares: f64 = detector_shares(&s, Basis::X, 0).iter().sum();
        assert!((shares - 1.0).abs() < 1e-12);
    }
}
