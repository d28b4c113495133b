//! Confidence bounds on an error fraction, and the binary entropy, in fixed point on the board.
//!
//! The board estimates the QBER from `k` errors among `n` tested bits and must say how far the
//! true rate can lie above `k/n`. Two bounds, both in integer arithmetic (u128 intermediates, no
//! floats), rounded outward (upper bounds up, lower bounds down), in parts per million:
//!
//! - **Hoeffding** (W. Hoeffding, JASA 58, 13, 1963): P(X̄ − p ≥ t) ≤ e^(−2nt²), so with
//!   confidence 1 − ε the rate lies below k/n + t, t = √(ln(1/ε)/(2n)) (one-sided); the two-sided
//!   form P(|X̄ − p| ≥ t) ≤ 2e^(−2nt²) gives t = √(ln(2/ε)/(2n)). Distribution-free, loose at
//!   small rates.
//! - **Wilson score interval** (E. B. Wilson, JASA 22, 209, 1927): the solutions p of
//!   (k/n − p)² = z²·p(1 − p)/n, i.e. (k + z²/2 ± z·√(k(n − k)/n + z²/4)) / (n + z²). Much tighter
//!   than Hoeffding at QBERs of a few percent; it is a normal-approximation interval, so the exact
//!   Clopper-Pearson interval is computed on the host beside it for comparison.
//!
//! The natural logarithm comes from a binary logarithm by repeated squaring (one result bit per
//! squaring of the normalised mantissa, common practice for fixed-point log2), times ln 2.
//!
//! [`binary_entropy_q32`] and [`shor_preskill_rate_ppb`] give h(Q) and the Shor-Preskill rate
//! 1 − 2h(Q) (Shor & Preskill, PRL 85, 441, 2000), whose zero is [`SHOR_PRESKILL_QBER_PPM`].

use core::fmt;

/// ln 2 in Q32.32: round(0.693147180559945309 × 2^32).
pub const LN2_Q32: u64 = 2_977_044_472;

/// QBER at which the Shor-Preskill rate 1 − 2h(Q) is zero, in ppm: 11.0028 %.
///
/// Derivation: h(Q) = −Q·log2 Q − (1 − Q)·log2(1 − Q) is increasing on (0, 1/2), so h(Q) = 1/2 has
/// one root there; bisection gives Q = 0.1100278644… (Shor & Preskill, PRL 85, 441, 2000 quote
/// 11 %); rounded to the nearest ppm, 110 028. The tests check the sign change of the fixed-point
/// rate across it.
pub const SHOR_PRESKILL_QBER_PPM: u32 = 110_028;

/// One-sided z for ε = 1e-10 in Q16.16: Φ⁻¹(1 − 1e-10) = 6.361340902 (from memory; checked against
/// scipy `norm.isf(1e-10)` in `tests/tests/bounds_reference.rs`), round(6.361340902 × 2^16).
pub const Z_ONE_SIDED_1E_10_Q16: u32 = 416_897;

/// Why a bound could not be set up.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BoundError {
    /// ε = 1/`one_in` with `one_in` < 2 (ε must lie in (0, 1/2]).
    Epsilon(u64),
    /// z of zero.
    ZeroZ,
}

impl fmt::Display for BoundError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Epsilon(n) => write!(f, "epsilon 1/{n}: expected one_in >= 2"),
            Self::ZeroZ => write!(f, "z must be positive"),
        }
    }
}

impl core::error::Error for BoundError {}

/// A failure probability ε = 1/`one_in`, stored as ln(1/ε) in Q32.32.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Epsilon {
    one_in: u64,
    ln_inv_q32: u64,
}

impl Epsilon {
    /// ε = 1/`one_in` (e.g. `one_in(10_000_000_000)` for 1e-10); `one_in` ≥ 2.
    pub fn one_in(one_in: u64) -> Result<Self, BoundError> {
        if one_in < 2 {
            return Err(BoundError::Epsilon(one_in));
        }
        Ok(Self {
            one_in,
            ln_inv_q32: ln_q32(one_in).unsigned_abs(),
        })
    }

