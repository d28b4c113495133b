//! Scenario files: one TOML document describes a whole simulated link (transmitter, fibre,
//! receiver optics, detectors, clocks and TDC). Every key, its unit and its range is documented in
//! `docs/scenario.md`; [`Scenario::from_toml_str`] refuses unknown keys and out-of-range values with
//! an error that names the file, the line and the key.

use serde::{Deserialize, Serialize};
use specs::{Faults, PnrSpec, SourceKind, SourceSpec};
use std::path::Path;

mod alarms;
pub mod layout;
pub mod specs;
pub use alarms::{AlarmsToml, BoundName};

/// The default scenario's text (BRIEF §6), committed as `scenarios/bench-100mhz-30km.toml`.
pub const DEFAULT_BENCH_TOML: &str = include_str!("../../scenarios/bench-100mhz-30km.toml");

/// Name under which [`Scenario::default_bench`] reports errors (the committed file's path).
pub const DEFAULT_BENCH_PATH: &str = "scenarios/bench-100mhz-30km.toml";

/// Group delay of standard single-mode fibre at 1550 nm, ps per km (group index ≈ 1.468; common
/// practice).
pub const FIBER_DELAY_PS_PER_KM: f64 = 4.9e6;

/// Uncertainty of the simulated classical-channel hello (the transmitter's slot counter announced
/// at link start) when a scenario does not state one, in seconds: the hello is off by this much
/// worth of slots.
pub const HINT_ERROR_S: f64 = 3e-4;

/// Fixed delay before slot 0 reaches the receiver when `start_offset_ps` is not given, in ps.
pub const BASE_START_OFFSET_PS: f64 = 1.0e6;

/// How the qubit is encoded, which fixes the receiver optics.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Encoding {
    /// Time-bin: arrival-time detector plus an unbalanced interferometer with two outputs.
    TimeBin,
    /// Polarization: passive basis splitter and four detectors (H, V, D, A).
    Polarization,
}

/// Which states the transmitter prepares.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Protocol {
    /// Four states, both bases with probability 1/2 (`p_z` must be 0.5).
    Bb84,
    /// Four states, Z basis with probability `p_z`.
    EfficientBb84,
    /// Z0 and Z1 with probability `p_z/2` each, X+ with `1 - p_z`.
    ThreeState,
}

fn default_afterpulse_delay_ns() -> f64 {
    1000.0
}

