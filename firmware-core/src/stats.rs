//! Stage 7b — live statistics in bounded memory: what an operator watches while the link runs.
//!
//! The receiver's own [`Tally`](crate::tally::Tally) holds counts since start. A link that degrades (a drifting
//! interferometer, a saturating detector, a fibre being bent) shows up first over the recent past,
//! so [`Monitor`] keeps a **sliding window**: a ring of `BLOCKS` block tallies (const generic),
//! plus the same counts since start.
//!
//! **Block length is receiver time** (`block_ps`), not slots or sifted bits: rates, dead time and
//! the off-gate count are per-second quantities, and a blackout — no detections, no slots, no
//! sifted bits — must still close blocks (empty ones) so the rate collapse is seen. At a fixed
//! repetition rate, a block of `block_ps` is `block_ps / T` slots. Time comes in with the data (the
//! core never reads a clock): a block closes when a detection at or past its end arrives; the
//! caller may call [`Monitor::advance`] with a time from elsewhere.
//!
//! Per block, and since start:
//! - QBER per basis and intensity: a [`Tally`](crate::tally::Tally) of sifted bits (matched basis; tested when the
//!   transmitter revealed its bit), single and squashed multi-click slots together;
//! - detections per channel (every detection the receiver took in, whatever its fate);
//! - time locked (sum of gaps between consecutive detections seen while the clock was locked);
//! - detections outside every gate per channel: off-gate rate = count / time locked. Uniform noise
//!   (dark counts, late afterpulses) lands outside the gates with probability 1 − duty, where duty
//!   is the channel's summed gate width per slot, so the channel's noise rate is estimated as
//!   off-gate rate / (1 − duty) and the noise expected inside its gates as that times duty;
//! - dead-time fraction per channel from the configured dead time τ of a non-paralysable detector:
//!   each registered detection blinds it for τ, so the fraction of time dead is m·τ for a measured
//!   rate m (common practice; radiation-detection textbooks give m = n/(1 + nτ));
//! - multi-click slots (two or more gated detections in one slot) over slots with a gated
//!   detection.
//!
//! Feeding it leaves the receiver's hot path alone: [`Monitor::observe`] reads the [`Trace`]
//! that `Receiver::push` returns, and [`Tap`] wraps the caller's [`KeySink`] to see sifted bits.
//! A closed block re-evaluates the alarms ([`crate::alarms`]) and leaves a [`Snapshot`] (record
//! type 6) for the caller to frame. A board that ingests raw TDC words also hands its
//! [`IngestCounts`] to [`Monitor::observe_ingest`] now and then (once per DMA block, say), so a
//! lost or garbled word raises an alarm instead of only a summary counter at the end.

use crate::accounting::Fate;
use crate::alarms::{AlarmConfig, AlarmEvent, Alarms};
use crate::gates::Basis;
use crate::ingest::IngestCounts;
use crate::receiver::Trace;
use crate::sift::{KeySink, Outcome, SiftedBit};

pub use crate::counts::{Counts, StatsConfig, StatsConfigError};
pub use crate::formats::statistics::Snapshot;

/// Window length, in blocks, of the default monitor (the board and the host use it).
pub const DEFAULT_BLOCKS: usize = 8;

/// Live statistics and alarms over a window of `BLOCKS` blocks.
#[derive(Clone, Debug)]
pub struct Monitor<const BLOCKS: usize> {
    cfg: StatsConfig,
    alarms: Alarms,
    ring: [Counts; BLOCKS],
    /// Next ring entry to write.
    head: usize,
    /// Closed blocks held (≤ BLOCKS).
    len: usize,
    current: Counts,
    block_start_ps: Option<u64>,
    blocks_closed: u64,
    totals: Counts,
    first_t_ps: Option<u64>,
    last_t_ps: Option<u64>,
    was_locked: bool,
    last_gated_slot: Option<u64>,
    last_gated_multi: bool,
    snapshot: Option<Snapshot>,
    snapshots_replaced: u64,
}

impl<const BLOCKS: usize> Monitor<BLOCKS> {
    /// An empty monitor.
    pub const fn new(cfg: StatsConfig, alarms: AlarmConfig) -> Self {
        const { assert!(BLOCKS > 0 && BLOCKS <= 255, "BLOCKS must lie in 1..=255") };
        Self {
            cfg,
            alarms: Alarms::new(alarms),
            ring: [Counts::new(); BLOCKS],
            head: 0,
            len: 0,
            current: Counts::new(),
            block_start_ps: None,
            blocks_closed: 0,
            totals: Counts::new(),
            first_t_ps: None,
            last_t_ps: None,
            was_locked: false,
            last_gated_slot: None,
            last_gated_multi: false,
            snapshot: None,
            snapshots_replaced: 0,
        }
    }

