//! Receiver profiles: one TOML document describes a real receiver — its TDC, the transmitter's
//! nominal clock, protocol and intensity classes, channels, gate windows, marker, sifting and
//! alarms — so a capture from any hardware replays without a simulated scenario.
//!
//! Every key, its unit and its range is in `docs/receiver-profile.md`. [`Profile::from_toml_str`]
//! refuses unknown keys; [`Profile::check`] turns the values into the core's own configurations
//! through their constructors, and every refusal names the file, the line and the key (dotted,
//! e.g. `gates[2].half_width_slot`) and the range that was expected. The simulator's receiver is
//! one producer of profiles ([`Profile::from_scenario`]).

use crate::scenario::{AlarmsToml, Protocol};
use crate::tomlcheck::{self, Bound, Check, TomlError};
use serde::{Deserialize, Serialize};
use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::frame::{
    FrameConfig, MarkerSpec, DEFAULT_CONFIRM_BITS, DEFAULT_MONITOR_BITS, DEFAULT_NOISE_SHARE,
    DEFAULT_SEARCH_BITS,
};
use slotwise::gates::{GateError, MAX_CHANNELS, MAX_INTENSITIES};
use slotwise::timestamps::UnwrapConfigError;
use slotwise::{
    AlarmConfig, Basis, FixedClock, Gate, GateTable, OverflowPolicy, ReceiverConfig, StatsConfig,
    UnwrapConfig,
};
use std::path::Path;

mod draw;
mod from_scenario;
pub use draw::{gate_layout_svg, gate_layout_text};

/// Seed of the squashing rule when a profile does not set one.
pub const DEFAULT_SQUASH_SEED: u64 = 0x5351_5541_5348;

/// Pending-queue length the host replays with (a board may hold fewer).
pub const HOST_PENDING: usize = 4096;

/// One receiver, as read from a profile file (units in the field names).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Profile {
    /// Human-readable name of the receiver.
    pub name: String,
    /// Detectors that resolve photon numbers: the channel byte's upper bits carry a level.
    #[serde(default)]
    pub photon_levels: bool,
    /// The time-to-digital converter.
    pub tdc: TdcToml,
    /// The transmitter's clock as the receiver expects it.
    pub clock: ClockToml,
    /// What the transmitter prepares.
    pub protocol: ProtocolToml,
    /// Detector channels, numbered 0.. in TDC channel order.
    pub channels: Vec<ChannelToml>,
    /// Gate windows: where in the slot a click on a channel stands for a basis and bit.
    pub gates: Vec<GateToml>,
    /// The public marker (`docs/marker.md`).
    #[serde(default)]
    pub marker: MarkerToml,
    /// Sifting settings.
    #[serde(default)]
    pub sifting: SiftingToml,
    /// Live-statistics settings.
    #[serde(default)]
    pub monitor: MonitorToml,
    /// Alarm thresholds (as a scenario's `[alarms]` table).
    #[serde(default, skip_serializing_if = "AlarmsToml::is_default")]
    pub alarms: AlarmsToml,
}

/// The `[tdc]` table.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TdcToml {
    /// Counter width, bits (32..=64); the counter wraps modulo 2^bits and the core unwraps it.
    pub counter_bits: u8,
    /// Counter tick, ps (≥ 1).
    pub tick_ps: u32,
}

/// The `[clock]` table.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ClockToml {
    /// Nominal repetition rate of the transmitter, Hz.
    pub rep_rate_hz: f64,
    /// Prior on the period for recovery: nominal ± this many ppm (1..=1000).
    #[serde(default = "default_prior_ppm")]
    pub prior_ppm: u32,
    /// Expected in-gate signal detections per second (sets the tracking loop's bandwidth).
    pub signal_rate_hz: f64,
    /// RMS timing jitter of a click, ps.
    #[serde(default)]
    pub jitter_ps: f64,
    /// Drift of the transmitter's clock the loop must follow, ppm per second.
    #[serde(default)]
    pub drift_ppm_per_s: f64,
    /// A distributed reference clock, when the link has one (`--clock reference`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reference: Option<ReferenceToml>,
}

