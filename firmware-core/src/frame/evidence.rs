//! Integer arithmetic behind the alignment tests: base-2 logarithms in Q16 with a known rounding
//! direction, integer square roots and the Chinese-remainder step.
//!
//! Evidence is kept in bits (log2 of a likelihood ratio) as Q16 fixed point in an `i64`. Weights
//! that add evidence are rounded down and weights that remove it are rounded up, so every score
//! the aligner computes is at most the exact log-likelihood ratio and the stated error bounds hold
//! for the integer arithmetic as it runs.

/// One bit of evidence in Q16.
pub const ONE_BIT_Q16: i64 = 1 << 16;

/// log2(x) in Q16 for x ≥ 1, at most one unit (2^−16) below the exact value, never above it.
pub const fn log2_q16_floor(x: u64) -> i64 {
    if x == 0 {
        return i64::MIN / 4;
    }
    let e = 63 - x.leading_zeros();
    // Mantissa in [1, 2) as Q62; a right shift (e = 63) drops one bit, which only lowers it.
    let mut m: u128 = if e <= 62 {
        (x as u128) << (62 - e)
    } else {
        (x as u128) >> 1
    };
    let two: u128 = 1 << 63;
    let mut frac: i64 = 0;
    let mut i = 0;
    // Repeated squaring: each squaring doubles log2(m); an overflow past 2 is the next bit.
    while i < 16 {
        m = (m * m) >> 62;
        frac <<= 1;
        if m >= two {
            m >>= 1;
            frac |= 1;
        }
        i += 1;
    }
    ((e as i64) << 16) + frac
}

/// log2(num / den) in Q16, rounded down (`up == false`) or up (`up == true`) by at least the
/// truncation of [`log2_q16_floor`]; `num`, `den` ≥ 1.
pub const fn log2_ratio_q16(num: u64, den: u64, up: bool) -> i64 {
    let d = log2_q16_floor(num) - log2_q16_floor(den);
    // Each floor is within one unit below the truth, so the difference is within ±1.
    if up {
        d + 2
    } else {
        d - 2
    }
}

/// Smallest k with 2^k ≥ n (n ≥ 1).
pub const fn ceil_log2(n: u64) -> u32 {
    if n <= 1 {
        0
    } else {
        64 - (n - 1).leading_zeros()
    }
}

/// floor(sqrt(x)).
pub const fn isqrt(x: u64) -> u64 {
    if x < 2 {
        return x;
    }
    // Newton's iteration from above converges to the floor.
    let mut r = 1u64 << (ceil_log2(x).div_ceil(2));
    loop {
        let next = (r + x / r) / 2;
        if next >= r {
            return r;
        }
        r = next;
    }
}

/// Greatest common divisor.
pub const fn gcd(mut a: u64, mut b: u64) -> u64 {
    while b != 0 {
        let t = a % b;
        a = b;
        b = t;
    }
    a
}

/// The inverse of `a` modulo `m` (m ≥ 2), if gcd(a, m) = 1.
pub const fn mod_inverse(a: u64, m: u64) -> Option<u64> {
    if m < 2 {
        return None;
    }
    let (mut r0, mut r1) = (m as i128, (a % m) as i128);
    let (mut t0, mut t1) = (0i128, 1i128);
    while r1 != 0 {
        let q = r0 / r1;
        let r2 = r0 - q * r1;
        r0 = r1;
        r1 = r2;
        let t2 = t0 - q * t1;
        t0 = t1;
        t1 = t2;
    }
    if r0 != 1 {
        return None;
    }
    let m = m as i128;
    Some((((t0 % m) + m) % m) as u64)
}

/// Likelihood-ratio weights of one binary test, in Q16 bits: an event for the hypothesis adds
/// `gain_q16`, an event against it subtracts `loss_q16`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Weights {
    /// log2(2 (1 − e)), rounded down: evidence added per event for the hypothesis.
    pub gain_q16: i64,
    /// −log2(2 e), rounded up: evidence removed per event against it.
    pub loss_q16: i64,
}

