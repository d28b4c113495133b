//! Replay: push a stream of TDC events through the firmware core exactly as a board would, and
//! collect what a person debugging the link wants to see — the summary, time series for plots,
//! the fold profile, and optionally a per-detection trace.

use crate::clocks::{ClockStages, HostClock, HostNumbering};
use crate::stats::{BlockPoint, HostMonitor, LiveLog};
use serde::Serialize;
use slotwise::fixed::types::U0F32;
use slotwise::formats::{
    alarm, encode_frame, statistics, RecordType, CRC_LEN, HEADER_LEN, MAX_FRAME,
};
use slotwise::frame_out::SMALL_RECORD;
use slotwise::{AlarmConfig, StatsConfig};
use slotwise::{
    Basis, Fate, KeySink, Outcome, Receiver, ReceiverConfig, SiftedBit, TdcEvent, Trace,
    Transmitter,
};
use std::collections::BTreeMap;
use std::io::Write;

pub use crate::profile::HOST_PENDING;

/// The receiver as the host runs it: the host's clock and numbering stages, [`HOST_PENDING`].
pub type HostReceiver = Receiver<HostClock, HOST_PENDING, HostNumbering>;

/// Number of phase bins in the fold profile.
pub const FOLD_BINS: usize = 200;

/// What the simulator knows about one detection (never shown to the core).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TruthTag {
    /// Slot of the pulse that caused the detection; `None` for dark counts and afterpulses.
    pub slot: Option<u64>,
}

/// A per-detection trace request: write detections with `from_ps <= t < to_ps` as CSV.
pub struct TraceRequest {
    /// Where to write.
    pub out: Box<dyn Write>,
    /// First time traced (ps, on the unwrapped time base).
    pub from_ps: u64,
    /// End of the traced range (exclusive).
    pub to_ps: u64,
}

/// A change of the clock's or the numbering's state during a run.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ClockEventKind {
    /// The clock gives slots (first lock or relock).
    Locked,
    /// The clock stopped giving slots.
    LockLost,
    /// The numbering reached the transmitter's absolute slot numbers.
    Aligned,
    /// The numbering lost them (new clock epoch, or misalignment).
    AlignmentLost,
    /// The clock went into holdover: no slots, the model extrapolated (`docs/holdover.md`).
    HoldoverStarted,
    /// A holdover ended with the arrivals where the prediction put them: numbers kept.
    HoldoverBridged,
    /// A holdover ended on a phase jump of the arrivals, taken without losing the lock.
    PhaseJump,
}

/// One [`ClockEventKind`] at a time, seconds since the first detection.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct ClockEvent {
    /// Seconds since the first detection.
    pub t_s: f64,
    /// What changed.
    pub kind: ClockEventKind,
    /// At the end of a holdover: the arrivals' offset from the prediction, slots.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub offset_slots: Option<f64>,
    /// At the end of a holdover: the prediction's error bound then, slots.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub bound_slots: Option<f64>,
}

/// Most clock events a session keeps (later ones are counted, not kept).
pub const MAX_CLOCK_EVENTS: usize = 4096;

/// QBER errors and totals of one time bucket.
#[derive(Clone, Copy, Debug, Default, Serialize, PartialEq)]
pub struct Bucket {
    /// Start of the bucket in seconds since the first detection.
    pub t_s: f64,
    /// Matched-basis tested bits and errors: `[basis] = (errors, total)`.
    pub tested: [(u64, u64); 2],
    /// Detections taken in during the bucket, per channel (first 8 channels).
    pub detections: [u64; 8],
    /// Gated detections: count and sum of squared distance to their gate's centre (ps²).
    pub residual: (u64, f64),
    /// The clock's period at the bucket's last gated detection (ps), when locked.
    pub period_ps: Option<f64>,
}

struct Sink {
    bucket_ps: u64,
    /// Time of the latest detection, ps since the first one (sifted bits are binned by it).
    now_ps: u64,
    buckets: Vec<Bucket>,
    wrong_slot: BTreeMap<u64, bool>,
    misassigned_sifted: u64,
    truth_checked: bool,
    trace_pending: BTreeMap<u64, Vec<String>>,
    trace_out: Option<Box<dyn Write>>,
    io_error: Option<std::io::Error>,
    /// Where sifted bits are copied to as well (a key-block file), when set.
    tap: Option<Box<dyn KeySink>>,
}

