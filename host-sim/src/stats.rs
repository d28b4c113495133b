//! Live statistics on the host: the core's [`Monitor`] as the replay session runs it, the exact
//! Clopper-Pearson interval beside the board's fixed-point bounds, and the table and JSON object
//! of the summary.
//!
//! Clopper-Pearson (Biometrika 26, 404, 1934): the interval of p for k successes in n trials whose
//! binomial tails are each α/2 — lower = B⁻¹(α/2; k, n − k + 1), upper = B⁻¹(1 − α/2; k + 1, n − k),
//! B⁻¹ the inverse of the regularised incomplete beta function I_x(a, b). I_x comes from its
//! continued fraction evaluated by the modified Lentz method (Press, Teukolsky, Vetterling,
//! Flannery, *Numerical Recipes*, 3rd ed., §6.4; Lentz, Applied Optics 15, 668, 1976), ln Γ from
//! the Lanczos approximation (SIAM J. Numer. Anal. B 1, 86, 1964; g = 7, nine terms), and the
//! inverse by bisection, which cannot fail on a monotone function.

use serde::Serialize;
use slotwise::alarms::{AlarmEvent, AlarmKind, BoundKind};
use slotwise::bounds::{hoeffding_upper_ppm, Epsilon};
use slotwise::formats::RecordType;
use slotwise::stats::{Snapshot, DEFAULT_BLOCKS};
use slotwise::{Basis, Counts, IngestFault, Monitor};
use std::collections::BTreeMap;

pub use crate::normal::{normal_isf, normal_upper_tail};

/// The monitor the host runs: the board's default window.
pub type HostMonitor = Monitor<DEFAULT_BLOCKS>;

/// ln Γ(x) for x > 0 (Lanczos, g = 7, n = 9; relative error about 1e-15).
pub fn ln_gamma(x: f64) -> f64 {
    const G: f64 = 7.0;
    const C: [f64; 9] = [
        0.999_999_999_999_809_9,
        676.520_368_121_885_1,
        -1_259.139_216_722_402_8,
        771.323_428_777_653_1,
        -176.615_029_162_140_6,
        12.507_343_278_686_905,
        -0.138_571_095_265_720_12,
        9.984_369_578_019_572e-6,
        1.505_632_735_149_311_6e-7,
    ];
    if x < 0.5 {
        // Reflection: Γ(x)Γ(1 − x) = π / sin(πx).
        return (std::f64::consts::PI / (std::f64::consts::PI * x).sin()).ln() - ln_gamma(1.0 - x);
    }
    let x = x - 1.0;
    let mut a = C[0];
    let t = x + G + 0.5;
    for (i, c) in C.iter().enumerate().skip(1) {
        a += c / (x + i as f64);
    }
    0.5 * (2.0 * std::f64::consts::PI).ln() + (x + 0.5) * t.ln() - t + a.ln()
}

/// One-sided ε of the QBER alarm's bound: 1/`one_in` for Hoeffding; for Wilson the ε its Q16.16
/// z stands for, Q(z), to three significant digits (the z rounding moves ε in the fifth).
pub fn bound_epsilon(b: BoundKind) -> f64 {
    match b {
        BoundKind::Hoeffding(e) => 1.0 / e.inverse() as f64,
        BoundKind::Wilson { z_q16 } => {
            let q = normal_upper_tail(f64::from(z_q16) / 65536.0);
            let unit = 10f64.powf(q.log10().floor() - 2.0);
            (q / unit).round() * unit
        }
    }
}

/// Continued fraction of I_x(a, b) (modified Lentz).
fn beta_cf(a: f64, b: f64, x: f64) -> f64 {
    const TINY: f64 = 1e-300;
    let (qab, qap, qam) = (a + b, a + 1.0, a - 1.0);
    let mut c = 1.0;
    let mut d = 1.0 - qab * x / qap;
    if d.abs() < TINY {
        d = TINY;
    }
    d = 1.0 / d;
    let mut h = d;
    for m in 1..=10_000 {
        let m = f64::from(m);
        let m2 = 2.0 * m;
        for aa in [
            m * (b - m) * x / ((qam + m2) * (a + m2)),
            -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2)),
        ] {
            d = 1.0 + aa * d;
            if d.abs() < TINY {
                d = TINY;
            }
            c = 1.0 + aa / c;
            if c.abs() < TINY {
                c = TINY;
            }
            d = 1.0 / d;
            h *= d * c;
        }
        if (d * c - 1.0).abs() < 1e-16 {
            break;
        }
    }
    h
}

