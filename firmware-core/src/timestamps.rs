//! Stage 1 — timestamps in: TDC counter values become a monotonic picosecond time base.
//!
//! A time-to-digital converter reports a free-running counter of `counter_bits` (32–64) bits that
//! ticks every `resolution_ps` and wraps. Merged channels can arrive slightly out of order, so a
//! step is read as the shortest way round the counter circle: forward when the modular difference
//! is below half the range, backward (a reordered neighbour) otherwise. This is common practice for
//! wrapping counters (serial-number arithmetic).

use core::fmt;

/// One raw event as the TDC reports it: counter value (in ticks) and input channel. C layout, so
/// a C firmware's array of `{ uint64_t count; uint8_t channel; }` is read where it lies.
#[repr(C)]
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TdcEvent {
    /// Counter value in ticks of the TDC resolution, `< 2^counter_bits`.
    pub count: u64,
    /// TDC input channel.
    pub channel: u8,
}

/// One detection on the unwrapped time base.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Detection {
    /// Arrival time in picoseconds since the TDC counter's first reported value's epoch.
    pub t_ps: u64,
    /// TDC input channel.
    pub channel: u8,
}

/// Why a TDC configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum UnwrapConfigError {
    /// Counter width outside 32..=64 bits.
    CounterBits(u8),
    /// Resolution of zero picoseconds.
    ZeroResolution,
}

impl fmt::Display for UnwrapConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::CounterBits(b) => write!(f, "TDC counter width {b} bits is outside 32..=64"),
            Self::ZeroResolution => write!(f, "TDC resolution must be at least 1 ps"),
        }
    }
}

impl core::error::Error for UnwrapConfigError {}

/// Why one TDC event could not be placed on the time base.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum UnwrapError {
    /// The counter value has bits set above the configured width.
    CountTooWide,
    /// A backward step reaches before the start of the time base.
    BeforeStart,
    /// The time in picoseconds no longer fits 64 bits.
    Overflow,
}

impl fmt::Display for UnwrapError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::CountTooWide => write!(f, "counter value wider than the configured counter"),
            Self::BeforeStart => write!(f, "event before the start of the time base"),
            Self::Overflow => write!(f, "time in picoseconds overflows 64 bits"),
        }
    }
}

impl core::error::Error for UnwrapError {}

/// Validated TDC description: counter width and tick length.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct UnwrapConfig {
    counter_bits: u8,
    resolution_ps: u32,
}

impl UnwrapConfig {
    /// Check a counter width (32..=64 bits) and a tick length in picoseconds (≥ 1).
    pub const fn new(counter_bits: u8, resolution_ps: u32) -> Result<Self, UnwrapConfigError> {
        if counter_bits < 32 || counter_bits > 64 {
            return Err(UnwrapConfigError::CounterBits(counter_bits));
        }
        if resolution_ps == 0 {
            return Err(UnwrapConfigError::ZeroResolution);
        }
        Ok(Self {
            counter_bits,
            resolution_ps,
        })
    }

    /// Counter width in bits.
    pub const fn counter_bits(&self) -> u8 {
        self.counter_bits
    }

    /// Tick length in picoseconds.
    pub const fn resolution_ps(&self) -> u32 {
        self.resolution_ps
    }

    /// Mask of the valid counter bits.
    pub const fn mask(&self) -> u64 {
        if self.counter_bits >= 64 {
            u64::MAX
        } else {
            (1u64 << self.counter_bits) - 1
        }
    }
}

/// Streaming counter unwrapper: keeps the latest (largest) unwrapped tick count.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Unwrapper {
    cfg: UnwrapConfig,
    /// The counter's mask, computed once (`cfg.mask()`).
    mask: u64,
    /// Largest tick count whose picosecond time fits in 64 bits (u64::MAX / resolution), so the
    /// hot path multiplies without an overflow-checked 64-bit multiply.
    max_ticks: u64,
    /// Largest unwrapped tick count so far; `None` before the first event.
    newest_ticks: Option<u64>,
}

impl Unwrapper {
    /// A fresh unwrapper for the given TDC.
    pub const fn new(cfg: UnwrapConfig) -> Self {
        // resolution_ps ≥ 1 (checked by UnwrapConfig::new), so the division cannot fail.
        let max_ticks = match u64::MAX.checked_div(cfg.resolution_ps as u64) {
            Some(m) => m,
            None => u64::MAX,
        };
        Self {
            mask: cfg.mask(),
            max_ticks,
            cfg,
            newest_ticks: None,
        }
    }

