//! Stage 2 — the clock model: which slot a detection falls in, and where inside it.
//!
//! A clock is a period (Q32.32 picoseconds) and a phase origin (the time at which slot 0 starts).
//! This module holds the [`SlotClock`] seam and [`FixedClock`], the clock handed in by
//! configuration (links with a distributed reference clock use it). Recovering the clock from the
//! detections themselves ([`crate::RecoveredClock`]) plugs into the same seam. Which absolute
//! slot number a clock's slot has is a separate stage (`numbering`), so any clock
//! combines with any numbering.
//!
//! Slot assignment avoids a division per detection: the slot estimate is the elapsed time
//! multiplied by a Q0.64 reciprocal of the period, corrected by at most two steps; the position in
//! the slot is the remainder multiplied by the same reciprocal. For every practical period
//! (≤ 2^30 ps) this needs only 64-bit arithmetic and the high half of two 64×64 products, which a
//! 32-bit core builds from four 32×32→64 multiplies each.

use core::fmt;
use fixed::types::{U0F32, U32F32};

/// Where a detection sits on the transmitter's slot grid.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SlotPos {
    /// Slot index counted from the clock's origin.
    pub slot: u64,
    /// Position inside the slot as a fraction of the period, in [0, 1).
    pub phase: U0F32,
}

/// What a clock says about one detection time.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Located {
    /// The clock is valid here: slot and position.
    At(SlotPos),
    /// The time lies before the clock's origin.
    BeforeOrigin,
    /// The clock is not (yet) locked: no slot can be given.
    NotLocked,
}

/// What the numbering stage says about a located, gated detection.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Numbered {
    /// The transmitter's absolute slot number.
    Slot(u64),
    /// A marker slot: public, never sifted.
    Marker,
    /// The clock is locked but the absolute numbering is not yet established.
    Unaligned,
}

/// A slot clock: the seam between the time base and the gates. It maps a delay-corrected time
/// to a slot of its own numbering and a position in the slot; it does not know the transmitter's
/// absolute numbers (that is the job of a `Numbering` stage).
///
/// Two clocks implement it: [`FixedClock`] (period and origin from configuration, a distributed
/// reference) and [`crate::RecoveredClock`] (acquired and tracked from the detections).
pub trait SlotClock {
    /// Where the clock places `t_ps` now, without learning from it.
    fn locate(&self, t_ps: u64) -> Located;

    /// Locate a delay-corrected detection of `channel` at `t_ps` and learn from it: a recovered
    /// clock stores it while acquiring and updates its tracking loop while locked (using that
    /// channel's expected arrival positions).
    fn observe(&mut self, channel: u8, t_ps: u64) -> Located;

    /// Whether the clock gives slots now.
    fn is_locked(&self) -> bool;

    /// Numbering epoch: changes whenever the clock's own slot numbers restart without continuity
    /// (0 before the first lock). A numbering stage restarts its alignment when it changes.
    fn epoch(&self) -> u32;

    /// After the latest epoch change, the new numbers differ from the old by at most ± this
    /// many slots; `None` when unknown (a cold start, or a clock that never renumbers). No
    /// default: a wrapper that forgot to forward it would cost a full realignment.
    fn renumbered_within(&self) -> Option<u64>;

    /// The clock's own slot number at time `t_ps` (for coarse hints); `None` without a period.
    fn slot_at(&self, t_ps: u64) -> Option<u64>;
}

/// Why a clock description was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ClockError {
    /// Period outside 2 ps ..= 2^31 ps.
    PeriodOutOfRange,
}

impl fmt::Display for ClockError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::PeriodOutOfRange => write!(f, "slot period must lie in 2 ps ..= 2^31 ps"),
        }
    }
}

impl core::error::Error for ClockError {}

/// A period with its precomputed reciprocal: the grid arithmetic shared by every clock.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SlotGrid {
    period_ps: U32F32,
    /// floor(2^64 / period_ps): the Q0.64 reciprocal of the period.
    inv_q64: u64,
}

impl SlotGrid {
    /// Build the grid arithmetic for one period (2 ps ..= 2^31 ps).
    pub const fn new(period_ps: U32F32) -> Result<Self, ClockError> {
        let bits = period_ps.to_bits();
        if bits < (2u64 << 32) || bits > (1u64 << 63) {
            return Err(ClockError::PeriodOutOfRange);
        }
        let inv = (1u128 << 96) / bits as u128;
        // bits ≥ 2^33 keeps inv ≤ 2^63.
        Ok(Self {
            period_ps,
            inv_q64: inv as u64,
        })
    }

