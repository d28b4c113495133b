//! Asymptotic decoy-state BB84: the GLLP rate with the vacuum + weak decoy bounds of Ma, Qi,
//! Zhao, Lo, PRA 72, 012326 (2005) (decoy method of Lo, Ma, Chen, PRL 94, 230504 (2005)).
//!
//! Counts are taken as their expectations (no statistical fluctuations). With a vacuum class its
//! gain is Y0; without one, Y0 is bounded from the signal and the weak decoy (derived below).

use super::channel::{gllp, Link, E0};
use super::entropy::{h2, h2_capped};
use super::{Bound, EstimatorError, Observed, Terms, X, Z};

/// Below this mean photon number a class counts as vacuum.
pub const VACUUM_MU: f64 = 1e-9;

/// Lower bound on the single-photon yield from signal μ and weak decoy ν < μ (Ma, Qi, Zhao, Lo
/// 2005, eq. (34), the vacuum + weak decoy bound):
/// Y1 ≥ μ/(μν − ν²)·[Q_ν·e^ν − Q_μ·e^μ·ν²/μ² − (μ² − ν²)/μ²·Y0], with Y0 its upper bound.
/// Derived again here: Q_ν·e^ν − Q_μ·e^μ·ν²/μ² = Y0·(μ² − ν²)/μ² + Y1·(μν − ν²)/μ
/// + Σ_(n≥3) Y_n·(ν^n − ν²·μ^(n−2))/n!, and every term of the sum is ≤ 0 for ν < μ.
pub fn y1_lower(mu: f64, nu: f64, q_mu: f64, q_nu: f64, y0_upper: f64) -> f64 {
    let a = q_nu * nu.exp() - q_mu * mu.exp() * nu * nu / (mu * mu);
    let b = (mu * mu - nu * nu) / (mu * mu) * y0_upper;
    (mu / (mu * nu - nu * nu) * (a - b)).max(0.0)
}

/// Upper bound on the single-photon error rate from the weak decoy ν (Ma, Qi, Zhao, Lo 2005,
/// eq. (37)): e1 ≤ (E_ν·Q_ν·e^ν − e0·Y0)/(Y1·ν), with Y0 its lower bound and Y1 its lower
/// bound (derived again: E_ν·Q_ν·e^ν = e0·Y0 + e1·Y1·ν + Σ_(n≥2) e_n·Y_n·ν^n/n!, every term ≥ 0);
/// fraction, not capped (a bound ≥ 1/2 leaves no secrecy).
pub fn e1_upper(nu: f64, q_nu: f64, e_nu: f64, y0_lower: f64, y1_lower: f64) -> f64 {
    if y1_lower <= 0.0 || nu <= 0.0 {
        return f64::INFINITY;
    }
    ((e_nu * q_nu * nu.exp() - E0 * y0_lower) / (y1_lower * nu)).max(0.0)
}

/// Bounds (Y0_lower, Y0_upper) on the vacuum yield in basis `b`. A vacuum class gives Y0 itself.
/// Otherwise (derived here from the photon-number expansion Q_k·e^(μ_k) = Σ_n Y_n·μ_k^n/n!):
/// Y0 ≥ (μ·Q_ν·e^ν − ν·Q_μ·e^μ)/(μ − ν) because ν·μ^n − μ·ν^n ≥ 0 for n ≥ 1; and
/// Y0 ≤ E_k·Q_k·e^(μ_k)/e0 for every class k because every term of E_k·Q_k·e^(μ_k) is ≥ 0.
pub fn y0_bounds(o: &Observed, b: usize, signal: usize, decoy: usize) -> (f64, f64) {
    if let Some(v) = o.classes.iter().find(|c| c.mu < VACUUM_MU) {
        let y0 = v.gain(b);
        return (y0, y0);
    }
    let (s, d) = (&o.classes[signal], &o.classes[decoy]);
    let (mu, nu) = (s.mu, d.mu);
    let lower = ((mu * d.gain(b) * nu.exp() - nu * s.gain(b) * mu.exp()) / (mu - nu)).max(0.0);
    let upper = o
        .classes
        .iter()
        .map(|c| c.qber(b) * c.gain(b) * c.mu.exp() / E0)
        .fold(f64::INFINITY, f64::min);
    (lower, upper.max(lower))
}

