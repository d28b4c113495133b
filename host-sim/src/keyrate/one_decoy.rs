//! Finite-key one-decoy bound: Rusca, Boaron, Grünenfelder, Martin, Zbinden, "Finite-key analysis
//! for the 1-decoy state QKD protocol", APL 112, 171104 (2018).
//!
//! Two intensities μ1 > μ2 (signal and decoy), no vacuum class. Key from the Z basis of both
//! intensities, phase error from the X basis. The lines carry the numbers of the paper's
//! appendix: (A25) the key length, (A16) the upper bound on vacuum events, (A17) the single-photon
//! bound, ε_sec = 19ε. For the three-state protocol (X+ only) the X-basis errors of the one X
//! state stand for the X basis: that assumes the phase error does not depend on which X state was
//! sent, an assumption of this estimate, not of the paper.
//!
//! Two suspected misprints of the appendix, decided from the derivation:
//! - the rescaled counts n^±_k and m^±_k carry the factor e^k/p_k wherever they appear (one
//!   display, (A18) in a public copy, shows them without it). The factor is what turns the count
//!   of class k into the photon-number expansion Σ_n (τ_n/...)·s_n that the decoy bounds compare;
//!   without it the bounds mix counts of different classes;
//! - (A16) takes δ(n_Z) at ε1 where a second, independent concentration bound (ε2) is meant: the
//!   errors of class μ2 and the errors among vacuum events are two different random variables.
//!   With every ε_i = ε_sec/19, as here, the two readings give the same number.
//!
//! Where the earlier form differed (docs/keyrate.md has the figures): s^u_Z,0 lacked the
//! 2·δ(n_Z) of (A16), the fluctuation of the error count among vacuum events, so s_Z,1 was a
//! little too large for small blocks.

use super::finite_lim::{finite_key, hoeffding_delta, rescaled, tau, v1_upper, Epsilons};
use super::{Bound, EstimatorError, Observed, X, Z};

/// Number of error terms ε_sec is split into (Rusca et al. 2018, appendix: ε_sec = 19ε).
pub const RUSCA_SPLIT: f64 = 19.0;

/// Signal and decoy indices (μ1 > μ2 > 0).
fn ordered(o: &Observed) -> Result<[usize; 2], EstimatorError> {
    if o.classes.len() != 2 {
        return Err(EstimatorError(format!(
            "the one-decoy bound needs exactly two intensity classes; the counts have {}",
            o.classes.len()
        )));
    }
    let (a, b) = (o.classes[0].mu, o.classes[1].mu);
    let idx = if a > b { [0, 1] } else { [1, 0] };
    if o.classes[idx[1]].mu <= 0.0 || a == b {
        return Err(EstimatorError(format!(
            "the one-decoy bound needs μ1 > μ2 > 0; got {a} and {b}"
        )));
    }
    Ok(idx)
}

/// Bounds in basis `b` (s_0 lower, s_0 upper, s_1 lower), counts; `fluct = false` drops the
/// Hoeffding terms.
pub fn rusca_s0_s1(
    o: &Observed,
    b: usize,
    eps: Epsilons,
    fluct: bool,
) -> Result<(f64, f64, f64), EstimatorError> {
    let [i1, i2] = ordered(o)?;
    let (c1, c2) = (&o.classes[i1], &o.classes[i2]);
    let (mu1, mu2) = (c1.mu, c2.mu);
    let e = eps.sec / RUSCA_SPLIT;
    let (dn, dm) = if fluct {
        (hoeffding_delta(o.n(b), e), hoeffding_delta(o.m(b), e))
    } else {
        (0.0, 0.0)
    };
    let (_, n1p) = rescaled(mu1, c1.prob, c1.n(b), dn);
    let (n2m, _) = rescaled(mu2, c2.prob, c2.n(b), dn);
    let (tau0, tau1) = (tau(o, 0), tau(o, 1));
    // Lim et al. 2014 eq. (2) with (μ2, μ3) → (μ1, μ2), the lower bound Rusca et al. use in
    // (A25): s_0 ≥ τ0/(μ1 − μ2)·(μ1·n^-_μ2 − μ2·n^+_μ1).
    let s0_lo = (tau0 / (mu1 - mu2) * (mu1 * n2m - mu2 * n1p)).max(0.0);
    // (A16): s^u_0 = 2·[τ0·(e^μ2/p_μ2)·(m_μ2 + δ(m, ε)) + δ(n, ε)]: vacuum events err with
    // probability 1/2, so s_0 ≤ 2·(m_0 + δ(n)), and m_0 ≤ τ0·m^+_μ2 by the decoy expansion.
    let (_, m2p) = rescaled(mu2, c2.prob, c2.errors[b], dm);
    let s0_hi = 2.0 * (tau0 * m2p + dn);
    // (A17): s_1 ≥ μ1·τ1/(μ2(μ1 − μ2))·[n^-_μ2 − μ2²/μ1²·n^+_μ1 − (μ1² − μ2²)/μ1²·s^u_0/τ0].
    let s1 = mu1 * tau1 / (mu2 * (mu1 - mu2))
        * (n2m
            - mu2 * mu2 / (mu1 * mu1) * n1p
            - (mu1 * mu1 - mu2 * mu2) / (mu1 * mu1) * s0_hi / tau0);
    Ok((s0_lo, s0_hi, s1.max(0.0)))
}

/// Upper bound on single-photon errors in X, counts (Lim et al. 2014 eq. (4) with (μ2, μ3) →
/// (μ1, μ2), as in Rusca et al.'s appendix): v_X,1 ≤ τ1·(m^+_X,μ1 − m^-_X,μ2)/(μ1 − μ2).
pub fn rusca_v1(o: &Observed, eps: Epsilons, fluct: bool) -> Result<f64, EstimatorError> {
    let [i1, i2] = ordered(o)?;
    Ok(v1_upper(
        o,
        &o.classes[i1],
        &o.classes[i2],
        eps,
        RUSCA_SPLIT,
        fluct,
    ))
}

/// Finite-key length of the one-decoy protocol (Rusca et al. 2018, (A25)):
/// ℓ = s_Z,0 + s_Z,1·[1 − h(φ_Z)] − λ_EC − 6·log2(19/ε_sec) − log2(2/ε_cor), with
/// φ_Z = v_X,1/s_X,1 + γ(ε_sec, v_X,1/s_X,1, s_Z,1, s_X,1) (eq. (5), the γ of Lim et al. 2014 with
/// 19 in place of 21) and λ_EC = f·n_Z·h(E_Z). Returned per pulse sent with its terms.
pub fn rusca_key(o: &Observed, eps: Epsilons, f_ec: f64) -> Result<Bound, EstimatorError> {
    finite_key(o, eps, f_ec, RUSCA_SPLIT, |fluct| {
        let (s0z, _, s1z) = rusca_s0_s1(o, Z, eps, fluct)?;
        let (_, _, s1x) = rusca_s0_s1(o, X, eps, fluct)?;
        let v1x = rusca_v1(o, eps, fluct)?;
        Ok((s0z, s1z, s1x, v1x))
    })
}
