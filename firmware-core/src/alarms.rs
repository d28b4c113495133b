//! Alarms: the conditions under which an operator must look at the link now.
//!
//! Five conditions, thresholds from an [`AlarmConfig`] validated once:
//! - **QBER high**: the upper confidence bound ([`crate::bounds`]) of the window QBER of one
//!   basis, in the configured intensity class (default: signal), at or above a ceiling. The
//!   default ceiling is the Shor-Preskill zero, 11.0028 % (Shor & Preskill, PRL 85, 441, 2000):
//!   above it the asymptotic BB84 rate 1 − 2h(Q) is negative. Silent until the window holds
//!   `min_tested` tested bits of that basis (with fewer, any bound is wide and says nothing).
//! - **Lock lost**: the clock stopped giving slots after it had given them; cleared on relock.
//! - **Rate collapse**: a block's detections below `rate_floor_ppm` of the running level (an
//!   exponential average over blocks, weight 1/8, fed only with blocks that did not collapse and
//!   seeded by the first [`RATE_WARMUP_BLOCKS`] blocks).
//! - **Detector saturation**: a channel's dead-time fraction over a block (see
//!   `stats`) at or above `saturation_ppm`.
//! - **Ingest fault**: one of the board's raw-word ingest counters ([`crate::ingest`]: overrun,
//!   FIFO full, rollover gap, malformed word) grew since the previous reading; cleared after a
//!   reading in which none grew. Any growth counts: each of them is data lost or garbled before
//!   the receiver saw it, and nothing may be lost silently.
//!
//! Each change raises or clears an [`AlarmEvent`] stamped with the receiver time it was decided
//! at (block end for block conditions, the detection's time for the lock, the caller's reading
//! time for the ingest counters). Events wait in a
//! bounded queue (`EVENT_QUEUE`); an overflow is counted, never silent. An event is the payload
//! of a record-type-5 frame ([`crate::formats::alarm`]) and is logged through `defmt` when that feature is on.

use crate::bounds::{hoeffding_upper_ppm, wilson_ppm, Epsilon, SHOR_PRESKILL_QBER_PPM};
use crate::bounds::{BoundError, Z_ONE_SIDED_1E_10_Q16};
use crate::counts::{Counts, StatsConfig};
use crate::gates::{Basis, MAX_INTENSITIES};
use crate::ingest::{IngestCounts, IngestFault};
use core::fmt;
use heapless::Deque;

pub use crate::formats::alarm::{AlarmEvent, AlarmKind};

/// Alarm events held until taken.
pub const EVENT_QUEUE: usize = 16;
/// Blocks that seed the running rate level before rate collapse is judged.
pub const RATE_WARMUP_BLOCKS: u32 = 2;
/// Alarm conditions, one per wire code (QBER counts once for both bases).
pub const CONDITIONS: usize = 5;

/// Which upper confidence bound the QBER alarm uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BoundKind {
    /// Wilson score upper bound with this z (Q16.16).
    Wilson {
        /// Standard-normal quantile, Q16.16.
        z_q16: u32,
    },
    /// One-sided Hoeffding bound with this ε.
    Hoeffding(Epsilon),
}

/// Why an alarm configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AlarmConfigError {
    /// QBER ceiling outside 1..=500 000 ppm.
    Ceiling(u32),
    /// `min_tested` of zero.
    MinTested,
    /// Intensity class outside the tally's classes.
    Intensity(u8),
    /// Rate floor outside 1..=999 999 ppm.
    RateFloor(u32),
    /// Saturation threshold outside 1..=1 000 000 ppm.
    Saturation(u32),
    /// A bound parameter out of range.
    Bound(BoundError),
}

impl fmt::Display for AlarmConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Ceiling(v) => write!(f, "qber_ceiling_ppm {v} outside 1..=500000"),
            Self::MinTested => write!(f, "min_tested must be at least 1"),
            Self::Intensity(i) => write!(f, "intensity {i} outside 0..{MAX_INTENSITIES}"),
            Self::RateFloor(v) => write!(f, "rate_floor_ppm {v} outside 1..=999999"),
            Self::Saturation(v) => write!(f, "saturation_ppm {v} outside 1..=1000000"),
            Self::Bound(e) => write!(f, "bound: {e}"),
        }
    }
}

