//! Holdover: keep the clock through a cut or a jump, and decide how it resumes.
//!
//! When the lock's averages fail (no in-window detection for `blackout_ps`, the in-window
//! fraction below its threshold, or the rms residual too large), the tracker does not drop the
//! lock at once. It freezes the last good model and extrapolates it with the drift estimate:
//! position(t) = p₀ + ν₀·Δt + ½·ν̇·Δt². The error of that prediction is bounded by
//! U(Δt) = n·ε_ν + ½·n·Δt·ε_ν̇ slots, n = ν₀·Δt the slots elapsed, ε_ν the loop's frequency
//! uncertainty (`hold_ppt`) and ε_ν̇ the drift estimate's (`hold_drift_ppt_per_s`, or the
//! profile's whole drift allowance until the estimate has matured). No slot is given meanwhile.
//!
//! Each detection in holdover is folded at its predicted slot phase with the channel's arrival
//! pattern (the Z²_n statistic of [`crate::acquire::fold`], Buccheri et al. 1983). The fold is
//! tested at 64, 128, ... 4096 detections; once Z² passes [`Z2_RESUME`]
//! (χ² with at most four degrees of freedom under noise alone: P ≤ 26·e^−25 ≈ 4e-10 per test),
//! the matched filter gives the offset φ of the arrivals from the prediction, and:
//! - |φ| ≤ U + 2w (w the window): the cut is bridged; the model moves by φ and tracking resumes
//!   with the slot numbers unchanged;
//! - otherwise the arrivals jumped: the model moves by φ taken the short way round (|φ| < ½),
//!   and the numbers are kept when |φ| + U ≤ 7/16; a jump closer to half a slot is ambiguous,
//!   so the numbering is redone around the predicted numbers (±1 slot).
//!
//! If U reaches [`GIVE_UP_Q32`] (3/8 slot) first, the slot numbers can no longer be trusted
//! from the prediction, and if [`MAX_FOLD`] detections pass without the arrivals being found
//! (a frequency step beyond the wide gear's reach), the model itself is wrong: either way the
//! lock is lost, and the recovered clock reacquires near the predicted frequency, renumbering
//! within the bound.

use super::snapshot::Snapshot;
use super::LossCause;
use crate::acquire::fold::{ChannelPattern, Fold};
use fixed::types::U32F32;

/// Standard deviations in the prediction's bound.
pub const SIGMAS: u64 = 6;
/// Z² needed to resume from holdover (two harmonics).
pub const Z2_RESUME: U32F32 = U32F32::const_from_int(50);
/// First test of the holdover fold, detections; later tests at each doubling.
pub const FIRST_TEST: u32 = 64;
/// Holdover gives up after this many detections without finding the arrivals: the model is
/// wrong (a frequency step beyond the wide gear's reach), whatever the bound says.
pub const MAX_FOLD: u32 = 4096;
/// Prediction bound (Q32.32 slots) at which holdover gives up: 3/8 slot.
pub const GIVE_UP_Q32: u64 = 3 << 29;
/// A jump taken the short way round keeps the numbers while |φ| + U stays within 7/16 slot.
pub const JUMP_KEEP_Q32: u64 = 7 << 28;

/// The last good model extrapolated with the drift estimate.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Prediction {
    /// Predicted position in slots (Q64.64).
    pub pos_q64: i128,
    /// Predicted frequency, cycles per ps (Q0.96).
    pub nu_q96: u128,
    /// Bound on the prediction's error, slots (Q32.32).
    pub bound_q32: u64,
}

/// How a holdover ended with the lock kept.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Resumed {
    /// The arrivals came back where the prediction put them: numbers kept.
    Bridged,
    /// The arrivals jumped by more than the prediction's bound; `renumber` when the jump was
    /// too close to half a slot to keep the numbers.
    Jump {
        /// Whether the slot numbers must be established again.
        renumber: bool,
    },
}

