//! The simulated link's true slot grid on the core's time base: what a reference clock would
//! give, and what the recovered clock is checked against.

use super::Simulator;
use crate::scenario::Scenario;
use slotwise::fixed::types::U32F32;
use slotwise::FixedClock;
use std::fmt;

/// Why the true clock cannot be expressed on the core's time base.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ClockTruthError {
    /// The counter wrapped between slot 0 and the first event: slot 0 starts before the time base.
    SlotZeroBeforeTimeBase,
    /// The period lies outside what the core's clock accepts.
    PeriodOutOfRange,
}

impl fmt::Display for ClockTruthError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::SlotZeroBeforeTimeBase => write!(
                f,
                "the TDC counter wraps between slot 0 and the first event; move tdc_start_ticks"
            ),
            Self::PeriodOutOfRange => write!(f, "slot period outside 2 ps ..= 2^31 ps"),
        }
    }
}

impl std::error::Error for ClockTruthError {}

/// Where the transmitter's slot grid lies on the time base the core builds from a capture.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ClockTruth {
    /// Slot period at slot 0, ps (offset included, drift not).
    pub period_ps: f64,
    /// Start of slot 0 on the core's unwrapped time base (first event's raw count taken as-is,
    /// times the resolution), ps.
    pub origin_ps_unwrapped: u64,
    /// Start of slot 0 in true time since the capture start, ps.
    pub origin_true_ps: f64,
    /// Raw counter value of the first event, if there is one.
    pub first_count: Option<u64>,
    /// Counter wraps before the first event.
    pub wraps_before_first: u64,
    period_q32: U32F32,
}

impl ClockTruth {
    /// The core's fixed clock for this grid (exact for drift 0; with drift the grid walks away
    /// by ½·drift·t² of a slot).
    pub fn fixed_clock(&self) -> FixedClock {
        FixedClock::new(self.period_q32, self.origin_ps_unwrapped)
            .unwrap_or_else(|e| panic!("period checked when the truth was built: {e}"))
    }
}

/// The true slot grid on the core's time base for this scenario's capture.
///
/// The core's unwrapper starts from the first event's raw count, so the base is the unbounded tick
/// count minus the wraps that happened before the first event; this runs the simulator up to its
/// first event to find them.
pub fn clock_truth(s: &Scenario) -> Result<ClockTruth, ClockTruthError> {
    let mut sim = Simulator::new(s);
    let first = sim.next_event();
    let bits = u32::from(s.tdc_bits);
    let res = i128::from(s.tdc_resolution_ps);
    let (first_count, wraps) = match first {
        Some(e) => (Some(e.event.count), sim.ticks(e.truth.true_t_ps) >> bits),
        None => (None, 0),
    };
    let origin_true_ps = sim.clock().start_ps();
    let base_ticks = i128::from(s.tdc_start_ticks) - ((wraps as i128) << bits);
    let origin = base_ticks * res + origin_true_ps.round() as i128;
    let origin_ps_unwrapped =
        u64::try_from(origin).map_err(|_| ClockTruthError::SlotZeroBeforeTimeBase)?;
    let period_ps = sim.clock().initial_period_ps();
    let period_q32 =
        U32F32::checked_from_num(period_ps).ok_or(ClockTruthError::PeriodOutOfRange)?;
    FixedClock::new(period_q32, origin_ps_unwrapped)
        .map_err(|_| ClockTruthError::PeriodOutOfRange)?;
    Ok(ClockTruth {
        period_ps,
        origin_ps_unwrapped,
        origin_true_ps,
        first_count,
        wraps_before_first: wraps as u64,
        period_q32,
    })
}