    /// The `one_in` this ε was built from (ε = 1/`one_in`).
    pub const fn inverse(&self) -> u64 {
        self.one_in
    }

    /// ln(1/ε) in Q32.32.
    pub const fn ln_inv_q32(&self) -> u64 {
        self.ln_inv_q32
    }
}

/// log2(x) of an integer x ≥ 1 in Q32.32 (signed so callers can subtract); `log2(0)` gives 0.
///
/// Integer part from the leading zeros; 32 fraction bits by squaring the mantissa in Q1.63.
pub fn log2_q32(x: u64) -> i64 {
    if x == 0 {
        return 0;
    }
    let lz = x.leading_zeros();
    let int = i64::from(63 - lz);
    // Mantissa in [1, 2) as Q1.63.
    let mut m = u128::from(x << lz);
    let mut frac: i64 = 0;
    for _ in 0..32 {
        m = (m * m) >> 63;
        frac <<= 1;
        if m >= 1 << 64 {
            m >>= 1;
            frac |= 1;
        }
    }
    (int << 32) + frac
}

/// ln(x) of an integer x ≥ 1 in Q32.32: log2(x)·ln 2.
pub fn ln_q32(x: u64) -> i64 {
    ((i128::from(log2_q32(x)) * i128::from(LN2_Q32)) >> 32) as i64
}

/// A Q0.64 fraction in [0, 1) as ppm, rounded up.
fn q64_to_ppm_up(v: u128) -> u32 {
    let ppm = (v * 1_000_000).div_ceil(1 << 64);
    ppm.min(1_000_000) as u32
}

/// Hoeffding deviation t = √(ln(1/ε)/(2n)) (one-sided) in ppm, rounded up; 1e6 when n = 0.
pub fn hoeffding_t_ppm(n: u64, eps: Epsilon) -> u32 {
    hoeffding(n, u128::from(eps.ln_inv_q32))
}

/// Two-sided Hoeffding deviation t = √(ln(2/ε)/(2n)) in ppm, rounded up; 1e6 when n = 0.
pub fn hoeffding_two_sided_t_ppm(n: u64, eps: Epsilon) -> u32 {
    hoeffding(n, u128::from(eps.ln_inv_q32) + u128::from(LN2_Q32))
}

fn hoeffding(n: u64, ln_q32: u128) -> u32 {
    if n == 0 {
        return 1_000_000;
    }
    // t² in Q0.64: ln (Q32.32) << 32 over 2n.
    let t2_q64 = (ln_q32 << 32) / (2 * u128::from(n));
    if t2_q64 >= 1 << 64 {
        return 1_000_000;
    }
    // √(Q0.64) is Q0.32; round the root up so the bound stays conservative.
    let mut t_q32 = t2_q64.isqrt();
    if t_q32 * t_q32 < t2_q64 {
        t_q32 += 1;
    }
    q64_to_ppm_up(t_q32 << 32)
}

/// `k` of `n` as ppm, rounded to nearest (0 when n = 0).
pub fn fraction_ppm(k: u64, n: u64) -> u32 {
    if n == 0 {
        return 0;
    }
    ((u128::from(k) * 1_000_000 + u128::from(n) / 2) / u128::from(n)).min(1_000_000) as u32
}

/// Hoeffding one-sided upper bound min(1, k/n + t) in ppm (1e6 when n = 0).
pub fn hoeffding_upper_ppm(k: u64, n: u64, eps: Epsilon) -> u32 {
    if n == 0 {
        return 1_000_000;
    }
    let p = (u128::from(k.min(n)) * 1_000_000).div_ceil(u128::from(n)) as u32;
    p.saturating_add(hoeffding_t_ppm(n, eps)).min(1_000_000)
}

