//! A sub-Poissonian (single-photon) source characterised by its second-order correlation g2(0).
//!
//! Multi-photon bound: for a source with mean photon number μ per pulse and g2(0) = Σ n(n−1)p_n
//! / μ², p_(n≥2) ≤ μ²·g2(0)/2, because n(n − 1)/2 ≥ 1 for n ≥ 2 (Waks, Inoue, Diamanti,
//! Yamamoto, PRA 66, 042315 (2002) use this bound — citation from memory; the inequality is
//! elementary). The rate then follows GLLP (Gottesman, Lo, Lütkenhaus, Preskill, QIC 4, 325
//! (2004), their eq. for a source with multi-photon fraction Δ): every multi-photon pulse is
//! assumed detected and insecure, Δ = p_(n≥2)/Q.

use super::entropy::{h2, h2_capped};
use super::{Bound, EstimatorError, Observed, Terms, X, Z};

/// Upper bound on the multi-photon probability per pulse, μ²·g2(0)/2 (see the module doc).
pub fn multi_photon_bound(mu: f64, g2: f64) -> f64 {
    0.5 * mu * mu * g2
}

/// Key rate of the signal class (largest μ) from a source with the given g2(0), per pulse sent:
/// R = p_μ·p_Z·Q_Z·{(1 − Δ)·[1 − h(E_X/(1 − Δ))] − f·h(E_Z)} (GLLP 2004), where
/// Δ = μ²·g2(0)/2 / Q_any bounds the share of detections from multi-photon pulses (Q_any: answered
/// detections of the class per pulse, any bases; the basis choices do not depend on the photon
/// number, so the share is the same among key-basis detections). Bits per pulse.
pub fn sps_rate(o: &Observed, g2: f64, f_ec: f64) -> Result<Bound, EstimatorError> {
    if !(g2.is_finite() && g2 >= 0.0) {
        return Err(EstimatorError(format!("g2(0) must be ≥ 0, got {g2}")));
    }
    let s = o
        .classes
        .iter()
        .max_by(|a, b| a.mu.total_cmp(&b.mu))
        .ok_or_else(|| EstimatorError("no intensity class in the counts".into()))?;
    let pulses = s.pulses[Z] + s.pulses[X];
    let answered: f64 = s.detected.iter().flatten().sum();
    if pulses <= 0.0 || answered <= 0.0 || s.n(Z) <= 0.0 {
        return Err(EstimatorError(
            "the signal class has no detections to estimate from".into(),
        ));
    }
    let q_any = answered / pulses;
    let delta = (multi_photon_bound(s.mu, g2) / q_any).min(1.0);
    let (e_z, e_x) = (s.qber(Z), s.qber(X));
    let scale = s.prob * o.p_basis_tx[Z] * s.gain(Z);
    let one = 1.0 - delta;
    let e1 = if one > 0.0 { e_x / one } else { f64::INFINITY };
    let leak = f_ec * h2(e_z);
    let cost = one * h2_capped(e1);
    Ok(Bound {
        bits_per_pulse: scale * (one - cost - leak),
        terms: Terms {
            single_photon: scale * one,
            phase_error: e1,
            phase_error_cost: scale * cost,
            ec_leakage: scale * leak,
            qber_key: e_z,
            ..Terms::default()
        },
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bound_holds_for_poisson_light() {
        // Poisson light has g2(0) = 1 and p_(≥2) = 1 − e^(−μ)(1 + μ) (common practice).
        for mu in [0.01f64, 0.1, 0.5, 1.0] {
            let exact = 1.0 - (-mu).exp() * (1.0 + mu);
            assert!(exact <= multi_photon_bound(mu, 1.0), "{mu}");
            // Tight to second order as μ → 0.
            assert!(multi_photon_bound(mu, 1.0) / exact < 1.0 + mu);
        }
    }

    #[test]
    fn perfect_single_photons_give_shor_preskill() {
        // g2 = 0: Δ = 0 and the key fraction per Z detection is 1 − h(E_X) − f·h(E_Z); with
        // f = 1, E = 3 % it is 1 − 2h(0.03) = 0.611216 (Shor & Preskill 2000; BRIEF §4).
        let o = super::super::observed::tests_support::symmetric(0.5, 0.03, 1e6);
        let b = sps_rate(&o, 0.0, 1.0).unwrap();
        let per_det = b.bits_per_pulse / (o.classes[0].prob * 0.5 * o.classes[0].gain(Z));
        assert!((per_det - 0.611_216).abs() < 1e-6, "{per_det}");
    }
}