/// Regularised incomplete beta function I_x(a, b), a, b > 0, x in [0, 1].
pub fn inc_beta(a: f64, b: f64, x: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    if x >= 1.0 {
        return 1.0;
    }
    let ln_front = ln_gamma(a + b) - ln_gamma(a) - ln_gamma(b) + a * x.ln() + b * (-x).ln_1p();
    let front = ln_front.exp();
    // The fraction converges fast for x < (a + 1)/(a + b + 2); use the symmetry beyond.
    if x < (a + 1.0) / (a + b + 2.0) {
        front * beta_cf(a, b, x) / a
    } else {
        1.0 - front * beta_cf(b, a, 1.0 - x) / b
    }
}

/// The x with I_x(a, b) = p, by bisection to the last bit (p in [0, 1]).
pub fn inv_inc_beta(p: f64, a: f64, b: f64) -> f64 {
    let (mut lo, mut hi) = (0.0f64, 1.0f64);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        if inc_beta(a, b, mid) < p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Clopper-Pearson interval for `k` of `n` with total tail probability `alpha` (α/2 each side).
pub fn clopper_pearson(k: u64, n: u64, alpha: f64) -> (f64, f64) {
    if n == 0 {
        return (0.0, 1.0);
    }
    let (kf, nf) = (k.min(n) as f64, n as f64);
    let lower = if k == 0 {
        0.0
    } else {
        inv_inc_beta(alpha / 2.0, kf, nf - kf + 1.0)
    };
    // Upper by symmetry, so the small tail is solved directly: I_{1−u}(n − k, k + 1) = α/2.
    let upper = if k >= n {
        1.0
    } else {
        1.0 - inv_inc_beta(alpha / 2.0, nf - kf, kf + 1.0)
    };
    (lower, upper)
}

/// One alarm event on the host's time axis.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct AlarmRow {
    /// Seconds since the first detection.
    pub t_s: f64,
    /// `qber_z`, `qber_x`, `lock_lost`, `rate_collapse`, `saturation_chN`,
    /// `ingest_<counter>` (e.g. `ingest_rollover_gaps`).
    pub kind: String,
    /// Raised (true) or cleared.
    pub raised: bool,
    /// Measured value (fraction: QBER bound, rate over level, dead fraction; 0 for the lock;
    /// for an ingest fault the counter's growth, a count, not a fraction).
    pub value: f64,
    /// Threshold it was compared with (fraction).
    pub threshold: f64,
}

/// Name of an alarm kind in reports.
pub fn alarm_name(k: AlarmKind) -> String {
    match k {
        AlarmKind::QberHigh(Basis::Z) => "qber_z".into(),
        AlarmKind::QberHigh(Basis::X) => "qber_x".into(),
        AlarmKind::LockLost => "lock_lost".into(),
        AlarmKind::RateCollapse => "rate_collapse".into(),
        AlarmKind::Saturation { channel } => format!("saturation_ch{channel}"),
        AlarmKind::IngestFault { counter } => format!("ingest_{}", counter.name()),
    }
}

/// Name of an alarm condition in the raised and active lists: the kind without its detail
/// (channel or counter).
pub fn alarm_condition(k: AlarmKind) -> &'static str {
    match k {
        AlarmKind::QberHigh(Basis::Z) => "qber_z",
        AlarmKind::QberHigh(Basis::X) => "qber_x",
        AlarmKind::LockLost => "lock_lost",
        AlarmKind::RateCollapse => "rate_collapse",
        AlarmKind::Saturation { .. } => "saturation",
        AlarmKind::IngestFault { .. } => "ingest_fault",
    }
}

/// The value of an alarm event as the host reports it: a fraction for the ppm kinds, the
/// counter's growth (a count) for an ingest fault.
pub fn alarm_value(e: &AlarmEvent) -> f64 {
    match e.kind {
        AlarmKind::IngestFault { .. } => f64::from(e.value_ppm),
        _ => f64::from(e.value_ppm) * 1e-6,
    }
}

