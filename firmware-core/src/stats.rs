//! Stage 7b — live statistics in bounded memory: what an operator watches while the link runs.
//!
//! The receiver's own [`Tally`] holds counts since start. A link that degrades (a drifting
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
//! - QBER per basis and intensity: a [`Tally`] of sifted bits (matched basis; tested when the
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
//! type 6) for the caller to frame.

use crate::accounting::Fate;
use crate::alarms::{AlarmConfig, AlarmEvent, Alarms};
use crate::gates::{Basis, GateTable, MAX_CHANNELS, MAX_INTENSITIES};
use crate::receiver::Trace;
use crate::sift::{KeySink, Outcome, SiftedBit};
use crate::tally::Tally;
use core::fmt;

/// Why a statistics configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum StatsConfigError {
    /// Block length of zero ps.
    ZeroBlock,
    /// Dead time not shorter than one block (ps).
    DeadTime(u64),
}

impl fmt::Display for StatsConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::ZeroBlock => write!(f, "block_ps must be positive"),
            Self::DeadTime(d) => write!(f, "dead_time_ps {d} must be shorter than one block"),
        }
    }
}

impl core::error::Error for StatsConfigError {}

/// Validated statistics settings: block length, detector dead time, per-channel gate duty.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StatsConfig {
    block_ps: u64,
    dead_time_ps: u64,
    channels: u8,
    duty_ppm: [u32; MAX_CHANNELS],
}

impl StatsConfig {
    /// Blocks of `block_ps` receiver time; `dead_time_ps` is the detectors' dead time; the gate
    /// duty per channel is read from `gates`.
    pub fn new(
        block_ps: u64,
        dead_time_ps: u64,
        gates: &GateTable,
    ) -> Result<Self, StatsConfigError> {
        if block_ps == 0 {
            return Err(StatsConfigError::ZeroBlock);
        }
        if dead_time_ps >= block_ps {
            return Err(StatsConfigError::DeadTime(dead_time_ps));
        }
        let mut duty = [0u64; MAX_CHANNELS];
        for g in gates.gates() {
            if let Some(d) = duty.get_mut(usize::from(g.channel)) {
                *d += u64::from(g.end.to_bits().saturating_sub(g.start.to_bits()));
            }
        }
        let mut duty_ppm = [0u32; MAX_CHANNELS];
        for (p, d) in duty_ppm.iter_mut().zip(duty) {
            *p = ((u128::from(d) * 1_000_000) >> 32).min(1_000_000) as u32;
        }
        Ok(Self {
            block_ps,
            dead_time_ps,
            channels: gates.channels(),
            duty_ppm,
        })
    }

    /// Block length in ps of receiver time.
    pub const fn block_ps(&self) -> u64 {
        self.block_ps
    }

    /// Detector dead time in ps.
    pub const fn dead_time_ps(&self) -> u64 {
        self.dead_time_ps
    }

    /// Channels described by the gate table.
    pub const fn channels(&self) -> u8 {
        self.channels
    }

    /// Summed gate width of `channel` as a fraction of the slot, ppm (0 for unknown channels).
    pub fn duty_ppm(&self, channel: u8) -> u32 {
        self.duty_ppm
            .get(usize::from(channel))
            .copied()
            .unwrap_or(0)
    }
}

/// Counts of one block, of the window, or since start.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Counts {
    /// Receiver time covered, ps.
    pub span_ps: u64,
    /// Time the clock was locked, ps.
    pub locked_ps: u64,
    /// Sifted bits by (basis, tx bit, intensity, basis, rx bit); unrevealed bits in `untested`.
    pub tally: Tally,
    /// Sifted bits.
    pub sifted: u64,
    /// Detections taken in (every fate, every channel).
    pub detections_in: u64,
    /// Detections per channel (channels ≥ [`MAX_CHANNELS`] are in `detections_in` only).
    pub detections: [u64; MAX_CHANNELS],
    /// Detections outside every gate, per channel.
    pub off_gate: [u64; MAX_CHANNELS],
    /// Slots with at least one gated detection.
    pub gated_slots: u64,
    /// Slots with two or more gated detections.
    pub multi_click_slots: u64,
    /// Gated detections in multi-click slots.
    pub multi_click_detections: u64,
}

impl Counts {
    /// All counts at zero.
    pub const fn new() -> Self {
        Self {
            span_ps: 0,
            locked_ps: 0,
            tally: Tally::new(),
            sifted: 0,
            detections_in: 0,
            detections: [0; MAX_CHANNELS],
            off_gate: [0; MAX_CHANNELS],
            gated_slots: 0,
            multi_click_slots: 0,
            multi_click_detections: 0,
        }
    }

