//! Maximal-length sequences (m-sequences) from the PRBS shift-register generators.
//!
//! A PRBS generator "x^n + x^m + 1" is an n-stage shift register whose new bit is the XOR of the
//! bits n and m steps old: `s[k] = s[k-n] ^ s[k-m]`. With a primitive polynomial the output repeats
//! every N = 2^n − 1 bits and is an m-sequence: 2^(n−1) ones per period, and a periodic ±1
//! autocorrelation of N at lag 0 and −1 at every other lag (Golomb, Shift Register Sequences,
//! 1967). Every register here starts from the all-ones state; bit 0 of the sequence is the first
//! new bit (which is `1 ^ 1 = 0`).
//!
//! This is the one implementation of the marker sequences: the receiver correlates against it and
//! the host's simulated transmitter sends from it.

/// A PRBS generator polynomial x^degree + x^tap + 1 (register length `degree`, second tap `tap`).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Prbs {
    /// Register length n; the period is 2^n − 1 bits.
    pub degree: u8,
    /// Second feedback tap m (1 ≤ m < n).
    pub tap: u8,
}

/// PRBS7, x^7 + x^6 + 1 (common practice for link test patterns).
pub const PRBS7: Prbs = Prbs { degree: 7, tap: 6 };
/// PRBS9, x^9 + x^5 + 1 (ITU-T O.150 [from memory]).
pub const PRBS9: Prbs = Prbs { degree: 9, tap: 5 };
/// PRBS11, x^11 + x^9 + 1 (ITU-T O.150 [from memory]).
pub const PRBS11: Prbs = Prbs { degree: 11, tap: 9 };
/// PRBS15, x^15 + x^14 + 1 (ITU-T O.150 [from memory]).
pub const PRBS15: Prbs = Prbs {
    degree: 15,
    tap: 14,
};
/// PRBS20, x^20 + x^3 + 1 (ITU-T O.150 [from memory]).
pub const PRBS20: Prbs = Prbs { degree: 20, tap: 3 };
/// PRBS23, x^23 + x^18 + 1 (ITU-T O.150 [from memory]).
pub const PRBS23: Prbs = Prbs {
    degree: 23,
    tap: 18,
};
/// PRBS31, x^31 + x^28 + 1 (ITU-T O.150 [from memory]).
pub const PRBS31: Prbs = Prbs {
    degree: 31,
    tap: 28,
};

impl Prbs {
    /// The generator of this module for a register length, if there is one.
    pub const fn for_degree(degree: u8) -> Option<Prbs> {
        match degree {
            7 => Some(PRBS7),
            9 => Some(PRBS9),
            11 => Some(PRBS11),
            15 => Some(PRBS15),
            20 => Some(PRBS20),
            23 => Some(PRBS23),
            31 => Some(PRBS31),
            _ => None,
        }
    }

    /// Sequence period in bits, 2^degree − 1.
    pub const fn period(&self) -> u32 {
        (1u32 << self.degree) - 1
    }
}

/// The shift register of one [`Prbs`] generator, started from the all-ones state.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Lfsr {
    /// Bit i holds the output of i + 1 steps ago.
    state: u32,
    degree: u8,
    tap: u8,
}

impl Lfsr {
    /// A register at the start of the sequence (all-ones state).
    pub const fn new(poly: Prbs) -> Self {
        let mask = if poly.degree >= 32 {
            u32::MAX
        } else {
            (1u32 << poly.degree) - 1
        };
        Self {
            state: mask,
            degree: poly.degree,
            tap: poly.tap,
        }
    }

    /// The next bit of the sequence (0 or 1).
    pub const fn next_bit(&mut self) -> u8 {
        let n = self.degree as u32;
        let m = self.tap as u32;
        let bit = ((self.state >> (n - 1)) ^ (self.state >> (m - 1))) & 1;
        let mask = if n >= 32 { u32::MAX } else { (1u32 << n) - 1 };
        self.state = ((self.state << 1) | bit) & mask;
        bit as u8
    }

    /// The register contents (bit i = output of i + 1 steps ago).
    pub const fn state(&self) -> u32 {
        self.state
    }
}

impl Iterator for Lfsr {
    type Item = u8;

    fn next(&mut self) -> Option<u8> {
        Some(self.next_bit())
    }
}

/// Longest sequence a [`SeqBits`] table holds: one PRBS9 period (511 bits).
pub const MAX_TABLE_BITS: usize = 512;

/// One period of an m-sequence as a bit table, for O(1) lookup of bit i.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SeqBits {
    words: [u32; MAX_TABLE_BITS / 32],
    len: u16,
}

impl SeqBits {
    /// A table of length zero (every bit reads 0).
    pub const EMPTY: Self = Self {
        words: [0; MAX_TABLE_BITS / 32],
        len: 0,
    };

    /// One full period of `poly`'s sequence, or `None` if it is longer than [`MAX_TABLE_BITS`].
    pub const fn new(poly: Prbs) -> Option<Self> {
        if poly.degree < 2 || poly.tap < 1 || poly.tap >= poly.degree || poly.degree > 9 {
            return None;
        }
        let len = poly.period();
        let mut lfsr = Lfsr::new(poly);
        let mut words = [0u32; MAX_TABLE_BITS / 32];
        let mut left = len;
        let mut rest: &mut [u32] = &mut words;
        while let [w, tail @ ..] = rest {
            let mut b = 0;
            while b < 32 && left > 0 {
                *w |= (lfsr.next_bit() as u32) << b;
                b += 1;
                left -= 1;
            }
            rest = tail;
        }
        Some(Self {
            words,
            len: len as u16,
        })
    }

    /// Period of the sequence in bits.
    pub const fn len(&self) -> usize {
        self.len as usize
    }

    /// True only for [`SeqBits::EMPTY`].
    pub const fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Bit `i` of the sequence (0 or 1); `i` is taken modulo the period.
    pub fn bit(&self, i: usize) -> u8 {
        let len = self.len();
        let i = if i < len { i } else { i % len.max(1) };
        self.words
            .get(i / 32)
            .map_or(0, |w| ((w >> (i % 32)) & 1) as u8)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn register_returns_to_the_seed_after_one_period() {
        for poly in [PRBS7, PRBS9, PRBS11, PRBS15] {
            let mut l = Lfsr::new(poly);
            let seed = l.state();
            let mut steps = 0u32;
            loop {
                l.next_bit();
                steps += 1;
                if l.state() == seed {
                    break;
                }
            }
            // Maximal period 2^n − 1 means the polynomial is primitive (Golomb 1967).
            assert_eq!(steps, poly.period(), "degree {}", poly.degree);
        }
    }

    #[test]
    fn table_matches_register() {
        let t = SeqBits::new(PRBS9).unwrap();
        let mut l = Lfsr::new(PRBS9);
        for i in 0..2 * t.len() {
            assert_eq!(t.bit(i), l.next_bit(), "bit {i}");
        }
        assert!(SeqBits::new(PRBS11).is_none());
    }
}
