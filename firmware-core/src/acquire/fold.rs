//! Fixed-point folding: a Q1.15 cosine table, harmonic sums, the Z²_n statistic, and the
//! per-channel arrival patterns that let detections of every channel add up coherently.
//!
//! A phase is a wrapping `u64` in Q0.64 turns (one slot = 2^64), so the phase of a time at trial
//! frequency ν (cycles per ps in Q0.64) is the wrapping product `Δt · ν` — one multiply, and
//! reordered (negative) Δt are handled by two's complement for free.
//!
//! Z²_n = Σ_k 2·|S_k|² / N_k with S_k = Σ_i exp(2πi·k·φ_i) (Buccheri et al., A&A 128, 245, 1983).
//! Each channel's detections are rotated by the argument of its pattern's k-th harmonic
//! C_k = Σ_j exp(2πi·k·a_j) over its expected arrival positions a_j, so that peaks of different
//! channels add in phase; a harmonic whose |C_k| < |pattern|/4 carries no signal for that channel
//! and is left out for it (its N_k does not count those detections). A rotation by a fixed angle
//! keeps the null distribution, so Z²_n stays χ² with at most 2n degrees of freedom.

use crate::gates::{GateTable, MAX_CHANNELS, MAX_GATES};
use fixed::types::{U0F32, U32F32};

/// log2 of the trig table length.
pub const TABLE_BITS: u32 = 10;
/// Trig table length (entries per turn).
pub const TABLE_LEN: usize = 1 << TABLE_BITS;
/// Largest number of harmonics n in Z²_n.
pub const MAX_HARMONICS: usize = 4;
/// Amplitude of the Q1.15 table: cos 0 is stored as this value.
pub const TABLE_ONE: i32 = 32767;

/// π in Q4.60, from Machin's formula evaluated to 60 digits.
const PI_Q60: i128 = 3_622_009_729_038_561_421;
const ONE_Q60: i128 = 1 << 60;

/// cos x by its Taylor series in Q4.60, for 0 ≤ x ≤ π/2 (truncation error below 1e-12).
const fn cos_q60(x: i128) -> i128 {
    let x2 = (x * x) >> 60;
    let mut term = ONE_Q60;
    let mut sum = ONE_Q60;
    let mut k: i128 = 1;
    while k <= 10 {
        term = -((term * x2) >> 60) / ((2 * k - 1) * (2 * k));
        sum += term;
        k += 1;
    }
    sum
}

const fn round_q60(v: i128) -> i16 {
    let half = 1i128 << 59;
    let r = if v >= 0 {
        (v + half) >> 60
    } else {
        -((-v + half) >> 60)
    };
    r as i16
}

// Evaluated at compile time only: an index out of range is a build error, not a run-time panic.
#[allow(clippy::indexing_slicing)]
const fn build_cos() -> [i16; TABLE_LEN] {
    let mut t = [0i16; TABLE_LEN];
    let quarter = TABLE_LEN / 4;
    let mut j = 0;
    while j <= quarter {
        // x = 2π·j/TABLE_LEN.
        let x = PI_Q60 * (j as i128) / (TABLE_LEN as i128 / 2);
        let c = round_q60(cos_q60(x) * TABLE_ONE as i128);
        t[j] = c;
        if j > 0 {
            t[TABLE_LEN - j] = c;
        }
        if j < quarter {
            t[TABLE_LEN / 2 - j] = -c;
            t[TABLE_LEN / 2 + j] = -c;
        }
        j += 1;
    }
    t
}

#[allow(clippy::indexing_slicing)]
const fn sum_sq(t: &[i16; TABLE_LEN]) -> u64 {
    let mut s = 0u64;
    let mut j = 0;
    while j < TABLE_LEN {
        let v = t[j] as i64;
        s += (v * v) as u64;
        j += 1;
    }
    s
}

/// cos(2π·j/TABLE_LEN) in Q1.15.
static COS: [i16; TABLE_LEN] = build_cos();
/// Σ_j cos²: E[cos² + sin²] under a uniform phase is `2·COS_SUM_SQ / TABLE_LEN`.
const COS_SUM_SQ: u64 = sum_sq(&build_cos());

#[inline]
fn entry(i: usize) -> i32 {
    i32::from(COS.get(i & (TABLE_LEN - 1)).copied().unwrap_or(0))
}