    /// Add `o` into `self`, field by field.
    pub fn add(&mut self, o: &Counts) {
        self.span_ps += o.span_ps;
        self.locked_ps += o.locked_ps;
        let dst = self.tally.counts.iter_mut().flatten().flatten().flatten();
        let src = o.tally.counts.iter().flatten().flatten().flatten();
        for (d, s) in dst.flatten().zip(src.flatten()) {
            *d += s;
        }
        let dst = self.tally.untested.iter_mut().flatten();
        for (d, s) in dst.zip(o.tally.untested.iter().flatten()) {
            *d += s;
        }
        self.sifted += o.sifted;
        self.detections_in += o.detections_in;
        for (d, s) in self.detections.iter_mut().zip(o.detections) {
            *d += s;
        }
        for (d, s) in self.off_gate.iter_mut().zip(o.off_gate) {
            *d += s;
        }
        self.gated_slots += o.gated_slots;
        self.multi_click_slots += o.multi_click_slots;
        self.multi_click_detections += o.multi_click_detections;
    }

    /// (errors, tested) of one basis; `intensity = None` sums every class.
    pub fn errors(&self, basis: Basis, intensity: Option<u8>) -> (u64, u64) {
        self.tally.errors(basis, intensity)
    }

    /// QBER in ppm, `None` when nothing was tested.
    pub fn qber_ppm(&self, basis: Basis, intensity: Option<u8>) -> Option<u32> {
        self.tally.qber_ppm(basis, intensity)
    }

    /// Detection rate of `channel` in mHz (0 over an empty span).
    pub fn rate_mhz(&self, channel: u8) -> u64 {
        per_second_milli(get(&self.detections, channel), self.span_ps)
    }

    /// Fraction of time `channel` was dead, ppm: detections × τ over the span (capped at 1e6).
    pub fn dead_fraction_ppm(&self, channel: u8, dead_time_ps: u64) -> u32 {
        if self.span_ps == 0 {
            return 0;
        }
        let busy = u128::from(get(&self.detections, channel)) * u128::from(dead_time_ps);
        (busy * 1_000_000 / u128::from(self.span_ps)).min(1_000_000) as u32
    }

    /// Detections outside every gate of `channel` per second locked, mHz.
    pub fn off_gate_rate_mhz(&self, channel: u8) -> u64 {
        per_second_milli(get(&self.off_gate, channel), self.locked_ps)
    }

    /// Noise rate of `channel` estimated from its off-gate rate: off-gate / (1 − duty), mHz.
    pub fn noise_rate_mhz(&self, channel: u8, duty_ppm: u32) -> u64 {
        let outside = 1_000_000u128.saturating_sub(u128::from(duty_ppm));
        if outside == 0 {
            return 0;
        }
        (u128::from(self.off_gate_rate_mhz(channel)) * 1_000_000 / outside)
            .min(u128::from(u64::MAX)) as u64
    }

    /// Noise counts expected inside `channel`'s gates per second: noise rate × duty, mHz.
    pub fn in_gate_noise_mhz(&self, channel: u8, duty_ppm: u32) -> u64 {
        let n = u128::from(self.noise_rate_mhz(channel, duty_ppm));
        (n * u128::from(duty_ppm) / 1_000_000) as u64
    }

    /// Multi-click slots over slots with a gated detection, ppm.
    pub fn multi_click_ppm(&self) -> u32 {
        crate::bounds::fraction_ppm(self.multi_click_slots, self.gated_slots)
    }

    /// Multi-click slots per second, mHz.
    pub fn multi_click_rate_mhz(&self) -> u64 {
        per_second_milli(self.multi_click_slots, self.span_ps)
    }
}

fn get(a: &[u64; MAX_CHANNELS], channel: u8) -> u64 {
    a.get(usize::from(channel)).copied().unwrap_or(0)
}

