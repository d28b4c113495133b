//! The clock the host hands to the core: the reference clock of a scenario (links with a
//! distributed reference) or the clock recovered from the detections, configured from the
//! scenario's hardware by the documented rules of the core's acquisition and tracking stages.

use crate::scenario::Scenario;
use crate::sim;
use serde::Serialize;
use slotwise::acquire::{AcquireConfig, AcquireParams};
use slotwise::fixed::types::U32F32;
use slotwise::recovered::{RecoveredClock, RecoveredConfig};
use slotwise::track::{bandwidth_for_mhz, LockState, TrackConfig, TrackParams};
use slotwise::{Clock, FixedClock, GateTable, Located};

/// The recovered clock's shape on the host: 2048 stored detections, 8 candidates, Z²_2.
pub type HostRecovered = RecoveredClock<2048, 8, 2>;

/// Which clock the receiver uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, Default)]
pub enum ClockMode {
    /// Recover period and phase from the detections alone (default).
    #[default]
    Recovered,
    /// Use the scenario's true clock at the start of the run (a distributed reference).
    Reference,
}

/// The clock stage as the host runs it.
#[derive(Debug)]
pub enum HostClock {
    /// Fixed by configuration.
    Reference(FixedClock),
    /// Recovered from the data.
    Recovered(Box<HostRecovered>),
}

impl Clock for HostClock {
    fn locate(&mut self, t_ps: u64) -> Located {
        match self {
            Self::Reference(c) => c.locate(t_ps),
            Self::Recovered(c) => c.locate(t_ps),
        }
    }

    fn locate_on(&mut self, channel: u8, t_ps: u64) -> Located {
        match self {
            Self::Reference(c) => c.locate_on(channel, t_ps),
            Self::Recovered(c) => c.locate_on(channel, t_ps),
        }
    }
}

/// Lock figures for the summary.
#[derive(Clone, Debug, Default, Serialize, PartialEq)]
pub struct LockReport {
    /// Whether the clock was ever acquired.
    pub acquired: bool,
    /// Detections taken in before the first lock.
    pub after_detections: Option<u64>,
    /// Receiver time of the first lock, seconds since the first detection.
    pub after_s: Option<f64>,
    /// Losses of lock.
    pub losses: u32,
    /// Locks regained after a loss.
    pub relocks: u32,
    /// Relocks whose gap was bridged without losing the slot numbering.
    pub bridged: u32,
    /// Final lock state.
    pub state: String,
}

impl HostClock {
    /// The period the clock uses now, in ps (`None` while not locked).
    pub fn period_ps(&self) -> Option<f64> {
        match self {
            Self::Reference(c) => Some(c.period_ps().to_num()),
            Self::Recovered(c) => c.period_ps().map(|p| p.to_num()),
        }
    }

    /// Whether the clock gives slots now.
    pub fn locked(&self) -> bool {
        match self {
            Self::Reference(_) => true,
            Self::Recovered(c) => c.state() == LockState::Locked,
        }
    }

    /// Lock counters (a reference clock is always locked).
    pub fn counters(&self) -> (u32, u32, u32, String) {
        match self {
            Self::Reference(_) => (0, 0, 0, "reference".into()),
            Self::Recovered(c) => {
                let k = c.counters();
                (
                    k.losses,
                    k.relocks,
                    k.bridged,
                    format!("{:?}", c.state()).to_lowercase(),
                )
            }
        }
    }
}

/// Expected rate of in-gate signal detections per second, from the channel model.
pub fn signal_rate_per_s(s: &Scenario) -> f64 {
    let m = sim::channel_model(s);
    let gain: f64 = m.intensities.iter().map(|i| i.prob * i.gain).sum();
    (gain - m.y0).max(1e-12) * s.rep_rate_hz
}

/// Build the scenario's clock in the chosen mode.
///
/// Recovered mode: prior ±`prior_ppm` around the nominal period; loop bandwidth from the core's
/// rule ([`bandwidth_for_mhz`]) with the expected signal rate, a drift allowance of
/// max(|drift|, 0.1 ppm/s), and σ² = jitter² + the window's uniform-noise share; blackout after
/// the longer of 1 ms and 50 expected detections.
pub fn build(
    s: &Scenario,
    gates: &GateTable,
    mode: ClockMode,
    prior_ppm: u32,
) -> Result<HostClock, Box<dyn std::error::Error>> {
    match mode {
        ClockMode::Reference => Ok(HostClock::Reference(sim::clock_truth(s)?.fixed_clock())),
        ClockMode::Recovered => {
            let period = s.period_ps();
            let mut a = AcquireParams::new(U32F32::from_num(period), prior_ppm);
            a.work_per_call = 4096;
            let rate = signal_rate_per_s(s);
            let drift_ppb = (s.clock_drift_ppm_per_s.abs() * 1e3).max(100.0) as u64;
            let w = 1.0 / 16.0;
            let window_sigma2 = 2.0 * w * (w * period).powi(2) / 3.0;
            let sigma = (s.jitter_ps.powi(2) + window_sigma2).sqrt().max(1.0) as u64;
            let rate_u = rate.max(1.0) as u64;
            let b = bandwidth_for_mhz(rate_u, drift_ppb, sigma, 707).min(rate_u * 100) as u32;
            let blackout_ps = (1e9_f64).max(50.0 / rate * 1e12) as u64;
            let t = TrackParams::new(b.max(1), rate_u, blackout_ps);
            let cfg = RecoveredConfig::new(AcquireConfig::new(a)?, TrackConfig::new(t)?, 20)?;
            let pattern = slotwise::acquire::fold::ArrivalPattern::from_gates(gates);
            Ok(HostClock::Recovered(Box::new(HostRecovered::new(
                cfg, pattern,
            )?)))
        }
    }
}