    /// The statistics settings.
    pub const fn config(&self) -> &StatsConfig {
        &self.cfg
    }

    /// Alarm state, counters and pending events.
    pub const fn alarms(&self) -> &Alarms {
        &self.alarms
    }

    /// Take the oldest alarm event not yet taken.
    pub fn pop_event(&mut self) -> Option<AlarmEvent> {
        self.alarms.pop_event()
    }

    /// Take the snapshot of the latest closed block, once.
    pub fn take_snapshot(&mut self) -> Option<Snapshot> {
        self.snapshot.take()
    }

    /// Snapshots replaced before they were taken (one detection closing several blocks, e.g.
    /// after a blackout, leaves only the last block's; the window's counts are unaffected).
    pub const fn snapshots_replaced(&self) -> u64 {
        self.snapshots_replaced
    }

    /// Closed blocks held in the window (≤ `BLOCKS`).
    pub const fn window_blocks(&self) -> usize {
        self.len
    }

    /// Blocks closed since start (including empty ones).
    pub const fn blocks_closed(&self) -> u64 {
        self.blocks_closed
    }

    /// The block still open.
    pub const fn current(&self) -> &Counts {
        &self.current
    }

    /// Counts since start (the open block included); `span_ps` is first to latest detection.
    pub fn since_start(&self) -> Counts {
        let mut t = self.totals;
        t.span_ps = match (self.first_t_ps, self.last_t_ps) {
            (Some(a), Some(b)) => b.saturating_sub(a),
            _ => 0,
        };
        t
    }

    /// The block closed most recently.
    pub fn last_block(&self) -> Option<&Counts> {
        if self.len == 0 {
            return None;
        }
        self.ring.get((self.head + BLOCKS - 1) % BLOCKS)
    }

    /// Sum of the closed blocks in the window.
    pub fn window(&self) -> Counts {
        let mut w = Counts::new();
        for b in self.ring.iter().take(self.len) {
            w.add(b);
        }
        w
    }

    /// A [`KeySink`] that shows every sifted bit to this monitor and passes it on to `inner`.
    pub fn tap<'a, K: KeySink>(&'a mut self, inner: &'a mut K) -> Tap<'a, K, BLOCKS> {
        Tap {
            monitor: self,
            inner,
        }
    }

    /// Count one sifted bit into the open block and the totals.
    pub fn sifted(&mut self, bit: &SiftedBit) {
        for c in [&mut self.current, &mut self.totals] {
            c.tally
                .add(bit.basis, bit.tx_bit, bit.intensity, bit.basis, bit.bit);
            c.sifted += 1;
        }
    }

    /// Read one detection's [`Trace`]; `locked` is whether the clock gives slots after it.
    pub fn observe(&mut self, tr: &Trace, locked: bool) {
        if let Some(t) = tr.t_ps {
            self.advance(t);
            self.first_t_ps.get_or_insert(t);
            if let (true, true, Some(last)) = (locked, self.was_locked, self.last_t_ps) {
                let dt = t.saturating_sub(last);
                self.current.locked_ps += dt;
                self.totals.locked_ps += dt;
            }
            self.alarms.lock(t, self.was_locked, locked);
            self.was_locked = locked;
            self.last_t_ps = Some(self.last_t_ps.map_or(t, |l| l.max(t)));
        }
        let ch = usize::from(tr.channel);
        let multi = match (tr.fate, tr.slot) {
            (Fate::InFlight, Some((slot, _))) if self.last_gated_slot == Some(slot) => {
                let first = !self.last_gated_multi;
                self.last_gated_multi = true;
                Some(first)
            }
            (Fate::InFlight, Some((slot, _))) => {
                self.last_gated_slot = Some(slot);
                self.last_gated_multi = false;
                None
            }
            _ => None,
        };
        for c in [&mut self.current, &mut self.totals] {
            c.detections_in += 1;
            if let Some(d) = c.detections.get_mut(ch) {
                *d += 1;
            }
            match tr.fate {
                Fate::OutsideGates => {
                    if let Some(d) = c.off_gate.get_mut(ch) {
                        *d += 1;
                    }
                }
                Fate::InFlight => match multi {
                    None => c.gated_slots += 1,
                    Some(true) => {
                        c.multi_click_slots += 1;
                        c.multi_click_detections += 2;
                    }
                    Some(false) => c.multi_click_detections += 1,
                },
                _ => {}
            }
        }
    }