/// Wilson score interval (lower, upper) in ppm for `k` of `n` at z (Q16.16), lower rounded down
/// and upper rounded up; (0, 1e6) when n = 0.
pub fn wilson_ppm(k: u64, n: u64, z_q16: u32) -> (u32, u32) {
    if n == 0 {
        return (0, 1_000_000);
    }
    let k = u128::from(k.min(n));
    let n = u128::from(n);
    // Everything in Q32 (values × 2^32).
    let z2_q32 = u128::from(z_q16) * u128::from(z_q16);
    let centre_q32 = (k << 32) + z2_q32 / 2;
    // k(n − k)/n + z²/4 in Q32; its root in Q32 is √(v·2^32). Past 2^40 tested bits the shift
    // would overflow: divide first (the lost fraction is below 2^-32 of a count's worth there).
    let spread = k * (n - k);
    let spread_q32 = if n < 1 << 40 {
        (spread << 32) / n
    } else {
        (spread / n) << 32
    };
    let inner_q32 = spread_q32 + z2_q32 / 4;
    let mut root_q32 = (inner_q32 << 32).isqrt();
    if root_q32 * root_q32 < inner_q32 << 32 {
        root_q32 += 1;
    }
    let half_q32 = (u128::from(z_q16) * root_q32).div_ceil(1 << 16);
    let den_q32 = (n << 32) + z2_q32;
    let upper = ((centre_q32 + half_q32) * 1_000_000).div_ceil(den_q32);
    let lower = (centre_q32.saturating_sub(half_q32) * 1_000_000) / den_q32;
    (lower.min(1_000_000) as u32, upper.min(1_000_000) as u32)
}

/// Binary entropy h(p) in bits, Q0.32 (as u64 so h(1/2) = 2^32 fits), for p in ppm (≤ 1e6).
pub fn binary_entropy_q32(p_ppm: u32) -> u64 {
    let p = u64::from(p_ppm.min(1_000_000));
    let q = 1_000_000 - p;
    // −x·log2(x/1e6) for x in ppm, in Q32.32: x·(log2 1e6 − log2 x)/1e6.
    let log_1e6 = i128::from(log2_q32(1_000_000));
    let term = |x: u64| -> i128 {
        if x == 0 {
            return 0;
        }
        i128::from(x) * (log_1e6 - i128::from(log2_q32(x))) / 1_000_000
    };
    (term(p) + term(q)).max(0) as u64
}

/// Shor-Preskill asymptotic rate 1 − 2h(Q) in parts per billion (negative above the zero).
pub fn shor_preskill_rate_ppb(q_ppm: u32) -> i64 {
    let h = i128::from(binary_entropy_q32(q_ppm));
    let r_q32 = (1i128 << 32) - 2 * h;
    ((r_q32 * 1_000_000_000) >> 32) as i64
}

#[cfg(test)]
mod tests {
    use super::*;

    fn eps_1e10() -> Epsilon {
        Epsilon::one_in(10_000_000_000).unwrap()
    }

    #[test]
    fn log_and_ln() {
        assert_eq!(log2_q32(1), 0);
        assert_eq!(log2_q32(1024), 10 << 32);
        // ln(1e10) = 23.02585093 (10·ln 10, common practice).
        let v = ln_q32(10_000_000_000) as f64 / 2f64.powi(32);
        assert!((v - 23.025_850_93).abs() < 1e-6, "{v}");
    }

    #[test]
    fn hoeffding_check_value() {
        // BRIEF §4 (Hoeffding, JASA 58, 13, 1963): n = 1e6, ε = 1e-10 → t = 3.39e-3. That value is
        // the one-sided form √(ln(1/ε)/(2n)) = √(23.02585/2e6) = 3.3931e-3; the two-sided form
        // √(ln(2/ε)/(2n)) = √(23.71900/2e6) = 3.4438e-3 (both derived here from the formulas).
        let t1 = hoeffding_t_ppm(1_000_000, eps_1e10());
        assert!((3393..=3394).contains(&t1), "{t1}");
        let t2 = hoeffding_two_sided_t_ppm(1_000_000, eps_1e10());
        assert!((3444..=3445).contains(&t2), "{t2}");
        assert_eq!(hoeffding_t_ppm(0, eps_1e10()), 1_000_000);
        assert_eq!(
            hoeffding_upper_ppm(10_000, 1_000_000, eps_1e10()),
            10_000 + t1
        );
    }