/// One simulated link, as read from a scenario file (units in the field names).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Scenario {
    /// Human-readable name, e.g. `bench-100mhz-30km`.
    pub name: String,
    /// Seed of every random choice in the simulation.
    pub seed: u64,
    /// Length of the run in seconds of transmitter slots.
    pub duration_s: f64,
    /// Nominal repetition rate of the transmitter, Hz.
    pub rep_rate_hz: f64,
    /// Qubit encoding (receiver optics).
    pub encoding: Encoding,
    /// Protocol (which states the transmitter prepares).
    pub protocol: Protocol,
    /// Probability of the Z basis, at the transmitter and at the receiver's passive splitter.
    pub p_z: f64,
    /// Mean photon numbers per pulse, index 0 = signal, then decoys (1..=3 entries).
    pub intensities: Vec<f64>,
    /// Probability of each intensity class (same length as `intensities`, sums to 1).
    pub intensity_probs: Vec<f64>,
    /// Fibre length, km.
    pub fiber_km: f64,
    /// Fibre attenuation, dB per km.
    pub fiber_db_per_km: f64,
    /// Further loss (attenuators, receiver optics), dB.
    pub extra_loss_db: f64,
    /// Detection efficiency of every detector, in (0, 1].
    pub detector_efficiency: f64,
    /// Dark-count rate of each detector, Hz.
    pub dark_count_hz: f64,
    /// Non-paralysable dead time of each detector, ns.
    pub dead_time_ns: f64,
    /// RMS of the Gaussian timing jitter of photon clicks, ps.
    pub jitter_ps: f64,
    /// Probability that a registered click is followed by one afterpulse.
    pub afterpulse_prob: f64,
    /// Mean of the exponential afterpulse delay, ns.
    #[serde(default = "default_afterpulse_delay_ns")]
    pub afterpulse_delay_ns: f64,
    /// Misalignment error e_d: probability that a photon's bit flips within its basis.
    pub misalignment: f64,
    /// Transmitter clock offset, ppm (positive: transmitter runs fast, shorter period).
    pub clock_offset_ppm: f64,
    /// Linear drift of the transmitter clock offset, ppm per second.
    pub clock_drift_ppm_per_s: f64,
    /// TDC counter width, bits (32..=64).
    pub tdc_bits: u8,
    /// TDC tick, ps.
    pub tdc_resolution_ps: u32,
    /// TDC counter value at true time 0, ticks (places a wrap mid-run).
    #[serde(default)]
    pub tdc_start_ticks: u64,
    /// Per-detector cable and detector skew, ps (one entry per channel; default all 0).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub channel_delays_ps: Option<Vec<i64>>,
    /// True time from the start of the capture to the start of slot 0, ps (default: 1 µs plus
    /// 4.9 µs per km of fibre).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub start_offset_ps: Option<u64>,
    /// Whether the transmitter embeds the public marker of `docs/marker.md` (default true): every
    /// 64th slot is vacuum or a Z pulse at the signal intensity, and carries no key.
    #[serde(default = "default_true")]
    pub marker: bool,
    /// Error of the simulated hello (slot hint), µs: the hint is off by this much worth of slots,
    /// and the receiver's profile states it as its bound (default 300, [`HINT_ERROR_S`]).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub hint_error_us: Option<f64>,
    /// Alarm thresholds, the `[alarms]` table (default: the board's defaults).
    #[serde(default, skip_serializing_if = "AlarmsToml::is_default")]
    pub alarms: AlarmsToml,
    /// Field faults to inject (`[faults]` table; default none), see `docs/scenario.md`.
    #[serde(default, skip_serializing_if = "Faults::is_empty")]
    pub faults: Faults,
    /// Photon-number-resolving detectors (default: threshold detectors); see `docs/scenario.md`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pnr: Option<PnrSpec>,
    /// The light source (default: an attenuated laser); see `docs/scenario.md`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub source: Option<SourceSpec>,
}

fn default_true() -> bool {
    true
}

pub use crate::tomlcheck::TomlError as ScenarioError;
use crate::tomlcheck::{Bound, Check};

use Bound::{Closed, Open};

impl Scenario {
    /// Parse and validate a scenario; `source_name` (usually the file path) names it in errors.
    pub fn from_toml_str(text: &str, source_name: &str) -> Result<Self, ScenarioError> {
        let s: Scenario = crate::tomlcheck::parse(text, source_name)?;
        s.validate_text(source_name, text)?;
        Ok(s)
    }

    /// Read, parse and validate a scenario file.
    pub fn load(path: impl AsRef<Path>) -> Result<Self, ScenarioError> {
        let path = path.as_ref();
        let name = path.display().to_string();
        let text = std::fs::read_to_string(path).map_err(|e| ScenarioError {
            source: name.clone(),
            line: None,
            column: None,
            byte: None,
            key: None,
            message: format!("cannot read: {e}"),
        })?;
        Self::from_toml_str(&text, &name)
    }

    /// The default demo scenario (BRIEF §6): 100 MHz time-bin bench link over 30 km.
    pub fn default_bench() -> Self {
        // The committed file is parsed by a unit test, so this cannot fail in a released build.
        Self::from_toml_str(DEFAULT_BENCH_TOML, DEFAULT_BENCH_PATH)
            .unwrap_or_else(|e| panic!("built-in scenario is invalid: {e}"))
    }

    /// Validate the values (ranges and consistency); errors carry `source_name` but no line.
    pub fn validate(&self, source_name: &str) -> Result<(), ScenarioError> {
        self.validate_text(source_name, "")
    }