/// (cos, sin) of 2π·phase for a Q0.64 phase, in Q1.15, nearest table entry.
#[inline]
pub fn cos_sin(phase_q64: u64) -> (i32, i32) {
    let i = (phase_q64.wrapping_add(1 << (63 - TABLE_BITS)) >> (64 - TABLE_BITS)) as usize;
    (entry(i), entry(i.wrapping_sub(TABLE_LEN / 4)))
}

/// Expected arrival positions of one channel, with the rotation of each harmonic.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ChannelPattern {
    pos: [u64; MAX_GATES],
    len: u8,
    /// arg C_k in table steps (2^-TABLE_BITS turn), for k = 1..=MAX_HARMONICS: [`arg`] only
    /// ever returns whole steps, so this holds the Q0.64 angle exactly in a quarter of the bytes.
    rot: [u16; MAX_HARMONICS],
    /// Bit k−1 set when harmonic k carries signal for this channel.
    mask: u8,
}

impl ChannelPattern {
    const EMPTY: Self = Self {
        pos: [0; MAX_GATES],
        len: 0,
        rot: [0; MAX_HARMONICS],
        mask: 0,
    };

    /// A pattern from expected positions (Q0.64 slot fractions); empty input means "mid-slot".
    fn from_positions(positions: &[u64]) -> Self {
        let mut p = Self::EMPTY;
        for &a in positions.iter().take(MAX_GATES) {
            let known = p.positions().contains(&a);
            if let (false, Some(slot)) = (known, p.pos.get_mut(usize::from(p.len))) {
                *slot = a;
                p.len += 1;
            }
        }
        if let (0, Some(first)) = (p.len, p.pos.first_mut()) {
            *first = 1 << 63;
            p.len = 1;
        }
        for (k, rot) in p.rot.iter_mut().enumerate() {
            let (mut re, mut im) = (0i64, 0i64);
            for &a in p.pos.iter().take(usize::from(p.len)) {
                let (c, s) = cos_sin(a.wrapping_mul(k as u64 + 1));
                re += i64::from(c);
                im += i64::from(s);
            }
            // |C_k| ≥ len/4 (in table units): the harmonic carries at least a quarter of the peak.
            let lim = i64::from(p.len) * i64::from(TABLE_ONE) / 4;
            if re * re + im * im >= lim * lim {
                p.mask |= 1 << k;
            }
            *rot = arg_step(re, im);
        }
        p
    }

    /// Expected positions in Q0.64 slot fractions.
    pub fn positions(&self) -> &[u64] {
        self.pos.get(..usize::from(self.len)).unwrap_or(&[])
    }

    /// Whether harmonic `k` (1-based) carries signal for this channel.
    pub fn uses(&self, k: usize) -> bool {
        (1..=MAX_HARMONICS).contains(&k) && self.mask & (1 << (k - 1)) != 0
    }

    /// Signed distance (Q0.64 slot fraction) from `frac` to the nearest expected position, and
    /// the slot step (−1, 0 or +1) from the detection's slot to that position's slot.
    pub fn residual(&self, frac_q64: u64) -> (i64, i64) {
        let mut best = (i64::MAX, 0i64);
        for &a in self.positions() {
            let r = frac_q64.wrapping_sub(a) as i64;
            if r.unsigned_abs() < best.0.unsigned_abs() {
                let carry = (i128::from(frac_q64) - i128::from(a) - i128::from(r)) >> 64;
                best = (r, carry as i64);
            }
        }
        best
    }

    /// Probability that a uniformly placed detection falls within ±`half_window` of a position,
    /// in Q0.32 (capped at one).
    pub fn null_fraction(&self, half_window: U0F32) -> u64 {
        let f = 2 * u64::from(half_window.to_bits()) * u64::from(self.len);
        f.min(u64::from(u32::MAX))
    }
}

/// Argument of (re, im) in table steps (2^-TABLE_BITS turn), by exhaustive search.
fn arg_step(re: i64, im: i64) -> u16 {
    const { assert!(TABLE_LEN <= 1 << u16::BITS) };
    let mut best = (i64::MIN, 0u16);
    for j in 0..TABLE_LEN {
        let (c, s) = cos_sin(step_q64(j as u16));
        let v = re * i64::from(c) + im * i64::from(s);
        if v > best.0 {
            best = (v, j as u16);
        }
    }
    best.1
}

/// A table step as a Q0.64 angle.
#[inline]
fn step_q64(j: u16) -> u64 {
    u64::from(j) << (64 - TABLE_BITS)
}

const UNION_FALLBACK: ChannelPattern = ChannelPattern {
    pos: [1 << 63; MAX_GATES],
    len: 1,
    rot: [0; MAX_HARMONICS],
    mask: 0,
};