impl core::error::Error for AlarmConfigError {}

/// Validated alarm thresholds.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AlarmConfig {
    qber_ceiling_ppm: u32,
    bound: BoundKind,
    min_tested: u64,
    intensity: u8,
    rate_floor_ppm: u32,
    saturation_ppm: u32,
}

impl AlarmConfig {
    /// Defaults: Shor-Preskill ceiling, Wilson bound at ε = 1e-10 one-sided, 1000 tested bits,
    /// signal class, rate floor 25 % of the running level, saturation at 10 % dead time.
    pub const DEFAULT: Self = Self {
        qber_ceiling_ppm: SHOR_PRESKILL_QBER_PPM,
        bound: BoundKind::Wilson {
            z_q16: Z_ONE_SIDED_1E_10_Q16,
        },
        min_tested: 1000,
        intensity: 0,
        rate_floor_ppm: 250_000,
        saturation_ppm: 100_000,
    };

    /// Check and bundle thresholds: QBER ceiling (ppm) on the `bound` of the window QBER of
    /// class `intensity` once `min_tested` bits are tested; rate floor and saturation in ppm.
    pub fn new(
        qber_ceiling_ppm: u32,
        bound: BoundKind,
        min_tested: u64,
        intensity: u8,
        rate_floor_ppm: u32,
        saturation_ppm: u32,
    ) -> Result<Self, AlarmConfigError> {
        if qber_ceiling_ppm == 0 || qber_ceiling_ppm > 500_000 {
            return Err(AlarmConfigError::Ceiling(qber_ceiling_ppm));
        }
        if let BoundKind::Wilson { z_q16: 0 } = bound {
            return Err(AlarmConfigError::Bound(BoundError::ZeroZ));
        }
        if min_tested == 0 {
            return Err(AlarmConfigError::MinTested);
        }
        if usize::from(intensity) >= MAX_INTENSITIES {
            return Err(AlarmConfigError::Intensity(intensity));
        }
        if rate_floor_ppm == 0 || rate_floor_ppm >= 1_000_000 {
            return Err(AlarmConfigError::RateFloor(rate_floor_ppm));
        }
        if saturation_ppm == 0 || saturation_ppm > 1_000_000 {
            return Err(AlarmConfigError::Saturation(saturation_ppm));
        }
        Ok(Self {
            qber_ceiling_ppm,
            bound,
            min_tested,
            intensity,
            rate_floor_ppm,
            saturation_ppm,
        })
    }

    /// QBER ceiling, ppm.
    pub const fn qber_ceiling_ppm(&self) -> u32 {
        self.qber_ceiling_ppm
    }

    /// The bound the QBER alarm uses.
    pub const fn bound(&self) -> BoundKind {
        self.bound
    }

    /// Intensity class whose QBER is watched.
    pub const fn intensity(&self) -> u8 {
        self.intensity
    }

    /// Tested bits the window needs before the QBER alarm speaks.
    pub const fn min_tested(&self) -> u64 {
        self.min_tested
    }

    /// Rate-collapse floor, ppm of the running level.
    pub const fn rate_floor_ppm(&self) -> u32 {
        self.rate_floor_ppm
    }

    /// Dead-time fraction at which a channel counts as saturated, ppm.
    pub const fn saturation_ppm(&self) -> u32 {
        self.saturation_ppm
    }

    /// Upper bound in ppm of `k` errors in `n` tested bits (1e6 when n = 0).
    pub fn upper_ppm(&self, k: u64, n: u64) -> u32 {
        match self.bound {
            BoundKind::Wilson { z_q16 } => wilson_ppm(k, n, z_q16).1,
            BoundKind::Hoeffding(eps) => hoeffding_upper_ppm(k, n, eps),
        }
    }
}

