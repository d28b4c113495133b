//! Counter-based random numbers for the simulator: SplitMix64.
//!
//! SplitMix64 (Steele, Lea, Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014;
//! constants and shifts as in Vigna's reference `splitmix64.c`, prng.di.unimi.it) keeps a state
//! that advances by the golden-ratio increment γ and hashes it with a 64-bit finaliser. Because
//! output `i` of a generator seeded with `s` is simply `mix64(s + (i + 1)·γ)`, any output can be
//! computed directly from (seed, index): the transmitter's choice for slot `k` needs no stored
//! state. Independent streams get their own key: output `stream` of the generator seeded with the
//! scenario seed.

/// The SplitMix64 increment γ = 2^64 / φ, odd.
pub const GOLDEN_GAMMA: u64 = 0x9E37_79B9_7F4A_7C15;

pub use crate::scenario::layout::NORMAL_BOUND;

/// The SplitMix64 output finaliser (a bijection on 64-bit words).
pub const fn mix64(z: u64) -> u64 {
    let z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    let z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Output number `index` (0-based) of a SplitMix64 generator whose state starts at `state`.
pub const fn splitmix_at(state: u64, index: u64) -> u64 {
    mix64(state.wrapping_add(GOLDEN_GAMMA.wrapping_mul(index.wrapping_add(1))))
}

/// The key of stream `stream` under `seed`.
pub const fn stream_key(seed: u64, stream: u64) -> u64 {
    splitmix_at(seed, stream)
}

/// A uniform double in [0, 1) from the top 53 bits of a word.
pub fn unit_f64(x: u64) -> f64 {
    (x >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

/// A sequential SplitMix64 stream with the usual continuous and discrete draws.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Stream {
    state: u64,
}

impl Stream {
    /// Stream number `stream` of the scenario `seed`.
    pub const fn new(seed: u64, stream: u64) -> Self {
        Self {
            state: stream_key(seed, stream),
        }
    }

    /// A stream starting from a raw SplitMix64 state.
    pub const fn from_state(state: u64) -> Self {
        Self { state }
    }

    /// Next 64-bit word.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(GOLDEN_GAMMA);
        mix64(self.state)
    }

    /// Uniform in [0, 1).
    pub fn uniform(&mut self) -> f64 {
        unit_f64(self.next_u64())
    }

    /// Uniform in (0, 1], safe to take the logarithm of.
    pub fn uniform_nonzero(&mut self) -> f64 {
        1.0 - self.uniform()
    }

    /// True with probability `p`.
    pub fn bernoulli(&mut self, p: f64) -> bool {
        self.uniform() < p
    }

    /// A fair bit (0 or 1).
    pub fn bit(&mut self) -> u8 {
        (self.next_u64() >> 63) as u8
    }

    /// Exponential with the given mean (same unit as the mean).
    pub fn exponential(&mut self, mean: f64) -> f64 {
        -self.uniform_nonzero().ln() * mean
    }

    /// Standard normal by the Box-Muller transform (Box & Muller, Ann. Math. Stat. 29, 610,
    /// 1958); |z| never exceeds [`NORMAL_BOUND`].
    pub fn normal(&mut self) -> f64 {
        let r = (-2.0 * self.uniform_nonzero().ln()).sqrt();
        let theta = std::f64::consts::TAU * self.uniform();
        r * theta.cos()
    }

    /// Poisson with the given mean (≤ 700), by sequential inversion of the distribution function.
    pub fn poisson(&mut self, mean: f64) -> u32 {
        let u = self.uniform();
        poisson_invert(mean, u, 0)
    }

    /// Poisson conditioned on at least one event (zero-truncated), by inversion.
    pub fn poisson_nonzero(&mut self, mean: f64) -> u32 {
        let p0 = (-mean).exp();
        let q = -(-mean).exp_m1();
        // u uniform on [p0, 1): the distribution function above its zero term.
        let u = p0 + q * self.uniform();
        poisson_invert(mean, u, 1)
    }
}

/// Smallest k ≥ `min_k` with F(k) > u, where F is the Poisson(mean) distribution function.
fn poisson_invert(mean: f64, u: f64, min_k: u32) -> u32 {
    let mut k = 0u32;
    let mut p = (-mean).exp();
    let mut cdf = p;
    let limit = 50 + (20.0 * mean) as u32;
    while (k < min_k || cdf <= u) && k < limit {
        k += 1;
        p *= mean / f64::from(k);
        cdf += p;
    }
    k.max(min_k)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_the_reference_outputs_for_seed_zero() {
        // First three outputs of splitmix64.c seeded with 0 (published reference values of the
        // generator that seeds xoshiro/xoroshiro, prng.di.unimi.it).
        let mut s = Stream::from_state(0);
        assert_eq!(s.next_u64(), 0xE220_A839_7B1D_CDAF);
        assert_eq!(s.next_u64(), 0x6E78_9E6A_A1B9_65F4);
        assert_eq!(s.next_u64(), 0x06C4_5D18_8009_454F);
        assert_eq!(splitmix_at(0, 2), 0x06C4_5D18_8009_454F);
    }

    #[test]
    fn random_access_equals_sequential() {
        let mut s = Stream::new(42, 7);
        let key = stream_key(42, 7);
        for i in 0..100 {
            assert_eq!(s.next_u64(), splitmix_at(key, i));
        }
        assert_ne!(stream_key(42, 7), stream_key(42, 8));
        assert_ne!(stream_key(42, 7), stream_key(43, 7));
        let a: Vec<u64> = (0..8).map(|_| Stream::new(9, 1).next_u64()).collect();
        assert!(a.windows(2).all(|w| w[0] == w[1]), "deterministic");
    }

    #[test]
    fn uniform_passes_chi_square() {
        // 100 equal bins, 200 000 draws: Pearson's statistic follows χ² with 99 degrees of
        // freedom; its 0.999 quantile is 148.23 (standard tables [mem]; recomputed here from the
        // regularised incomplete gamma function).
        let mut s = Stream::new(2024, 3);
        let n = 200_000;
        let mut bins = [0u32; 100];
        for _ in 0..n {
            let u = s.uniform();
            assert!((0.0..1.0).contains(&u));
            bins[(u * 100.0) as usize] += 1;
        }
        let expect = f64::from(n) / 100.0;
        let chi2: f64 = bins
            .iter()
            .map(|&o| (f64::from(o) - expect).powi(2) / expect)
            .sum();
        assert!(chi2 < 148.23, "chi2 = {chi2}");
        // A broken generator (all draws in one half) must fail the same statistic.
        let mut bad = [0u32; 100];
        for i in 0..n {
            bad[(i % 50) as usize] += 1;
        }
        let chi2_bad: f64 = bad
            .iter()
            .map(|&o| (f64::from(o) - expect).powi(2) / expect)
            .sum();
        assert!(chi2_bad > 148.23);
    }

    #[test]
    fn poisson_mean_and_variance() {
        // Poisson(m): mean m, variance m; the sample variance has variance (m + 2m²)/n
        // (fourth central moment m + 3m², common practice). Checked within 4σ.
        for &m in &[0.05, 0.5, 2.5, 9.0] {
            let mut s = Stream::new(11, (m * 100.0) as u64);
            let n = 200_000u32;
            let xs: Vec<f64> = (0..n).map(|_| f64::from(s.poisson(m))).collect();
            let mean = xs.iter().sum::<f64>() / f64::from(n);
            let var = xs.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / f64::from(n - 1);
            let sd_mean = (m / f64::from(n)).sqrt();
            let sd_var = ((m + 2.0 * m * m) / f64::from(n)).sqrt();
            assert!((mean - m).abs() < 4.0 * sd_mean, "m={m} mean={mean}");
            assert!((var - m).abs() < 4.0 * sd_var, "m={m} var={var}");
        }
    }

    #[test]
    fn zero_truncated_poisson_mean() {
        // E[N | N ≥ 1] = m / (1 − e^−m); Var[N | N ≥ 1] = E·(1 + m − E) (zero-truncated Poisson).
        for &m in &[1e-4, 0.02, 0.5, 3.0] {
            let mut s = Stream::new(5, (m * 1e4) as u64);
            let n = 200_000u32;
            let xs: Vec<f64> = (0..n).map(|_| f64::from(s.poisson_nonzero(m))).collect();
            assert!(xs.iter().all(|&x| x >= 1.0));
            let mean = xs.iter().sum::<f64>() / f64::from(n);
            let e = m / -(-m).exp_m1();
            let v = e * (1.0 + m - e);
            let tol = 4.0 * (v / f64::from(n)).sqrt() + 1e-12;
            assert!((mean - e).abs() <= tol, "m={m} mean={mean} want {e}");
        }
    }

    #[test]
    fn normal_moments_and_bound() {
        let mut s = Stream::new(77, 0);
        let n = 200_000u32;
        let xs: Vec<f64> = (0..n).map(|_| s.normal()).collect();
        let mean = xs.iter().sum::<f64>() / f64::from(n);
        let var = xs.iter().map(|x| x * x).sum::<f64>() / f64::from(n) - mean * mean;
        // Standard normal: sd of the mean 1/√n, of the variance √(2/n).
        assert!(mean.abs() < 4.0 / f64::from(n).sqrt(), "{mean}");
        assert!(
            (var - 1.0).abs() < 4.0 * (2.0 / f64::from(n)).sqrt(),
            "{var}"
        );
        // Fraction beyond 2σ: 2·(1 − Φ(2)) = 0.0455003 (standard normal tables [mem]).
        let tail = xs.iter().filter(|x| x.abs() > 2.0).count() as f64 / f64::from(n);
        let p = 0.045_500_3;
        assert!(
            (tail - p).abs() < 4.0 * (p * (1.0 - p) / f64::from(n)).sqrt(),
            "{tail}"
        );
        assert!(xs.iter().all(|x| x.abs() <= NORMAL_BOUND));
    }
}
