//! The loop's model and the fixed-point arithmetic that extrapolates it.

use crate::clock::mul_hi;
use fixed::types::U32F32;

/// ⌊e·k/2^64⌋ for signed e: the unsigned high product of e's bits, less k when e < 0
/// (e's bits are e + 2^64 then). The result fits in an i64, so the wrapping sum is exact.
pub(super) fn mul_hi_signed(e: i64, k: u64) -> i64 {
    let hi = mul_hi(e as u64, k);
    (if e < 0 { hi.wrapping_sub(k) } else { hi }) as i64
}

/// ⌊Δt·ν/2^32⌋ for ν = hi·2^32 + lo and Δt < 2^62 (< 2^127), and whether the division left a
/// remainder: two 64×64→128 products on 64-bit hosts, [`advance_limbs`] elsewhere.
#[inline(always)]
pub(super) fn advance(dt_ps: u64, hi: u64, lo: u32) -> (u128, bool) {
    #[cfg(target_pointer_width = "64")]
    {
        let part = u128::from(dt_ps) * u128::from(lo);
        (
            u128::from(dt_ps) * u128::from(hi) + (part >> 32),
            part as u32 != 0,
        )
    }
    #[cfg(not(target_pointer_width = "64"))]
    {
        advance_limbs(dt_ps, hi, lo)
    }
}

/// [`advance`] from `mul_hi` and 32×32→64 products, for 32-bit cores (where a 128-bit multiply
/// is a library call): Δt·lo/2^32 = (Δt div 2^32)·lo + (Δt mod 2^32)·lo/2^32.
#[cfg_attr(target_pointer_width = "64", allow(dead_code))]
#[inline(always)]
pub(super) fn advance_limbs(dt_ps: u64, hi: u64, lo: u32) -> (u128, bool) {
    let lo = u64::from(lo);
    let whole = (u128::from(mul_hi(dt_ps, hi)) << 64) | u128::from(dt_ps.wrapping_mul(hi));
    let low = (dt_ps & 0xFFFF_FFFF) * lo;
    let part = (dt_ps >> 32) * lo + (low >> 32);
    (whole + u128::from(part), low as u32 != 0)
}

/// ⌊e_q32·g/2^32⌋ (the ν step, Q0.96) for a 32-bit error and g < 2^96 (checked in
/// [`TrackConfig::new`]): one 128-bit product on 64-bit hosts, [`nu_step_limbs`] elsewhere.
#[inline(always)]
pub(super) fn nu_step_q96(e_q32: i32, g_q96: u128) -> i128 {
    #[cfg(target_pointer_width = "64")]
    {
        (i128::from(e_q32) * g_q96 as i128) >> 32
    }
    #[cfg(not(target_pointer_width = "64"))]
    {
        nu_step_limbs(e_q32, g_q96)
    }
}

/// [`nu_step_q96`] from three 32×32→64 products of g's 32-bit limbs.
#[cfg_attr(target_pointer_width = "64", allow(dead_code))]
#[inline(always)]
pub(super) fn nu_step_limbs(e_q32: i32, g_q96: u128) -> i128 {
    let e = i64::from(e_q32);
    let limb = |k: u32| i64::from((g_q96 >> k) as u32);
    // |e| ≤ 2^31 and each limb < 2^32, so each product fits in an i64; the two upper ones are
    // whole after the shift by 32.
    (i128::from(e * limb(64)) << 32) + i128::from(e * limb(32)) + i128::from((e * limb(0)) >> 32)
}

/// The loop's model at one instant: enough to extrapolate slot positions.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Snapshot {
    /// Anchor time in ps.
    pub t_ps: u64,
    /// Position at the anchor in slots (Q64.64).
    pub pos_q64: i128,
    /// Frequency in cycles per ps (Q0.96).
    pub nu_q96: u128,
}

impl Snapshot {
    /// Position of time `t_ps` in slots (Q64.64); `None` beyond ±2^62 ps from the anchor.
    pub fn position(&self, t_ps: u64) -> Option<i128> {
        let (dt_ps, early) = match t_ps.checked_sub(self.t_ps) {
            Some(d) => (d, false),
            None => (self.t_ps - t_ps, true),
        };
        if dt_ps >= 1 << 62 {
            return None;
        }
        let Ok(hi) = u64::try_from(self.nu_q96 >> 32) else {
            return self.position_wide(t_ps);
        };
        let (adv, inexact) = advance(dt_ps, hi, self.nu_q96 as u32);
        // An early time rounds the negative advance down, as the 128-bit product would.
        let adv = adv as i128;
        self.pos_q64.checked_add(if early {
            -adv - i128::from(inexact)
        } else {
            adv
        })
    }

    /// [`Self::position`] with 128-bit products, for frequencies of 2^-32 cycles/ps and above.
    fn position_wide(&self, t_ps: u64) -> Option<i128> {
        let d = i128::from(t_ps) - i128::from(self.t_ps);
        let hi = (self.nu_q96 >> 32) as i128;
        let lo = (self.nu_q96 & 0xFFFF_FFFF) as i128;
        self.pos_q64.checked_add(d * hi + ((d * lo) >> 32))
    }

    /// Period in ps (Q32.32).
    pub fn period_ps(&self) -> U32F32 {
        let bits = u128::MAX / self.nu_q96.max(1);
        U32F32::from_bits(u64::try_from(bits).unwrap_or(u64::MAX))
    }
}