/// Signal (largest μ) and weak decoy (smallest nonzero μ below it) class indices.
pub fn signal_and_weak(o: &Observed) -> Result<(usize, usize), EstimatorError> {
    let by_mu = |a: &&(usize, f64), b: &&(usize, f64)| a.1.total_cmp(&b.1);
    let mus: Vec<(usize, f64)> = o.classes.iter().map(|c| c.mu).enumerate().collect();
    let signal = mus.iter().max_by(by_mu).map(|x| x.0);
    let weak = mus
        .iter()
        .filter(|x| x.1 >= VACUUM_MU && Some(x.0) != signal)
        .min_by(by_mu)
        .map(|x| x.0);
    match (signal, weak) {
        (Some(s), Some(w)) => Ok((s, w)),
        _ => Err(EstimatorError(format!(
            "the decoy bounds need a signal and a weak decoy of nonzero intensity; the counts have \
             {} class(es) with μ = {:?}",
            o.classes.len(),
            mus.iter().map(|x| x.1).collect::<Vec<_>>()
        ))),
    }
}

/// Asymptotic decoy-state rate (GLLP with the vacuum + weak decoy bounds above; Lo, Ma, Chen
/// 2005 eq. (1); Ma, Qi, Zhao, Lo 2005): key from the signal class in the Z basis, phase error
/// bounded by the X-basis single-photon error e1^X:
/// R = p_μ·p_Z·{Q1^Z·[1 − h(e1^X)] − f·Q_μ^Z·h(E_μ^Z)}, bits per pulse, with Q1^Z = Y1^Z·μ·e^(−μ).
pub fn decoy_rate(o: &Observed, f_ec: f64) -> Result<Bound, EstimatorError> {
    let (si, wi) = signal_and_weak(o)?;
    let (s, w) = (&o.classes[si], &o.classes[wi]);
    let (_, y0z_hi) = y0_bounds(o, Z, si, wi);
    let y1z = y1_lower(s.mu, w.mu, s.gain(Z), w.gain(Z), y0z_hi);
    let (y0x_lo, y0x_hi) = y0_bounds(o, X, si, wi);
    let y1x = y1_lower(s.mu, w.mu, s.gain(X), w.gain(X), y0x_hi);
    let e1 = e1_upper(w.mu, w.gain(X), w.qber(X), y0x_lo, y1x);
    let q1 = y1z * s.mu * (-s.mu).exp();
    let scale = s.prob * o.p_basis_tx[Z];
    let (q_mu, e_mu) = (s.gain(Z), s.qber(Z));
    let bits = gllp(scale, q_mu, e_mu, q1, e1, f_ec);
    Ok(Bound {
        bits_per_pulse: bits,
        terms: Terms {
            single_photon: scale * q1,
            phase_error: e1,
            phase_error_cost: scale * q1 * h2_capped(e1),
            ec_leakage: scale * f_ec * q_mu * h2(e_mu),
            qber_key: e_mu,
            ..Terms::default()
        },
    })
}

/// Vacuum + weak decoy rate of the standard channel model (Ma, Qi, Zhao, Lo 2005: eq. (1) with
/// Y1 from eq. (34) and e1 from eq. (37); the vacuum decoy measures Y0 itself), signal μ, weak
/// decoy ν, at `l_km`; the share q of pulses that give key, as in eq. (1); bits per pulse.
pub fn vacuum_weak_rate(link: &Link, mu: f64, nu: f64, l_km: f64, f: f64, q: f64) -> f64 {
    let (q_mu, e_mu) = link.coherent(mu, l_km);
    let (q_nu, e_nu) = link.coherent(nu, l_km);
    let y1 = y1_lower(mu, nu, q_mu, q_nu, link.y0);
    let e1 = e1_upper(nu, q_nu, e_nu, link.y0, y1);
    gllp(q, q_mu, e_mu, y1 * mu * (-mu).exp(), e1, f)
}