/// Alarm state: what is active, the running rate level, the events not yet taken.
#[derive(Clone, Debug)]
pub struct Alarms {
    cfg: AlarmConfig,
    active: u8,
    /// Running detections per block × 256.
    level_q8: u64,
    level_blocks: u32,
    events: Deque<AlarmEvent, EVENT_QUEUE>,
    dropped: u64,
    raised: [u64; CONDITIONS],
    /// Ingest counters at the previous reading.
    ingest_seen: IngestCounts,
    /// The counter the active ingest-fault alarm named when raised.
    ingest_named: IngestFault,
}

impl Alarms {
    /// No alarm active.
    pub const fn new(cfg: AlarmConfig) -> Self {
        Self {
            cfg,
            active: 0,
            level_q8: 0,
            level_blocks: 0,
            events: Deque::new(),
            dropped: 0,
            raised: [0; CONDITIONS],
            ingest_seen: IngestCounts::ZERO,
            ingest_named: IngestFault::OverrunWords,
        }
    }

    /// The thresholds.
    pub const fn config(&self) -> &AlarmConfig {
        &self.cfg
    }

    /// Active alarms as a bit mask ([`AlarmKind::bit`]).
    pub const fn active(&self) -> u8 {
        self.active
    }

    /// Events lost because the queue was full.
    pub const fn dropped(&self) -> u64 {
        self.dropped
    }

    /// Times raised since start: QBER (either basis), lock lost, rate collapse, saturation,
    /// ingest fault.
    pub const fn raised_counts(&self) -> [u64; CONDITIONS] {
        self.raised
    }

    /// Running detections per block (the rate collapse's reference), × 256.
    pub const fn rate_level_q8(&self) -> u64 {
        self.level_q8
    }

    /// Upper bound of the watched class's QBER in `w` for `basis`, ppm; `None` when untested.
    pub fn upper_ppm(&self, w: &Counts, basis: Basis) -> Option<u32> {
        let (e, n) = w.errors(basis, Some(self.cfg.intensity));
        (n > 0).then(|| self.cfg.upper_ppm(e, n))
    }

    pub(crate) fn pop_event(&mut self) -> Option<AlarmEvent> {
        self.events.pop_front()
    }

    fn set(&mut self, t_ps: u64, kind: AlarmKind, on: bool, value_ppm: u32, threshold_ppm: u32) {
        let bit = kind.bit();
        if (self.active & bit != 0) == on {
            return;
        }
        self.active ^= bit;
        if on {
            let (code, _) = kind.code();
            if let Some(r) = self.raised.get_mut(usize::from(code - 1)) {
                *r += 1;
            }
        }
        let ev = AlarmEvent {
            t_ps,
            kind,
            raised: on,
            value_ppm,
            threshold_ppm,
        };
        if on {
            crate::log::warning!("alarm raised {}", ev);
        } else {
            crate::log::debug!("alarm cleared {}", ev);
        }
        if self.events.push_back(ev).is_err() {
            self.dropped += 1;
        }
    }

    /// The clock's lock after a detection at `t_ps`: `was` before it, `now` after it.
    pub(crate) fn lock(&mut self, t_ps: u64, was: bool, now: bool) {
        if was && !now {
            self.set(t_ps, AlarmKind::LockLost, true, 0, 0);
        } else if now && self.active & AlarmKind::LockLost.bit() != 0 {
            self.set(t_ps, AlarmKind::LockLost, false, 0, 0);
        }
    }

