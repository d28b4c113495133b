//! The JSON summary of a run: where every detection went, sifted bits, QBER, the clock, and (for
//! simulated runs) the truth to compare against.

use crate::clocks::LockReport;
use crate::replay::SessionResult;
use serde::Serialize;
use slotwise::gates::MAX_INTENSITIES;
use slotwise::{Basis, IngestCounts, Tally, Transmitter};
use std::collections::BTreeMap;

/// QBER of one basis with its counts.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct QberFigure {
    /// Error fraction (errors / tested), `null` when nothing was tested.
    pub value: Option<f64>,
    /// Matched-basis errors.
    pub errors: u64,
    /// Matched-basis tested events.
    pub tested: u64,
}

impl QberFigure {
    fn from_tally(t: &Tally, b: Basis, intensity: Option<u8>) -> Self {
        let (errors, tested) = t.errors(b, intensity);
        Self {
            value: (tested > 0).then(|| errors as f64 / tested as f64),
            errors,
            tested,
        }
    }
}

/// QBER per basis, overall and per intensity class.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Qber {
    /// Key basis.
    pub z: QberFigure,
    /// Test basis.
    pub x: QberFigure,
    /// Per intensity class (index 0 = signal).
    pub per_intensity: Vec<BTreeMap<&'static str, QberFigure>>,
}

/// Period figures in picoseconds.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct PeriodPs {
    /// What the receiver used or estimated.
    pub estimate: f64,
    /// The simulator's true period at the start (simulated runs only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub truth: Option<f64>,
}

/// The simulator's truth (simulated runs only).
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Truth {
    /// Expected Z-basis QBER from the channel model.
    pub qber_z: f64,
    /// Expected X-basis QBER from the channel model.
    pub qber_x: f64,
    /// Sifted bits assigned to a slot other than the one their photon was sent in.
    pub misassigned_sifted: u64,
}

/// The whole summary.
#[derive(Clone, Debug, Serialize, PartialEq)]
pub struct Summary {
    /// Scenario or capture name.
    pub name: String,
    /// Detections taken in.
    pub detections_in: u64,
    /// Where they went (values sum to `detections_in`).
    pub accounting: BTreeMap<&'static str, u64>,
    /// Multi-click slot events by outcome.
    pub multi_click_events: BTreeMap<&'static str, u64>,
    /// Answered slots with two or more photons detected, per intensity class (index 0 = signal):
    /// `slots`, `one_outcome` (one click reporting a level ≥ 2) and `sifted`.
    pub multi_photon: Vec<BTreeMap<&'static str, u64>>,
    /// Transmitter answers the core refused.
    pub answer_errors: BTreeMap<&'static str, u64>,
    /// The board's raw-word ingest counters (`overrun_words`, `fifo_full_flags`,
    /// `rollover_gaps`, `malformed_words`, `blocks`); all 0 when the receiver was fed events
    /// directly, as in a simulation or a capture replay.
    pub ingest: BTreeMap<&'static str, u64>,
    /// Sifted key bits (single and squashed multi-click).
    pub sifted_bits: u64,
    /// QBER per basis.
    pub qber: Qber,
    /// The slot period.
    pub period_ps: PeriodPs,
    /// Clock lock figures.
    pub lock: LockReport,
    /// RMS distance of gated detections from their gate's centre (ps), over the whole run.
    pub phase_residual_rms_ps: Option<f64>,
    /// Truth, for simulated runs.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub truth: Option<Truth>,
    /// Counts per `tx basis/tx bit/intensity/rx basis/rx bit`, nonzero entries only.
    pub tally: BTreeMap<String, u64>,
    /// Wall-clock seconds the replay took, and detections per second.
    pub run: BTreeMap<&'static str, f64>,
    /// Live statistics: window and since-start QBER with bounds, rates, dead time, alarms.
    pub stats: crate::stats::StatsReport,
    /// The framed link to the transmitter, when the exchange ran through frames.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub link: Option<crate::link::report::LinkSummary>,
    /// Damaged data stepped over (`replay --skip-damaged` only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub skipped: Option<crate::capture::SkipReport>,
    /// The scenario of the link as TOML text (what `slotwise keyrate` reads its protocol from).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub scenario: Option<String>,
}

impl Summary {
    /// The same summary with the board's raw-word ingest counters.
    pub fn with_ingest(mut self, counts: IngestCounts) -> Self {
        self.ingest = counts.fields().into_iter().collect();
        self
    }

    /// The same summary with the link's scenario recorded.
    pub fn with_scenario(mut self, s: &crate::scenario::Scenario) -> Self {
        self.scenario = Some(s.to_toml_string());
        self
    }
}