#[cfg(test)]
mod tests {
    use super::super::channel::infinite_decoy_rate;
    use super::super::ClassCounts;
    use super::*;

    /// Expected counts of the standard model for BB84 (q = 1/2 per basis) at `l_km`.
    fn model_counts(link: &Link, mus: &[f64], l_km: f64) -> Observed {
        let classes = mus
            .iter()
            .map(|&mu| {
                let (q, e) = link.coherent(mu, l_km);
                let p = 1e12 / mus.len() as f64;
                ClassCounts {
                    mu,
                    prob: 1.0 / mus.len() as f64,
                    pulses: [p / 2.0, p / 2.0],
                    detected: [[p / 2.0 * q, 0.0], [0.0, p / 2.0 * q]],
                    errors: [p / 2.0 * q * e, p / 2.0 * q * e],
                }
            })
            .collect();
        Observed {
            classes,
            pulses: 1e12,
            p_basis_tx: [0.5, 0.5],
            pulses_per_s: 1e9,
        }
    }

    #[test]
    fn vacuum_weak_bounds_bracket_the_truth_and_approach_it_as_nu_shrinks() {
        // Ma, Qi, Zhao, Lo 2005 state that the vacuum + weak decoy bounds are tight as ν → 0.
        let link = Link::GYS_EXAMPLE;
        let (y1, e1) = link.single_photon(20.0);
        let mut prev_gap = f64::INFINITY;
        for nu in [0.2, 0.1, 0.05, 0.01] {
            let o = model_counts(&link, &[0.48, nu, 0.0], 20.0);
            let (_, y0_hi) = y0_bounds(&o, Z, 0, 1);
            let y1l = y1_lower(0.48, nu, o.classes[0].gain(Z), o.classes[1].gain(Z), y0_hi);
            let e1u = e1_upper(nu, o.classes[1].gain(X), o.classes[1].qber(X), y0_hi, y1l);
            // Y1 ≈ Y0 + η is itself an approximation of 1 − (1 − Y0)(1 − η): allow 1e-9.
            assert!(y1l <= y1 * (1.0 + 1e-9) && e1u >= e1 * (1.0 - 1e-9), "{nu}");
            let gap = (y1 - y1l) / y1;
            assert!(gap < prev_gap);
            prev_gap = gap;
        }
        assert!(prev_gap < 0.01, "{prev_gap}");
    }

    #[test]
    fn decoy_rate_below_infinite_decoy_rate() {
        let link = Link::GYS_EXAMPLE;
        for l in [0.0, 40.0, 80.0] {
            let o = model_counts(&link, &[0.48, 0.05, 0.0], l);
            let r = decoy_rate(&o, 1.22).unwrap().bits_per_pulse;
            // p_μ = 1/3 and p_Z = 1/2 with Bob's share folded into the gains here: compare with
            // the infinite-decoy rate at q = 1/2 scaled by p_μ.
            let inf = infinite_decoy_rate(&link, 0.48, l, 1.22, 0.5) / 3.0;
            assert!(r <= inf && r > 0.8 * inf, "L {l}: {r} vs {inf}");
        }
    }

    #[test]
    fn no_vacuum_class_still_bounds() {
        let link = Link::GYS_EXAMPLE;
        let o = model_counts(&link, &[0.5, 0.1], 10.0);
        let (lo, hi) = y0_bounds(&o, Z, 0, 1);
        assert!(lo <= link.y0 * (1.0 + 1e-6) && hi >= link.y0, "{lo} {hi}");
        assert!(decoy_rate(&o, 1.22).unwrap().bits_per_pulse > 0.0);
    }
}
