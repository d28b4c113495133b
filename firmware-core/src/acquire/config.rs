//! Acquisition settings: what the search may assume and how much it may do per call.

use crate::clock::SlotGrid;
use core::fmt;
use fixed::types::{U0F32, U32F32};

/// Acquisition settings before validation (plain integers and fixed-point values).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
// No defmt::Format: the fixed-point fields have none.
pub struct AcquireParams {
    /// Nominal slot period T0 in ps (Q32.32).
    pub nominal_period_ps: U32F32,
    /// Half-width of the cold prior in ppm of the nominal frequency (1..=1000).
    pub prior_ppm: u32,
    /// Detections in the first search stage (≥ 16).
    pub first_stage: u32,
    /// Number of window doublings after the first stage (0..=16).
    pub stages: u8,
    /// Detections in the confirmation batch (≥ 32).
    pub confirm: u32,
    /// Half-width of the fit window around each expected position, slot fraction (0, 1/4].
    pub fit_half_window: U0F32,
    /// Work units [`super::Acquirer::work`] may spend per detection when driven by a clock.
    pub work_per_call: u32,
    /// Largest transmitter drift the search allows for, ppb of the frequency per second
    /// (0..=10,000); 0 folds with a constant frequency (no chirp dimension).
    pub drift_ppb_per_s: u32,
}

impl AcquireParams {
    /// Defaults: 128 detections in stage 0, three doublings (1024), 512 to confirm, ±1/16 slot.
    pub const fn new(nominal_period_ps: U32F32, prior_ppm: u32) -> Self {
        Self {
            nominal_period_ps,
            prior_ppm,
            first_stage: 128,
            stages: 3,
            confirm: 512,
            fit_half_window: U0F32::from_bits(1 << 28),
            work_per_call: 256,
            drift_ppb_per_s: 0,
        }
    }
}

/// Why acquisition settings were refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AcquireConfigError {
    /// Nominal period outside 2 ps ..= 2^31 ps.
    Period,
    /// Prior outside 1..=1000 ppm.
    Prior,
    /// First stage below 16 detections.
    FirstStage,
    /// More than 16 stages.
    Stages,
    /// Confirmation batch below 32 detections.
    Confirm,
    /// Fit half-window zero or above a quarter slot.
    FitWindow,
    /// Zero work per call.
    Work,
    /// Drift allowance above 10,000 ppb/s (or beyond the chirp arithmetic's range).
    Drift,
    /// Search plus confirmation batch exceed the buffer capacity (detections needed).
    Capacity(u64),
}

impl fmt::Display for AcquireConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Period => write!(f, "nominal_period_ps must lie in 2 ps ..= 2^31 ps"),
            Self::Prior => write!(f, "prior_ppm must lie in 1..=1000"),
            Self::FirstStage => write!(f, "first_stage must be at least 16 detections"),
            Self::Stages => write!(f, "stages must be at most 16"),
            Self::Confirm => write!(f, "confirm must be at least 32 detections"),
            Self::FitWindow => write!(f, "fit_half_window must lie in (0, 1/4] slot"),
            Self::Work => write!(f, "work_per_call must be at least 1"),
            Self::Drift => write!(f, "drift_ppb_per_s must lie in 0..=10000"),
            Self::Capacity(n) => write!(f, "search and confirmation need {n} detections of buffer"),
        }
    }
}

impl core::error::Error for AcquireConfigError {}

/// Validated acquisition settings.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
// No defmt::Format: the fixed-point fields have none.
pub struct AcquireConfig {
    pub(crate) p: AcquireParams,
    pub(crate) nu0: u64,
    /// Largest chirp a = ν̇/2 searched, Q0.128 cycles per ps² (0: no chirp dimension).
    pub(crate) chirp_max_q128: i64,
}

impl AcquireConfig {
    /// Check the settings.
    pub fn new(p: AcquireParams) -> Result<Self, AcquireConfigError> {
        if SlotGrid::new(p.nominal_period_ps).is_err() {
            return Err(AcquireConfigError::Period);
        }
        if p.prior_ppm == 0 || p.prior_ppm > 1000 {
            return Err(AcquireConfigError::Prior);
        }
        if p.first_stage < 16 {
            return Err(AcquireConfigError::FirstStage);
        }
        if p.stages > 16 {
            return Err(AcquireConfigError::Stages);
        }
        if p.confirm < 32 {
            return Err(AcquireConfigError::Confirm);
        }
        if p.fit_half_window == U0F32::ZERO || p.fit_half_window.to_bits() > 1 << 30 {
            return Err(AcquireConfigError::FitWindow);
        }
        if p.work_per_call == 0 {
            return Err(AcquireConfigError::Work);
        }
        let nu0 = ((1u128 << 96) / u128::from(p.nominal_period_ps.to_bits())) as u64;
        if p.drift_ppb_per_s > 10_000 {
            return Err(AcquireConfigError::Drift);
        }
        // The prior's upper edge drifts fastest.
        let nu_hi = nu0.saturating_add(nu0 / 1000);
        let chirp_max_q128 = super::chirp::chirp_max_q128(nu_hi, p.drift_ppb_per_s)
            .ok_or(AcquireConfigError::Drift)?;
        Ok(Self {
            p,
            nu0,
            chirp_max_q128,
        })
    }

    /// The settings.
    pub const fn params(&self) -> &AcquireParams {
        &self.p
    }

    /// Nominal frequency in cycles per ps (Q0.64).
    pub const fn nominal_nu_q64(&self) -> u64 {
        self.nu0
    }

    pub(crate) fn search_len(&self) -> u64 {
        u64::from(self.p.first_stage) << self.p.stages
    }
}
