//! Figure 4: losing and regaining the lock — a 1 s blackout, a 0.37-slot arrival phase jump, and
//! (for contrast) a 5 ms blackout short enough for the slot numbering to be bridged.
//!
//! Each seed locks cold on the link, tracks until the event at [`EVENT_AT_PS`], then runs until
//! it is locked again. Counting starts at the end of the event (the first detection after a
//! blackout, the jump itself). Numbering is checked against the truth: the offset (located slot −
//! true slot) of signal detections before the event is compared with the offset after the relock;
//! a bridged relock must keep it, an unbridged one opens a new epoch.

use super::link::{self, Feed, LinkEvent, LinkPoint};
use serde::Serialize;
use slotwise::track::LockState;
use slotwise::{Located, SlotClock};
use std::collections::{BTreeMap, VecDeque};
use std::error::Error;

/// Time of the event on the receiver's time base, ps (the cold lock takes ~30 ms here).
pub const EVENT_AT_PS: u64 = 200_000_000_000;

/// Most detections fed after the event.
const AFTER_CAP: u64 = 400_000;

/// Signal detections whose offsets decide the numbering, before and after.
const OFFSET_SAMPLE: usize = 64;

/// The events of figure 4.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub enum RelockEvent {
    /// No detections for this many ps.
    Blackout {
        /// Length, ps.
        length_ps: u64,
    },
    /// Arrivals move later by this fraction of a slot.
    PhaseJump {
        /// Jump, slots.
        slots: f64,
    },
}

impl RelockEvent {
    fn name(&self) -> String {
        match self {
            Self::Blackout { length_ps } if length_ps % 1_000_000_000_000 == 0 => {
                format!("blackout {} s", length_ps / 1_000_000_000_000)
            }
            Self::Blackout { length_ps } => format!("blackout {} ms", length_ps / 1_000_000_000),
            Self::PhaseJump { slots } => format!("phase jump {slots} slot"),
        }
    }
}

#[derive(Clone, Copy, Debug, Default)]
struct RelockRun {
    locked_before: bool,
    lost: bool,
    relocked: bool,
    to_loss: Option<u64>,
    total: u64,
    signal: u64,
    secs: f64,
    bridged: bool,
    epoch_advanced: bool,
    numbering_kept: Option<bool>,
}

fn dominant<'a>(offsets: impl Iterator<Item = &'a i128>) -> Option<i128> {
    let mut m: BTreeMap<i128, usize> = BTreeMap::new();
    for &o in offsets {
        *m.entry(o).or_default() += 1;
    }
    m.into_iter().max_by_key(|&(_, c)| c).map(|(o, _)| o)
}

fn run_one(
    pt: &LinkPoint,
    ev: RelockEvent,
    seed: u64,
    prior_ppm: u32,
) -> Result<RelockRun, Box<dyn Error>> {
    let offset = link::offset_for_seed(seed, prior_ppm);
    let mut s = link::scenario(pt, seed, offset, 1.0)?;
    let (events, t_ref) = match ev {
        RelockEvent::Blackout { length_ps } => (
            vec![LinkEvent::Blackout {
                from_ps: EVENT_AT_PS,
                to_ps: EVENT_AT_PS + length_ps,
            }],
            EVENT_AT_PS + length_ps,
        ),
        RelockEvent::PhaseJump { slots } => {
            let shift_ps = (slots * s.period_ps() / (1.0 + offset * 1e-6)).round() as u64;
            (
                vec![LinkEvent::PhaseJump {
                    at_ps: EVENT_AT_PS,
                    shift_ps,
                }],
                EVENT_AT_PS,
            )
        }
    };
    s.duration_s = (t_ref as f64 * 1e-12 + 2.0).min(1000.0);
    let gates = link::gate_table(&s)?;
    let mut clk = link::cold_clock(&s, &gates, prior_ppm)?;
    let feed = Feed::new(&s, &gates, events)?;
    let mut out = RelockRun::default();
    let mut before: VecDeque<i128> = VecDeque::new();
    let mut after: Vec<i128> = Vec::new();
    let mut counters0 = None;
    let mut t_first_after = None;
    let mut after_n = 0u64;
    for d in feed {
        // Channel delays move a detection by at most 140 ps across the reference time.
        let after_event = d.t_ps + 200 >= t_ref;
        if after_event && counters0.is_none() {
            out.locked_before = clk.state() == LockState::Locked;
            counters0 = Some(*clk.counters());
        }
        let got = clk.observe(d.channel, d.t_ps);
        if !after_event {
            if let (Located::At(p), Some(k)) = (got, d.slot) {
                before.push_back(i128::from(p.slot) - i128::from(k));
                if before.len() > OFFSET_SAMPLE {
                    before.pop_front();
                }
            }
            continue;
        }
        if !out.locked_before {
            break;
        }
        let t0 = *t_first_after.get_or_insert(d.t_ps);
        after_n += 1;
        if !out.relocked {
            out.signal += u64::from(d.slot.is_some());
        }
        let locked = clk.state() == LockState::Locked;
        if !out.lost && !locked {
            out.lost = true;
            out.to_loss = Some(after_n);
        } else if out.lost && !out.relocked && locked {
            out.relocked = true;
            out.total = after_n;
            out.secs = (d.t_ps - t0) as f64 * 1e-12;
            if let Some(c0) = counters0 {
                let c = clk.counters();
                out.bridged = c.bridged > c0.bridged;
                out.epoch_advanced = c.epoch > c0.epoch;
            }
        } else if out.relocked {
            if let (Located::At(p), Some(k)) = (got, d.slot) {
                after.push(i128::from(p.slot) - i128::from(k));
                if after.len() >= OFFSET_SAMPLE {
                    break;
                }
            }
        }
        if after_n >= AFTER_CAP {
            break;
        }
    }
    if let (true, Some(a), Some(b)) = (
        out.relocked,
        dominant(before.iter()),
        dominant(after.iter()),
    ) {
        out.numbering_kept = Some(a == b);
    }
    Ok(out)
}