/// What one detection did to the tracker's lock, for the clock above it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum TrackEvent {
    /// Holdover began, for this reason.
    HoldoverStarted(LossCause),
    /// Holdover ended with the lock kept.
    Resumed {
        /// How.
        how: Resumed,
        /// Offset of the arrivals from the prediction, slot fraction (Q0.32, signed).
        phase_q32: i32,
        /// The prediction's bound then, slots (Q32.32).
        bound_q32: u64,
        /// Length of the holdover, ps.
        held_ps: u64,
    },
    /// Holdover gave up: the lock is lost.
    Lost(LossCause),
}

/// The holdover's fold and its reason.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Hold {
    pub(super) active: bool,
    pub(super) cause: LossCause,
    pub(super) since_ps: u64,
    fold: Fold<2>,
    n: u32,
    /// The fold saw [`MAX_FOLD`] detections without finding the arrivals.
    pub(super) exhausted: bool,
}

impl Hold {
    pub(super) const fn new() -> Self {
        Self {
            active: false,
            cause: LossCause::Blackout,
            since_ps: 0,
            fold: Fold::new(),
            n: 0,
            exhausted: false,
        }
    }

    pub(super) fn start(&mut self, cause: LossCause, since_ps: u64) {
        *self = Self {
            active: true,
            cause,
            since_ps,
            ..Self::new()
        };
    }

    /// Fold one detection at predicted phase `frac_q64`; the arrivals' offset φ (Q0.64,
    /// signed) once the fold is significant.
    pub(super) fn observe(&mut self, frac_q64: u64, pat: &ChannelPattern) -> Option<i64> {
        self.fold.add(frac_q64, pat);
        self.n += 1;
        if self.n < FIRST_TEST || !self.n.is_power_of_two() {
            return None;
        }
        if self.fold.z2() >= Z2_RESUME {
            return Some(self.fold.best_offset().0 as i64);
        }
        if self.n >= MAX_FOLD {
            self.exhausted = true;
        }
        None
    }
}

/// Extrapolate `s` to `t_ps` with slope `rate_q16` (see [`super::drift`]) and bound the error
/// with a frequency bound `nu_bound_q64` (Q0.64 cycles/ps) and a slope bound `slope_bound_q64`
/// (Q0.64 cycles/ps per 2^32 ps); `None` beyond 2^42 ps (4.4 s) from the model or outside its
/// range. The bound in slots is U = n·δν/ν + ½·n·Δt·δν̇/ν for n slots elapsed.
pub(super) fn predict(
    s: &Snapshot,
    t_ps: u64,
    rate_q16: i64,
    nu_bound_q64: u64,
    slope_bound_q64: u64,
) -> Option<Prediction> {
    let dt = t_ps.saturating_sub(s.t_ps);
    if dt >> 42 != 0 {
        return None;
    }
    let lin = s.position(t_ps)?;
    let dt_i = i128::from(dt);
    // Δν (Q0.96) = rate·Δt/2^16 (|rate| < 2^63, Δt < 2^42: within i128); ½·ν̇·Δt² (Q64.64
    // slots) = Δν·Δt/2^33, saturating for slopes far beyond any clock's.
    let dnu_q96 = (i128::from(rate_q16) * dt_i) >> 16;
    let quad = dnu_q96.saturating_mul(dt_i) >> 33;
    let gap_q32 = ((lin - s.pos_q64) >> 32).unsigned_abs();
    let nu_q64 = u128::from(u64::try_from(s.nu_q96 >> 32).unwrap_or(u64::MAX).max(1));
    let lin_q32 = gap_q32.saturating_mul(u128::from(nu_bound_q64)) / nu_q64;
    let quad_q32 = ((gap_q32.saturating_mul(u128::from(dt))) >> 33)
        .saturating_mul(u128::from(slope_bound_q64))
        / nu_q64;
    Some(Prediction {
        pos_q64: lin.checked_add(quad)?,
        nu_q96: (s.nu_q96 as i128).saturating_add(dnu_q96).max(1) as u128,
        bound_q32: u64::try_from(lin_q32.saturating_add(quad_q32)).unwrap_or(u64::MAX),
    })
}