    fn validate_text(&self, source: &str, text: &str) -> Result<(), ScenarioError> {
        let c = Check { source, text };
        if self.name.trim().is_empty() {
            return Err(c.err("name", "must not be empty"));
        }
        c.range("duration_s", self.duration_s, Open(0.0), Closed(100_000.0))?;
        c.range("rep_rate_hz", self.rep_rate_hz, Closed(1e3), Closed(1e11))?;
        if let Some(us) = self.hint_error_us {
            c.range("hint_error_us", us, Closed(0.0), Closed(1e6))?;
        }
        c.range("p_z", self.p_z, Open(0.0), Open(1.0))?;
        if self.protocol == Protocol::Bb84 && self.p_z != 0.5 {
            return Err(c.err("p_z", "protocol \"bb84\" chooses bases with p_z = 0.5"));
        }
        let n = self.intensities.len();
        if !(1..=3).contains(&n) {
            return Err(c.err("intensities", format!("needs 1..=3 entries, got {n}")));
        }
        for (i, &mu) in self.intensities.iter().enumerate() {
            if !(mu.is_finite() && (0.0..=10.0).contains(&mu)) {
                return Err(c.err(
                    "intensities",
                    format!("entry {i} must lie in [0,10] photons, got {mu}"),
                ));
            }
        }
        if self.intensities.first().is_some_and(|&mu| mu <= 0.0) {
            return Err(c.err("intensities", "entry 0 (signal) must be above 0"));
        }
        if self.intensity_probs.len() != n {
            return Err(c.err(
                "intensity_probs",
                format!(
                    "needs {n} entries (one per intensity), got {}",
                    self.intensity_probs.len()
                ),
            ));
        }
        for (i, &p) in self.intensity_probs.iter().enumerate() {
            if !(p.is_finite() && p > 0.0 && p <= 1.0) {
                return Err(c.err(
                    "intensity_probs",
                    format!("entry {i} must lie in (0,1], got {p}"),
                ));
            }
        }
        let sum: f64 = self.intensity_probs.iter().sum();
        if (sum - 1.0).abs() > 1e-9 {
            return Err(c.err("intensity_probs", format!("must sum to 1, got {sum}")));
        }
        c.range("fiber_km", self.fiber_km, Closed(0.0), Closed(1000.0))?;
        c.range(
            "fiber_db_per_km",
            self.fiber_db_per_km,
            Closed(0.0),
            Closed(10.0),
        )?;
        c.range(
            "extra_loss_db",
            self.extra_loss_db,
            Closed(0.0),
            Closed(100.0),
        )?;
        c.range(
            "detector_efficiency",
            self.detector_efficiency,
            Open(0.0),
            Closed(1.0),
        )?;
        c.range(
            "dark_count_hz",
            self.dark_count_hz,
            Closed(0.0),
            Closed(1e8),
        )?;
        c.range("dead_time_ns", self.dead_time_ns, Closed(0.0), Closed(1e6))?;
        c.range("jitter_ps", self.jitter_ps, Closed(0.0), Closed(1e5))?;
        c.range(
            "afterpulse_prob",
            self.afterpulse_prob,
            Closed(0.0),
            Open(1.0),
        )?;
        c.range(
            "afterpulse_delay_ns",
            self.afterpulse_delay_ns,
            Open(0.0),
            Closed(1e6),
        )?;
        c.range("misalignment", self.misalignment, Closed(0.0), Closed(0.5))?;
        c.range(
            "clock_offset_ppm",
            self.clock_offset_ppm,
            Closed(-1000.0),
            Closed(1000.0),
        )?;
        c.finite("clock_drift_ppm_per_s", self.clock_drift_ppm_per_s)?;
        if (self.clock_drift_ppm_per_s * self.duration_s).abs() > 1000.0 {
            return Err(c.err(
                "clock_drift_ppm_per_s",
                "drift times duration_s must stay within ±1000 ppm",
            ));
        }
        if !(32..=64).contains(&self.tdc_bits) {
            return Err(c.err(
                "tdc_bits",
                format!("must lie in 32..=64, got {}", self.tdc_bits),
            ));
        }
        if self.tdc_resolution_ps == 0 {
            return Err(c.err("tdc_resolution_ps", "must be at least 1 ps"));
        }
        let w_ps = layout::gate_half_width_ps(self);
        if f64::from(self.tdc_resolution_ps) > w_ps {
            return Err(c.err(
                "tdc_resolution_ps",
                format!("coarser than the gate half-width ({w_ps:.1} ps)"),
            ));
        }
        if self.tdc_bits < 64 && self.tdc_start_ticks >> self.tdc_bits != 0 {
            return Err(c.err(
                "tdc_start_ticks",
                "does not fit the counter width (tdc_bits)",
            ));
        }
        let end_ps = self.start_offset() + self.duration_s * 1e12 * 1.002 + 1e9;
        let end_ticks = self.tdc_start_ticks as f64 + end_ps / f64::from(self.tdc_resolution_ps);
        if end_ticks * f64::from(self.tdc_resolution_ps) >= 1.8e19 {
            return Err(c.err(
                "tdc_start_ticks",
                "counter value times resolution would overflow 64-bit picoseconds during the run",
            ));
        }
        let channels = usize::from(layout::channels(self));
        if let Some(d) = &self.channel_delays_ps {
            if d.len() != channels {
                return Err(c.err(
                    "channel_delays_ps",
                    format!(
                        "needs {channels} entries (one per detector), got {}",
                        d.len()
                    ),
                ));
            }
            if let Some(x) = d.iter().find(|x| x.unsigned_abs() > 1_000_000) {
                return Err(c.err("channel_delays_ps", format!("{x} ps exceeds ±1 µs")));
            }
        }
        self.faults
            .check(self.duration_s, layout::channels(self), self.dead_time_ns)
            .map_err(|(key, m)| c.err(key, m))?;
        if let Some(p) = &self.pnr {
            if !(1..=64).contains(&p.pixels) {
                return Err(c.err("pixels", format!("must lie in 1..=64, got {}", p.pixels)));
            }
            c.range(
                "pixel_efficiency",
                p.pixel_efficiency,
                Open(0.0),
                Closed(1.0),
            )?;
            c.range(
                "pixel_recovery_ns",
                p.pixel_recovery_ns,
                Closed(0.0),
                Closed(1e6),
            )?;
        }
        if let Some(src) = &self.source {
            if !(src.g2.is_finite() && (0.0..=1.0).contains(&src.g2)) {
                return Err(c.err("g2", format!("must lie in [0,1], got {}", src.g2)));
            }
            if let Some(w) = src.wavelength_nm {
                c.range("wavelength_nm", w, Closed(300.0), Closed(2000.0))?;
            }
            if src.kind == SourceKind::SinglePhoton {
                if let Some(mu) = self
                    .intensities
                    .iter()
                    .find(|&&mu| mu > 1.0 || mu * src.g2 > 1.0)
                {
                    return Err(c.err(
                        "intensities",
                        format!(
                            "a single-photon source needs μ ≤ 1 and μ·g2 ≤ 1 per class, got μ = {mu}"
                        ),
                    ));
                }
            }
        }
        let earliest = layout::earliest_click_offset_ps(self);
        if self.start_offset() + earliest < 0.0 {
            return Err(c.err(
                "start_offset_ps",
                "too small: the earliest skewed, jittered click of slot 0 would precede time 0",
            ));
        }
        self.alarm_config_text(source, text)?;
        Ok(())
    }