    /// Judge the block conditions at the end of a block: `w` the window, `b` the block.
    pub(crate) fn evaluate(&mut self, t_ps: u64, w: &Counts, b: &Counts, cfg: &StatsConfig) {
        let ceiling = self.cfg.qber_ceiling_ppm;
        for basis in Basis::ALL {
            let (e, n) = w.errors(basis, Some(self.cfg.intensity));
            if n >= self.cfg.min_tested {
                let ub = self.cfg.upper_ppm(e, n);
                self.set(t_ps, AlarmKind::QberHigh(basis), ub >= ceiling, ub, ceiling);
            }
        }
        let count_q8 = u128::from(b.detections_in) << 8;
        if self.level_blocks < RATE_WARMUP_BLOCKS {
            self.level_blocks += 1;
            self.level_q8 = if self.level_blocks == 1 {
                count_q8 as u64
            } else {
                self.ewma(count_q8)
            };
        } else if self.level_q8 > 0 {
            let ratio =
                (count_q8 * 1_000_000 / u128::from(self.level_q8)).min(u128::from(u32::MAX));
            let floor = self.cfg.rate_floor_ppm;
            let collapsed = ratio < u128::from(floor);
            self.set(
                t_ps,
                AlarmKind::RateCollapse,
                collapsed,
                ratio as u32,
                floor,
            );
            if !collapsed {
                self.level_q8 = self.ewma(count_q8);
            }
        }
        let (worst, dead) = (0..cfg.channels())
            .map(|c| (c, b.dead_fraction_ppm(c, cfg.dead_time_ps())))
            .fold((0, 0), |a, x| if x.1 > a.1 { x } else { a });
        let limit = self.cfg.saturation_ppm;
        let kind = AlarmKind::Saturation { channel: worst };
        self.set(t_ps, kind, dead >= limit, dead, limit);
    }

    /// Judge the ingest counters read at `t_ps`: raised when a fault counter grew since the
    /// previous reading (naming the one that grew most, ties to the first in
    /// [`IngestFault::ALL`], with its growth as the value), cleared after a reading without
    /// growth. A counter below its previous reading (the caller restarted its ingest stage) is
    /// no growth.
    pub(crate) fn ingest(&mut self, t_ps: u64, now: &IngestCounts) {
        let mut worst: Option<(IngestFault, u64)> = None;
        for fault in IngestFault::ALL {
            let grew = now.get(fault).saturating_sub(self.ingest_seen.get(fault));
            if grew > worst.map_or(0, |(_, g)| g) {
                worst = Some((fault, grew));
            }
        }
        self.ingest_seen = *now;
        match worst {
            Some((counter, grew)) => {
                let kind = AlarmKind::IngestFault { counter };
                if self.active & kind.bit() == 0 {
                    self.ingest_named = counter;
                }
                let value = u32::try_from(grew).unwrap_or(u32::MAX);
                self.set(t_ps, kind, true, value, 0);
            }
            None => {
                let counter = self.ingest_named;
                self.set(t_ps, AlarmKind::IngestFault { counter }, false, 0, 0);
            }
        }
    }

    fn ewma(&self, count_q8: u128) -> u64 {
        let l = i128::from(self.level_q8);
        (l + (count_q8 as i128 - l) / 8).max(0) as u64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn config_is_validated() {
        let w = BoundKind::Wilson { z_q16: 1 << 16 };
        assert_eq!(
            AlarmConfig::new(0, w, 1, 0, 1, 1),
            Err(AlarmConfigError::Ceiling(0))
        );
        assert_eq!(
            AlarmConfig::new(1, BoundKind::Wilson { z_q16: 0 }, 1, 0, 1, 1),
            Err(AlarmConfigError::Bound(BoundError::ZeroZ))
        );
        assert_eq!(
            AlarmConfig::new(1, w, 0, 0, 1, 1),
            Err(AlarmConfigError::MinTested)
        );
        assert_eq!(
            AlarmConfig::new(1, w, 1, 3, 1, 1),
            Err(AlarmConfigError::Intensity(3))
        );
        assert_eq!(
            AlarmConfig::new(1, w, 1, 0, 1_000_000, 1),
            Err(AlarmConfigError::RateFloor(1_000_000))
        );
        assert_eq!(
            AlarmConfig::new(1, w, 1, 0, 1, 0),
            Err(AlarmConfigError::Saturation(0))
        );
        assert!(AlarmConfig::new(110_028, w, 1000, 0, 250_000, 100_000).is_ok());
    }
}