/// Build the summary of a finished session.
pub fn summarize<T: Transmitter>(
    name: &str,
    res: &SessionResult<T>,
    period_estimate_ps: f64,
    truth_period_ps: Option<f64>,
    truth_qber: Option<(f64, f64)>,
    seconds: f64,
) -> Summary {
    let rx = &res.rx;
    let accounting = rx.accounting().fields().into_iter().collect();
    let m = rx.multi_click_events();
    let multi_click_events = [
        ("sifted", m.sifted),
        ("basis_mismatch", m.basis_mismatch),
        ("queue_overflow", m.queue_overflow),
        ("unanswered", m.unanswered),
        ("cross_basis", m.cross_basis),
    ]
    .into_iter()
    .collect();
    let mp = rx.multi_photon();
    let multi_photon = (0..usize::from(rx.config().intensities()).min(MAX_INTENSITIES))
        .map(|i| {
            let at = |a: &[u64; MAX_INTENSITIES]| a.get(i).copied().unwrap_or(0);
            [
                ("slots", at(&mp.slots)),
                ("one_outcome", at(&mp.one_outcome)),
                ("sifted", at(&mp.sifted)),
            ]
            .into_iter()
            .collect()
        })
        .collect();
    let ae = rx.answer_errors();
    let answer_errors = [("unmatched", ae.unmatched), ("malformed", ae.malformed)]
        .into_iter()
        .collect();
    let t = rx.tally();
    let n_int = rx.config().intensities();
    let per_intensity = (0..n_int.min(MAX_INTENSITIES as u8))
        .map(|i| {
            [
                ("z", QberFigure::from_tally(t, Basis::Z, Some(i))),
                ("x", QberFigure::from_tally(t, Basis::X, Some(i))),
            ]
            .into_iter()
            .collect()
        })
        .collect();
    let mut tally = BTreeMap::new();
    for tb in Basis::ALL {
        for tbit in 0..2u8 {
            for i in 0..n_int {
                for rb in Basis::ALL {
                    for rbit in 0..2u8 {
                        let n = t.count(tb, tbit, i, rb, rbit);
                        if n > 0 {
                            let k = format!("{}{}/{}/{}{}", tb.name(), tbit, i, rb.name(), rbit);
                            tally.insert(k, n);
                        }
                    }
                }
            }
        }
    }
    let det = rx.detections_in();
    Summary {
        name: name.to_string(),
        detections_in: det,
        accounting,
        multi_click_events,
        multi_photon,
        answer_errors,
        ingest: IngestCounts::ZERO.fields().into_iter().collect(),
        sifted_bits: rx.sifted_bits(),
        qber: Qber {
            z: QberFigure::from_tally(t, Basis::Z, None),
            x: QberFigure::from_tally(t, Basis::X, None),
            per_intensity,
        },
        period_ps: PeriodPs {
            estimate: period_estimate_ps,
            truth: truth_period_ps,
        },
        lock: {
            let (k, t, state) = rx.clock().counters();
            let (numbering, realignments) = rx.numbering().state();
            let aligned = rx.numbering().alignment();
            LockReport {
                numbering,
                realignments,
                aligned_after_detections: aligned.map(|a| a.0),
                aligned_by: aligned.map(|a| a.1.to_string()),
                wrong_offset_log2_bound: aligned.map(|a| a.2),
                delay_corrections_ps: rx
                    .clock()
                    .delay_corrections_ps(rx.config().gates().channels()),
                acquired: res.first_lock.is_some(),
                after_detections: res.first_lock.map(|l| l.0),
                after_s: res.first_lock.map(|l| l.1),
                losses: k.losses,
                relocks: k.relocks,
                bridged: k.bridged,
                holdovers: k.holdovers,
                holdovers_bridged: k.holdovers_bridged,
                jumps: k.jumps,
                wide_gear: t.wide_gear,
                channels_set_aside: t.set_asides,
                set_aside_detections: t.aside_detections,
                state,
            }
        },
        phase_residual_rms_ps: {
            let (n, ss) = res.buckets.iter().fold((0u64, 0.0), |(n, s), b| {
                (n + b.residual.0, s + b.residual.1)
            });
            (n > 0).then(|| (ss / n as f64).sqrt())
        },
        truth: truth_qber.map(|(qz, qx)| Truth {
            qber_z: qz,
            qber_x: qx,
            misassigned_sifted: res.misassigned_sifted.unwrap_or(0),
        }),
        tally,
        run: [
            ("seconds", seconds),
            (
                "detections_per_s",
                if seconds > 0.0 {
                    det as f64 / seconds
                } else {
                    0.0
                },
            ),
        ]
        .into_iter()
        .collect(),
        stats: crate::stats::report(&res.monitor, &res.live, res.first_t_ps, n_int),
        link: None,
        skipped: None,
        scenario: None,
    }
}

fn pct(v: Option<f64>) -> String {
    v.map(|x| format!("{:.3} %", 100.0 * x))
        .unwrap_or_else(|| "n/a".into())
}