/// One closed block as the host keeps it for plots.
#[derive(Clone, Debug, PartialEq)]
pub struct BlockPoint {
    /// End of the block, seconds since the first detection.
    pub t_s: f64,
    /// The window's statistics at that moment (the record-type-6 payload).
    pub snapshot: Snapshot,
    /// Detections per channel in the block just closed.
    pub block_detections: Vec<u64>,
    /// Block length, s.
    pub block_s: f64,
}

/// What the host records from the monitor while a session runs.
#[derive(Clone, Debug, Default)]
pub struct LiveLog {
    /// Every closed block.
    pub blocks: Vec<BlockPoint>,
    /// Every alarm event, with receiver time in ps.
    pub events: Vec<AlarmEvent>,
    /// Alarm (type 5) and statistics (type 6) frames as the board would send them.
    pub frames: Vec<Vec<u8>>,
    /// Frames of each type: (alarm, stats).
    pub frame_counts: (u64, u64),
}

/// One QBER row of the table: a basis, an intensity class (or all), window or since start.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct QberRow {
    /// `Z` or `X`.
    pub basis: &'static str,
    /// Intensity class index, `null` for all classes together.
    pub intensity: Option<u8>,
    /// `window` or `since_start`.
    pub scope: &'static str,
    /// Errors among tested bits.
    pub errors: u64,
    /// Tested bits.
    pub tested: u64,
    /// errors / tested.
    pub value: Option<f64>,
    /// The board's fixed-point upper bound (the alarm's bound), fraction.
    pub board_upper: Option<f64>,
    /// The board's one-sided Hoeffding upper bound at the same ε, fraction.
    pub hoeffding_upper: Option<f64>,
    /// Exact Clopper-Pearson interval at the same ε on each side, fractions.
    pub clopper_pearson: Option<(f64, f64)>,
}

/// Per-channel figures of the table.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct ChannelRow {
    /// TDC channel.
    pub channel: u8,
    /// Detection rate over the window, Hz.
    pub rate_window_hz: f64,
    /// Detection rate since start, Hz.
    pub rate_since_start_hz: f64,
    /// Fraction of time dead since start (m·τ).
    pub dead_fraction: f64,
    /// Detections outside every gate per second locked, since start, Hz.
    pub off_gate_hz: f64,
    /// Noise rate estimated from the off-gate rate (off-gate / (1 − duty)), Hz.
    pub noise_estimate_hz: f64,
    /// Summed gate width as a fraction of the slot.
    pub gate_duty: f64,
}

/// The `stats` object of the summary and the live-statistics table.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct StatsReport {
    /// Block length, s.
    pub block_s: f64,
    /// Window capacity in blocks.
    pub window_blocks: usize,
    /// Bytes of RAM the board's monitor takes for this window (`size_of`).
    pub monitor_ram_bytes: usize,
    /// The QBER alarm's bound, its ε (one-sided) and ceiling.
    pub bound: String,
    /// One-sided ε of the bounds shown.
    pub epsilon: f64,
    /// QBER ceiling of the alarm (fraction).
    pub qber_ceiling: f64,
    /// QBER rows.
    pub qber: Vec<QberRow>,
    /// Per-channel rows.
    pub channels: Vec<ChannelRow>,
    /// Multi-click slots over slots with a gated detection, since start.
    pub multi_click_fraction: f64,
    /// Multi-click slots per second, since start.
    pub multi_click_hz: f64,
    /// Times each alarm was raised.
    pub alarms_raised: BTreeMap<&'static str, u64>,
    /// Alarms active at the end.
    pub alarms_active: Vec<String>,
    /// Every raise and clear.
    pub alarm_events: Vec<AlarmRow>,
    /// Alarm events lost to a full queue (0 unless the queue is too small).
    pub alarm_events_dropped: u64,
    /// Frames built: alarm records (type 5) and statistics records (type 6).
    pub frames: BTreeMap<&'static str, u64>,
    /// Block snapshots replaced before they were framed (several blocks closed by one
    /// detection, as after a blackout; only the last one's snapshot is sent).
    pub snapshots_replaced: u64,
}