    /// The slot period in picoseconds (Q32.32).
    pub const fn period_ps(&self) -> U32F32 {
        self.period_ps
    }

    /// Split an elapsed time (ps since slot 0 started) into slot index and position.
    #[inline]
    pub fn split(&self, elapsed_ps: u64) -> SlotPos {
        let period = self.period_ps.to_bits();
        if period > FAST_PERIOD_MAX {
            return self.split_wide(elapsed_ps);
        }
        // slot·period ≤ elapsed·2^32 (floored reciprocal) and the estimate is low by at most one
        // slot, so the true remainder is below 2·period ≤ 2^63: exact in wrapping u64 arithmetic.
        let mut slot = mul_hi(elapsed_ps, self.inv_q64);
        let mut rem = (elapsed_ps << 32).wrapping_sub(slot.wrapping_mul(period));
        while rem >= period {
            rem -= period;
            slot += 1;
        }
        // rem < period, so rem·(2^96/period)/2^64 < 2^32.
        SlotPos {
            slot,
            phase: U0F32::from_bits(mul_hi(rem, self.inv_q64) as u32),
        }
    }

    /// [`Self::split`] in 128-bit arithmetic, for periods above [`FAST_PERIOD_MAX`].
    fn split_wide(&self, elapsed_ps: u64) -> SlotPos {
        let period = u128::from(self.period_ps.to_bits());
        let inv = u128::from(self.inv_q64);
        let e = u128::from(elapsed_ps);
        // The reciprocal is floored, so the estimate is low by at most 2 slots.
        let mut slot = (e * inv) >> 64;
        let mut rem = (e << 32).saturating_sub(slot * period);
        let mut steps = 0;
        while rem >= period && steps < 4 {
            rem -= period;
            slot += 1;
            steps += 1;
        }
        if rem >= period {
            // Not reachable with a floored reciprocal; keep the exact answer anyway.
            slot += rem / period;
            rem %= period;
        }
        let frac = (rem * inv) >> 64;
        let phase_bits = if frac > u128::from(u32::MAX) {
            u32::MAX
        } else {
            frac as u32
        };
        SlotPos {
            slot: if slot > u128::from(u64::MAX) {
                u64::MAX
            } else {
                slot as u64
            },
            phase: U0F32::from_bits(phase_bits),
        }
    }
}

/// Longest period (Q32.32 bits, 2^30 ps) that [`SlotGrid::split`] handles in 64-bit arithmetic.
const FAST_PERIOD_MAX: u64 = 1 << 62;

/// High 64 bits of the 128-bit product: one instruction on 64-bit hosts, four 32×32→64
/// multiplies on 32-bit cores (where a 128-bit multiply would be a library call).
#[inline(always)]
pub(crate) fn mul_hi(a: u64, b: u64) -> u64 {
    #[cfg(target_pointer_width = "64")]
    {
        ((u128::from(a) * u128::from(b)) >> 64) as u64
    }
    #[cfg(not(target_pointer_width = "64"))]
    {
        mul_hi_limbs(a, b)
    }
}

/// [`mul_hi`] from four 32×32→64 products (exact: no partial sum exceeds 2^64 − 1).
#[cfg_attr(target_pointer_width = "64", allow(dead_code))]
#[inline(always)]
fn mul_hi_limbs(a: u64, b: u64) -> u64 {
    let (a0, a1) = (a & 0xFFFF_FFFF, a >> 32);
    let (b0, b1) = (b & 0xFFFF_FFFF, b >> 32);
    let p00 = a0 * b0;
    let p01 = a0 * b1;
    let p10 = a1 * b0;
    let mid = (p00 >> 32) + (p01 & 0xFFFF_FFFF) + (p10 & 0xFFFF_FFFF);
    a1 * b1 + (p01 >> 32) + (p10 >> 32) + (mid >> 32)
}

/// A clock fixed by configuration: known period and the time at which slot 0 starts.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct FixedClock {
    grid: SlotGrid,
    origin_ps: u64,
}

impl FixedClock {
    /// A clock with period `period_ps` whose slot 0 starts at `origin_ps`.
    pub const fn new(period_ps: U32F32, origin_ps: u64) -> Result<Self, ClockError> {
        match SlotGrid::new(period_ps) {
            Ok(grid) => Ok(Self { grid, origin_ps }),
            Err(e) => Err(e),
        }
    }