    /// The TDC description in use.
    pub const fn config(&self) -> &UnwrapConfig {
        &self.cfg
    }

    /// Place one event on the picosecond time base.
    #[inline]
    pub fn unwrap(&mut self, ev: TdcEvent) -> Result<Detection, UnwrapError> {
        let mask = self.mask;
        if ev.count & !mask != 0 {
            return Err(UnwrapError::CountTooWide);
        }
        let ticks = match self.newest_ticks {
            None => {
                self.newest_ticks = Some(ev.count);
                ev.count
            }
            Some(newest) => {
                let step = ev.count.wrapping_sub(newest) & mask;
                let half = (mask >> 1) + 1;
                if step < half {
                    let t = newest.checked_add(step).ok_or(UnwrapError::Overflow)?;
                    self.newest_ticks = Some(t);
                    t
                } else {
                    let back = (mask - step) + 1;
                    newest.checked_sub(back).ok_or(UnwrapError::BeforeStart)?
                }
            }
        };
        // ticks ≤ u64::MAX / resolution ⇔ ticks·resolution ≤ u64::MAX.
        if ticks > self.max_ticks {
            return Err(UnwrapError::Overflow);
        }
        let t_ps = ticks.wrapping_mul(u64::from(self.cfg.resolution_ps));
        Ok(Detection {
            t_ps,
            channel: ev.channel,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn overflow_exactly_where_the_product_leaves_64_bits() {
        // 64-bit counter at 3 ps: u64::MAX / 3 ticks fit, one more does not.
        let cfg = UnwrapConfig::new(64, 3).unwrap();
        let last = u64::MAX / 3;
        let mut u = Unwrapper::new(cfg);
        assert_eq!(
            u.unwrap(TdcEvent {
                count: last,
                channel: 0
            })
            .map(|d| d.t_ps),
            Ok(last * 3)
        );
        let mut u = Unwrapper::new(cfg);
        assert_eq!(
            u.unwrap(TdcEvent {
                count: last + 1,
                channel: 0
            }),
            Err(UnwrapError::Overflow)
        );
    }

    #[test]
    fn rejects_bad_widths() {
        assert_eq!(
            UnwrapConfig::new(31, 1),
            Err(UnwrapConfigError::CounterBits(31))
        );
        assert_eq!(
            UnwrapConfig::new(65, 1),
            Err(UnwrapConfigError::CounterBits(65))
        );
        assert_eq!(
            UnwrapConfig::new(48, 0),
            Err(UnwrapConfigError::ZeroResolution)
        );
    }

    #[test]
    fn unwraps_a_32_bit_counter_through_two_wraps() {
        let cfg = UnwrapConfig::new(32, 4).unwrap();
        let mut u = Unwrapper::new(cfg);
        let start: u64 = 0xFFFF_FF00;
        let mut ticks = start;
        for i in 0..3000u64 {
            let ev = TdcEvent {
                count: ticks & 0xFFFF_FFFF,
                channel: 0,
            };
            let t = u.unwrap(ev).unwrap().t_ps;
            assert_eq!(t, (start + i * 3_000_000) * 4, "event {i}");
            ticks += 3_000_000;
        }
    }

    #[test]
    fn reordered_neighbour_across_a_wrap_goes_backward() {
        let cfg = UnwrapConfig::new(32, 1).unwrap();
        let mut u = Unwrapper::new(cfg);
        let a = u
            .unwrap(TdcEvent {
                count: 0xFFFF_FFF0,
                channel: 0,
            })
            .unwrap();
        let b = u
            .unwrap(TdcEvent {
                count: 0x10,
                channel: 1,
            })
            .unwrap();
        let c = u
            .unwrap(TdcEvent {
                count: 0xFFFF_FFFA,
                channel: 2,
            })
            .unwrap();
        assert_eq!(b.t_ps - a.t_ps, 0x20);
        assert_eq!(b.t_ps - c.t_ps, 0x16);
    }

    #[test]
    fn too_wide_and_before_start_are_errors() {
        let cfg = UnwrapConfig::new(32, 1).unwrap();
        let mut u = Unwrapper::new(cfg);
        assert_eq!(
            u.unwrap(TdcEvent {
                count: 1 << 32,
                channel: 0
            }),
            Err(UnwrapError::CountTooWide)
        );
        u.unwrap(TdcEvent {
            count: 5,
            channel: 0,
        })
        .unwrap();
        assert_eq!(
            u.unwrap(TdcEvent {
                count: 0xFFFF_FFF0,
                channel: 0
            }),
            Err(UnwrapError::BeforeStart)
        );
    }
}
