//! Finite-key decoy BB84 with two decoys: Lim, Curty, Walenta, Xu, Zbinden, "Concise security
//! bounds for practical decoy-state quantum key distribution", PRA 89, 022307 (2014).
//!
//! The paper extracts key from its X basis and tests in Z; here the key basis is Z and the test
//! basis X (names swapped, formulas unchanged). Intensities μ1 > μ2 + μ3, μ2 > μ3 ≥ 0. Each line
//! carries the number of the equation it implements (eqs. (1)-(5) and Appendix B, checked against
//! the paper's text); the simulation model and its checks are in [`super::lim_model`]. Counts are
//! treated as i.i.d. and bounded with Hoeffding's inequality (JASA 58, 13 (1963)).
//!
//! Where the earlier form differed (docs/keyrate.md lists the figures that moved): n^−_k was
//! clamped at 0, which raises s_0 and s_1 when a weak class has fewer counts than δ (the paper
//! has no clamp, and a negative n^−_k is what keeps the bound a bound); ℓ was not rounded down.

use super::entropy::{h2, h2_capped};
use super::{Bound, ClassCounts, EstimatorError, Observed, Terms, X, Z};

/// Number of error terms ε_sec is split into in Lim et al. (Appendix B: ε_sec = 21ε; the "21"
/// of their eqs. (1), (2) and (5)).
pub const LIM_SPLIT: f64 = 21.0;

/// Security and correctness parameters of a finite-key bound.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct Epsilons {
    /// Secrecy parameter ε_sec.
    pub sec: f64,
    /// Correctness parameter ε_cor.
    pub cor: f64,
}

/// Hoeffding deviation δ(n, ε) = sqrt(n/2 · ln(1/ε)) for a total of `n` counts (Lim et al.
/// 2014, the n^± of eq. (2), with ε = ε_sec/21), counts.
pub fn hoeffding_delta(n: f64, eps: f64) -> f64 {
    (n / 2.0 * (1.0 / eps).ln()).sqrt()
}

/// τ_n = Σ_k p_k·e^(−μ_k)·μ_k^n/n!: probability that a pulse holds n photons (Lim et al. 2014,
/// below eq. (2)).
pub fn tau(o: &Observed, n: u32) -> f64 {
    let fact: f64 = (1..=n).map(f64::from).product();
    o.classes
        .iter()
        .map(|c| c.prob * (-c.mu).exp() * c.mu.powi(n as i32) / fact)
        .sum()
}

/// The Hoeffding-corrected, rescaled count n^±_k = (e^(μ_k)/p_k)·(n_k ± δ) (Lim et al. 2014,
/// the definition after eq. (2)); n^− may be negative, as in the paper.
pub fn rescaled(mu: f64, p: f64, n_k: f64, delta: f64) -> (f64, f64) {
    let s = mu.exp() / p;
    (s * (n_k - delta), s * (n_k + delta))
}

/// γ(a, b, c, d) = sqrt[(c + d)(1 − b)b/(c·d·ln 2) · log2((c + d)/(c·d·(1 − b)b) · split²/a²)]:
/// the random-sampling deviation of the phase error (Lim et al. 2014, the γ of eq. (5), split =
/// 21; "log 2" in its denominator is the natural logarithm), fraction.
pub fn gamma(a: f64, b: f64, c: f64, d: f64, split: f64) -> f64 {
    if c <= 0.0 || d <= 0.0 || b <= 0.0 || b >= 1.0 {
        return if b <= 0.0 && c > 0.0 && d > 0.0 {
            0.0
        } else {
            f64::INFINITY
        };
    }
    let inner = (c + d) / (c * d * (1.0 - b) * b) * split * split / (a * a);
    ((c + d) * (1.0 - b) * b / (c * d * std::f64::consts::LN_2) * inner.log2())
        .max(0.0)
        .sqrt()
}