impl Sink {
    fn bucket(&mut self, t_ps: u64) -> &mut Bucket {
        let i = (t_ps / self.bucket_ps.max(1)) as usize;
        while self.buckets.len() <= i {
            let t_s = (self.buckets.len() as u64 * self.bucket_ps) as f64 * 1e-12;
            self.buckets.push(Bucket {
                t_s,
                ..Bucket::default()
            });
        }
        &mut self.buckets[i]
    }

    fn flush_trace(&mut self, slot: u64, outcome: &str) {
        if let Some(lines) = self.trace_pending.remove(&slot) {
            // Every detection of a slot with two or more gated clicks is counted `multi_click`
            // (the slot's own outcome goes to `multi_click_events`); the trace says the same.
            let outcome = if lines.len() > 1 {
                Fate::MultiClick.name()
            } else {
                outcome
            };
            if let Some(out) = self.trace_out.as_mut() {
                for l in lines {
                    if let Err(e) = writeln!(out, "{l},{outcome}") {
                        self.io_error.get_or_insert(e);
                    }
                }
            }
        }
    }
}

impl KeySink for Sink {
    fn sifted(&mut self, bit: SiftedBit) {
        if let Some(t) = self.tap.as_mut() {
            t.sifted(bit);
        }
        if self.truth_checked && self.wrong_slot.get(&bit.slot).copied().unwrap_or(false) {
            self.misassigned_sifted += 1;
        }
        if let Some(tx_bit) = bit.tx_bit {
            let b = self.bucket(self.now_ps);
            let e = &mut b.tested[bit.basis.index()];
            e.1 += 1;
            if tx_bit != bit.bit {
                e.0 += 1;
            }
        }
    }

    fn resolved(&mut self, slot: u64, outcome: Outcome) {
        self.wrong_slot.remove(&slot);
        self.flush_trace(slot, outcome.name());
    }
}

/// The firmware core plus the host's bookkeeping around it.
pub struct Session<T: Transmitter> {
    rx: Box<HostReceiver>,
    tx: T,
    sink: Sink,
    fold: Vec<[u64; FOLD_BINS]>,
    trace_range: (u64, u64),
    cfg: ReceiverConfig,
    first_t_ps: Option<u64>,
    first_lock: Option<(u64, f64)>,
    /// Clock locked and numbering aligned at the latest detection.
    state: (bool, bool),
    /// Holdovers, bridged holdovers and jumps so far (to note each as it happens).
    holds: (u32, u32, u32),
    /// Whether the clock was in holdover at the previous detection.
    was_holding: bool,
    clock_events: Vec<ClockEvent>,
    monitor: Box<HostMonitor>,
    live: LiveLog,
    frame_seq: u16,
}

impl<T: Transmitter> Session<T> {
    /// A session with the given core configuration, clock and transmitter; `bucket_s` is the
    /// resolution of the time series (seconds since the first detection).
    pub fn new(
        cfg: ReceiverConfig,
        stages: ClockStages,
        tx: T,
        bucket_s: f64,
        truth_checked: bool,
        trace: Option<TraceRequest>,
    ) -> std::io::Result<Self> {
        let (trace_out, trace_range) = match trace {
            Some(mut t) => {
                writeln!(
                    t.out,
                    "t_ps,channel,slot,phase,gate,basis,bit,decision,outcome"
                )?;
                (Some(t.out), (t.from_ps, t.to_ps))
            }
            None => (None, (0, 0)),
        };
        Ok(Self {
            rx: stages.receiver(cfg),
            tx,
            sink: Sink {
                bucket_ps: (bucket_s * 1e12).max(1.0) as u64,
                now_ps: 0,
                buckets: Vec::new(),
                wrong_slot: BTreeMap::new(),
                misassigned_sifted: 0,
                truth_checked,
                trace_pending: BTreeMap::new(),
                trace_out,
                io_error: None,
                tap: None,
            },
            fold: vec![[0; FOLD_BINS]; usize::from(cfg.gates().channels())],
            trace_range,
            cfg,
            first_t_ps: None,
            first_lock: None,
            state: (false, false),
            holds: (0, 0, 0),
            was_holding: false,
            clock_events: Vec::new(),
            monitor: Box::new(HostMonitor::new(
                StatsConfig::new((bucket_s * 1e12).max(1.0) as u64, 0, cfg.gates())
                    .map_err(std::io::Error::other)?,
                AlarmConfig::DEFAULT,
            )),
            live: LiveLog::default(),
            frame_seq: 0,
        })
    }