fn default_prior_ppm() -> u32 {
    500
}

/// The `[clock.reference]` table: the slot grid on the capture's unwrapped time base.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ReferenceToml {
    /// Slot period, ps.
    pub period_ps: f64,
    /// Start of slot 0 on the core's time base (ticks since the first event's counter value
    /// times the tick, plus that value times the tick), ps.
    pub slot0_ps: u64,
}

/// The `[protocol]` table.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ProtocolToml {
    /// Which states the transmitter prepares.
    pub kind: Protocol,
    /// Probability of the Z basis (for the key-rate estimate; informative).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub p_z: Option<f64>,
    /// Mean photon numbers of the intensity classes, index 0 = signal (1..=3 entries).
    pub intensities: Vec<f64>,
    /// Probability of each class (same length; informative).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub intensity_probs: Vec<f64>,
}

/// One `[[channels]]` entry.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChannelToml {
    /// TDC channel number (0-based, in order).
    pub channel: u8,
    /// Name shown in reports.
    pub name: String,
    /// Cable and detector skew the core subtracts, ps (±1 µs).
    #[serde(default)]
    pub delay_ps: i64,
    /// Non-paralysable dead time of the detector, ns.
    #[serde(default)]
    pub dead_time_ns: f64,
}

/// Basis of a gate, as written in a profile.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum BasisToml {
    /// The Z (key) basis.
    Z,
    /// The X (test) basis.
    X,
}

impl From<BasisToml> for Basis {
    fn from(b: BasisToml) -> Self {
        match b {
            BasisToml::Z => Basis::Z,
            BasisToml::X => Basis::X,
        }
    }
}

impl From<Basis> for BasisToml {
    fn from(b: Basis) -> Self {
        match b {
            Basis::Z => BasisToml::Z,
            Basis::X => BasisToml::X,
        }
    }
}

/// One `[[gates]]` entry: a window centre and half-width, each in slot fractions or in ps.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct GateToml {
    /// TDC channel.
    pub channel: u8,
    /// Window centre, fraction of the slot in [0, 1).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub centre_slot: Option<f64>,
    /// Window centre, ps after the slot start.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub centre_ps: Option<f64>,
    /// Half-width, fraction of the slot in (0, 0.5].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub half_width_slot: Option<f64>,
    /// Half-width, ps.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub half_width_ps: Option<f64>,
    /// Basis the window measures.
    pub basis: BasisToml,
    /// Bit the window stands for (0 or 1).
    pub bit: u8,
}

/// The `[marker]` table.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct MarkerToml {
    /// Whether the transmitter embeds the public marker (required by the recovered clock).
    pub enabled: bool,
    /// Slots between marker slots (a power of two, 8..=4096).
    pub spacing_slots: u64,
    /// Register length of the inner sequence.
    pub inner_degree: u8,
    /// Register length of the outer sequence (0: none).
    pub outer_degree: u8,
    /// Stated error bound of the hello (the slot hint), ± µs; absent: unknown (full search).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hint_error_us: Option<f64>,
}

impl Default for MarkerToml {
    fn default() -> Self {
        let s = MarkerSpec::standard();
        Self {
            enabled: true,
            spacing_slots: s.spacing(),
            inner_degree: slotwise::frame::INNER_DEGREE,
            outer_degree: slotwise::frame::OUTER_DEGREE,
            hint_error_us: None,
        }
    }
}

/// How the pending queue treats a new slot when it is full.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum OverflowToml {
    /// Keep the waiting entries; drop the new slot.
    DropNewest,
    /// Drop the oldest waiting entry.
    DropOldest,
}

impl OverflowToml {
    /// The core's policy.
    pub fn policy(self) -> OverflowPolicy {
        match self {
            Self::DropNewest => OverflowPolicy::DropNewest,
            Self::DropOldest => OverflowPolicy::DropOldest,
        }
    }
}

