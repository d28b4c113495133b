//! The whole receiver as one push-style object for a board's own main loop: blocks of raw TDC
//! words or of events in, bytes of the classical channel in and out, CRC-framed records out for
//! the post-processing host, counters and alarms readable at any time.
//!
//! It runs the same steps as [`FullRun`] (the HIL firmware and its host replay), configured from
//! a [`ProfileBlob`]. The firmware moves bytes between its peripherals and the station's rings;
//! the station never blocks and never allocates. The C interface (`firmware-c`) is a thin layer
//! over this type.
//!
//! The classical channel is unauthenticated until [`Station::authenticate`] switches it to round
//! mode (`docs/wire-protocol.md` §9.9); the round verdicts then go into the record stream.

use crate::blob::ProfileBlob;
use crate::board::BoardError;
use crate::full::{
    build_clock, build_numbering, FullMonitor, FullReceiver, FullRun, FullTotals, LinkEnd,
    LINK_BATCH, LINK_OUT,
};
use crate::probe::Probe;
use crate::ring::{ByteRing, FrameBytesOut, FrameRing};
use crate::run::{BoardFrameOut, BLOCK};
use core::mem::MaybeUninit;
use core::ptr::addr_of_mut;
use slotwise::formats::round::RoundVerdict;
use slotwise::ingest::{Ingest, IngestCounts};
use slotwise::wire::round::{RoundConfigError, RoundCounters, RESENDS};
use slotwise::wire::{AuthConfig, AuthConfigError, AuthCounters, LinkAuth, RefillFrameError};
use slotwise::{ReceiverLink, Summary, TdcEvent, Transmitter};

/// Bytes of the classical channel held until the receiver reads them.
pub const LINK_IN_BYTES: usize = 2048;
/// Bytes of announce frames held until the firmware sends them.
pub const LINK_OUT_BYTES: usize = 4096;
/// Bytes of output records held until the firmware drains them.
pub const FRAMES_BYTES: usize = 8192;

/// One-time-pad words (8 bytes each, and a flag) the station's link holds once authenticated: what the HIL
/// authentication bench holds. Round mode spends two words per round, so a refill of a few dozen
/// words every few rounds keeps the pool above the low-key mark.
pub const STATION_KEY_WORDS: usize = 96;

/// The station's link endpoint: answers from a ring, announce frames into a ring, a pad pool of
/// [`STATION_KEY_WORDS`] words (unused until [`Station::authenticate`]).
pub type StationLink = ReceiverLink<
    ByteRing<LINK_IN_BYTES>,
    FrameBytesOut<LINK_OUT_BYTES>,
    LINK_BATCH,
    LINK_OUT,
    STATION_KEY_WORDS,
>;

impl LinkEnd for StationLink {
    fn end_of_input(&mut self) {
        self.flush();
    }

    fn close(&mut self) {
        ReceiverLink::close(self);
    }

    fn poll_verdict(&mut self) -> Option<RoundVerdict> {
        ReceiverLink::poll_verdict(self)
    }
}

/// Where the station is in its life.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Phase {
    /// Taking blocks.
    Running,
    /// Input ended; the last answers may still be pushed.
    Ending,
    /// Round-authenticated only: the receiver finished and the link closed; the transmitter's
    /// last round tags may still be pushed, then [`Station::finish`] again.
    Closing,
    /// Finished: the summary record is written; nothing more is taken.
    Finished,
}

/// Why a call was refused; the station's state is unchanged.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum StationError {
    /// The profile blob was refused.
    Profile(BoardError),
    /// Raw words were pushed but the profile has no raw-word layout.
    NoWordLayout,
    /// The call does not fit the phase (a block after the end of input, say).
    Phase(Phase),
    /// Authentication asked for after the first detection: both ends must tag from the start.
    Started,
    /// The link is authenticated already.
    Authenticated,
    /// The hash key or the pre-shared pad key was refused.
    AuthKey(AuthConfigError),
    /// The round setting was refused (zero frames per round, no outcome key in pad words 0, 1).
    AuthRounds(RoundConfigError),
    /// A key-refill record was refused (damaged, not a refill, unauthenticated link, pool).
    Refill(RefillFrameError),
}

impl core::fmt::Display for StationError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            Self::Profile(e) => write!(f, "profile blob: {e}"),
            Self::NoWordLayout => write!(f, "raw words pushed, but the profile has no word layout"),
            Self::Phase(p) => write!(f, "call not allowed in phase {p:?}"),
            Self::Started => write!(f, "authentication must come before the first detection"),
            Self::Authenticated => write!(f, "the link is authenticated already"),
            Self::AuthKey(e) => write!(f, "authentication key: {e}"),
            Self::AuthRounds(e) => write!(f, "authentication rounds: {e}"),
            Self::Refill(e) => write!(f, "key refill: {e}"),
        }
    }
}

