//! The board file: what the whole receiver needs beside [`crate::Setup`] — the recovered clock's
//! settings, the classical channel's numbering hint, the link endpoint's timeouts, and the
//! live-statistics monitor with its alarm thresholds — in a fixed layout with a CRC.
//!
//! Layout (all integers little-endian, fixed-point values as their raw bits):
//!
//! | offset | size | field |
//! |---|---|---|
//! | 0 | 4 | magic `SWHB` |
//! | 4 | 1 | version, 3 |
//! | 5 | 8 | acquire: nominal period ps, Q32.32 |
//! | 13 | 4 | acquire: prior ppm |
//! | 17 | 4 | acquire: first stage, detections |
//! | 21 | 1 | acquire: stages |
//! | 22 | 4 | acquire: confirmation batch, detections |
//! | 26 | 4 | acquire: fit half-window, Q0.32 slot fraction |
//! | 30 | 4 | acquire: work units per detection |
//! | 34 | 4 | acquire: drift range of the chirp search, ppb/s (0: constant-frequency fold) |
//! | 38 | 4 | track: loop bandwidth mHz |
//! | 42 | 4 | track: damping, thousandths |
//! | 46 | 8 | track: signal rate per s |
//! | 54 | 4 | track: window half-width, Q0.32 slot fraction |
//! | 58 | 1 | track: average shift |
//! | 59 | 8 | track: blackout ps |
//! | 67 | 4 | track: max rms, Q0.32 slot fraction |
//! | 71 | 4 | track: wide-gear bandwidth factor |
//! | 75 | 4 | track: drift allowance, ppb/s |
//! | 79 | 4 | track: least holdover frequency uncertainty, ppt |
//! | 83 | 4 | reacquisition prior ppm |
//! | 87 | 8 | hint: receiver time ps |
//! | 95 | 8 | hint: transmitter slot |
//! | 103 | 8 | link: answer timeout, slots |
//! | 111 | 8 | link: batch flush age, slots |
//! | 119 | 8 | monitor: block length ps |
//! | 127 | 8 | monitor: detector dead time ps |
//! | 135 | 4 | alarms: QBER ceiling ppm |
//! | 139 | 1 | alarms: bound, 0 = Wilson, 1 = Hoeffding |
//! | 140 | 8 | alarms: Wilson z (Q16.16) or Hoeffding 1/ε |
//! | 148 | 8 | alarms: tested bits before the QBER alarm speaks |
//! | 156 | 1 | alarms: intensity class watched |
//! | 157 | 4 | alarms: rate floor ppm |
//! | 161 | 4 | alarms: saturation ppm |
//! | 165 | 4 | CRC-32/ISCSI over every byte before it |

use crate::setup::{Reader, SetupError, Writer};
use core::fmt;
use slotwise::acquire::AcquireConfigError;
use slotwise::alarms::AlarmConfigError;
use slotwise::bounds::Epsilon;
use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::frame::FrameError as AlignConfigError;
use slotwise::recovered::RecoveredConfigError;
use slotwise::stats::StatsConfigError;
use slotwise::track::TrackConfigError;
use slotwise::wire::LinkConfigError;
use slotwise::{
    AcquireConfig, AcquireParams, AlarmConfig, BoundKind, GateTable, LinkConfig, RecoveredConfig,
    StatsConfig, TrackConfig, TrackParams,
};

/// File magic.
pub const BOARD_MAGIC: [u8; 4] = *b"SWHB";
/// Board file format version.
pub const BOARD_VERSION: u8 = 3;
/// Bytes of a board file.
pub const BOARD_LEN: usize = 169;

/// Why a board file could not be read, or its settings were refused by the core.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BoardError {
    /// Layout: truncated, bad field, CRC, trailing bytes, buffer too small.
    Layout(SetupError),
    /// Acquisition settings refused.
    Acquire(AcquireConfigError),
    /// Tracking settings refused.
    Track(TrackConfigError),
    /// Recovered-clock settings refused.
    Recovered(RecoveredConfigError),
    /// Link settings refused.
    Link(LinkConfigError),
    /// Monitor settings refused.
    Stats(StatsConfigError),
    /// Alarm thresholds refused.
    Alarms(AlarmConfigError),
    /// Marker alignment settings refused.
    Frame(AlignConfigError),
}