/// The `[sifting]` table.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct SiftingToml {
    /// Slots after which an unanswered detection expires (default: 10 ms of slots).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub answer_timeout_slots: Option<u64>,
    /// The same in milliseconds (give one of the two).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub answer_timeout_ms: Option<f64>,
    /// Pending-queue length of the board (the host replays with [`HOST_PENDING`]).
    pub pending_capacity: usize,
    /// What a full queue drops.
    pub overflow: OverflowToml,
    /// Seed of the squashing rule for multi-clicks.
    pub squash_seed: u64,
}

impl Default for SiftingToml {
    fn default() -> Self {
        Self {
            answer_timeout_slots: None,
            answer_timeout_ms: None,
            pending_capacity: HOST_PENDING,
            overflow: OverflowToml::DropNewest,
            squash_seed: DEFAULT_SQUASH_SEED,
        }
    }
}

/// The `[monitor]` table.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct MonitorToml {
    /// Length of one statistics block, s.
    pub block_s: f64,
}

impl Default for MonitorToml {
    fn default() -> Self {
        Self { block_s: 0.01 }
    }
}

/// A gate window as slot fractions `[lo, hi)`.
pub type Window = (f64, f64);

/// A profile turned into the core's configurations.
#[derive(Clone, Debug, PartialEq)]
pub struct Checked {
    /// The receiver (answer timeout of the profile).
    pub receiver: ReceiverConfig,
    /// The marker, when enabled.
    pub marker: Option<MarkerSpec>,
    /// The numbering stage's settings, when the marker is enabled.
    pub frame: Option<FrameConfig>,
    /// The monitor's block and dead time.
    pub stats: StatsConfig,
    /// The alarm thresholds.
    pub alarms: AlarmConfig,
    /// The reference clock, when the profile has one.
    pub reference: Option<FixedClock>,
    /// Each gate's window as slot fractions `[lo, hi)` after clipping to the slot.
    pub windows: Vec<Window>,
}

impl Profile {
    /// Parse and check a profile; `source` (usually the file path) names it in errors.
    pub fn from_toml_str(text: &str, source: &str) -> Result<(Self, Checked), TomlError> {
        let p: Profile = tomlcheck::parse(text, source)?;
        let checked = p.check_text(source, text)?;
        Ok((p, checked))
    }

    /// Read, parse and check a profile file.
    pub fn load(path: &Path) -> Result<(Self, Checked), TomlError> {
        let (text, name) = tomlcheck::read(path)?;
        Self::from_toml_str(&text, &name)
    }

    /// The profile as TOML text (round-trips through [`Profile::from_toml_str`]).
    pub fn to_toml_string(&self) -> String {
        toml::to_string(self).unwrap_or_else(|e| panic!("a profile always serializes: {e}"))
    }

    /// Nominal slot period, ps.
    pub fn period_ps(&self) -> f64 {
        1e12 / self.clock.rep_rate_hz
    }

    /// Check the values without the text (errors carry `source` but no line).
    pub fn check(&self, source: &str) -> Result<Checked, TomlError> {
        self.check_text(source, "")
    }