/// `count` per `span_ps` as mHz: count × 1e15 / span (0 over an empty span).
fn per_second_milli(count: u64, span_ps: u64) -> u64 {
    if span_ps == 0 {
        return 0;
    }
    (u128::from(count) * 1_000_000_000_000_000 / u128::from(span_ps)).min(u128::from(u64::MAX))
        as u64
}

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

    /// Close every block that ends at or before `t_ps` (empty ones included).
    pub fn advance(&mut self, t_ps: u64) {
        let block = self.cfg.block_ps;
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
        counts.span_ps = self.cfg.block_ps;
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
        self.snapshot = Some(Snapshot::of(
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

/// Bytes of a [`Snapshot`] payload (record type 6).
pub const SNAPSHOT_LEN: usize = 228;

/// The window's statistics at the end of one block: the payload of a record-type-6 frame.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Snapshot {
    /// End of the block just closed, ps of receiver time.
    pub t_ps: u64,
    /// Blocks closed since start.
    pub blocks_closed: u64,
    /// Receiver time the window covers, ps.
    pub window_ps: u64,
    /// Time locked within the window, ps.
    pub locked_ps: u64,
    /// Closed blocks in the window.
    pub window_blocks: u8,
    /// Channels described (entries of `detections` and `off_gate` that mean something).
    pub channels: u8,
    /// Active alarms as a bit mask ([`crate::alarms::AlarmKind::bit`]).
    pub active: u8,
    /// Window (errors, tested) per `[basis][intensity]`, saturating at u32::MAX.
    pub tested: [[(u32, u32); MAX_INTENSITIES]; 2],
    /// Upper confidence bound of the alarm's intensity class per basis, ppm (u32::MAX: no data).
    pub upper_ppm: [u32; 2],
    /// Window detections per channel.
    pub detections: [u32; MAX_CHANNELS],
    /// Window detections outside every gate, per channel.
    pub off_gate: [u32; MAX_CHANNELS],
    /// Window slots with a gated detection.
    pub gated_slots: u32,
    /// Window slots with two or more gated detections.
    pub multi_click_slots: u32,
}

fn sat32(v: u64) -> u32 {
    u32::try_from(v).unwrap_or(u32::MAX)
}

impl Snapshot {
    fn of(
        t_ps: u64,
        blocks_closed: u64,
        window_blocks: u8,
        w: &Counts,
        cfg: &StatsConfig,
        alarms: &Alarms,
    ) -> Self {
        let mut s = Self {
            t_ps,
            blocks_closed,
            window_ps: w.span_ps,
            locked_ps: w.locked_ps,
            window_blocks,
            channels: cfg.channels,
            active: alarms.active(),
            gated_slots: sat32(w.gated_slots),
            multi_click_slots: sat32(w.multi_click_slots),
            ..Self::default()
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

    /// Write the payload ([`SNAPSHOT_LEN`] bytes, layout in `docs/frames.md`); returns its length.
    pub fn encode(&self, out: &mut [u8]) -> Option<usize> {
        let dst = out.get_mut(..SNAPSHOT_LEN)?;
        let mut w = Put(dst, 0);
        w.put(&self.t_ps.to_le_bytes());
        w.put(&self.blocks_closed.to_le_bytes());
        w.put(&self.window_ps.to_le_bytes());
        w.put(&self.locked_ps.to_le_bytes());
        w.put(&[self.window_blocks, self.channels, self.active, 0]);
        for &(e, n) in self.tested.iter().flatten() {
            w.put(&e.to_le_bytes());
            w.put(&n.to_le_bytes());
        }
        for v in self
            .upper_ppm
            .iter()
            .chain(&self.detections)
            .chain(&self.off_gate)
            .chain([&self.gated_slots, &self.multi_click_slots])
        {
            w.put(&v.to_le_bytes());
        }
        Some(w.1)
    }

    /// Read a payload written by [`Self::encode`]; `None` when its length is not
    /// [`SNAPSHOT_LEN`].
    pub fn decode(p: &[u8]) -> Option<Self> {
        if p.len() != SNAPSHOT_LEN {
            return None;
        }
        let mut r = Take(p, 0);
        let mut s = Self {
            t_ps: r.u64(),
            blocks_closed: r.u64(),
            window_ps: r.u64(),
            locked_ps: r.u64(),
            window_blocks: r.u8(),
            channels: r.u8(),
            active: r.u8(),
            ..Self::default()
        };
        r.u8();
        for cell in s.tested.iter_mut().flatten() {
            *cell = (r.u32(), r.u32());
        }
        for v in s
            .upper_ppm
            .iter_mut()
            .chain(&mut s.detections)
            .chain(&mut s.off_gate)
        {
            *v = r.u32();
        }
        s.gated_slots = r.u32();
        s.multi_click_slots = r.u32();
        Some(s)
    }
}

/// Little-endian writer into a fixed buffer (writes past the end are dropped).
pub(crate) struct Put<'a>(pub(crate) &'a mut [u8], pub(crate) usize);

impl Put<'_> {
    pub(crate) fn put(&mut self, bytes: &[u8]) {
        if let Some(d) = self.0.get_mut(self.1..self.1 + bytes.len()) {
            d.copy_from_slice(bytes);
        }
        self.1 += bytes.len();
    }
}

/// Little-endian reader over a payload whose length was checked (reads past the end give 0).
pub(crate) struct Take<'a>(pub(crate) &'a [u8], pub(crate) usize);

impl Take<'_> {
    fn bytes<const N: usize>(&mut self) -> [u8; N] {
        let mut a = [0u8; N];
        if let Some(s) = self.0.get(self.1..self.1 + N) {
            a.copy_from_slice(s);
        }
        self.1 += N;
        a
    }
    pub(crate) fn u8(&mut self) -> u8 {
        u8::from_le_bytes(self.bytes())
    }
    pub(crate) fn u32(&mut self) -> u32 {
        u32::from_le_bytes(self.bytes())
    }
    pub(crate) fn u64(&mut self) -> u64 {
        u64::from_le_bytes(self.bytes())
    }
}

#[cfg(test)]
mod tests;
