//! Detection thresholds for Z²_n, fixed offline from its null distribution.
//!
//! Under noise alone (uniform phases) Z²_n is χ² with 2n degrees of freedom (Buccheri et al.,
//! A&A 128, 245, 1983), whose survival function is Q(x) = exp(−x/2)·Σ_{k<n} (x/2)^k / k!
//! (the Poisson–χ² identity, common practice). A search that tests M trial frequencies raises a
//! false lock with probability at most M·Q(x) (Bonferroni), so the per-trial threshold for a
//! false-lock probability P per attempt solves Q(x) = P/M. With P = 1e-9 and M rounded up to
//! 2^m, `SEARCH_MILLI[n−1][m]` holds that x in thousandths, rounded up, for m = 0..=40
//! (computed with `scipy.stats.chi2.isf(1e-9 / 2**m, 2*n)`; the unit tests re-derive every
//! entry from the series above). Examples: n = 2, M = 2^15 (a ±500 ppm search over 5·10^6 slots)
//! → x = 69.391; n = 4, M = 2^21 → x = 89.947.
//!
//! The finite-N tail of the Rayleigh statistic is lighter than the χ² tail (Z² ≤ 2N; correction
//! terms of order z²/N, Greenwood & Durand 1955, from memory), so these thresholds are
//! conservative. Harmonics that a channel does not use lower the degrees of freedom, which is
//! conservative too.
//!
//! With a drift allowance the search also runs over chirps ([`super::chirp`]): M is then the
//! number of final frequency points times the number of final chirp points
//! ([`search_trials`]), every point any stage could have led to, so the bound per attempt
//! stays 1e-9 over the enlarged search (2^35.6 trials at 1e-7 per slot, 1 GHz, ±500 ppm and
//! 0.1 ppm/s still lies inside the table).
//!
//! Confirmation tests one trial (the found frequency) on an independent batch at P = 1e-6:
//! `CONFIRM_MILLI[n−1]` = chi2.isf(1e-6, 2n) in thousandths, rounded up. Search and
//! confirmation must both pass; the batches are independent, so a false lock needs both.

use fixed::types::U32F32;

/// False-lock probability per acquisition attempt that [`SEARCH_MILLI`] guarantees.
pub const SEARCH_FALSE_LOCK_PER_ATTEMPT: &str = "1e-9";
/// Largest log2 of the trial count covered by [`SEARCH_MILLI`].
pub const MAX_TRIALS_LOG2: u32 = 40;
/// Single-trial false-alarm probability of the confirmation test.
pub const CONFIRM_FALSE_ALARM: &str = "1e-6";

/// Per-trial Z²_n threshold (thousandths, rounded up) for 2^m trials: `[n − 1][m]`.
pub const SEARCH_MILLI: [[u32; MAX_TRIALS_LOG2 as usize + 1]; 4] = [
    [
        41447, 42833, 44220, 45606, 46992, 48379, 49765, 51151, 52537, 53924, 55310, 56696, 58083,
        59469, 60855, 62241, 63628, 65014, 66400, 67787, 69173, 70559, 71946, 73332, 74718, 76104,
        77491, 78877, 80263, 81650, 83036, 84422, 85808, 87195, 88581, 89967, 91354, 92740, 94126,
        95513, 96899,
    ],
    [
        47880, 49323, 50765, 52205, 53644, 55081, 56517, 57952, 59385, 60818, 62249, 63680, 65109,
        66537, 67965, 69391, 70817, 72242, 73667, 75090, 76513, 77935, 79357, 80778, 82198, 83618,
        85037, 86456, 87874, 89291, 90708, 92125, 93541, 94957, 96372, 97787, 99202, 100616,
        102029, 103443, 104855,
    ],
    [
        53345, 54838, 56327, 57814, 59298, 60780, 62260, 63737, 65212, 66685, 68156, 69625, 71092,
        72558, 74022, 75484, 76945, 78405, 79863, 81320, 82775, 84229, 85683, 87134, 88585, 90035,
        91484, 92932, 94378, 95824, 97269, 98713, 100156, 101599, 103040, 104481, 105921, 107360,
        108799, 110237, 111674,
    ],
    [
        58308, 59845, 61378, 62907, 64432, 65954, 67473, 68989, 70501, 72011, 73518, 75023, 76525,
        78024, 79522, 81017, 82510, 84001, 85490, 86978, 88463, 89947, 91429, 92910, 94389, 95866,
        97342, 98817, 100290, 101762, 103233, 104702, 106170, 107637, 109103, 110568, 112032,
        113495, 114956, 116417, 117877,
    ],
];

/// Single-trial Z²_n confirmation threshold (thousandths, rounded up): `[n − 1]`.
pub const CONFIRM_MILLI: [u32; 4] = [27632, 33377, 38259, 42701];

fn milli_to_q32(milli: u32) -> U32F32 {
    // Round up so the fixed-point threshold is never below the tabled value.
    let bits = (u128::from(milli) << 32).div_ceil(1000);
    U32F32::from_bits(u64::try_from(bits).unwrap_or(u64::MAX))
}

/// ceil(log2(trials)), with 0 for one trial.
pub fn trials_log2(trials: u64) -> u32 {
    if trials <= 1 {
        0
    } else {
        64 - (trials - 1).leading_zeros()
    }
}