impl Weights {
    /// Weights for the alternative "a share `e = share_q16 / 2^16` of the events go against the
    /// true hypothesis" tested against the null "half of them do" (0 < e < 1/2).
    pub const fn for_share(share_q16: u32) -> Self {
        let e = share_q16 as u64;
        Self {
            gain_q16: log2_ratio_q16(2 * (65_536 - e), 65_536, false),
            loss_q16: log2_ratio_q16(65_536, 2 * e, true),
        }
    }
}

/// The alternatives the search and confirmation tests try at once: a share of 1/16, 1/8, 1/4 or
/// 3/8 of contradicting events. A test passes when any of them reaches its threshold, which
/// therefore carries [`GRID_BITS`] extra bits (union bound over the grid).
pub const GRID: [Weights; 4] = [
    Weights::for_share(4_096),
    Weights::for_share(8_192),
    Weights::for_share(16_384),
    Weights::for_share(24_576),
];

/// log2 of the number of alternatives in [`GRID`].
pub const GRID_BITS: i64 = 2;

/// Whether `gain·for_count − loss·against_count` reaches `threshold_q16` for some weights of
/// [`GRID`] (counts of events for and against the hypothesis).
pub fn grid_passes(for_count: u16, against_count: u16, threshold_q16: i64) -> bool {
    GRID.iter().any(|w| {
        w.gain_q16 * i64::from(for_count) - w.loss_q16 * i64::from(against_count) >= threshold_q16
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log2_against_f64() {
        // Reference: the platform's f64 log2 (IEEE 754, correctly rounded to well below 2^-16).
        let mut x = 1u64;
        while x < u64::MAX / 8 {
            for y in [x, x + 1, x / 2 * 3 + 1] {
                let exact = (y as f64).log2() * 65_536.0;
                let got = log2_q16_floor(y) as f64;
                assert!(
                    got <= exact + 1e-6 && exact - got <= 1.0 + 1e-6,
                    "{y}: {got} vs {exact}"
                );
            }
            x += x / 3 + 1;
        }
        assert_eq!(log2_q16_floor(1), 0);
        assert_eq!(log2_q16_floor(1 << 40), 40 << 16);
        assert_eq!(log2_q16_floor(u64::MAX), (64 << 16) - 1);
    }

    #[test]
    fn ratios_round_the_stated_way() {
        for (n, d) in [
            (3u64, 2u64),
            (7, 8),
            (1, 1000),
            (65_535, 65_536),
            (123_456_789, 17),
        ] {
            let exact = (n as f64 / d as f64).log2() * 65_536.0;
            let lo = log2_ratio_q16(n, d, false) as f64;
            let hi = log2_ratio_q16(n, d, true) as f64;
            assert!(lo <= exact && exact <= hi && hi - lo <= 6.0, "{n}/{d}");
        }
    }

    #[test]
    fn weights_for_one_eighth() {
        // e = 1/8: log2(1.75) = 0.807355, -log2(0.25) = 2 (exact values).
        let w = Weights::for_share(8_192);
        let gain = w.gain_q16 as f64 / 65_536.0;
        let loss = w.loss_q16 as f64 / 65_536.0;
        assert!(gain <= 0.807_355 && gain > 0.807_3, "{gain}");
        assert!((2.0..2.000_1).contains(&loss), "{loss}");
    }

    #[test]
    fn integer_helpers() {
        for x in [
            0u64,
            1,
            2,
            3,
            4,
            15,
            16,
            17,
            99,
            10_000,
            u32::MAX as u64,
            u64::MAX,
        ] {
            let r = isqrt(x);
            assert!(r.checked_mul(r).is_some_and(|s| s <= x));
            assert!((r + 1).checked_mul(r + 1).is_none_or(|s| s > x), "{x}");
        }
        assert_eq!(ceil_log2(127), 7);
        assert_eq!(ceil_log2(128), 7);
        assert_eq!(ceil_log2(129), 8);
        // 2^a − 1 and 2^b − 1 share the factor 2^gcd(a,b) − 1 (elementary number theory).
        assert_eq!(gcd(127, 511), 1);
        assert_eq!(gcd(63, 511), 7);
        let inv = mod_inverse(127, 511).unwrap();
        assert_eq!(inv * 127 % 511, 1);
        assert_eq!(mod_inverse(7, 511), None);
    }
}