impl fmt::Display for BoardError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Layout(e) => write!(f, "board file: {e}"),
            Self::Acquire(e) => write!(f, "board file acquire fields: {e}"),
            Self::Track(e) => write!(f, "board file track fields: {e}"),
            Self::Recovered(e) => write!(f, "board file clock fields: {e}"),
            Self::Link(e) => write!(f, "board file link fields: {e}"),
            Self::Stats(e) => write!(f, "board file monitor fields: {e}"),
            Self::Alarms(e) => write!(f, "board file alarm fields: {e}"),
            Self::Frame(e) => write!(f, "marker alignment: {e}"),
        }
    }
}

impl core::error::Error for BoardError {}

impl From<SetupError> for BoardError {
    fn from(e: SetupError) -> Self {
        Self::Layout(e)
    }
}

/// Settings of the whole receiver beside the [`crate::Setup`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct BoardSettings {
    /// Clock acquisition from a cold start.
    pub acquire: AcquireParams,
    /// Tracking after the lock.
    pub track: TrackParams,
    /// Prior of a reacquisition around the last good period, ppm.
    pub reacquire_ppm: u32,
    /// The classical channel's hint: receiver time in ps on the core's time base.
    pub hint_t_ps: u64,
    /// The classical channel's hint: the transmitter's slot counter at `hint_t_ps`.
    pub hint_tx_slot: u64,
    /// Link endpoint timeouts.
    pub link: LinkConfig,
    /// Monitor block length, ps of receiver time.
    pub block_ps: u64,
    /// Detector dead time, ps.
    pub dead_time_ps: u64,
    /// Alarm thresholds.
    pub alarms: AlarmConfig,
}

impl BoardSettings {
    /// The recovered clock's validated settings.
    pub fn recovered_config(&self) -> Result<RecoveredConfig, BoardError> {
        let a = AcquireConfig::new(self.acquire).map_err(BoardError::Acquire)?;
        let t = TrackConfig::new(self.track).map_err(BoardError::Track)?;
        RecoveredConfig::new(a, t, self.reacquire_ppm).map_err(BoardError::Recovered)
    }

    /// The monitor's settings for the gate table `gates`.
    pub fn stats_config(&self, gates: &GateTable) -> Result<StatsConfig, BoardError> {
        StatsConfig::new(self.block_ps, self.dead_time_ps, gates).map_err(BoardError::Stats)
    }

    /// Write the board file into `out`; returns its length ([`BOARD_LEN`]).
    pub fn encode(&self, out: &mut [u8]) -> Result<usize, BoardError> {
        let mut w = Writer {
            out,
            at: 0,
            ok: true,
        };
        let (a, t, al) = (&self.acquire, &self.track, &self.alarms);
        w.put(&BOARD_MAGIC);
        w.put(&[BOARD_VERSION]);
        w.put(&a.nominal_period_ps.to_bits().to_le_bytes());
        w.put(&a.prior_ppm.to_le_bytes());
        w.put(&a.first_stage.to_le_bytes());
        w.put(&[a.stages]);
        w.put(&a.confirm.to_le_bytes());
        w.put(&a.fit_half_window.to_bits().to_le_bytes());
        w.put(&a.work_per_call.to_le_bytes());
        w.put(&a.drift_ppb_per_s.to_le_bytes());
        w.put(&t.bandwidth_mhz.to_le_bytes());
        w.put(&t.damping_milli.to_le_bytes());
        w.put(&t.rate_per_s.to_le_bytes());
        w.put(&t.window.to_bits().to_le_bytes());
        w.put(&[t.average_shift]);
        w.put(&t.blackout_ps.to_le_bytes());
        w.put(&t.max_rms.to_bits().to_le_bytes());
        w.put(&t.wide_factor.to_le_bytes());
        w.put(&t.drift_ppb_per_s.to_le_bytes());
        w.put(&t.hold_ppt.to_le_bytes());
        w.put(&self.reacquire_ppm.to_le_bytes());
        w.put(&self.hint_t_ps.to_le_bytes());
        w.put(&self.hint_tx_slot.to_le_bytes());
        w.put(&self.link.answer_timeout_slots().to_le_bytes());
        w.put(&self.link.flush_age_slots().to_le_bytes());
        w.put(&self.block_ps.to_le_bytes());
        w.put(&self.dead_time_ps.to_le_bytes());
        w.put(&al.qber_ceiling_ppm().to_le_bytes());
        let (kind, param) = match al.bound() {
            BoundKind::Wilson { z_q16 } => (0u8, u64::from(z_q16)),
            BoundKind::Hoeffding(eps) => (1u8, eps.inverse()),
        };
        w.put(&[kind]);
        w.put(&param.to_le_bytes());
        w.put(&al.min_tested().to_le_bytes());
        w.put(&[al.intensity()]);
        w.put(&al.rate_floor_ppm().to_le_bytes());
        w.put(&al.saturation_ppm().to_le_bytes());
        Ok(w.seal()?)
    }