/// Figure 4 row: one event over all seeds.
#[derive(Clone, Debug, Serialize)]
pub struct RelockRow {
    /// The event.
    pub event: RelockEvent,
    /// Human name of the event.
    pub name: String,
    /// The link.
    pub point: LinkPoint,
    /// Seeds run.
    pub seeds: usize,
    /// Seeds locked when the event came.
    pub locked_before: usize,
    /// Seeds that lost the lock.
    pub lost: usize,
    /// Seeds locked again within the cap.
    pub relocked: usize,
    /// Detections from the end of the event to the loss (phase jump), median and max.
    pub to_loss_median: Option<f64>,
    /// See `to_loss_median`.
    pub to_loss_max: Option<f64>,
    /// Detections from the end of the event to the relock, median and max.
    pub total_median: Option<f64>,
    /// See `total_median`.
    pub total_max: Option<f64>,
    /// Signal detections among them, median and max.
    pub signal_median: Option<f64>,
    /// See `signal_median`.
    pub signal_max: Option<f64>,
    /// Receiver time from the end of the event to the relock, s: median and max.
    pub secs_median: Option<f64>,
    /// See `secs_median`.
    pub secs_max: Option<f64>,
    /// Relocks that bridged the numbering.
    pub bridged: usize,
    /// Relocks that opened a new numbering epoch.
    pub new_epoch: usize,
    /// Bridged relocks whose numbering matches the truth's offset from before the event.
    pub bridged_correct: usize,
    /// Bridged relocks whose numbering moved (a wrong bridge).
    pub bridged_wrong: usize,
}

/// Run one event over `seeds` seeds.
pub fn run(
    pt: &LinkPoint,
    ev: RelockEvent,
    seeds: u64,
    prior_ppm: u32,
    threads: usize,
) -> Result<RelockRow, Box<dyn Error>> {
    let ids: Vec<u64> = (0..seeds).map(|i| 7_000_000 + i).collect();
    let runs = link::par_map(&ids, threads, |&seed| {
        run_one(pt, ev, seed, prior_ppm).map_err(|e| e.to_string())
    });
    let runs: Vec<RelockRun> = runs.into_iter().collect::<Result<_, _>>()?;
    let ok: Vec<&RelockRun> = runs.iter().filter(|r| r.relocked).collect();
    let col = |f: &dyn Fn(&RelockRun) -> f64| ok.iter().map(|r| f(r)).collect::<Vec<f64>>();
    let to_loss: Vec<f64> = runs
        .iter()
        .filter_map(|r| r.to_loss.map(|v| v as f64))
        .collect();
    let bridged: Vec<&&RelockRun> = ok.iter().filter(|r| r.bridged).collect();
    Ok(RelockRow {
        event: ev,
        name: ev.name(),
        point: *pt,
        seeds: runs.len(),
        locked_before: runs.iter().filter(|r| r.locked_before).count(),
        lost: runs.iter().filter(|r| r.lost).count(),
        relocked: ok.len(),
        to_loss_median: link::median(&to_loss),
        to_loss_max: link::max(&to_loss),
        total_median: link::median(&col(&|r| r.total as f64)),
        total_max: link::max(&col(&|r| r.total as f64)),
        signal_median: link::median(&col(&|r| r.signal as f64)),
        signal_max: link::max(&col(&|r| r.signal as f64)),
        secs_median: link::median(&col(&|r| r.secs)),
        secs_max: link::max(&col(&|r| r.secs)),
        bridged: bridged.len(),
        new_epoch: ok.iter().filter(|r| r.epoch_advanced).count(),
        bridged_correct: bridged
            .iter()
            .filter(|r| r.numbering_kept == Some(true))
            .count(),
        bridged_wrong: bridged
            .iter()
            .filter(|r| r.numbering_kept == Some(false))
            .count(),
    })
}