impl core::error::Error for StationError {}

/// Counters of the station beside the receiver's own accounting.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StationCounts {
    /// Detections, blocks, alarm and statistics records.
    pub totals: FullTotals,
    /// The raw-word ingest's counters (zero when events are pushed).
    pub ingest: IngestCounts,
    /// Classical-channel bytes refused because the input ring was full, in bytes.
    pub link_in_refused_bytes: u64,
    /// Output records dropped because the firmware did not drain them in time, in frames.
    pub frames_dropped: u64,
    /// Output records written, in frames.
    pub frames_out: u64,
    /// The link's authentication, once [`Station::authenticate`] switched it on.
    pub auth: Option<AuthCounts>,
}

/// What the authenticated link did: the core's counters, the key left and the alarms.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AuthCounts {
    /// Frames tagged, refusals, key bits loaded, consumed and abandoned.
    pub counters: AuthCounters,
    /// Rounds closed, verified (key kept) and failed (key discarded), tag records sent.
    pub rounds: RoundCounters,
    /// Unused key bits in the pad pool, in bits.
    pub key_bits_left: u64,
    /// Whether the attack alarm is up (too many refusals among the last 64 checks).
    pub attack_alarm: bool,
    /// Whether the low-key alarm is up (the pool is below its low-water mark: refill it).
    pub low_key_alarm: bool,
}

/// A blob read and every setting checked, before anything is built.
struct Checked {
    blob: ProfileBlob,
    stats: slotwise::StatsConfig,
}

impl Checked {
    fn of(bytes: &[u8]) -> Result<Self, StationError> {
        let blob = ProfileBlob::decode(bytes).map_err(StationError::Profile)?;
        let cfg = blob
            .setup
            .receiver_config()
            .map_err(|e| StationError::Profile(e.into()))?;
        let stats = blob
            .board
            .stats_config(cfg.gates())
            .map_err(StationError::Profile)?;
        Ok(Self { blob, stats })
    }

    fn count_mask(&self) -> u64 {
        u64::MAX >> (64 - u32::from(self.blob.setup.tdc.counter_bits()).clamp(1, 64))
    }
}

fn new_link(p: &Checked) -> StationLink {
    StationLink::new(
        p.blob.board.link,
        ByteRing::new(),
        FrameBytesOut(ByteRing::new()),
    )
}

/// The round-mode link over the old link's rings, in a frame of its own; the old link is
/// dropped (it held no key).
#[inline(never)]
fn to_round_link(
    link: &mut StationLink,
    auth: LinkAuth<STATION_KEY_WORDS>,
    round_frames: u32,
) -> Result<(), RoundConfigError> {
    let cfg = *link.config();
    let reader = core::mem::take(link.reader_mut());
    let writer = core::mem::replace(link.writer_mut(), FrameBytesOut(ByteRing::new()));
    *link = StationLink::new_round_authenticated(cfg, auth, round_frames, reader, writer)?;
    Ok(())
}

/// Refuse a round setting [`ReceiverLink::new_round_authenticated`] would refuse, before the
/// rings leave the old link: zero frames, or no usable outcome key in pad words 0 and 1.
fn check_rounds(
    auth: &LinkAuth<STATION_KEY_WORDS>,
    round_frames: u32,
) -> Result<(), RoundConfigError> {
    if round_frames == 0 {
        return Err(RoundConfigError::ZeroFrames);
    }
    match (auth.pool().peek(0), auth.pool().peek(1)) {
        (Some(a), Some(b)) if a.iter().chain(b.iter()).any(|&x| x != 0) => Ok(()),
        _ => Err(RoundConfigError::NoRoundKey),
    }
}

/// Build the receiver in a frame of its own and write it to `dst`.
///
/// # Safety
/// `dst` must be valid for a write of a `FullReceiver`.
#[inline(never)]
unsafe fn write_rx(dst: *mut FullReceiver, p: &Checked) -> Result<(), StationError> {
    let err = StationError::Profile;
    let cfg = p.blob.setup.receiver_config().map_err(|e| err(e.into()))?;
    let numbering = build_numbering().map_err(err)?;
    match build_clock(&p.blob.setup, &p.blob.board) {
        // SAFETY: valid for a write, by the caller's contract.
        Ok(clock) => unsafe { assemble(dst, cfg, clock, numbering) },
        Err(e) => return Err(err(e)),
    }
    Ok(())
}