/// The monitor's settings for a scenario: blocks of `block_s`, the scenario's dead time, the
/// gate table's duty cycle.
pub fn stats_config(
    s: &crate::scenario::Scenario,
    gates: &slotwise::GateTable,
    block_s: f64,
) -> Result<slotwise::StatsConfig, slotwise::stats::StatsConfigError> {
    slotwise::StatsConfig::new(
        (block_s * 1e12).max(1.0) as u64,
        (s.dead_time_ns * 1e3).round() as u64,
        gates,
    )
}

/// ε of the board's default bound (z for one-sided 1e-10); a scenario's `[alarms]` may change it.
pub const EPSILON: f64 = 1e-10;

fn qber_rows(c: &Counts, scope: &'static str, intensities: u8, m: &HostMonitor) -> Vec<QberRow> {
    let cfg = m.alarms().config();
    let epsilon = bound_epsilon(cfg.bound());
    let eps = Epsilon::one_in((1.0 / epsilon).round() as u64).ok();
    let mut rows = Vec::new();
    for b in Basis::ALL {
        let classes = std::iter::once(None).chain((0..intensities).map(Some));
        for i in classes {
            let (e, n) = c.errors(b, i);
            let ppm = |v: u32| f64::from(v) * 1e-6;
            rows.push(QberRow {
                basis: b.name(),
                intensity: i,
                scope,
                errors: e,
                tested: n,
                value: (n > 0).then(|| e as f64 / n as f64),
                board_upper: (n > 0).then(|| ppm(cfg.upper_ppm(e, n))),
                hoeffding_upper: eps
                    .filter(|_| n > 0)
                    .map(|eps| ppm(hoeffding_upper_ppm(e, n, eps))),
                clopper_pearson: (n > 0).then(|| clopper_pearson(e, n, 2.0 * epsilon)),
            });
        }
    }
    rows
}

/// Build the report from the final monitor, the session's log and the first detection's time.
pub fn report(m: &HostMonitor, log: &LiveLog, first_t_ps: u64, intensities: u8) -> StatsReport {
    let cfg = m.config();
    let s = m.since_start();
    let w = m.window();
    let mut qber = qber_rows(&w, "window", intensities, m);
    qber.extend(qber_rows(&s, "since_start", intensities, m));
    let channels = (0..cfg.channels())
        .map(|c| ChannelRow {
            channel: c,
            rate_window_hz: w.rate_mhz(c) as f64 * 1e-3,
            rate_since_start_hz: s.rate_mhz(c) as f64 * 1e-3,
            dead_fraction: f64::from(s.dead_fraction_ppm(c, cfg.dead_time_ps())) * 1e-6,
            off_gate_hz: s.off_gate_rate_mhz(c) as f64 * 1e-3,
            noise_estimate_hz: s.noise_rate_mhz(c, cfg.duty_ppm(c)) as f64 * 1e-3,
            gate_duty: f64::from(cfg.duty_ppm(c)) * 1e-6,
        })
        .collect();
    let a = m.alarms();
    let [q, l, r, sat, ingest] = a.raised_counts();
    let active = a.active();
    let kinds = [
        AlarmKind::QberHigh(Basis::Z),
        AlarmKind::QberHigh(Basis::X),
        AlarmKind::LockLost,
        AlarmKind::RateCollapse,
        AlarmKind::Saturation { channel: 0 },
        AlarmKind::IngestFault {
            counter: IngestFault::OverrunWords,
        },
    ];
    let bound = match a.config().bound() {
        BoundKind::Wilson { z_q16 } => format!("Wilson, z = {:.4}", f64::from(z_q16) / 65536.0),
        BoundKind::Hoeffding(e) => format!("Hoeffding, eps = 1/{}", e.inverse()),
    };
    StatsReport {
        block_s: cfg.block_ps() as f64 * 1e-12,
        window_blocks: DEFAULT_BLOCKS,
        monitor_ram_bytes: std::mem::size_of::<HostMonitor>(),
        bound,
        epsilon: bound_epsilon(a.config().bound()),
        qber_ceiling: f64::from(a.config().qber_ceiling_ppm()) * 1e-6,
        qber,
        channels,
        multi_click_fraction: f64::from(s.multi_click_ppm()) * 1e-6,
        multi_click_hz: s.multi_click_rate_mhz() as f64 * 1e-3,
        alarms_raised: [
            ("qber", q),
            ("lock_lost", l),
            ("rate_collapse", r),
            ("saturation", sat),
            ("ingest_fault", ingest),
        ]
        .into_iter()
        .collect(),
        alarms_active: kinds
            .iter()
            .filter(|k| active & k.bit() != 0)
            .map(|k| alarm_condition(*k).to_string())
            .collect(),
        alarm_events: log
            .events
            .iter()
            .map(|e| AlarmRow {
                t_s: e.t_ps.saturating_sub(first_t_ps) as f64 * 1e-12,
                kind: alarm_name(e.kind),
                raised: e.raised,
                value: alarm_value(e),
                threshold: f64::from(e.threshold_ppm) * 1e-6,
            })
            .collect(),
        alarm_events_dropped: a.dropped(),
        frames: [
            (RecordType::Alarm.name(), log.frame_counts.0),
            (RecordType::Stats.name(), log.frame_counts.1),
        ]
        .into_iter()
        .collect(),
        snapshots_replaced: m.snapshots_replaced(),
    }
}