/// Expected arrival positions of every channel, plus the union for detections without a channel.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ArrivalPattern {
    channels: [ChannelPattern; MAX_CHANNELS + 1],
}

// 17 patterns of 144 bytes on every target.
const _: () = assert!(core::mem::size_of::<ArrivalPattern>() <= 2_448);

impl ArrivalPattern {
    /// Every channel expects its detections at one position (slot fraction).
    pub fn single(position: U0F32) -> Self {
        let p = ChannelPattern::from_positions(&[u64::from(position.to_bits()) << 32]);
        Self {
            channels: [p; MAX_CHANNELS + 1],
        }
    }

    /// Gate centres of each channel; channels without gates use the union of all centres.
    pub fn from_gates(table: &GateTable) -> Self {
        let mut all = [0u64; MAX_GATES];
        let mut n_all = 0;
        for (slot, g) in all.iter_mut().zip(table.gates()) {
            *slot = u64::from(g.centre().to_bits()) << 32;
            n_all += 1;
        }
        let union = ChannelPattern::from_positions(all.get(..n_all).unwrap_or(&[]));
        let mut channels = [union; MAX_CHANNELS + 1];
        for (c, pat) in channels.iter_mut().enumerate().take(MAX_CHANNELS) {
            let mut mine = [0u64; MAX_GATES];
            let mut n = 0;
            for g in table.gates().iter().filter(|g| usize::from(g.channel) == c) {
                if let Some(slot) = mine.get_mut(n) {
                    *slot = u64::from(g.centre().to_bits()) << 32;
                    n += 1;
                }
            }
            if n > 0 {
                *pat = ChannelPattern::from_positions(mine.get(..n).unwrap_or(&[]));
            }
        }
        Self { channels }
    }

    /// The pattern of a channel; `None` or an unknown channel gives the union of all positions.
    pub fn channel(&self, channel: Option<u8>) -> &ChannelPattern {
        let i = channel.map_or(MAX_CHANNELS, |c| usize::from(c).min(MAX_CHANNELS));
        match self.channels.get(i) {
            Some(p) => p,
            None => &UNION_FALLBACK,
        }
    }
}

/// Harmonic sums S_k for k = 1..=H over a set of detections (table units).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Fold<const H: usize> {
    re: [i64; H],
    im: [i64; H],
    n: [u32; H],
}

impl<const H: usize> Default for Fold<H> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const H: usize> Fold<H> {
    /// Empty sums.
    pub const fn new() -> Self {
        const { assert!(H >= 1 && H <= MAX_HARMONICS, "1 ≤ H ≤ MAX_HARMONICS") };
        Self {
            re: [0; H],
            im: [0; H],
            n: [0; H],
        }
    }

    /// Add one detection at Q0.64 phase `phase_q64` from a channel with pattern `pat`.
    #[inline]
    pub fn add(&mut self, phase_q64: u64, pat: &ChannelPattern) {
        let sums = self
            .re
            .iter_mut()
            .zip(self.im.iter_mut())
            .zip(self.n.iter_mut());
        for (k, (((re, im), n), rot)) in sums.zip(pat.rot.iter()).enumerate() {
            if pat.mask & (1 << k) == 0 {
                continue;
            }
            let (c, s) = cos_sin(
                phase_q64
                    .wrapping_mul(k as u64 + 1)
                    .wrapping_sub(step_q64(*rot)),
            );
            *re += i64::from(c);
            *im += i64::from(s);
            *n += 1;
        }
    }

    /// Z²_H = Σ_k 2·|S_k|²/N_k, normalised by the table's exact power, in Q32.32 (saturating).
    pub fn z2(&self) -> U32F32 {
        let mut z: u128 = 0;
        for ((re, im), n) in self.re.iter().zip(self.im.iter()).zip(self.n.iter()) {
            if *n == 0 {
                continue;
            }
            let p = re.unsigned_abs() as u128 * re.unsigned_abs() as u128
                + im.unsigned_abs() as u128 * im.unsigned_abs() as u128;
            // 2|S|² / (N · E[c² + s²]) with E[c² + s²] = 2·COS_SUM_SQ/TABLE_LEN.
            let den = u128::from(*n) * u128::from(COS_SUM_SQ);
            z = z.saturating_add(p.saturating_mul((TABLE_LEN as u128) << 32) / den);
        }
        U32F32::from_bits(u64::try_from(z).unwrap_or(u64::MAX))
    }