    fn check_text(&self, source: &str, text: &str) -> Result<Checked, TomlError> {
        let c = Check { source, text };
        if self.name.trim().is_empty() {
            return Err(c.err("name", "must not be empty"));
        }
        let tdc = UnwrapConfig::new(self.tdc.counter_bits, self.tdc.tick_ps).map_err(|e| {
            let key = match e {
                UnwrapConfigError::CounterBits(_) => "tdc.counter_bits",
                UnwrapConfigError::ZeroResolution => "tdc.tick_ps",
            };
            c.err(
                key,
                format!("{e} (expected counter_bits in 32..=64, tick_ps ≥ 1)"),
            )
        })?;
        let k = &self.clock;
        c.range(
            "clock.rep_rate_hz",
            k.rep_rate_hz,
            Bound::Closed(1e3),
            Bound::Closed(1e11),
        )?;
        if !(1..=1000).contains(&k.prior_ppm) {
            return Err(c.err(
                "clock.prior_ppm",
                format!("must lie in 1..=1000, got {}", k.prior_ppm),
            ));
        }
        c.range(
            "clock.signal_rate_hz",
            k.signal_rate_hz,
            Bound::Open(0.0),
            Bound::Closed(1e11),
        )?;
        c.range(
            "clock.jitter_ps",
            k.jitter_ps,
            Bound::Closed(0.0),
            Bound::Closed(1e5),
        )?;
        c.range(
            "clock.drift_ppm_per_s",
            k.drift_ppm_per_s,
            Bound::Closed(-1000.0),
            Bound::Closed(1000.0),
        )?;
        let period = self.period_ps();
        if f64::from(self.tdc.tick_ps) * 4.0 > period {
            return Err(c.err(
                "tdc.tick_ps",
                format!(
                    "{} ps is coarser than a quarter of the {period:.1} ps slot",
                    self.tdc.tick_ps
                ),
            ));
        }
        let reference = match &k.reference {
            None => None,
            Some(r) => {
                let q = U32F32::checked_from_num(r.period_ps).ok_or_else(|| {
                    c.err(
                        "clock.reference.period_ps",
                        "out of range (2 ps .. 2^31 ps)",
                    )
                })?;
                Some(FixedClock::new(q, r.slot0_ps).map_err(|e| {
                    c.err(
                        "clock.reference.period_ps",
                        format!("{e} (expected 2 ps .. 2^31 ps)"),
                    )
                })?)
            }
        };
        self.check_protocol(&c)?;
        let delays = self.check_channels(&c)?;
        let (gates, windows) = self.gate_list(&c)?;
        let table = GateTable::new(&delays, &gates).map_err(|e| gate_error(&c, &self.gates, e))?;
        let table = if self.photon_levels {
            table.with_photon_levels()
        } else {
            table
        };
        let s = &self.sifting;
        let timeout = match (s.answer_timeout_slots, s.answer_timeout_ms) {
            (Some(_), Some(_)) => {
                return Err(c.err(
                    "sifting.answer_timeout_ms",
                    "give answer_timeout_slots or answer_timeout_ms, not both",
                ))
            }
            (Some(n), None) => n,
            (None, ms) => {
                let ms = ms.unwrap_or(10.0);
                c.range(
                    "sifting.answer_timeout_ms",
                    ms,
                    Bound::Open(0.0),
                    Bound::Closed(1e6),
                )?;
                (k.rep_rate_hz * ms * 1e-3).max(1.0) as u64
            }
        };
        if s.pending_capacity == 0 || s.pending_capacity > HOST_PENDING {
            return Err(c.err(
                "sifting.pending_capacity",
                format!("must lie in 1..={HOST_PENDING}, got {}", s.pending_capacity),
            ));
        }
        let overflow = s.overflow.policy();
        let n_int = self.protocol.intensities.len() as u8;
        let receiver = ReceiverConfig::new(tdc, table, n_int, timeout, overflow, s.squash_seed)
            .map_err(|e| c.err("sifting.answer_timeout_slots", e.to_string()))?;
        let (marker, frame) = self.check_marker(&c)?;
        c.range(
            "monitor.block_s",
            self.monitor.block_s,
            Bound::Closed(1e-6),
            Bound::Closed(3600.0),
        )?;
        let stats = StatsConfig::new(
            (self.monitor.block_s * 1e12).max(1.0) as u64,
            (self.dead_time_ns() * 1e3).round() as u64,
            &table,
        )
        .map_err(|e| c.err("monitor.block_s", e.to_string()))?;
        let alarms = self.alarms.config(self.protocol.intensities.len(), &c)?;
        Ok(Checked {
            receiver,
            marker,
            frame,
            stats,
            alarms,
            reference,
            windows,
        })
    }

    /// The longest dead time of any channel, ns (what the monitor's dead fraction uses).
    pub fn dead_time_ns(&self) -> f64 {
        self.channels
            .iter()
            .map(|ch| ch.dead_time_ns)
            .fold(0.0, f64::max)
    }