/// The `ingest` line of the printed summary, when any ingest counter is above zero.
fn ingest_line(ingest: &BTreeMap<&'static str, u64>) -> Option<String> {
    if ingest.values().all(|&v| v == 0) {
        return None;
    }
    let get = |k: &str| ingest.get(k).copied().unwrap_or(0);
    let faults: Vec<String> = IngestCounts::NAMES
        .iter()
        .filter(|k| **k != "blocks")
        .map(|k| format!("{k} {}", get(k)))
        .collect();
    Some(format!(
        "ingest         {} (in {} blocks)",
        faults.join(", "),
        get("blocks")
    ))
}

impl std::fmt::Display for Summary {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        writeln!(f, "run            {}", self.name)?;
        writeln!(f, "detections in  {}", self.detections_in)?;
        writeln!(f, "where they went:")?;
        for (k, v) in &self.accounting {
            if *v > 0 {
                let share = 100.0 * *v as f64 / self.detections_in.max(1) as f64;
                writeln!(f, "  {k:<17}{v:>12}  {share:6.2} %")?;
            }
        }
        if let Some(line) = ingest_line(&self.ingest) {
            writeln!(f, "{line}")?;
        }
        writeln!(f, "sifted bits    {}", self.sifted_bits)?;
        if self
            .multi_photon
            .iter()
            .any(|m| m.get("slots").is_some_and(|&n| n > 0))
        {
            let col = |k: &str| {
                self.multi_photon
                    .iter()
                    .map(|m| m.get(k).copied().unwrap_or(0).to_string())
                    .collect::<Vec<_>>()
                    .join(" / ")
            };
            writeln!(
                f,
                "multi-photon   {} slots per intensity class ({} in one outcome, {} sifted)",
                col("slots"),
                col("one_outcome"),
                col("sifted")
            )?;
        }
        let truth = self.truth.as_ref();
        let rows = [
            ("Z", &self.qber.z, truth.map(|t| t.qber_z)),
            ("X", &self.qber.x, truth.map(|t| t.qber_x)),
        ];
        for (name, q, model) in rows {
            let model = model
                .map(|m| format!("   model {:.3} %", 100.0 * m))
                .unwrap_or_default();
            writeln!(
                f,
                "QBER {name}         {:<12} ({} of {} tested){model}",
                pct(q.value),
                q.errors,
                q.tested
            )?;
        }
        write!(f, "period         {:.6} ps", self.period_ps.estimate)?;
        if let Some(t) = self.period_ps.truth {
            write!(f, "   truth {t:.6} ps")?;
        }
        writeln!(f)?;
        let l = &self.lock;
        let residual = self
            .phase_residual_rms_ps
            .map(|r| format!("{r:.1} ps"))
            .unwrap_or_else(|| "n/a".into());
        match l.after_detections {
            Some(n) => writeln!(
                f,
                "clock          {} after {n} detections ({:.4} s); {} losses, {} relocks ({} bridged); gate residual rms {residual}\n\
                 holdover       {} ({} bridged, {} phase jumps taken); wide gear {}×; channels set aside {}× ({} detections)",
                l.state,
                l.after_s.unwrap_or(0.0),
                l.losses,
                l.relocks,
                l.bridged,
                l.holdovers,
                l.holdovers_bridged,
                l.jumps,
                l.wide_gear,
                l.channels_set_aside,
                l.set_aside_detections,
            )?,
            None => writeln!(f, "clock          never locked ({})", l.state)?,
        }
        write!(
            f,
            "numbering      {} ({} realignments)",
            l.numbering, l.realignments
        )?;
        match (&l.aligned_by, l.aligned_after_detections) {
            (Some(by), Some(n)) => writeln!(
                f,
                ", after {n} gated detections by the {} (wrong offset ≤ 2^-{})",
                by.replace('-', " "),
                l.wrong_offset_log2_bound.unwrap_or(0)
            )?,
            _ => writeln!(f)?,
        }
        if let Some(t) = truth {
            writeln!(
                f,
                "misassigned    {} sifted bits (against the simulator's truth)",
                t.misassigned_sifted
            )?;
        }
        if let Some(l) = &self.link {
            write!(f, "{l}")?;
        }
        if let Some(s) = &self.skipped {
            write!(f, "{s}")?;
        }
        if let Some(s) = self.run.get("seconds") {
            writeln!(f, "replay time    {s:.2} s")?;
        }
        write!(f, "{}", self.stats)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_ingest_line_shows_only_when_a_counter_is_above_zero() {
        let zero: BTreeMap<_, _> = IngestCounts::ZERO.fields().into_iter().collect();
        assert_eq!(ingest_line(&zero), None);
        let counts = IngestCounts {
            rollover_gaps: 2,
            malformed_words: 5,
            blocks: 40,
            ..IngestCounts::ZERO
        };
        let some: BTreeMap<_, _> = counts.fields().into_iter().collect();
        assert_eq!(
            ingest_line(&some).as_deref(),
            Some(
                "ingest         overrun_words 0, fifo_full_flags 0, rollover_gaps 2, \
                 malformed_words 5 (in 40 blocks)"
            )
        );
    }
}
