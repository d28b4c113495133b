//! The clock the host hands to the core: the reference clock of a scenario (links with a
//! distributed reference) or the clock recovered from the detections, configured from the
//! scenario's hardware by the documented rules of the core's acquisition and tracking stages.

use crate::profile::{Checked, ClockToml, Profile};
use crate::scenario::Scenario;
use crate::sim;
use serde::Serialize;
use slotwise::acquire::{AcquireConfig, AcquireParams};
use slotwise::fixed::types::U32F32;
use slotwise::recovered::{LockCounters, RecoveredClock, RecoveredConfig};
use slotwise::track::{bandwidth_for_mhz, LockState, TrackConfig, TrackCounters, TrackParams};
use slotwise::{
    Absolute, FixedClock, GateTable, Located, MarkerNumbering, Numbered, Numbering, SlotClock,
};

/// The recovered clock's shape on the host: 2048 stored detections, 8 candidates, Z²_2.
pub type HostRecovered = RecoveredClock<2048, 8, 2>;

pub use crate::scenario::HINT_ERROR_S;

/// Which clock the receiver uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, Default)]
pub enum ClockMode {
    /// Recover period and phase from the detections alone (default).
    #[default]
    Recovered,
    /// Use the scenario's true clock at the start of the run (a distributed reference).
    Reference,
}

/// The slot clock as the host runs it.
#[derive(Clone, Debug)]
pub enum HostClock {
    /// Fixed by configuration (a distributed reference): numbers slots as the transmitter does.
    Reference(FixedClock),
    /// Recovered from the data.
    Recovered(Box<HostRecovered>),
}

impl SlotClock for HostClock {
    fn locate(&self, t_ps: u64) -> Located {
        match self {
            Self::Reference(c) => c.locate(t_ps),
            Self::Recovered(c) => c.locate(t_ps),
        }
    }

    #[inline]
    fn observe(&mut self, channel: u8, t_ps: u64) -> Located {
        match self {
            Self::Reference(c) => c.observe(channel, t_ps),
            Self::Recovered(c) => c.observe(channel, t_ps),
        }
    }

    fn is_locked(&self) -> bool {
        match self {
            Self::Reference(c) => c.is_locked(),
            Self::Recovered(c) => c.is_locked(),
        }
    }

    fn epoch(&self) -> u32 {
        match self {
            Self::Reference(c) => c.epoch(),
            Self::Recovered(c) => c.epoch(),
        }
    }

    fn renumbered_within(&self) -> Option<u64> {
        match self {
            Self::Reference(c) => c.renumbered_within(),
            Self::Recovered(c) => c.renumbered_within(),
        }
    }

    fn slot_at(&self, t_ps: u64) -> Option<u64> {
        match self {
            Self::Reference(c) => c.slot_at(t_ps),
            Self::Recovered(c) => c.slot_at(t_ps),
        }
    }
}

/// The clock and the numbering stage of one host receiver.
#[derive(Clone, Debug)]
pub struct ClockStages {
    /// The slot clock.
    pub clock: HostClock,
    /// The numbering stage.
    pub numbering: HostNumbering,
}

impl ClockStages {
    /// A receiver of configuration `cfg` on these stages, with a pending queue of `P` slots.
    pub fn receiver<const P: usize>(
        self,
        cfg: slotwise::ReceiverConfig,
    ) -> Box<slotwise::Receiver<HostClock, P, HostNumbering>> {
        Box::new(slotwise::Receiver::with_numbering(
            cfg,
            self.clock,
            self.numbering,
        ))
    }
}

/// The numbering stage as the host runs it.
#[derive(Clone, Debug)]
pub enum HostNumbering {
    /// The clock's numbers are the transmitter's; marker slots (when the scenario has a marker)
    /// are excluded.
    Absolute(Absolute),
    /// Aligned to the transmitter's numbering by the public marker and a coarse hint.
    Marker(Box<MarkerNumbering>),
}