    #[test]
    fn wilson_matches_textbook_formula() {
        // Wilson (JASA 22, 209, 1927): (p̂ + z²/2n ± z√(p̂(1−p̂)/n + z²/4n²)) / (1 + z²/n), in f64.
        let z = f64::from(Z_ONE_SIDED_1E_10_Q16) / 65536.0;
        for &(k, n) in &[
            (0u64, 10u64),
            (7, 50),
            (30, 1000),
            (1100, 10_000),
            (5, 5),
            (3, 2_000_000),
        ] {
            let (lo, hi) = wilson_ppm(k, n, Z_ONE_SIDED_1E_10_Q16);
            let p = k as f64 / n as f64;
            let nf = n as f64;
            let c = (p + z * z / (2.0 * nf)) / (1.0 + z * z / nf);
            let h = z / (1.0 + z * z / nf) * (p * (1.0 - p) / nf + z * z / (4.0 * nf * nf)).sqrt();
            let (flo, fhi) = ((c - h).max(0.0) * 1e6, (c + h).min(1.0) * 1e6);
            assert!(
                f64::from(lo) <= flo + 1e-6 && flo - f64::from(lo) < 1.5,
                "{k}/{n} {lo} {flo}"
            );
            assert!(
                f64::from(hi) >= fhi - 1e-6 && f64::from(hi) - fhi < 1.5,
                "{k}/{n} {hi} {fhi}"
            );
        }
        assert_eq!(wilson_ppm(0, 0, Z_ONE_SIDED_1E_10_Q16), (0, 1_000_000));
        // Huge counts take the divide-first path without overflow: 1 % of 2^50.
        let n = 1u64 << 50;
        let (lo, hi) = wilson_ppm(n / 100, n, Z_ONE_SIDED_1E_10_Q16);
        assert!(lo <= 10_000 && hi >= 10_000 && hi - lo <= 2, "{lo} {hi}");
        assert_eq!(
            hoeffding_upper_ppm(u64::MAX, u64::MAX, eps_1e10()),
            1_000_000
        );
    }

    #[test]
    fn entropy_and_shor_preskill() {
        // BRIEF §4 [der]: 1 − 2h(0.01) = 0.838414, 1 − 2h(0.03) = 0.611216, h(0.05) = 0.286397.
        let r = |q| shor_preskill_rate_ppb(q) as f64 * 1e-9;
        assert!((r(10_000) - 0.838_414).abs() < 1e-6, "{}", r(10_000));
        assert!((r(30_000) - 0.611_216).abs() < 1e-6, "{}", r(30_000));
        let h = binary_entropy_q32(50_000) as f64 / 2f64.powi(32);
        assert!((h - 0.286_397).abs() < 1e-6, "{h}");
        assert_eq!(binary_entropy_q32(500_000), 1 << 32);
        assert_eq!(binary_entropy_q32(0), 0);
        // Shor & Preskill (PRL 85, 441, 2000): the rate crosses zero at Q = 11.0028 %.
        assert!(shor_preskill_rate_ppb(SHOR_PRESKILL_QBER_PPM).abs() < 5_000);
        assert!(shor_preskill_rate_ppb(SHOR_PRESKILL_QBER_PPM - 1) > 0);
        assert!(shor_preskill_rate_ppb(SHOR_PRESKILL_QBER_PPM + 1) < 0);
    }

    proptest::proptest! {
        #[test]
        fn bounds_bracket_the_estimate(k in proptest::prelude::any::<u64>(),
                                       n in proptest::prelude::any::<u64>(),
                                       z in 1u32..2_000_000, one_in in 2u64..u64::MAX) {
            let k = if n == 0 { 0 } else { k % (n + 1).max(1) };
            let p = fraction_ppm(k, n);
            let (lo, hi) = wilson_ppm(k, n, z);
            proptest::prop_assert!(lo <= p && p <= hi, "{k}/{n}: {lo} {p} {hi}");
            proptest::prop_assert!(hi <= 1_000_000);
            let eps = Epsilon::one_in(one_in).unwrap();
            proptest::prop_assert!(hoeffding_upper_ppm(k, n, eps) >= p);
        }
    }

    #[test]
    fn epsilon_is_validated() {
        assert_eq!(Epsilon::one_in(1), Err(BoundError::Epsilon(1)));
        assert!(Epsilon::one_in(2).is_ok());
    }
}