/// Search threshold for `harmonics` (1..=4) and `trials` trial frequencies, in Q32.32; `None`
/// when the table does not cover the request.
pub fn search_threshold(harmonics: usize, trials: u64) -> Option<U32F32> {
    let m = trials_log2(trials);
    SEARCH_MILLI
        .get(harmonics.checked_sub(1)?)?
        .get(m as usize)
        .map(|&v| milli_to_q32(v))
}

/// Trial count of a search over `freq_points` frequencies and `chirp_points` chirps: every
/// final lattice point any stage could have led to (saturating).
pub fn search_trials(freq_points: u64, chirp_points: u64) -> u64 {
    freq_points.saturating_mul(chirp_points.max(1))
}

/// Confirmation threshold for `harmonics` (1..=4), in Q32.32.
pub fn confirm_threshold(harmonics: usize) -> Option<U32F32> {
    CONFIRM_MILLI
        .get(harmonics.checked_sub(1)?)
        .map(|&v| milli_to_q32(v))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// χ²_{2n} survival function by the finite series (Abramowitz & Stegun 26.4.21), in f64.
    fn chi2_sf(x: f64, n: usize) -> f64 {
        let h = x / 2.0;
        let mut term = 1.0;
        let mut sum = 1.0;
        for k in 1..n {
            term *= h / k as f64;
            sum += term;
        }
        (-h).exp() * sum
    }

    #[test]
    fn search_table_is_the_rounded_up_quantile() {
        for n in 1..=4 {
            for m in 0..=MAX_TRIALS_LOG2 {
                let alpha = 1e-9 / 2f64.powi(m as i32);
                let x = f64::from(SEARCH_MILLI[n - 1][m as usize]) / 1000.0;
                let rel = |v: f64| v / alpha;
                // At the tabled value the tail is at most alpha; one thousandth below, above it.
                assert!(rel(chi2_sf(x, n)) <= 1.0 + 1e-9, "n={n} m={m}");
                assert!(rel(chi2_sf(x - 0.001, n)) > 1.0 - 1e-9, "n={n} m={m}");
            }
        }
    }

    #[test]
    fn confirm_table_is_the_rounded_up_quantile() {
        for n in 1..=4 {
            let x = f64::from(CONFIRM_MILLI[n - 1]) / 1000.0;
            assert!(chi2_sf(x, n) <= 1e-6 * (1.0 + 1e-9));
            assert!(chi2_sf(x - 0.001, n) > 1e-6 * (1.0 - 1e-9));
        }
    }

    #[test]
    fn tables_agree_with_scipy_when_available() {
        // Reference: scipy.stats.chi2.isf. Runs when `SLOTWISE_PYTHON` (or python3) imports
        // scipy; otherwise the series tests above stand alone.
        let py = std::env::var("SLOTWISE_PYTHON").unwrap_or_else(|_| "python3".into());
        let script = concat!(
            "from scipy.stats import chi2\nimport math\n",
            "print(' '.join(str(math.ceil(chi2.isf(1e-9/2**m, 2*n)*1000))",
            " for n in range(1,5) for m in range(41)))\n",
            "print(' '.join(str(math.ceil(chi2.isf(1e-6, 2*n)*1000)) for n in range(1,5)))",
        );
        let Ok(out) = std::process::Command::new(py).args(["-c", script]).output() else {
            eprintln!("no python: scipy cross-check skipped");
            return;
        };
        if !out.status.success() {
            let err = String::from_utf8_lossy(&out.stderr);
            eprintln!(
                "no scipy: cross-check skipped ({})",
                err.lines().last().unwrap_or("")
            );
            return;
        }
        let text = String::from_utf8(out.stdout).unwrap();
        let mut lines = text.lines();
        let search: Vec<u32> = lines
            .next()
            .unwrap()
            .split(' ')
            .map(|v| v.parse().unwrap())
            .collect();
        let ours: Vec<u32> = SEARCH_MILLI.iter().flatten().copied().collect();
        assert_eq!(search, ours);
        let confirm: Vec<u32> = lines
            .next()
            .unwrap()
            .split(' ')
            .map(|v| v.parse().unwrap())
            .collect();
        assert_eq!(confirm, CONFIRM_MILLI);
    }

    #[test]
    fn lookup() {
        assert_eq!(trials_log2(1), 0);
        assert_eq!(trials_log2(2), 1);
        assert_eq!(trials_log2(3), 2);
        assert_eq!(trials_log2(1 << 15), 15);
        assert_eq!(search_threshold(2, 1 << 15), Some(milli_to_q32(69391)));
        assert_eq!(search_threshold(5, 1), None);
        assert_eq!(search_threshold(1, 1 << 41), None);
        assert!(confirm_threshold(2).unwrap() > U32F32::from_num(33.376));
        // The chirp dimension multiplies the trial count; one chirp point leaves it unchanged.
        assert_eq!(search_trials(12_345, 1), 12_345);
        assert_eq!(search_trials(1 << 20, 61), 61 << 20);
        assert_eq!(search_trials(u64::MAX, 3), u64::MAX);
        assert!(search_threshold(2, search_trials(1 << 20, 61)) > search_threshold(2, 1 << 20));
    }
}