    /// Run the live-statistics monitor with these settings (before the first detection).
    pub fn with_monitor(mut self, stats: StatsConfig, alarms: AlarmConfig) -> Self {
        self.monitor = Box::new(HostMonitor::new(stats, alarms));
        self
    }

    /// The live-statistics monitor.
    pub fn monitor(&self) -> &HostMonitor {
        &self.monitor
    }

    /// One line for a terminal: window QBER per basis with the board's bound, active alarms.
    pub fn live_status(&self) -> String {
        let w = self.monitor.window();
        let cfg = self.monitor.alarms().config();
        let q = |b: Basis| {
            let (e, n) = w.errors(b, Some(cfg.intensity()));
            if n == 0 {
                return format!("{} -", b.name());
            }
            let ub = f64::from(cfg.upper_ppm(e, n)) * 1e-4;
            format!("{} {:.2}% (≤{ub:.2}%)", b.name(), 1e2 * e as f64 / n as f64)
        };
        format!(
            "{} {} alarms {:#07b}",
            q(Basis::Z),
            q(Basis::X),
            self.monitor.alarms().active()
        )
    }

    /// Take the monitor's alarm events and block snapshot into the log, as frames too.
    fn drain(&mut self) {
        let first = self.first_t_ps.unwrap_or(0);
        while let Some(ev) = self.monitor.pop_event() {
            let mut p = [0u8; alarm::LEN];
            if let Ok(n) = ev.emit(&mut p) {
                self.frame(RecordType::Alarm, &p[..n]);
                self.live.frame_counts.0 += 1;
            }
            self.live.events.push(ev);
        }
        if let Some(snap) = self.monitor.take_snapshot() {
            let mut p = [0u8; statistics::LEN];
            if let Ok(n) = snap.emit(&mut p) {
                self.frame(RecordType::Stats, &p[..n]);
                self.live.frame_counts.1 += 1;
            }
            let channels = usize::from(self.cfg.gates().channels());
            self.live.blocks.push(BlockPoint {
                t_s: snap.t_ps.saturating_sub(first) as f64 * 1e-12,
                snapshot: snap,
                block_detections: self
                    .monitor
                    .last_block()
                    .map(|b| b.detections.iter().take(channels).copied().collect())
                    .unwrap_or_default(),
                block_s: self.monitor.config().block_ps() as f64 * 1e-12,
            });
        }
    }

    fn frame(&mut self, record: RecordType, payload: &[u8]) {
        let mut raw = [0u8; HEADER_LEN + SMALL_RECORD + CRC_LEN];
        let mut out = vec![0u8; MAX_FRAME];
        if let Ok(n) = encode_frame(record, self.frame_seq, payload, &mut raw, &mut out) {
            out.truncate(n);
            self.live.frames.push(out);
            self.frame_seq = self.frame_seq.wrapping_add(1);
        }
    }

    /// Pass the classical channel's coarse hint to the core (see `Receiver::hint`).
    pub fn hint(&mut self, t_ps: u64, tx_slot: u64) {
        self.rx.hint(t_ps, tx_slot);
    }

    /// Copy every sifted bit to `tap` as well (e.g. a key-block file writer).
    pub fn set_key_tap(&mut self, tap: Box<dyn KeySink>) {
        self.sink.tap = Some(tap);
    }

    /// The transmitter, mutably (to drain a link before the end).
    pub fn tx_mut(&mut self) -> &mut T {
        &mut self.tx
    }

    /// Take every answer that has arrived.
    pub fn service(&mut self) {
        self.rx.service(&mut self.tx, &mut self.sink);
    }