    fn check_protocol(&self, c: &Check) -> Result<(), TomlError> {
        let p = &self.protocol;
        let n = p.intensities.len();
        if !(1..=MAX_INTENSITIES).contains(&n) {
            return Err(c.err(
                "protocol.intensities",
                format!("needs 1..={} entries, got {n}", MAX_INTENSITIES),
            ));
        }
        for (i, &mu) in p.intensities.iter().enumerate() {
            if !(mu.is_finite() && (0.0..=10.0).contains(&mu)) {
                return Err(c.err(
                    "protocol.intensities",
                    format!("entry {i} must lie in [0,10] photons, got {mu}"),
                ));
            }
        }
        if !p.intensity_probs.is_empty() {
            if p.intensity_probs.len() != n {
                return Err(c.err(
                    "protocol.intensity_probs",
                    format!("needs {n} entries, got {}", p.intensity_probs.len()),
                ));
            }
            let sum: f64 = p.intensity_probs.iter().sum();
            if p.intensity_probs.iter().any(|&x| !(0.0..=1.0).contains(&x))
                || (sum - 1.0).abs() > 1e-9
            {
                return Err(c.err(
                    "protocol.intensity_probs",
                    format!("must be probabilities summing to 1, got sum {sum}"),
                ));
            }
        }
        if let Some(pz) = p.p_z {
            c.range("protocol.p_z", pz, Bound::Open(0.0), Bound::Open(1.0))?;
        }
        Ok(())
    }

    /// Per-channel delays, indexed by channel; channels must be 0.. in order.
    fn check_channels(&self, c: &Check) -> Result<Vec<i64>, TomlError> {
        if self.channels.is_empty() {
            return Err(c.err("channels", "needs at least one [[channels]] entry"));
        }
        if self.channels.len() > MAX_CHANNELS {
            return Err(c.err("channels", format!("at most {} channels", MAX_CHANNELS)));
        }
        let mut delays = Vec::new();
        for (i, ch) in self.channels.iter().enumerate() {
            if usize::from(ch.channel) != i {
                return Err(c.err(
                    &format!("channels[{i}].channel"),
                    format!(
                        "channels are numbered 0.. in order: entry {i} must be channel {i}, got \
                         {} (remap the TDC's channel numbers with `slotwise import \
                         --channel-map`)",
                        ch.channel
                    ),
                ));
            }
            if ch.delay_ps.unsigned_abs() > 1_000_000 {
                return Err(c.err(
                    &format!("channels[{i}].delay_ps"),
                    format!("{} ps exceeds ±1 µs", ch.delay_ps),
                ));
            }
            c.range(
                &format!("channels[{i}].dead_time_ns"),
                ch.dead_time_ns,
                Bound::Closed(0.0),
                Bound::Closed(1e6),
            )?;
            delays.push(ch.delay_ps);
        }
        Ok(delays)
    }