/// Three intensity classes ordered μ1 > μ2 > μ3 (indices), checking μ1 > μ2 + μ3.
fn ordered(o: &Observed) -> Result<[usize; 3], EstimatorError> {
    if o.classes.len() != 3 {
        return Err(EstimatorError(format!(
            "the two-decoy bound of Lim et al. needs three intensity classes; the counts have {} \
             (use --estimator one-decoy for two)",
            o.classes.len()
        )));
    }
    let mut idx = [0usize, 1, 2];
    idx.sort_by(|&a, &b| o.classes[b].mu.total_cmp(&o.classes[a].mu));
    let mu = |i: usize| o.classes[idx[i]].mu;
    if !(mu(0) > mu(1) + mu(2) && mu(1) > mu(2) && mu(2) >= 0.0) {
        return Err(EstimatorError(format!(
            "Lim et al. require μ1 > μ2 + μ3 and μ2 > μ3 ≥ 0; got {}, {}, {}",
            mu(0),
            mu(1),
            mu(2)
        )));
    }
    Ok(idx)
}

/// Decoy bounds (s_0 lower, s_1 lower) on detections in basis `b` from vacuum and single-photon
/// pulses, counts. `fluct = false` drops the Hoeffding terms (the same bound for expected counts).
pub fn lim_s0_s1(
    o: &Observed,
    b: usize,
    eps: Epsilons,
    fluct: bool,
) -> Result<(f64, f64), EstimatorError> {
    let [i1, i2, i3] = ordered(o)?;
    let (c1, c2, c3) = (&o.classes[i1], &o.classes[i2], &o.classes[i3]);
    let (mu1, mu2, mu3) = (c1.mu, c2.mu, c3.mu);
    let delta = if fluct {
        hoeffding_delta(o.n(b), eps.sec / LIM_SPLIT)
    } else {
        0.0
    };
    let (_, n1p) = rescaled(mu1, c1.prob, c1.n(b), delta);
    let (n2m, n2p) = rescaled(mu2, c2.prob, c2.n(b), delta);
    let (n3m, n3p) = rescaled(mu3, c3.prob, c3.n(b), delta);
    let (tau0, tau1) = (tau(o, 0), tau(o, 1));
    // Eq. (2): s_0 ≥ τ0·(μ2·n^-_3 − μ3·n^+_2)/(μ2 − μ3).
    let s0 = (tau0 * (mu2 * n3m - mu3 * n2p) / (mu2 - mu3)).max(0.0);
    // Eq. (3): s_1 ≥ τ1·μ1·[n^-_2 − n^+_3 − (μ2² − μ3²)/μ1²·(n^+_1 − s_0/τ0)]
    //                / [μ1(μ2 − μ3) − μ2² + μ3²].
    let s1 = tau1 * mu1 * (n2m - n3p - (mu2 * mu2 - mu3 * mu3) / (mu1 * mu1) * (n1p - s0 / tau0))
        / (mu1 * (mu2 - mu3) - mu2 * mu2 + mu3 * mu3);
    Ok((s0, s1.max(0.0)))
}

/// Upper bound on single-photon errors in the test basis X, counts (Lim et al. 2014, eq. (4)):
/// v_X,1 ≤ τ1·(m^+_X,2 − m^-_X,3)/(μ2 − μ3).
pub fn lim_v1(o: &Observed, eps: Epsilons, fluct: bool) -> Result<f64, EstimatorError> {
    let [_, i2, i3] = ordered(o)?;
    Ok(v1_upper(
        o,
        &o.classes[i2],
        &o.classes[i3],
        eps,
        LIM_SPLIT,
        fluct,
    ))
}

/// Upper bound on single-photon errors in X from a higher class `hi` and a lower class `lo`,
/// counts: τ1·(m^+_X,hi − m^-_X,lo)/(μ_hi − μ_lo), with Hoeffding's δ(m_X) at ε_sec/`split`
/// when `fluct` (Lim et al. 2014, eq. (4); the one-decoy protocol uses it with (μ2, μ3) →
/// (μ1, μ2)).
pub fn v1_upper(
    o: &Observed,
    hi: &ClassCounts,
    lo: &ClassCounts,
    eps: Epsilons,
    split: f64,
    fluct: bool,
) -> f64 {
    let delta = if fluct {
        hoeffding_delta(o.m(X), eps.sec / split)
    } else {
        0.0
    };
    let (_, m_hi_p) = rescaled(hi.mu, hi.prob, hi.errors[X], delta);
    let (m_lo_m, _) = rescaled(lo.mu, lo.prob, lo.errors[X], delta);
    (tau(o, 1) * (m_hi_p - m_lo_m) / (hi.mu - lo.mu)).max(0.0)
}