    /// Push one event (with the simulator's truth when known).
    pub fn push(&mut self, ev: TdcEvent, truth: Option<TruthTag>) {
        let tr = self
            .rx
            .push(ev, &mut self.tx, &mut self.monitor.tap(&mut self.sink));
        self.monitor.observe(&tr, self.rx.clock().locked());
        self.observe(&tr, truth);
        self.drain();
    }

    /// Push a block of events without truth.
    pub fn push_block(&mut self, events: &[TdcEvent]) {
        for &ev in events {
            self.push(ev, None);
        }
        self.drain();
    }

    fn observe(&mut self, tr: &Trace, truth: Option<TruthTag>) {
        if let Some(t) = tr.t_ps {
            let first = *self.first_t_ps.get_or_insert(t);
            let rel = t.saturating_sub(first);
            self.sink.now_ps = rel;
            if self.first_lock.is_none() && self.rx.clock().locked() {
                self.first_lock = Some((self.rx.detections_in(), rel as f64 * 1e-12));
            }
            self.clock_transitions(rel);
            // Only gated detections carry a residual; the clock's period is read for those alone.
            let gated = tr
                .gate
                .and_then(|g| self.cfg.gates().gate(g))
                .zip(tr.slot)
                .and_then(|(g, (_, phase))| {
                    let p = self.rx.clock().period_ps()?;
                    Some((p, (phase.to_num::<f64>() - g.centre().to_num::<f64>()) * p))
                });
            let b = self.sink.bucket(rel);
            if let Some(d) = b.detections.get_mut(usize::from(tr.channel)) {
                *d += 1;
            }
            if let Some((p, r)) = gated {
                b.period_ps = Some(p);
                b.residual.0 += 1;
                b.residual.1 += r * r;
            }
        }
        if let (Some((_, phase)), Some(f)) = (tr.slot, self.fold.get_mut(usize::from(tr.channel))) {
            let bin = ((u64::from(phase.to_bits()) * FOLD_BINS as u64) >> 32) as usize;
            f[bin.min(FOLD_BINS - 1)] += 1;
        }
        if tr.fate == Fate::InFlight {
            if let (Some((slot, _)), Some(TruthTag { slot: true_slot })) = (tr.slot, truth) {
                let wrong = true_slot.is_some_and(|s| s != slot);
                *self.sink.wrong_slot.entry(slot).or_insert(false) |= wrong;
            }
        }
        self.trace(tr);
    }

    /// Note when the clock's lock or the numbering's alignment changed. A holdover's start and
    /// end are noted as such, not as a loss and a lock.
    fn clock_transitions(&mut self, rel_ps: u64) {
        let clock = self.rx.clock();
        let now = (clock.locked(), self.rx.numbering().aligned());
        let holds = clock.holdover_counts();
        let holding = clock.holding();
        let (was, t_s) = (self.state, rel_ps as f64 * 1e-12);
        let was_holds = self.holds;
        self.state = now;
        self.holds = holds;
        let (offset, bound) = clock.last_resume().unzip();
        let mut note = |kind, detail: bool| {
            if self.clock_events.len() < MAX_CLOCK_EVENTS {
                self.clock_events.push(ClockEvent {
                    t_s,
                    kind,
                    offset_slots: offset.filter(|_| detail),
                    bound_slots: bound.filter(|_| detail),
                });
            }
        };
        if holds.0 > was_holds.0 {
            note(ClockEventKind::HoldoverStarted, false);
        }
        if holds.1 > was_holds.1 {
            note(ClockEventKind::HoldoverBridged, true);
        } else if holds.2 > was_holds.2 {
            note(ClockEventKind::PhaseJump, true);
        }
        let resumed = holds.1 > was_holds.1 || holds.2 > was_holds.2;
        match (was.0 || self.was_holding, now.0 || holding) {
            (false, true) if !resumed => note(ClockEventKind::Locked, false),
            (true, false) => note(ClockEventKind::LockLost, false),
            _ => {}
        }
        self.was_holding = holding;
        match (was.1, now.1) {
            (false, true) => note(ClockEventKind::Aligned, false),
            (true, false) => note(ClockEventKind::AlignmentLost, false),
            _ => {}
        }
    }