    /// Error of the simulated hello, s: `hint_error_us`, or [`HINT_ERROR_S`]. The scenario's
    /// profile states it as the hint's bound (`[marker] hint_error_us`).
    pub fn hint_error_s(&self) -> f64 {
        self.hint_error_us.map_or(HINT_ERROR_S, |us| us / 1e6)
    }

    /// Length of one live-statistics block (and of the time series' buckets): a fiftieth of the
    /// run, at least 1 µs, in s.
    pub fn monitor_block_s(&self) -> f64 {
        (self.duration_s / 50.0).max(1e-6)
    }

    /// True time from the start of the capture to the start of slot 0, ps.
    pub fn start_offset(&self) -> f64 {
        match self.start_offset_ps {
            Some(ps) => ps as f64,
            None => BASE_START_OFFSET_PS + FIBER_DELAY_PS_PER_KM * self.fiber_km,
        }
    }

    /// Nominal slot period, ps.
    pub fn period_ps(&self) -> f64 {
        1e12 / self.rep_rate_hz
    }

    /// Number of slots sent: `floor(duration_s · rep_rate_hz)`.
    pub fn slots(&self) -> u64 {
        (self.duration_s * self.rep_rate_hz).floor() as u64
    }

    /// Total channel loss (fibre plus extra), dB.
    pub fn loss_db(&self) -> f64 {
        self.fiber_km * self.fiber_db_per_km + self.extra_loss_db
    }

    /// Overall transmittance η = detector_efficiency · 10^(−loss/10) (dimensionless); with
    /// photon-number-resolving detectors the efficiency per pixel takes the detector's place.
    pub fn eta(&self) -> f64 {
        let eff = self
            .pnr
            .map_or(self.detector_efficiency, |p| p.pixel_efficiency);
        eff * 10f64.powf(-self.loss_db() / 10.0)
    }