fn pct(v: Option<f64>) -> String {
    v.map(|x| format!("{:.3}", 100.0 * x))
        .unwrap_or_else(|| "-".into())
}

impl std::fmt::Display for StatsReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        writeln!(
            f,
            "live statistics: window {} blocks of {:.4} s; monitor RAM {} bytes; bounds one-sided eps {:e} ({})",
            self.window_blocks, self.block_s, self.monitor_ram_bytes, self.epsilon, self.bound
        )?;
        writeln!(
            f,
            "  {:<12} {:<5} {:<4} {:>9} {:>10} {:>8} {:>8} {:>9} {:>19}",
            "scope",
            "basis",
            "int",
            "errors",
            "tested",
            "QBER %",
            "board ≤",
            "Hoeff. ≤",
            "Clopper-Pearson %"
        )?;
        for r in &self.qber {
            if r.tested == 0 && r.intensity.is_some() {
                continue;
            }
            let cp = r
                .clopper_pearson
                .map(|(lo, hi)| format!("{:.3} .. {:.3}", 100.0 * lo, 100.0 * hi))
                .unwrap_or_else(|| "-".into());
            writeln!(
                f,
                "  {:<12} {:<5} {:<4} {:>9} {:>10} {:>8} {:>8} {:>9} {:>19}",
                r.scope,
                r.basis,
                r.intensity.map_or("all".into(), |i| i.to_string()),
                r.errors,
                r.tested,
                pct(r.value),
                pct(r.board_upper),
                pct(r.hoeffding_upper),
                cp
            )?;
        }
        writeln!(
            f,
            "  {:<8} {:>14} {:>14} {:>8} {:>12} {:>14} {:>6}",
            "channel",
            "rate win Hz",
            "rate all Hz",
            "dead %",
            "off-gate Hz",
            "noise est. Hz",
            "duty"
        )?;
        for c in &self.channels {
            writeln!(
                f,
                "  {:<8} {:>14.1} {:>14.1} {:>8.3} {:>12.1} {:>14.1} {:>6.3}",
                c.channel,
                c.rate_window_hz,
                c.rate_since_start_hz,
                100.0 * c.dead_fraction,
                c.off_gate_hz,
                c.noise_estimate_hz,
                c.gate_duty
            )?;
        }
        writeln!(
            f,
            "  multi-click slots {:.4} % of gated slots ({:.1} per s)",
            100.0 * self.multi_click_fraction,
            self.multi_click_hz
        )?;
        let raised: Vec<String> = self
            .alarms_raised
            .iter()
            .map(|(k, v)| format!("{k} {v}"))
            .collect();
        writeln!(
            f,
            "  alarms raised: {}; active at end: {}; frames: {} alarm, {} stats ({} block snapshots replaced)",
            raised.join(", "),
            if self.alarms_active.is_empty() {
                "none".into()
            } else {
                self.alarms_active.join(", ")
            },
            self.frames.get(RecordType::Alarm.name()).unwrap_or(&0),
            self.frames.get(RecordType::Stats.name()).unwrap_or(&0),
            self.snapshots_replaced
        )?;
        for e in &self.alarm_events {
            writeln!(
                f,
                "    {:>10.4} s  {:<16} {:<7} value {:.4} threshold {:.4}",
                e.t_s,
                e.kind,
                if e.raised { "raised" } else { "cleared" },
                e.value,
                e.threshold
            )?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ingest_fault_events_are_named_by_counter_and_valued_in_counts() {
        let kind = AlarmKind::IngestFault {
            counter: IngestFault::MalformedWords,
        };
        assert_eq!(alarm_name(kind), "ingest_malformed_words");
        assert_eq!(alarm_condition(kind), "ingest_fault");
        let e = AlarmEvent {
            t_ps: 0,
            kind,
            raised: true,
            value_ppm: 12,
            threshold_ppm: 0,
        };
        assert_eq!(alarm_value(&e), 12.0);
        let sat = AlarmEvent {
            kind: AlarmKind::Saturation { channel: 2 },
            value_ppm: 500_000,
            ..e
        };
        assert_eq!(alarm_value(&sat), 0.5);
        assert_eq!(alarm_condition(sat.kind), "saturation");
    }

    #[test]
    fn clopper_pearson_matches_scipy() {
        // scipy.stats.binomtest(7, 50).proportion_ci() (exact, 95 %) = (0.0581917, 0.2673960),
        // BRIEF §4.
        let (lo, hi) = clopper_pearson(7, 50, 0.05);
        assert!((lo - 0.058_191_7).abs() < 5e-8, "{lo}");
        assert!((hi - 0.267_396_0).abs() < 5e-8, "{hi}");
        // k = 0 and k = n: the one-sided closed forms 1 − (α/2)^(1/n) and (α/2)^(1/n)
        // (Clopper & Pearson, Biometrika 26, 404, 1934).
        let (lo, hi) = clopper_pearson(0, 20, 0.05);
        assert_eq!(lo, 0.0);
        assert!(
            (hi - (1.0 - 0.025f64.powf(1.0 / 20.0))).abs() < 1e-12,
            "{hi}"
        );
        let (lo, hi) = clopper_pearson(20, 20, 0.05);
        assert!((lo - 0.025f64.powf(1.0 / 20.0)).abs() < 1e-12, "{lo}");
        assert_eq!(hi, 1.0);
    }

    #[test]
    fn normal_tail_matches_tables() {
        // Standard normal upper-tail table values (from memory; scipy `norm.sf`): Q(1.959964) =
        // 0.025, Q(3) = 1.349898e-3, Q(4) = 3.167124e-5; scipy `norm.isf(1e-10)` = 6.361340902.
        let rel = |a: f64, b: f64| ((a - b) / b).abs();
        assert!(rel(normal_upper_tail(1.959_963_984_540_054), 0.025) < 1e-10);
        assert!(rel(normal_upper_tail(3.0), 1.349_898_031_630_095e-3) < 1e-9);
        assert!(rel(normal_upper_tail(2.999_999_999), 1.349_898_031_630_095e-3) < 1e-8);
        assert!(rel(normal_upper_tail(4.0), 3.167_124_183_311_992e-5) < 1e-9);
        assert!((normal_isf(1e-10) - 6.361_340_902).abs() < 1e-8);
        assert!((normal_isf(0.025) - 1.959_963_985).abs() < 1e-8);
        // The board's constant is this z in Q16.16, and maps back to ε = 1e-10.
        let z_q16 = (normal_isf(1e-10) * 65536.0).round() as u32;
        assert_eq!(z_q16, slotwise::bounds::Z_ONE_SIDED_1E_10_Q16);
        assert_eq!(bound_epsilon(BoundKind::Wilson { z_q16 }), 1e-10);
    }

    #[test]
    fn incomplete_beta_closed_forms() {
        // I_x(1, b) = 1 − (1 − x)^b and I_x(a, 1) = x^a (common practice, from the definition).
        for &x in &[0.001, 0.2, 0.5, 0.93] {
            assert!((inc_beta(1.0, 7.0, x) - (1.0 - (1.0 - x).powi(7))).abs() < 1e-13);
            assert!((inc_beta(3.5, 1.0, x) - x.powf(3.5)).abs() < 1e-13);
        }
        // ln Γ(10) = ln 362880.
        assert!((ln_gamma(10.0) - 362_880f64.ln()).abs() < 1e-12);
        assert!((ln_gamma(0.5) - std::f64::consts::PI.sqrt().ln()).abs() < 1e-12);
    }
}