    /// Matched sum Σ_k Re(S_k·exp(−2πi·k·φ)) at Q0.64 offset `phi_q64` (table units²).
    pub fn matched(&self, phi_q64: u64) -> i64 {
        let mut v = 0i64;
        for (k, (re, im)) in self.re.iter().zip(self.im.iter()).enumerate() {
            let (c, s) = cos_sin(phi_q64.wrapping_mul(k as u64 + 1));
            v = v.saturating_add(re.saturating_mul(i64::from(c)));
            v = v.saturating_add(im.saturating_mul(i64::from(s)));
        }
        v
    }

    /// Offset φ (Q0.64, table resolution) maximising [`Self::matched`], and that maximum.
    pub fn best_offset(&self) -> (u64, i64) {
        let mut best = (0u64, i64::MIN);
        for j in 0..TABLE_LEN {
            let ph = (j as u64) << (64 - TABLE_BITS);
            let v = self.matched(ph);
            if v > best.1 {
                best = (ph, v);
            }
        }
        best
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_matches_libm_cos() {
        // Reference: the platform's f64 cos (IEEE 754, correctly rounded to < 1 ulp).
        for (j, &c) in COS.iter().enumerate() {
            let want = (2.0 * core::f64::consts::PI * j as f64 / TABLE_LEN as f64).cos();
            let got = f64::from(c) / f64::from(TABLE_ONE);
            assert!(
                (want - got).abs() <= 0.5 / f64::from(TABLE_ONE) + 1e-12,
                "j={j}"
            );
        }
        let (c, s) = cos_sin(1 << 62);
        assert_eq!((c, s), (0, TABLE_ONE));
    }

    #[test]
    fn z2_of_null_phases_follows_chi_square() {
        // Under uniform phases Z²_2 ~ χ²_4 (Buccheri et al. 1983): P(Z² > 9.4877) = 0.05, the
        // χ²_4 0.95 quantile (standard tables). 4000 folds of 64 phases: expect 200 ± 14.
        let pat = ArrivalPattern::single(U0F32::from_num(0.5));
        let p = pat.channel(Some(0));
        let mut rng = 0x1234_5678_9abc_def1u64;
        let mut over = 0;
        for _ in 0..4000 {
            let mut f = Fold::<2>::new();
            for _ in 0..64 {
                rng ^= rng << 13;
                rng ^= rng >> 7;
                rng ^= rng << 17;
                f.add(rng, p);
            }
            if f.z2() > U32F32::from_num(9.4877) {
                over += 1;
            }
        }
        assert!((200 - 50..=200 + 50).contains(&over), "{over}");
    }

    #[test]
    fn time_bin_patterns_choose_harmonics() {
        let t = crate::acquire::synth::time_bin_table();
        let pat = ArrivalPattern::from_gates(&t);
        // Two peaks half a slot apart cancel every odd harmonic.
        let z = pat.channel(Some(0));
        assert!(!z.uses(1) && z.uses(2) && !z.uses(3) && z.uses(4));
        // Three peaks a quarter apart: |C_k| = 1/3 for k = 1..3, 1 for k = 4.
        let x = pat.channel(Some(1));
        assert!(x.uses(1) && x.uses(2) && x.uses(3) && x.uses(4));
        // Nearest position and slot carry.
        let (r, carry) = z.residual(u64::MAX - (1 << 58));
        assert_eq!(carry, 1, "0.98 is nearest to the next slot's 0.125");
        assert!(r < 0);
        let (r, carry) = x.residual(1 << 58);
        let want = 1.0 / 64.0 - 0.125;
        assert!((r as f64 / 2f64.powi(64) - want).abs() < 1e-9 && carry == 0);
        let (_, carry) = x.residual(u64::MAX - (1 << 62));
        assert_eq!(carry, 0, "0.75 is nearest to this slot's 0.625");
    }

    #[test]
    fn best_offset_finds_the_peak() {
        let pat = ArrivalPattern::single(U0F32::from_num(0.5));
        let p = pat.channel(None);
        let mut f = Fold::<3>::new();
        for i in 0..100u64 {
            f.add((0.3f64 * 2f64.powi(64)) as u64 + (i << 50), p);
        }
        let (phi, _) = f.best_offset();
        let got = phi as f64 / 2f64.powi(64);
        // Detections at 0.3 (+ spread) with the expected position 0.5: offset ≈ 0.8 + 0.0027.
        assert!((got - 0.8027).abs() < 0.002, "{got}");
    }
}