/// The receiver assembled by a call of its own, its result written straight to `dst`.
///
/// # Safety
/// `dst` must be valid for a write of a `FullReceiver`.
#[inline(never)]
unsafe fn assemble(
    dst: *mut FullReceiver,
    cfg: slotwise::ReceiverConfig,
    clock: crate::FullClock,
    numbering: crate::FullNumbering,
) {
    // SAFETY: valid for a write, by the caller's contract.
    unsafe { dst.write(slotwise::Receiver::with_numbering(cfg, clock, numbering)) };
}

/// Build a part in a frame of its own and write it to `dst`.
///
/// # Safety
/// `dst` must be valid for a write of a `T`.
#[inline(never)]
unsafe fn write_with<T>(dst: *mut T, make: impl FnOnce() -> T) {
    // SAFETY: valid for a write, by the caller's contract.
    unsafe { dst.write(make()) };
}

/// Borrowed parts of a [`Station`]: the driver over its receiver, link, monitor and output, and
/// what the station keeps beside them.
struct Parts<'a> {
    run: FullRun<'a, crate::FullClock, crate::FullNumbering, StationLink, FrameRing<FRAMES_BYTES>>,
    totals: &'a mut FullTotals,
    ingest: &'a mut Option<Ingest>,
    events: &'a mut [TdcEvent; BLOCK],
    count_mask: u64,
}

/// The whole receiver, push-style.
pub struct Station {
    rx: FullReceiver,
    link: StationLink,
    monitor: FullMonitor,
    out: BoardFrameOut<FrameRing<FRAMES_BYTES>>,
    ingest: Option<Ingest>,
    events: [TdcEvent; BLOCK],
    totals: FullTotals,
    phase: Phase,
    /// The receiver's counter mask: decoded words are cut to the setup's counter width, which
    /// the receiver's time base widens again (its own wraps), so a long run never outgrows it.
    count_mask: u64,
}

impl Station {
    /// A receiver from a profile blob, cold (no lock yet), with the blob's hint given when it
    /// carries one (a hint of 0, 0 is none: call [`Self::hint`] when the transmitter's hello
    /// arrives). Returned by value: on a board, build it in place with [`Self::init`] instead.
    pub fn new(blob: &[u8]) -> Result<Self, StationError> {
        let mut slot = MaybeUninit::uninit();
        Self::init(&mut slot, blob)?;
        // SAFETY: `init` returned Ok, so every field of `slot` is written.
        Ok(unsafe { slot.assume_init() })
    }

