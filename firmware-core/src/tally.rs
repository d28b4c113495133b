//! Stage 6 — tallies: counts per (tx basis, tx bit, intensity, rx basis, rx bit) and the QBER.
//!
//! The tally is the raw material of every later estimate: the quantum bit error rate per basis and
//! intensity class (errors over matched-basis events with a revealed transmitter bit), the
//! cross-basis counts the three-state analysis needs, and the untested key counts.

use crate::gates::{Basis, MAX_INTENSITIES};

/// Counts of answered events in fixed memory.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Tally {
    /// `counts[tx_basis][tx_bit][intensity][rx_basis][rx_bit]` for events whose tx bit was revealed.
    pub counts: [[[[[u64; 2]; 2]; MAX_INTENSITIES]; 2]; 2],
    /// Matched-basis events whose tx bit was not revealed: `untested[intensity][basis]`.
    pub untested: [[u64; 2]; MAX_INTENSITIES],
}

impl Tally {
    /// An empty tally.
    pub const fn new() -> Self {
        Self {
            counts: [[[[[0; 2]; 2]; MAX_INTENSITIES]; 2]; 2],
            untested: [[0; 2]; MAX_INTENSITIES],
        }
    }

    /// Count one event; `tx_bit` is `None` when the transmitter did not reveal it.
    pub fn add(
        &mut self,
        tx_basis: Basis,
        tx_bit: Option<u8>,
        intensity: u8,
        rx_basis: Basis,
        rx_bit: u8,
    ) {
        let i = usize::from(intensity);
        match tx_bit {
            Some(b) => {
                if let Some(c) = self
                    .counts
                    .get_mut(tx_basis.index())
                    .and_then(|x| x.get_mut(usize::from(b & 1)))
                    .and_then(|x| x.get_mut(i))
                    .and_then(|x| x.get_mut(rx_basis.index()))
                    .and_then(|x| x.get_mut(usize::from(rx_bit & 1)))
                {
                    *c += 1;
                }
            }
            None => {
                if tx_basis == rx_basis {
                    if let Some(c) = self
                        .untested
                        .get_mut(i)
                        .and_then(|x| x.get_mut(rx_basis.index()))
                    {
                        *c += 1;
                    }
                }
            }
        }
    }

    /// One count: `counts[tx_basis][tx_bit][intensity][rx_basis][rx_bit]` (0 when out of range).
    pub fn count(
        &self,
        tx_basis: Basis,
        tx_bit: u8,
        intensity: u8,
        rx_basis: Basis,
        rx_bit: u8,
    ) -> u64 {
        self.counts
            .get(tx_basis.index())
            .and_then(|x| x.get(usize::from(tx_bit)))
            .and_then(|x| x.get(usize::from(intensity)))
            .and_then(|x| x.get(rx_basis.index()))
            .and_then(|x| x.get(usize::from(rx_bit)))
            .copied()
            .unwrap_or(0)
    }

    /// Matched-basis events with a revealed bit, and how many of them are errors, in one basis;
    /// `intensity = None` sums all classes.
    pub fn errors(&self, basis: Basis, intensity: Option<u8>) -> (u64, u64) {
        let mut total = 0;
        let mut errors = 0;
        for i in 0..MAX_INTENSITIES as u8 {
            if intensity.is_some_and(|want| want != i) {
                continue;
            }
            for tx_bit in 0..2u8 {
                for rx_bit in 0..2u8 {
                    let n = self.count(basis, tx_bit, i, basis, rx_bit);
                    total += n;
                    if tx_bit != rx_bit {
                        errors += n;
                    }
                }
            }
        }
        (errors, total)
    }

    /// QBER in parts per million, or `None` when no matched-basis event was tested.
    pub fn qber_ppm(&self, basis: Basis, intensity: Option<u8>) -> Option<u32> {
        let (e, n) = self.errors(basis, intensity);
        if n == 0 {
            return None;
        }
        let ppm = (u128::from(e) * 1_000_000 + u128::from(n) / 2) / u128::from(n);
        Some(ppm as u32)
    }

    /// Sum of every count (tested and untested).
    pub fn total(&self) -> u64 {
        let tested: u64 = self
            .counts
            .iter()
            .flatten()
            .flatten()
            .flatten()
            .flatten()
            .sum();
        let untested: u64 = self.untested.iter().flatten().sum();
        tested + untested
    }
}

/// Answered slots in which at least two photons were detected (several clicks, or one click
/// reporting a photon-number level of two or more), per intensity class.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MultiPhoton {
    /// All such slots, `slots[intensity]`.
    pub slots: [u64; MAX_INTENSITIES],
    /// Of those, the ones whose photons all fell into one outcome (one click, level ≥ 2).
    pub one_outcome: [u64; MAX_INTENSITIES],
    /// Of those, the ones that gave a sifted bit (matched basis).
    pub sifted: [u64; MAX_INTENSITIES],
}

impl MultiPhoton {
    /// An empty tally.
    pub const fn new() -> Self {
        Self {
            slots: [0; MAX_INTENSITIES],
            one_outcome: [0; MAX_INTENSITIES],
            sifted: [0; MAX_INTENSITIES],
        }
    }

    /// Count one answered slot in which two or more photons were detected (rare: kept out of
    /// line so that the answer path stays compact).
    #[cold]
    #[inline(never)]
    pub fn add(&mut self, intensity: u8, multi_click: bool, sifted: bool) {
        let i = usize::from(intensity);
        if let Some(c) = self.slots.get_mut(i) {
            *c += 1;
        }
        if !multi_click {
            if let Some(c) = self.one_outcome.get_mut(i) {
                *c += 1;
            }
        }
        if sifted {
            if let Some(c) = self.sifted.get_mut(i) {
                *c += 1;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn qber_counts_matched_basis_errors_only() {
        let mut t = Tally::new();
        for _ in 0..97 {
            t.add(Basis::Z, Some(0), 0, Basis::Z, 0);
        }
        for _ in 0..3 {
            t.add(Basis::Z, Some(1), 0, Basis::Z, 0);
        }
        t.add(Basis::X, Some(0), 0, Basis::Z, 1);
        t.add(Basis::Z, None, 1, Basis::Z, 1);
        assert_eq!(t.errors(Basis::Z, None), (3, 100));
        assert_eq!(t.qber_ppm(Basis::Z, Some(0)), Some(30_000));
        assert_eq!(t.qber_ppm(Basis::Z, Some(1)), None);
        assert_eq!(t.qber_ppm(Basis::X, None), None);
        assert_eq!(t.total(), 102);
    }
}