    /// Read and validate a board file.
    pub fn decode(bytes: &[u8]) -> Result<Self, BoardError> {
        let mut r = Reader { bytes, at: 0 };
        r.header(BOARD_MAGIC, BOARD_VERSION, ["magic", "version"])?;
        let mut acquire = AcquireParams::new(U32F32::from_bits(r.u64("acquire.period")?), 0);
        acquire.prior_ppm = r.u32("acquire.prior_ppm")?;
        acquire.first_stage = r.u32("acquire.first_stage")?;
        acquire.stages = r.u8("acquire.stages")?;
        acquire.confirm = r.u32("acquire.confirm")?;
        acquire.fit_half_window = U0F32::from_bits(r.u32("acquire.fit_half_window")?);
        acquire.work_per_call = r.u32("acquire.work_per_call")?;
        acquire.drift_ppb_per_s = r.u32("acquire.drift_ppb_per_s")?;
        let mut track = TrackParams::new(r.u32("track.bandwidth_mhz")?, 0, 0);
        track.damping_milli = r.u32("track.damping_milli")?;
        track.rate_per_s = r.u64("track.rate_per_s")?;
        track.window = U0F32::from_bits(r.u32("track.window")?);
        track.average_shift = r.u8("track.average_shift")?;
        track.blackout_ps = r.u64("track.blackout_ps")?;
        track.max_rms = U0F32::from_bits(r.u32("track.max_rms")?);
        track.wide_factor = r.u32("track.wide_factor")?;
        track.drift_ppb_per_s = r.u32("track.drift_ppb_per_s")?;
        track.hold_ppt = r.u32("track.hold_ppt")?;
        let reacquire_ppm = r.u32("reacquire_ppm")?;
        let hint_t_ps = r.u64("hint.t_ps")?;
        let hint_tx_slot = r.u64("hint.tx_slot")?;
        let timeout = r.u64("link.answer_timeout_slots")?;
        let flush_age = r.u64("link.flush_age_slots")?;
        let link = LinkConfig::new(timeout, flush_age).map_err(BoardError::Link)?;
        let block_ps = r.u64("monitor.block_ps")?;
        let dead_time_ps = r.u64("monitor.dead_time_ps")?;
        let ceiling = r.u32("alarms.qber_ceiling_ppm")?;
        let kind = r.u8("alarms.bound")?;
        let param = r.u64("alarms.bound_param")?;
        let bound = match kind {
            0 => BoundKind::Wilson {
                z_q16: u32::try_from(param).map_err(|_| r.bad(8, "alarms.bound_param"))?,
            },
            1 => BoundKind::Hoeffding(
                Epsilon::one_in(param)
                    .map_err(|e| BoardError::Alarms(AlarmConfigError::Bound(e)))?,
            ),
            _ => return Err(r.bad(9, "alarms.bound").into()),
        };
        let min_tested = r.u64("alarms.min_tested")?;
        let intensity = r.u8("alarms.intensity")?;
        let rate_floor = r.u32("alarms.rate_floor_ppm")?;
        let saturation = r.u32("alarms.saturation_ppm")?;
        let alarms = AlarmConfig::new(
            ceiling, bound, min_tested, intensity, rate_floor, saturation,
        )
        .map_err(BoardError::Alarms)?;
        r.crc_end("crc")?;
        let s = Self {
            acquire,
            track,
            reacquire_ppm,
            hint_t_ps,
            hint_tx_slot,
            link,
            block_ps,
            dead_time_ps,
            alarms,
        };
        s.recovered_config()?;
        Ok(s)
    }
}