    fn trace(&mut self, tr: &Trace) {
        if self.sink.trace_out.is_none() {
            return;
        }
        let Some(t) = tr.t_ps else {
            return self.trace_line(tr, None);
        };
        if t >= self.trace_range.0 && t < self.trace_range.1 {
            self.trace_line(tr, Some(t));
        }
    }

    fn trace_line(&mut self, tr: &Trace, t: Option<u64>) {
        let (slot, phase) = match tr.slot {
            Some((s, p)) => (s.to_string(), format!("{:.6}", p.to_num::<f64>())),
            None => (String::new(), String::new()),
        };
        let (gate, basis, bit) = match tr
            .gate
            .and_then(|g| self.cfg.gates().gate(g).map(|x| (g, x)))
        {
            Some((g, x)) => (g.to_string(), x.basis.name().to_string(), x.bit.to_string()),
            None => (String::new(), String::new(), String::new()),
        };
        let decision = tr.fate.name();
        let line = format!(
            "{},{},{slot},{phase},{gate},{basis},{bit},{decision}",
            t.map(|t| t.to_string()).unwrap_or_default(),
            tr.channel
        );
        match (tr.fate, tr.slot) {
            (Fate::InFlight, Some((s, _))) => {
                self.sink.trace_pending.entry(s).or_default().push(line)
            }
            _ => {
                if let Some(out) = self.sink.trace_out.as_mut() {
                    if let Err(e) = writeln!(out, "{line},") {
                        self.sink.io_error.get_or_insert(e);
                    }
                }
            }
        }
    }

    /// End of stream: resolve everything and hand back the results.
    pub fn finish(mut self) -> std::io::Result<SessionResult<T>> {
        self.rx
            .finish(&mut self.tx, &mut self.monitor.tap(&mut self.sink));
        self.drain();
        let rest: Vec<u64> = self.sink.trace_pending.keys().copied().collect();
        for s in rest {
            self.sink.flush_trace(s, "multi_click");
        }
        if let Some(mut out) = self.sink.trace_out.take() {
            out.flush()?;
        }
        if let Some(e) = self.sink.io_error.take() {
            return Err(e);
        }
        Ok(SessionResult {
            rx: self.rx,
            tx: self.tx,
            buckets: self.sink.buckets,
            fold: self.fold,
            first_lock: self.first_lock,
            clock_events: self.clock_events,
            monitor: self.monitor,
            live: self.live,
            first_t_ps: self.first_t_ps.unwrap_or(0),
            misassigned_sifted: if self.sink.truth_checked {
                Some(self.sink.misassigned_sifted)
            } else {
                None
            },
        })
    }

    /// The core, for progress reports.
    pub fn receiver(&self) -> &HostReceiver {
        &self.rx
    }
}

/// Everything a finished session produced.
pub struct SessionResult<T: Transmitter> {
    /// The core in its final state (accounting, tallies, clock).
    pub rx: Box<HostReceiver>,
    /// Detections taken in, and seconds since the first one, when the clock first locked.
    pub first_lock: Option<(u64, f64)>,
    /// Locks, losses, alignments and their losses, in time order (at most [`MAX_CLOCK_EVENTS`]).
    pub clock_events: Vec<ClockEvent>,
    /// The transmitter, for its own counters.
    pub tx: T,
    /// QBER and rate series.
    pub buckets: Vec<Bucket>,
    /// Fold profile per channel: detections per phase bin over the whole run.
    pub fold: Vec<[u64; FOLD_BINS]>,
    /// Sifted bits whose slot differs from the simulator's truth (simulated runs only).
    pub misassigned_sifted: Option<u64>,
    /// The live-statistics monitor in its final state.
    pub monitor: Box<HostMonitor>,
    /// Closed blocks, alarm events and their frames.
    pub live: LiveLog,
    /// Receiver time of the first detection, ps (the origin of every `t_s`).
    pub first_t_ps: u64,
}

/// A phase as an f64 fraction of the slot (for reports).
pub fn phase_f64(p: U0F32) -> f64 {
    p.to_num::<f64>()
}
