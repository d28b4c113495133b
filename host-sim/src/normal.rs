//! The standard normal law's upper tail and its inverse, for the host's confidence bounds and
//! for the alarms' Wilson z (a scenario's `[alarms]` table turns its ε into z with them). A module
//! of its own below both, so the scenario files need not reach up into the statistics.

/// Upper tail Q(x) = 1 − Φ(x) of the standard normal law, for x ≥ 0 (relative error ~1e-12).
///
/// Below x = 3 the Taylor series Φ(x) = 1/2 + φ(x)·Σ x^(2k+1)/(1·3·…·(2k+1)) (Marsaglia, J. Stat.
/// Softw. 11(4), 2004); from 3 on Laplace's continued fraction Q(x) = φ(x)/(x + 1/(x + 2/(x + …))),
/// evaluated backwards from depth 200, which avoids the cancellation of 1/2 − Φ in the far tail.
pub fn normal_upper_tail(x: f64) -> f64 {
    let phi = (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt();
    if x < 3.0 {
        let (mut term, mut sum, mut k) = (x, x, 1.0);
        while term.abs() > 1e-17 * sum.abs() {
            term *= x * x / (2.0 * k + 1.0);
            sum += term;
            k += 1.0;
        }
        0.5 - phi * sum
    } else {
        let mut d = x;
        for k in (1..=200).rev() {
            d = x + f64::from(k) / d;
        }
        phi / d
    }
}

/// z with Q(z) = ε for ε in (0, 1/2] (bisection on ln Q, which cannot fail on a monotone tail).
pub fn normal_isf(eps: f64) -> f64 {
    let (mut lo, mut hi) = (0.0f64, 40.0f64);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if normal_upper_tail(mid).ln() > eps.ln() {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}