    /// The core's gates and each window as clipped slot fractions.
    fn gate_list(&self, c: &Check) -> Result<(Vec<Gate>, Vec<Window>), TomlError> {
        if self.gates.is_empty() {
            return Err(c.err("gates", "needs at least one [[gates]] entry"));
        }
        let period = self.period_ps();
        let mut out = Vec::new();
        let mut windows = Vec::new();
        for (i, g) in self.gates.iter().enumerate() {
            let key = |k: &str| format!("gates[{i}].{k}");
            if usize::from(g.channel) >= self.channels.len() {
                return Err(c.err(
                    &key("channel"),
                    format!(
                        "channel {} is not described (the profile has channels 0..={})",
                        g.channel,
                        self.channels.len() - 1
                    ),
                ));
            }
            if g.bit > 1 {
                return Err(c.err(&key("bit"), format!("must be 0 or 1, got {}", g.bit)));
            }
            let centre = match (g.centre_slot, g.centre_ps) {
                (Some(f), None) => f,
                (None, Some(ps)) => ps / period,
                _ => {
                    return Err(c.err(
                        &format!("gates[{i}]"),
                        "give exactly one of centre_slot and centre_ps",
                    ))
                }
            };
            let w = match (g.half_width_slot, g.half_width_ps) {
                (Some(f), None) => f,
                (None, Some(ps)) => ps / period,
                _ => {
                    return Err(c.err(
                        &format!("gates[{i}]"),
                        "give exactly one of half_width_slot and half_width_ps",
                    ))
                }
            };
            let ckey = key(if g.centre_slot.is_some() {
                "centre_slot"
            } else {
                "centre_ps"
            });
            if !(centre.is_finite() && (0.0..1.0).contains(&centre)) {
                return Err(c.err(
                    &ckey,
                    format!(
                        "the centre must lie within the slot [0, {period:.1} ps), got {:.1} ps",
                        centre * period
                    ),
                ));
            }
            let wkey = key(if g.half_width_slot.is_some() {
                "half_width_slot"
            } else {
                "half_width_ps"
            });
            if !(w.is_finite() && w > 0.0) {
                return Err(c.err(&wkey, "the half-width must be above 0"));
            }
            if w > 0.5 {
                return Err(c.err(
                    &wkey,
                    format!(
                        "the window ({:.1} ps wide) is wider than the {period:.1} ps slot",
                        2.0 * w * period
                    ),
                ));
            }
            let (lo, hi) = ((centre - w).max(0.0), (centre + w).min(1.0));
            windows.push((lo, hi));
            out.push(Gate {
                channel: g.channel,
                start: U0F32::saturating_from_num(lo),
                end: if hi >= 1.0 {
                    U0F32::MAX
                } else {
                    U0F32::saturating_from_num(hi)
                },
                basis: g.basis.into(),
                bit: g.bit,
            });
        }
        Ok((out, windows))
    }

    fn check_marker(
        &self,
        c: &Check,
    ) -> Result<(Option<MarkerSpec>, Option<FrameConfig>), TomlError> {
        let m = &self.marker;
        if !m.enabled {
            return Ok((None, None));
        }
        let outer = (m.outer_degree != 0).then_some(m.outer_degree);
        let spec = MarkerSpec::new(m.spacing_slots, m.inner_degree, outer).map_err(|e| {
            let key = match e {
                slotwise::frame::FrameError::Spacing(_) => "marker.spacing_slots",
                slotwise::frame::FrameError::Degree("outer_degree", _) => "marker.outer_degree",
                _ => "marker.inner_degree",
            };
            c.err(key, e.to_string())
        })?;
        let frame = FrameConfig::new(
            spec,
            DEFAULT_SEARCH_BITS,
            DEFAULT_CONFIRM_BITS,
            DEFAULT_MONITOR_BITS,
            DEFAULT_NOISE_SHARE,
        )
        .map_err(|e| c.err("marker", e.to_string()))?;
        let hint_error_slots = match m.hint_error_us {
            None => None,
            Some(us) if us.is_finite() && (0.0..=1e9).contains(&us) => {
                Some((us * 1e-6 * self.clock.rep_rate_hz).ceil() as u64)
            }
            Some(us) => {
                return Err(c.err(
                    "marker.hint_error_us",
                    format!("{us}: must be a number of µs in 0 ..= 1e9"),
                ))
            }
        };
        let frame = frame.with_hint_error_slots(hint_error_slots);
        Ok((Some(spec), Some(frame)))
    }
}

/// A gate-table refusal, named by the profile's keys.
fn gate_error(c: &Check, gates: &[GateToml], e: GateError) -> TomlError {
    match e {
        GateError::Overlap(a, b) => {
            let ch = gates.get(b).map_or(0, |g| g.channel);
            c.err(
                &format!("gates[{b}]"),
                format!(
                    "overlaps gates[{a}] on channel {ch}: windows on one channel must not overlap"
                ),
            )
        }
        GateError::EmptyWindow(i) => c.err(&format!("gates[{i}]"), e.to_string()),
        GateError::BadBit(i) => c.err(&format!("gates[{i}].bit"), e.to_string()),
        GateError::TooManyGates => c.err("gates", e.to_string()),
        GateError::ChannelOutOfRange(ch) => c.err("channels", format!("channel {ch}: {e}")),
        GateError::Empty => c.err("gates", e.to_string()),
    }
}

#[cfg(test)]
mod tests;