    /// Per-detector skews, ps (zeros when not configured).
    pub fn delays_ps(&self) -> Vec<i64> {
        self.channel_delays_ps
            .clone()
            .unwrap_or_else(|| vec![0; usize::from(layout::channels(self))])
    }

    /// Serialise back to TOML text.
    pub fn to_toml_string(&self) -> String {
        toml::to_string(self).unwrap_or_default()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn default_bench_matches_the_brief() {
        let s = Scenario::default_bench();
        assert_eq!(s.name, "bench-100mhz-30km");
        assert_eq!(s.rep_rate_hz, 100e6);
        assert_eq!(s.encoding, Encoding::TimeBin);
        assert_eq!(s.protocol, Protocol::ThreeState);
        assert_eq!(s.intensities, vec![0.5, 0.15]);
        assert_eq!(s.intensity_probs, vec![0.7, 0.3]);
        assert_eq!(s.p_z, 0.9);
        assert_eq!(s.loss_db(), 14.0);
        assert_eq!((s.detector_efficiency, s.dead_time_ns), (0.8, 40.0));
        assert_eq!((s.dark_count_hz, s.jitter_ps), (100.0, 35.0));
        assert_eq!((s.afterpulse_prob, s.misalignment), (0.005, 0.01));
        assert_eq!((s.clock_offset_ppm, s.clock_drift_ppm_per_s), (37.0, 0.02));
        assert_eq!((s.tdc_bits, s.tdc_resolution_ps), (48, 1));
        assert_eq!(s.duration_s, 0.5);
    }

    #[test]
    fn committed_scenarios_parse() {
        let dir = concat!(env!("CARGO_MANIFEST_DIR"), "/../scenarios");
        let mut n = 0;
        for entry in std::fs::read_dir(dir).unwrap() {
            let p = entry.unwrap().path();
            if p.extension().is_some_and(|e| e == "toml") {
                Scenario::load(&p).unwrap_or_else(|e| panic!("{e}"));
                n += 1;
            }
        }
        assert!(n >= 3, "{n} scenario files");
    }

    #[test]
    fn hint_error_defaults_to_300_us_and_is_range_checked() {
        let s = Scenario::default_bench();
        assert_eq!(s.hint_error_us, None);
        assert_eq!(s.hint_error_s(), 3e-4);
        let text = DEFAULT_BENCH_TOML.replace("p_z = 0.9", "p_z = 0.9\nhint_error_us = 10.0");
        let s = Scenario::from_toml_str(&text, "x.toml").unwrap();
        assert_eq!(s.hint_error_s(), 1e-5);
        let text = DEFAULT_BENCH_TOML.replace("p_z = 0.9", "p_z = 0.9\nhint_error_us = -1.0");
        let msg = Scenario::from_toml_str(&text, "x.toml")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("key 'hint_error_us'"), "{msg}");
    }

    #[test]
    fn out_of_range_value_names_file_line_and_key() {
        let text = DEFAULT_BENCH_TOML.replace("p_z = 0.9", "p_z = 1.5");
        let e = Scenario::from_toml_str(&text, "scenarios/x.toml").unwrap_err();
        let msg = e.to_string();
        assert!(msg.starts_with("scenarios/x.toml: line "), "{msg}");
        assert!(msg.contains("key 'p_z': must lie in (0,1)"), "{msg}");
        let line = text.lines().position(|l| l.starts_with("p_z")).unwrap() + 1;
        assert_eq!(e.line, Some(line));
    }

    #[test]
    fn unknown_key_is_refused_with_its_line() {
        let text = format!("{DEFAULT_BENCH_TOML}\ncolour = \"blue\"\n");
        let e = Scenario::from_toml_str(&text, "a.toml").unwrap_err();
        assert!(e.message.contains("unknown field"), "{e}");
        assert_eq!(e.line, Some(text.lines().count()), "{e}");
        assert_eq!(e.key.as_deref(), Some("colour"), "{e}");
    }

    #[test]
    fn missing_key_is_named() {
        let text: String = DEFAULT_BENCH_TOML
            .lines()
            .filter(|l| !l.starts_with("seed"))
            .map(|l| format!("{l}\n"))
            .collect();
        let e = Scenario::from_toml_str(&text, "c.toml").unwrap_err();
        assert_eq!(e.to_string(), "c.toml: key 'seed': missing field `seed`");
    }