    /// Receiver time of the latest detection observed, ps.
    pub const fn last_t_ps(&self) -> Option<u64> {
        self.last_t_ps
    }

    /// Read the board's ingest counters at receiver time `t_ps` (ps): raises the ingest-fault
    /// alarm when an overrun, FIFO-full, rollover-gap or malformed-word counter grew since the
    /// previous call (the first call compares with zero), clears it after a call in which none
    /// grew. Closes no block: `t_ps` only stamps the event.
    pub fn observe_ingest(&mut self, counts: &IngestCounts, t_ps: u64) {
        self.alarms.ingest(t_ps, counts);
    }

    /// Close every block that ends at or before `t_ps` (empty ones included).
    pub fn advance(&mut self, t_ps: u64) {
        let block = self.cfg.block_ps();
        let Some(start) = self.block_start_ps else {
            self.block_start_ps = Some(t_ps);
            return;
        };
        if t_ps < start.saturating_add(block) {
            return;
        }
        let elapsed = (t_ps - start) / block;
        // Past a full window of empty blocks every further one looks the same: close BLOCKS + 1
        // (the first with the open block's counts) and count the rest (their snapshots too).
        let closes = elapsed.min(BLOCKS as u64 + 1);
        for i in 0..closes {
            let counts = if i == 0 {
                core::mem::take(&mut self.current)
            } else {
                Counts::new()
            };
            let end = start.saturating_add((i + 1).saturating_mul(block));
            self.close(end, counts);
        }
        self.blocks_closed += elapsed - closes;
        self.snapshots_replaced += elapsed - closes;
        self.block_start_ps = Some(start.saturating_add(elapsed.saturating_mul(block)));
    }

    fn close(&mut self, end_ps: u64, mut counts: Counts) {
        counts.span_ps = self.cfg.block_ps();
        if let Some(slot) = self.ring.get_mut(self.head) {
            *slot = counts;
        }
        self.head = (self.head + 1) % BLOCKS;
        self.len = (self.len + 1).min(BLOCKS);
        self.blocks_closed += 1;
        let w = self.window();
        self.alarms.evaluate(end_ps, &w, &counts, &self.cfg);
        if self.snapshot.is_some() {
            self.snapshots_replaced += 1;
        }
        self.snapshot = Some(snapshot(
            end_ps,
            self.blocks_closed,
            self.len as u8,
            &w,
            &self.cfg,
            &self.alarms,
        ));
    }
}

/// A [`KeySink`] adapter: the monitor sees each sifted bit, then `inner` gets it.
pub struct Tap<'a, K: KeySink, const BLOCKS: usize> {
    monitor: &'a mut Monitor<BLOCKS>,
    inner: &'a mut K,
}

impl<K: KeySink, const BLOCKS: usize> KeySink for Tap<'_, K, BLOCKS> {
    fn sifted(&mut self, bit: SiftedBit) {
        self.monitor.sifted(&bit);
        self.inner.sifted(bit);
    }

    fn resolved(&mut self, slot: u64, outcome: Outcome) {
        self.inner.resolved(slot, outcome);
    }
}

fn sat32(v: u64) -> u32 {
    u32::try_from(v).unwrap_or(u32::MAX)
}

/// The record of a closed block: the window `w` with its confidence bounds and active alarms.
fn snapshot(
    t_ps: u64,
    blocks_closed: u64,
    window_blocks: u8,
    w: &Counts,
    cfg: &StatsConfig,
    alarms: &Alarms,
) -> Snapshot {
    let mut s = Snapshot {
        t_ps,
        blocks_closed,
        window_ps: w.span_ps,
        locked_ps: w.locked_ps,
        window_blocks,
        channels: cfg.channels(),
        active: alarms.active(),
        gated_slots: sat32(w.gated_slots),
        multi_click_slots: sat32(w.multi_click_slots),
        ..Snapshot::default()
    };
    for b in Basis::ALL {
        if let Some(row) = s.tested.get_mut(b.index()) {
            for (i, cell) in row.iter_mut().enumerate() {
                let (e, n) = w.errors(b, Some(i as u8));
                *cell = (sat32(e), sat32(n));
            }
        }
        if let Some(u) = s.upper_ppm.get_mut(b.index()) {
            *u = alarms.upper_ppm(w, b).unwrap_or(u32::MAX);
        }
    }
    for (d, v) in s.detections.iter_mut().zip(w.detections) {
        *d = sat32(v);
    }
    for (d, v) in s.off_gate.iter_mut().zip(w.off_gate) {
        *d = sat32(v);
    }
    s
}

#[cfg(test)]
mod tests;

#[cfg(test)]
mod ingest_tests;
