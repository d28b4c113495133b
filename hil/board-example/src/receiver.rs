//! The whole receiver on the board, wired in this one module: the receiver with its recovered
//! clock and marker numbering, the link endpoint as its transmitter, the live-statistics monitor
//! and the frame writer, built from the [`Profile`] and fed one decoded block at a time.
//!
//! The firmware places each part in a static of its own (so a symbol listing shows each one's
//! RAM) and hands [`Pipeline`] the borrows. Everything the rest of the firmware calls is
//! [`Pipeline::new`], [`Pipeline::push_block`], [`Pipeline::service`] and the read-outs, so a
//! push-style wrapper of the same parts can replace this module without touching the rest.
//!
//! The order of the calls is the shared HIL driver's (`slotwise_hil::FullRun`), which the HIL
//! check compares byte for byte with the host: each detection through the receiver, the monitor
//! after it, alarm and statistics records into the frame stream; the link serviced after every
//! block.

use crate::profile::Profile;
use slotwise::formats::{alarm, statistics};
use slotwise::track::LockState;
use slotwise::wire::LinkCounters;
use slotwise::{AlarmEvent, FrameSink, ReceiverLink, RecordType, SlotClock, TdcEvent};
use slotwise_hil::full::{LINK_BATCH, LINK_OUT};
use slotwise_hil::{build_receiver, BoardError, BoardFrameOut, FullMonitor, FullReceiver};

pub use slotwise_hil::BoardFrameOut as FrameOut;

/// The link endpoint: announce frames out on `W`, answers frames in from `R`.
pub type Link<R, W> = ReceiverLink<R, W, LINK_BATCH, LINK_OUT>;

/// The receiver in its initial state: cold clock, numbering unaligned.
pub fn receiver(p: &Profile) -> Result<FullReceiver, BoardError> {
    build_receiver(&p.setup, &p.board)
}

/// The monitor with the profile's statistics block and alarm thresholds.
pub fn monitor(p: &Profile) -> Result<FullMonitor, BoardError> {
    let cfg = p.setup.receiver_config()?;
    Ok(FullMonitor::new(
        p.board.stats_config(cfg.gates())?,
        p.board.alarms,
    ))
}

/// The link endpoint with the profile's timeouts over `reader` and `writer`.
pub fn link<R, W>(p: &Profile, reader: R, writer: W) -> Link<R, W>
where
    R: embedded_io::Read + embedded_io::ReadReady,
    W: embedded_io::Write,
{
    Link::new(p.board.link, reader, writer)
}

/// What the pipeline has written besides key blocks.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PipelineCounts {
    /// Detections pushed, in events.
    pub detections: u64,
    /// Alarm records written, in records.
    pub alarm_frames: u64,
    /// Statistics records written, in records.
    pub stats_frames: u64,
    /// Alarm or statistics records that did not fit their buffer, in records.
    pub emit_errors: u64,
}

/// The parts, borrowed for the life of the firmware.
pub struct Pipeline<'a, R, W, S: FrameSink> {
    rx: &'a mut FullReceiver,
    link: &'a mut Link<R, W>,
    monitor: &'a mut FullMonitor,
    out: &'a mut BoardFrameOut<S>,
    counts: PipelineCounts,
    last_alarm: Option<AlarmEvent>,
}

impl<'a, R, W, S> Pipeline<'a, R, W, S>
where
    R: embedded_io::Read + embedded_io::ReadReady,
    W: embedded_io::Write,
    S: FrameSink,
{
    /// Wire the parts and give the clock the classical channel's hint from the profile.
    pub fn new(
        p: &Profile,
        rx: &'a mut FullReceiver,
        link: &'a mut Link<R, W>,
        monitor: &'a mut FullMonitor,
        out: &'a mut BoardFrameOut<S>,
    ) -> Self {
        rx.hint(p.board.hint_t_ps, p.board.hint_tx_slot);
        Self {
            rx,
            link,
            monitor,
            out,
            counts: PipelineCounts::default(),
            last_alarm: None,
        }
    }

    /// Push a block of events (one detection at a time, the monitor after each), then service
    /// the link so its answers are taken in.
    pub fn push_block(&mut self, events: &[TdcEvent]) {
        for &ev in events {
            let tr = self
                .rx
                .push(ev, &mut *self.link, &mut self.monitor.tap(&mut *self.out));
            let locked = self.rx.clock().is_locked();
            self.monitor.observe(&tr, locked);
            self.drain();
        }
        self.counts.detections += events.len() as u64;
        self.service();
    }

    /// Take in the answers that have arrived and sift what they settle, with no new events
    /// (call when the line is idle too, so answers never wait for the next detection).
    pub fn service(&mut self) {
        self.rx
            .service(&mut *self.link, &mut self.monitor.tap(&mut *self.out));
        self.drain();
    }

    /// Alarm events and the latest statistics snapshot into the frame stream.
    fn drain(&mut self) {
        while let Some(ev) = self.monitor.pop_event() {
            let mut p = [0u8; alarm::LEN];
            match ev.emit(&mut p) {
                Ok(n) => {
                    self.out
                        .record(RecordType::Alarm, p.get(..n).unwrap_or(&[]));
                    self.counts.alarm_frames += 1;
                }
                Err(_) => self.counts.emit_errors += 1,
            }
            self.last_alarm = Some(ev);
        }
        if let Some(snap) = self.monitor.take_snapshot() {
            let mut p = [0u8; statistics::LEN];
            match snap.emit(&mut p) {
                Ok(n) => {
                    self.out
                        .record(RecordType::Stats, p.get(..n).unwrap_or(&[]));
                    self.counts.stats_frames += 1;
                }
                Err(_) => self.counts.emit_errors += 1,
            }
        }
    }

    /// Where the clock stands.
    pub fn lock_state(&self) -> LockState {
        self.rx.clock().state()
    }

    /// The latest alarm change (raised or cleared), if any so far.
    pub const fn last_alarm(&self) -> Option<AlarmEvent> {
        self.last_alarm
    }

    /// Detections, alarm and statistics records so far.
    pub const fn counts(&self) -> PipelineCounts {
        self.counts
    }

    /// Sifted bits so far.
    pub fn sifted_bits(&self) -> u64 {
        self.rx.sifted_bits()
    }

    /// The link endpoint's counters.
    pub fn link_counters(&self) -> &LinkCounters {
        self.link.counters()
    }

    /// The frame writer (its sink's counters, its frame errors).
    pub fn frame_out(&self) -> &BoardFrameOut<S> {
        self.out
    }
}