/// Finite-key length of two-decoy BB84 (Lim et al. 2014, eq. (1)):
/// ℓ = s_Z,0 + s_Z,1·[1 − h(φ_Z)] − λ_EC − 6·log2(21/ε_sec) − log2(2/ε_cor), with
/// φ_Z = v_X,1/s_X,1 + γ(ε_sec, v_X,1/s_X,1, s_X,1, s_Z,1) (eq. (5); γ is symmetric in its last
/// two arguments) and λ_EC = f·n_Z·h(E_Z) (the leakage model of their simulations). Returned per
/// pulse sent (ℓ/N, ℓ rounded down when positive) with its terms.
pub fn lim_key(o: &Observed, eps: Epsilons, f_ec: f64) -> Result<Bound, EstimatorError> {
    finite_key(o, eps, f_ec, LIM_SPLIT, |fluct| {
        let (s0z, s1z) = lim_s0_s1(o, Z, eps, fluct)?;
        let (_, s1x) = lim_s0_s1(o, X, eps, fluct)?;
        let v1x = lim_v1(o, eps, fluct)?;
        Ok((s0z, s1z, s1x, v1x))
    })
}

/// Finite-key length ℓ = ⌊s_Z,0 + s_Z,1·[1 − h(φ_Z)] − λ_EC − 6·log2(split/ε_sec) −
/// log2(2/ε_cor)⌋ with φ_Z = v_X,1/s_X,1 + γ (Lim et al. 2014, eqs. (1) and (5); Rusca et al.
/// 2018, (A25), with split 19), per pulse sent with its terms. `bounds(fluct)` gives
/// (s_Z,0, s_Z,1, s_X,1, v_X,1) in counts.
pub fn finite_key(
    o: &Observed,
    eps: Epsilons,
    f_ec: f64,
    split: f64,
    bounds: impl Fn(bool) -> Result<(f64, f64, f64, f64), EstimatorError>,
) -> Result<Bound, EstimatorError> {
    let len = |fluct: bool| -> Result<(f64, Terms), EstimatorError> {
        let (s0z, s1z, s1x, v1x) = bounds(fluct)?;
        let ratio = if s1x > 0.0 { v1x / s1x } else { f64::INFINITY };
        let phi = if fluct {
            ratio + gamma(eps.sec, ratio, s1z, s1x, split)
        } else {
            ratio
        };
        let leak = f_ec * o.n(Z) * h2(o.qber(Z));
        let eps_terms = if fluct {
            6.0 * (split / eps.sec).log2() + (2.0 / eps.cor).log2()
        } else {
            0.0
        };
        let cost = s1z * h2_capped(phi);
        let l = s0z + s1z - cost - leak - eps_terms;
        let n = o.pulses;
        Ok((
            l,
            Terms {
                vacuum: s0z / n,
                single_photon: s1z / n,
                phase_error: phi,
                phase_error_cost: cost / n,
                ec_leakage: leak / n,
                qber_key: o.qber(Z),
                epsilon_terms: eps_terms / n,
                statistical_penalty: 0.0,
                phase_error_finite: None,
            },
        ))
    };
    // The terms are those of the same counts without fluctuations, so that they add up with the
    // finite-size penalty (ε terms + fluctuations) to the finite key length.
    let (l, finite) = len(true)?;
    let l = if l > 0.0 { l.floor() } else { l };
    let (l_inf, mut terms) = len(false)?;
    terms.epsilon_terms = finite.epsilon_terms;
    terms.statistical_penalty = (l_inf - l) / o.pulses - finite.epsilon_terms;
    terms.phase_error_finite = Some(finite.phase_error);
    Ok(Bound {
        bits_per_pulse: l / o.pulses,
        terms,
    })
}