    /// The same station built where it will live: each part is written into `slot` from a
    /// stack frame of its own, so building needs about the largest part's size in stack (the
    /// receiver, some 27 KiB on a Cortex-M4F) instead of several copies of the whole station.
    /// On a refusal nothing is built and `slot` stays uninitialised.
    pub fn init<'s>(
        slot: &'s mut MaybeUninit<Self>,
        blob: &[u8],
    ) -> Result<&'s mut Self, StationError> {
        let p = Checked::of(blob)?;
        // The receiver is the one part whose construction can still refuse; it goes first.
        let at = slot.as_mut_ptr();
        // SAFETY: `at` points to `slot`, valid for writes of a `Station`; each field pointer
        // comes from `addr_of_mut!` and is written exactly once before `assume_init_mut`.
        unsafe {
            write_rx(addr_of_mut!((*at).rx), &p)?;
            write_with(addr_of_mut!((*at).link), || new_link(&p));
            write_with(addr_of_mut!((*at).monitor), || {
                FullMonitor::new(p.stats, p.blob.board.alarms)
            });
            write_with(addr_of_mut!((*at).out), || {
                BoardFrameOut::new(FrameRing::new())
            });
            addr_of_mut!((*at).ingest).write(p.blob.words.map(Ingest::new));
            addr_of_mut!((*at).events).write(
                [TdcEvent {
                    count: 0,
                    channel: 0,
                }; BLOCK],
            );
            addr_of_mut!((*at).totals).write(FullTotals::default());
            addr_of_mut!((*at).phase).write(Phase::Running);
            addr_of_mut!((*at).count_mask).write(p.count_mask());
        }
        // SAFETY: every field was written above.
        let s = unsafe { slot.assume_init_mut() };
        s.hint_from(&p);
        Ok(s)
    }

    fn hint_from(&mut self, p: &Checked) {
        let b = &p.blob.board;
        if b.hint_t_ps != 0 || b.hint_tx_slot != 0 {
            self.hint(b.hint_t_ps, b.hint_tx_slot);
        }
    }

    /// The driver's steps over the station's parts, and the parts the station keeps beside them.
    fn parts(&mut self) -> Parts<'_> {
        Parts {
            run: FullRun {
                rx: &mut self.rx,
                link: &mut self.link,
                monitor: &mut self.monitor,
                out: &mut self.out,
                probe: Probe::NONE,
            },
            totals: &mut self.totals,
            ingest: &mut self.ingest,
            events: &mut self.events,
            count_mask: self.count_mask,
        }
    }

    fn running(&self) -> Result<(), StationError> {
        match self.phase {
            Phase::Running => Ok(()),
            p => Err(StationError::Phase(p)),
        }
    }

    /// The classical channel's hint: the transmitter's slot counter `tx_slot` at receiver time
    /// `t_ps` (ps on the core's time base).
    pub fn hint(&mut self, t_ps: u64, tx_slot: u64) {
        self.parts().run.begin(t_ps, tx_slot);
    }

    /// Push a block of events (any length; taken in pieces of [`BLOCK`], the answers read after
    /// each piece).
    pub fn push_events(&mut self, events: &[TdcEvent]) -> Result<(), StationError> {
        self.running()?;
        let mut p = self.parts();
        for piece in events.chunks(BLOCK) {
            p.run.push_block(piece, p.totals);
        }
        if let Some(i) = p.ingest.as_ref() {
            p.run.observe_ingest(&i.counts(), p.totals);
        }
        Ok(())
    }

    /// Push a block of raw TDC bytes in the profile's word layout; a block may cut a record
    /// anywhere (the rest is kept for the next block). The bytes are decoded where they lie, and
    /// each event's widened counter is cut to the setup's counter width (the receiver's time base
    /// widens it again).
    pub fn push_words(&mut self, bytes: &[u8]) -> Result<(), StationError> {
        self.running()?;
        let mut p = self.parts();
        let ingest = p.ingest.as_mut().ok_or(StationError::NoWordLayout)?;
        let mut rest = bytes;
        loop {
            let done = ingest.push(rest, p.events);
            if done.events > 0 {
                let block = p.events.get_mut(..done.events).unwrap_or(&mut []);
                for ev in block.iter_mut() {
                    ev.count &= p.count_mask;
                }
                p.run.push_block(block, p.totals);
            }
            rest = rest.get(done.consumed..).unwrap_or(&[]);
            if rest.is_empty() || done.consumed == 0 {
                p.run.observe_ingest(&ingest.counts(), p.totals);
                return Ok(());
            }
        }
    }

    /// The raw-word ingest stage, for a source that decodes itself (an SPI FIFO source polls
    /// into it, then its events go to [`Self::push_events`]); `None` without a word layout.
    pub fn ingest_mut(&mut self) -> Option<&mut Ingest> {
        self.ingest.as_mut()
    }

    /// The FIFO reported `words` words lost before they were read (overrun).
    pub fn report_overrun(&mut self, words: u64) {
        if let Some(i) = self.ingest.as_mut() {
            i.report_overrun(words);
        }
    }

    /// The FIFO's status showed its full flag.
    pub fn report_fifo_full(&mut self) {
        if let Some(i) = self.ingest.as_mut() {
            i.report_fifo_full();
        }
    }

    /// Bytes received on the classical channel (the transmitter's answers frames); returns how
    /// many were taken (the rest did not fit and are counted).
    pub fn push_link(&mut self, bytes: &[u8]) -> usize {
        self.link.reader_mut().push(bytes)
    }

    /// Authenticate the classical channel in round mode (`docs/wire-protocol.md` §9.9): frames
    /// travel untagged and one Wegman-Carter tag per round of `round_frames` announce frames,
    /// each way, covers the round's sifting outcome; a round's key blocks are kept only when
    /// both tags check (the round-verdict records say which). `hash_key` (16 bytes) and
    /// `preshared` (whole pad words, from word 0) are the secrets shared with the
    /// transmitter, loaded at start-up: never from the profile blob. Allowed only before the
    /// first detection; the link keeps its rings. On a refusal nothing changes. The new link is
    /// built in a frame of its own: the call needs about one link's size of stack (18 KB).
    pub fn authenticate(
        &mut self,
        hash_key: [u8; 16],
        preshared: &[u8],
        round_frames: u32,
    ) -> Result<(), StationError> {
        self.running()?;
        if self.totals.detections > 0 || self.link.counters().frames_out > 0 {
            return Err(StationError::Started);
        }
        if self.link.auth().is_some() {
            return Err(StationError::Authenticated);
        }
        let auth = LinkAuth::new(AuthConfig::DEFAULT, hash_key, preshared)
            .map_err(StationError::AuthKey)?;
        check_rounds(&auth, round_frames).map_err(StationError::AuthRounds)?;
        to_round_link(&mut self.link, auth, round_frames).map_err(StationError::AuthRounds)
    }

    /// A key-refill record from the post-processing host (one COBS frame of record type
    /// `KeyRefill`, as it arrived); returns the pad words loaded into the pool.
    pub fn push_refill(&mut self, frame: &[u8]) -> Result<usize, StationError> {
        self.link
            .take_refill_frame(frame)
            .map_err(StationError::Refill)
    }

    /// Bytes to send on the classical channel (announce frames); returns how many were written
    /// into `out`.
    pub fn drain_link(&mut self, out: &mut [u8]) -> usize {
        self.link.writer_mut().0.pop_into(out)
    }

    /// Output records for the post-processing host (key blocks, alarms, statistics, summary);
    /// returns how many bytes were written into `out`.
    pub fn drain_frames(&mut self, out: &mut [u8]) -> usize {
        self.out.sink_mut().drain(out)
    }

    /// End of input: the last announce frame is sent; push the answers still in flight, then
    /// [`Self::finish`].
    pub fn end_input(&mut self) -> Result<(), StationError> {
        self.running()?;
        self.parts().run.end_input();
        self.phase = Phase::Ending;
        Ok(())
    }

    /// Take the last answers, finish the receiver, close the link and write the summary record.
    ///
    /// Round-authenticated, in two calls: the first closes the link and leaves the station in
    /// [`Phase::Closing`] (its final report and round tags go out: drain them, push the
    /// transmitter's answer); the second takes the transmitter's last round tags, fails the
    /// rounds still without one, writes their verdicts and then the summary.
    pub fn finish(&mut self) -> Result<(), StationError> {
        match self.phase {
            Phase::Finished => return Err(StationError::Phase(Phase::Finished)),
            Phase::Running => self.parts().run.end_input(),
            Phase::Ending | Phase::Closing => {}
        }
        let rounds = self.link.rounds().is_some();
        if self.phase == Phase::Closing {
            self.settle_rounds();
        } else {
            let mut p = self.parts();
            let ingest = p.ingest.as_ref().map(Ingest::counts);
            if let Some(c) = ingest {
                p.run.observe_ingest(&c, p.totals);
            }
            p.run.close(p.totals);
            if rounds {
                self.phase = Phase::Closing;
                return Ok(());
            }
        }
        let ingest = self.ingest.as_ref().map(Ingest::counts);
        self.parts()
            .run
            .write_summary(|s| s.with_ingest(ingest.unwrap_or_default()));
        self.phase = Phase::Finished;
        Ok(())
    }

    /// Round mode, after the close: read the round tags that arrived, fail every round still
    /// waiting, send this end's last tags and write every verdict.
    fn settle_rounds(&mut self) {
        while self.link.poll_answer().is_some() {}
        self.link.give_up_rounds();
        for _ in 0..RESENDS {
            if self.link.rounds().is_none_or(|r| r.unsent() == 0) {
                break;
            }
            self.link.send_final_report();
        }
        let mut p = self.parts();
        p.run.drain_records(p.totals);
    }

    /// The phase.
    pub const fn phase(&self) -> Phase {
        self.phase
    }

    /// The receiver's summary now (accounting, tallies, sifted bits, the ingest counters).
    pub fn summary(&self) -> Summary {
        let ingest = self.ingest.as_ref().map(Ingest::counts).unwrap_or_default();
        Summary::of(&self.rx).with_ingest(ingest)
    }

    /// The receiver.
    pub const fn receiver(&self) -> &FullReceiver {
        &self.rx
    }

    /// The link endpoint (its counters, its state).
    pub const fn link(&self) -> &StationLink {
        &self.link
    }

    /// The monitor (active alarms: `monitor().alarms().active()`).
    pub const fn monitor(&self) -> &FullMonitor {
        &self.monitor
    }

    /// The station's own counters.
    pub fn counts(&self) -> StationCounts {
        let ring = self.out.sink();
        StationCounts {
            totals: self.totals,
            ingest: self.ingest.as_ref().map(Ingest::counts).unwrap_or_default(),
            link_in_refused_bytes: self.link.reader().refused(),
            frames_dropped: ring.dropped_frames(),
            frames_out: ring.frames(),
            auth: self.link.auth().map(|a| AuthCounts {
                counters: *a.counters(),
                rounds: self
                    .link
                    .rounds()
                    .map(|r| *r.counters())
                    .unwrap_or_default(),
                key_bits_left: a.key_bits_left(),
                attack_alarm: a.attack_alarm(),
                low_key_alarm: a.low_key_alarm(),
            }),
        }
    }
}