    /// The slot period in picoseconds (Q32.32).
    pub const fn period_ps(&self) -> U32F32 {
        self.grid.period_ps()
    }

    /// The time at which slot 0 starts, in picoseconds.
    pub const fn origin_ps(&self) -> u64 {
        self.origin_ps
    }
}

impl SlotClock for FixedClock {
    #[inline]
    fn locate(&self, t_ps: u64) -> Located {
        match t_ps.checked_sub(self.origin_ps) {
            Some(e) => Located::At(self.grid.split(e)),
            None => Located::BeforeOrigin,
        }
    }

    #[inline]
    fn observe(&mut self, _channel: u8, t_ps: u64) -> Located {
        self.locate(t_ps)
    }

    fn is_locked(&self) -> bool {
        true
    }

    fn epoch(&self) -> u32 {
        1
    }

    fn renumbered_within(&self) -> Option<u64> {
        None
    }

    fn slot_at(&self, t_ps: u64) -> Option<u64> {
        match self.locate(t_ps) {
            Located::At(p) => Some(p.slot),
            _ => None,
        }
    }
}

// Fixed-point fields print as raw bits with their format in the name (defmt has no fixed types).
#[cfg(feature = "defmt")]
impl defmt::Format for SlotPos {
    fn format(&self, f: defmt::Formatter<'_>) {
        defmt::write!(
            f,
            "SlotPos {{ slot: {=u64}, phase_q0_32: {=u32} }}",
            self.slot,
            self.phase.to_bits()
        );
    }
}

#[cfg(feature = "defmt")]
impl defmt::Format for SlotGrid {
    fn format(&self, f: defmt::Formatter<'_>) {
        defmt::write!(
            f,
            "SlotGrid {{ period_ps_q32_32: {=u64} }}",
            self.period_ps.to_bits()
        );
    }
}

#[cfg(feature = "defmt")]
impl defmt::Format for FixedClock {
    fn format(&self, f: defmt::Formatter<'_>) {
        defmt::write!(
            f,
            "FixedClock {{ period_ps_q32_32: {=u64}, origin_ps: {=u64} }}",
            self.grid.period_ps.to_bits(),
            self.origin_ps
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    #[test]
    fn rejects_tiny_and_huge_periods() {
        assert!(SlotGrid::new(U32F32::from_num(1)).is_err());
        assert!(SlotGrid::new(U32F32::from_num(2)).is_ok());
        assert!(SlotGrid::new(U32F32::MAX).is_err());
    }

    #[test]
    fn ten_ns_grid() {
        let c = FixedClock::new(U32F32::from_num(10_000), 1_000).unwrap();
        assert_eq!(c.locate(999), Located::BeforeOrigin);
        let Located::At(p) = c.locate(1_000 + 3 * 10_000 + 2_500) else {
            panic!()
        };
        assert_eq!(p.slot, 3);
        // Floored reciprocal: within one ulp of the exact quarter.
        assert!(U0F32::from_num(0.25).to_bits() - p.phase.to_bits() <= 1);
    }

    proptest! {
        // The fast split and the 128-bit one give the same answer wherever both apply.
        #[test]
        fn fast_split_equals_wide_split(bits in (2u64 << 32)..=FAST_PERIOD_MAX, e in any::<u64>()) {
            let g = SlotGrid::new(U32F32::from_bits(bits)).unwrap();
            prop_assert_eq!(g.split(e), g.split_wide(e));
        }

        // Against the exact 128-bit product (u128 arithmetic of the Rust core library).
        #[test]
        fn mul_hi_matches_the_128_bit_product(a in any::<u64>(), b in any::<u64>()) {
            prop_assert_eq!(mul_hi_limbs(a, b), ((u128::from(a) * u128::from(b)) >> 64) as u64);
            prop_assert_eq!(mul_hi(a, b), mul_hi_limbs(a, b));
        }

        // Against exact u128 long division (the definition of floor and remainder).
        #[test]
        fn split_matches_exact_division(bits in (2u64 << 32)..(1u64 << 63), e in any::<u64>()) {
            let g = SlotGrid::new(U32F32::from_bits(bits)).unwrap();
            let p = g.split(e);
            let num = u128::from(e) << 32;
            let slot = num / u128::from(bits);
            let rem = num % u128::from(bits);
            prop_assert_eq!(u128::from(p.slot), slot);
            let exact = (rem << 32) / u128::from(bits);
            let got = u128::from(p.phase.to_bits());
            prop_assert!(got <= exact && exact - got <= 1, "phase {} vs {}", got, exact);
        }
    }
}