impl Numbering for HostNumbering {
    #[inline]
    fn number<C: SlotClock + ?Sized>(
        &mut self,
        clock: &C,
        slot: u64,
        z_bit: Option<u8>,
    ) -> Numbered {
        match self {
            Self::Absolute(n) => n.number(clock, slot, z_bit),
            Self::Marker(n) => n.number(clock, slot, z_bit),
        }
    }

    fn hint<C: SlotClock + ?Sized>(&mut self, clock: &C, t_ps: u64, tx_slot: u64) {
        match self {
            Self::Absolute(n) => n.hint(clock, t_ps, tx_slot),
            Self::Marker(n) => n.hint(clock, t_ps, tx_slot),
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
    /// Holdovers: the lock's averages failed, the model was extrapolated and no slot given.
    pub holdovers: u32,
    /// Holdovers that ended with the arrivals where the prediction put them (numbers kept).
    pub holdovers_bridged: u32,
    /// Holdovers that ended on a phase jump of the arrivals, taken without losing the lock.
    pub jumps: u32,
    /// Times the tracking loop shifted to its wide gear (on a large mean error, or to pull in
    /// after a lock or a holdover).
    pub wide_gear: u32,
    /// Times a channel was set aside by its health check (blinded, saturated).
    pub channels_set_aside: u32,
    /// Detections given no slot because their channel was set aside (counted `no_clock`).
    pub set_aside_detections: u64,
    /// Final lock state.
    pub state: String,
    /// Marker alignment of the slot numbering: `aligned`, `searching`, `confirming`,
    /// `awaiting-hint`, `misaligned`, or `reference` (numbering given by the clock).
    pub numbering: String,
    /// Alignment restarts after the first (new clock epochs, misalignments).
    pub realignments: u32,
    /// Gated detections numbered until the offset in use was established (`None`: not aligned
    /// on the marker).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub aligned_after_detections: Option<u64>,
    /// What established it: `hint-window` (a bounded hint and few detections) or `search`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub aligned_by: Option<String>,
    /// The numbering's confidence: the test that established the offset accepts a wrong one
    /// with probability at most 2^−this (given its assumptions, `docs/marker.md`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub wrong_offset_log2_bound: Option<u8>,
    /// Per channel: delay correction measured from the data since the latest lock, ps (relative
    /// to the loop; `null` where the channel had too few detections).
    pub delay_corrections_ps: Vec<Option<i64>>,
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

    /// Whether the clock is in holdover now.
    pub fn holding(&self) -> bool {
        matches!(self, Self::Recovered(c) if c.state() == LockState::Holdover)
    }

    /// Holdovers, bridged holdovers and phase jumps so far (zero for a reference clock).
    pub fn holdover_counts(&self) -> (u32, u32, u32) {
        match self {
            Self::Reference(_) => (0, 0, 0),
            Self::Recovered(c) => {
                let k = c.counters();
                (k.holdovers, k.holdovers_bridged, k.jumps)
            }
        }
    }

    /// The latest holdover's end: the arrivals' offset from the prediction and the bound then,
    /// slots.
    pub fn last_resume(&self) -> Option<(f64, f64)> {
        match self {
            Self::Reference(_) => None,
            Self::Recovered(c) => match c.last_event() {
                Some(slotwise::track::TrackEvent::Resumed {
                    phase_q32,
                    bound_q32,
                    ..
                }) => Some((
                    f64::from(*phase_q32) / 4_294_967_296.0,
                    *bound_q32 as f64 / 4_294_967_296.0,
                )),
                _ => None,
            },
        }
    }

    /// Lock counters (a reference clock is always locked).
    pub fn counters(&self) -> (LockCounters, TrackCounters, String) {
        match self {
            Self::Reference(..) => (
                LockCounters::default(),
                TrackCounters::default(),
                "reference".into(),
            ),
            Self::Recovered(c) => (
                *c.counters(),
                c.tracker().counters(),
                format!("{:?}", c.state()).to_lowercase(),
            ),
        }
    }
}

/// Prior (ppm) of a narrow reacquisition around the last good period, after a loss.
pub const REACQUIRE_PPM: u32 = 20;

/// The recovered clock's settings for a scenario's hardware (its profile's `[clock]`, see
/// [`recovered_params_for`]).
pub fn recovered_params(s: &Scenario, prior_ppm: u32) -> (AcquireParams, TrackParams) {
    recovered_params_for(&ClockToml::of_scenario(s), prior_ppm)
}

/// The recovered clock's settings for a receiver's `[clock]` table.
///
/// Prior ±`prior_ppm` around the nominal period; loop bandwidth from the core's rule
/// ([`bandwidth_for_mhz`]) with the expected signal rate, a drift allowance of
/// max(|drift|, 0.1 ppm/s), and σ² = jitter² + the window's uniform-noise share; blackout after
/// the longer of 1 ms and 50 expected detections; a drift allowance for holdover of twice the
/// profile's drift (at least 0.1 ppm/s). The acquisition's drift range is the
/// profile's |drift| (no chirp search when it is 0).
pub fn recovered_params_for(k: &ClockToml, prior_ppm: u32) -> (AcquireParams, TrackParams) {
    let period = 1e12 / k.rep_rate_hz;
    let mut a = AcquireParams::new(U32F32::from_num(period), prior_ppm);
    a.work_per_call = 4096;
    // The acquisition folds along a chirp up to the profile's drift (rounded up to whole ppb/s;
    // the core's limit is 10 ppm/s); a clock without drift keeps the constant-frequency fold.
    a.drift_ppb_per_s = (k.drift_ppm_per_s.abs() * 1e3).ceil().min(10_000.0) as u32;
    let rate = k.signal_rate_hz;
    let drift_ppb = (k.drift_ppm_per_s.abs() * 1e3).max(100.0) as u64;
    let w = 1.0 / 16.0;
    let window_sigma2 = 2.0 * w * (w * period).powi(2) / 3.0;
    let sigma = (k.jitter_ps.powi(2) + window_sigma2).sqrt().max(1.0) as u64;
    let rate_u = rate.max(1.0) as u64;
    let b = bandwidth_for_mhz(rate_u, drift_ppb, sigma, 707).min(rate_u * 100) as u32;
    let blackout_ps = (1e9_f64).max(50.0 / rate * 1e12) as u64;
    let mut t = TrackParams::new(b.max(1), rate_u, blackout_ps);
    // Holdover extrapolates with the measured drift, bounded by twice the profile's (at least
    // 0.1 ppm/s).
    t.drift_ppb_per_s = (2.0 * k.drift_ppm_per_s.abs() * 1e3).clamp(100.0, 1e6) as u32;
    (a, t)
}

/// Build the scenario's clock and numbering in the chosen mode, as for its profile
/// ([`Profile::from_scenario`], [`build_for`]).
pub fn build(
    s: &Scenario,
    gates: &GateTable,
    mode: ClockMode,
    prior_ppm: u32,
) -> Result<ClockStages, Box<dyn std::error::Error>> {
    let p = Profile::from_scenario(s);
    let checked = p.check(&s.name)?;
    build_for(&p, &checked, gates, mode, prior_ppm)
}

/// Build a receiver's clock and numbering in the chosen mode. Recovered:
/// [`recovered_params_for`], numbered by the marker. Reference: the profile's
/// `[clock.reference]`, marker slots (when there is a marker) excluded.
pub fn build_for(
    p: &Profile,
    checked: &Checked,
    gates: &GateTable,
    mode: ClockMode,
    prior_ppm: u32,
) -> Result<ClockStages, Box<dyn std::error::Error>> {
    match mode {
        ClockMode::Reference => {
            let Some(clock) = checked.reference else {
                return Err(format!(
                    "'{}': --clock reference needs the reference slot grid ([clock.reference] \
                     with period_ps and slot0_ps in the profile)",
                    p.name
                )
                .into());
            };
            Ok(ClockStages {
                clock: HostClock::Reference(clock),
                numbering: HostNumbering::Absolute(match checked.marker {
                    Some(m) => Absolute::with_marker(m),
                    None => Absolute::new(),
                }),
            })
        }
        ClockMode::Recovered => {
            let (a, t) = recovered_params_for(&p.clock, prior_ppm);
            let cfg =
                RecoveredConfig::new(AcquireConfig::new(a)?, TrackConfig::new(t)?, REACQUIRE_PPM)?;
            let Some(frame) = checked.frame else {
                return Err(format!(
                    "'{}': the recovered clock needs the public marker to number slots as the \
                     transmitter does ([marker] enabled = true in a profile, marker = true in a \
                     scenario), or use --clock reference",
                    p.name
                )
                .into());
            };
            let pattern = slotwise::acquire::fold::ArrivalPattern::from_gates(gates);
            let clock = HostRecovered::new(cfg, pattern)?;
            Ok(ClockStages {
                clock: HostClock::Recovered(Box::new(clock)),
                numbering: HostNumbering::Marker(Box::new(MarkerNumbering::new(frame)?)),
            })
        }
    }
}

/// The simulated hello message of the classical channel: a receiver time (on the core's time
/// base) and the transmitter's slot counter then, off by [`Scenario::hint_error_s`] worth of slots (the
/// edge of its stated bound).
pub fn simulated_hint(s: &Scenario) -> Result<(u64, u64), Box<dyn std::error::Error>> {
    let truth = sim::clock_truth(s)?;
    let t_ps = truth.origin_ps_unwrapped.saturating_add(1_000_000_000);
    let slots = (t_ps - truth.origin_ps_unwrapped) as f64 / truth.period_ps;
    let error = s.hint_error_s() * s.rep_rate_hz;
    Ok((t_ps, (slots + error).max(0.0) as u64))
}

impl HostClock {
    /// Per-channel delay corrections measured since the latest lock (recovered clock only).
    pub fn delay_corrections_ps(&self, channels: u8) -> Vec<Option<i64>> {
        match self {
            Self::Reference(..) => Vec::new(),
            Self::Recovered(c) => c
                .delay_corrections_ps()
                .iter()
                .take(usize::from(channels))
                .copied()
                .collect(),
        }
    }
}

impl HostNumbering {
    /// Whether detections get the transmitter's absolute slot numbers now.
    pub fn aligned(&self) -> bool {
        match self {
            Self::Absolute(_) => true,
            Self::Marker(n) => n.aligned(),
        }
    }

    /// Gated detections until the offset in use was established, and by which test.
    pub fn aligned_after(&self) -> Option<(u64, &'static str)> {
        self.alignment().map(|(d, by, _)| (d, by))
    }

    /// Gated detections until the offset in use was established, by which test, and that
    /// test's bound on a wrong offset (bits: probability ≤ 2^−bits).
    pub fn alignment(&self) -> Option<(u64, &'static str, u8)> {
        match self {
            Self::Absolute(_) => None,
            Self::Marker(n) => {
                let cfg = n.aligner().config();
                n.aligned_after().map(|(d, w)| {
                    if w {
                        (d, "hint-window", cfg.window_bits())
                    } else {
                        (d, "search", cfg.confirm_bits())
                    }
                })
            }
        }
    }

    /// How the slot numbering stands, and how often it was re-established.
    pub fn state(&self) -> (String, u32) {
        use slotwise::AlignState as A;
        match self {
            Self::Absolute(_) => ("reference".into(), 0),
            Self::Marker(n) => {
                let s = match n.aligner().state() {
                    A::Searching { .. } => "searching",
                    A::Confirming { .. } => "confirming",
                    A::AwaitingHint { .. } => "awaiting-hint",
                    A::Aligned { .. } => "aligned",
                    A::Misaligned { .. } => "misaligned",
                };
                (s.into(), n.realignments())
            }
        }
    }
}