    #[test]
    fn wrong_type_names_the_key() {
        let text = DEFAULT_BENCH_TOML.replace("tdc_bits = 48", "tdc_bits = \"wide\"");
        let e = Scenario::from_toml_str(&text, "b.toml").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("tdc_bits"), "{e}");
    }

    #[test]
    fn consistency_checks() {
        let base = Scenario::default_bench();
        let bad = |f: &dyn Fn(&mut Scenario), key: &str| {
            let mut s = base.clone();
            f(&mut s);
            let e = s.validate("t").unwrap_err();
            assert_eq!(e.key.as_deref(), Some(key), "{e}");
        };
        bad(&|s| s.intensity_probs = vec![0.7, 0.2], "intensity_probs");
        bad(&|s| s.intensity_probs = vec![1.0], "intensity_probs");
        bad(&|s| s.intensities = vec![], "intensities");
        bad(&|s| s.intensities = vec![0.0, 0.1], "intensities");
        bad(&|s| s.protocol = Protocol::Bb84, "p_z");
        bad(&|s| s.tdc_bits = 31, "tdc_bits");
        bad(&|s| s.tdc_start_ticks = 1 << 48, "tdc_start_ticks");
        bad(
            &|s| s.channel_delays_ps = Some(vec![0, 0]),
            "channel_delays_ps",
        );
        bad(&|s| s.tdc_resolution_ps = 1000, "tdc_resolution_ps");
        bad(&|s| s.duration_s = f64::NAN, "duration_s");
        bad(&|s| s.clock_drift_ppm_per_s = 1e4, "clock_drift_ppm_per_s");
        assert!(base.validate("t").is_ok());
    }

    const FAULTS_TOML: &str = r#"
[faults.merge]
reorder_ps = 2000.0
duplicate_prob = 0.01

[[faults.blackout]]
from_s = 0.1
duration_s = 1.0

[[faults.phase_jump]]
at_s = 0.2
slots = 0.37

[[faults.frequency_step]]
at_s = 0.3
ppm = 2.0

[[faults.drift_ramp]]
from_s = 0.1
duration_s = 0.2
ppm_per_s = 0.1

[[faults.saturation]]
channel = 0
from_s = 0.1
duration_s = 0.2
rate_hz = 1e9

[[faults.afterpulse_storm]]
from_s = 0.1
duration_s = 0.2
prob = 0.2

[[faults.stray_channel]]
channel = 7
rate_hz = 1000.0
"#;

    #[test]
    fn faults_parse_and_round_trip() {
        let text = format!("{DEFAULT_BENCH_TOML}{FAULTS_TOML}");
        let s = Scenario::from_toml_str(&text, "f.toml").unwrap();
        let f = &s.faults;
        assert_eq!(f.blackout.len(), 1);
        assert_eq!(f.phase_jump[0].slots, 0.37);
        assert_eq!(f.saturation[0].rate_hz, 1e9);
        assert_eq!(f.merge.map(|m| m.reorder_ps), Some(2000.0));
        let back = Scenario::from_toml_str(&s.to_toml_string(), "rt").unwrap();
        assert_eq!(back, s);
    }

    #[test]
    fn bad_fault_names_its_table_and_line() {
        let text =
            format!("{DEFAULT_BENCH_TOML}{FAULTS_TOML}").replace("channel = 7", "channel = 1");
        let e = Scenario::from_toml_str(&text, "f.toml").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("faults.stray_channel"), "{e}");
        let line = text
            .lines()
            .position(|l| l == "[[faults.stray_channel]]")
            .unwrap()
            + 1;
        assert_eq!(e.line, Some(line), "{e}");
        assert!(e.message.contains("is a detector"), "{e}");
        let text = format!("{DEFAULT_BENCH_TOML}{FAULTS_TOML}").replace("prob = 0.2", "prob = 1.2");
        let e = Scenario::from_toml_str(&text, "f.toml").unwrap_err();
        assert_eq!(e.key.as_deref(), Some("faults.afterpulse_storm"), "{e}");
    }

    #[test]
    fn round_trips_through_toml() {
        let s = Scenario::default_bench();
        let back = Scenario::from_toml_str(&s.to_toml_string(), "rt").unwrap();
        assert_eq!(back, s);
    }
}
