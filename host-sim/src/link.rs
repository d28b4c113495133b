//! The classical link to the transmitter, in memory: the core's [`ReceiverLink`] writes and reads
//! real frames through byte pipes, a link model loses, repeats, reorders, delays and damages them,
//! and a host transmitter ([`tx::HostTransmitter`]) answers from the scenario's choices.
//!
//! Time on the link is the newest slot the receiver announced: a frame sent at slot `s` arrives
//! at slot `s + latency`. Every random choice of the model comes from one seeded stream per
//! direction, so a run is reproducible.
//!
//! The link is authenticated unless the model says otherwise: both ends hold the same key
//! ([`auth::KeySupply`]), the board's pool is topped up with key-refill frames as it empties, and
//! an [`auth::Adversary`] may sit on the line. Every answer the receiver takes is checked
//! against what the transmitter sent, and every announce frame the transmitter takes against
//! what the receiver sent, so a forgery that got through would be counted.

pub mod auth;
pub mod keyfile;
pub mod report;
pub mod rounds;
pub mod tx;

use crate::scenario::Scenario;
use crate::sim::rng::Stream;
use crate::sim::SimTransmitter;
use auth::{Adversary, AttackStats, KeySupply, LinkAttack};
use serde::Serialize;
use slotwise::formats::round::RoundVerdict;
use slotwise::wire::{LinkConfig, LinkCounters, ReceiverLink};
use slotwise::{Announcement, Answer, Transmitter};
use std::cell::RefCell;
use std::cmp::Reverse;
use std::collections::hash_map::DefaultHasher;
use std::collections::{BTreeMap, BinaryHeap, HashMap, HashSet, VecDeque};
use std::convert::Infallible;
use std::hash::{Hash, Hasher};
use std::rc::Rc;
use tx::HostTransmitter;

/// Most announcements per announce frame the host endpoint can hold (the model's `batch` picks
/// the limit in use).
pub const HOST_BATCH: usize = 512;
/// Announcements per announce frame on the host link unless the model says otherwise.
pub const DEFAULT_BATCH: usize = 64;
/// Unanswered announcements the host endpoint keeps.
pub const HOST_OUT: usize = 1024;
/// Pad words of the host endpoint's key pool (4 KiB of key, as a board would hold).
pub const HOST_KEY_WORDS: usize = 512;

/// How the simulated link treats frames (probabilities per frame and direction).
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct LinkModel {
    /// Probability that a frame is lost.
    pub loss: f64,
    /// Probability that a frame arrives twice.
    pub dup: f64,
    /// Probability that a frame is held back behind later ones.
    pub reorder: f64,
    /// Probability that 1–3 bytes of a frame are overwritten with random values.
    pub corrupt: f64,
    /// One-way delay in slots.
    pub latency_slots: u64,
    /// A reordered frame is held back by a uniform 1..=this many slots more.
    pub reorder_slots: u64,
    /// Seed of the model's random choices.
    pub seed: u64,
    /// Share of answered slots whose transmitted bit is revealed for testing.
    pub test_fraction: f64,
    /// Slots after which the receiver gives up on an announce frame's answers.
    pub answer_timeout_slots: u64,
    /// Largest slot span of one announce batch.
    pub flush_age_slots: u64,
    /// Most announcements per announce frame (1..=512).
    pub batch: usize,
    /// Every frame carries a Wegman-Carter tag and both ends keep a key pool.
    pub authenticated: bool,
    /// With `authenticated`: `None` tags every frame; `Some(F)` sends frames untagged and one
    /// tag per round of `F` announce frames each way over the sifting outcome (§9.9).
    pub auth_round_frames: Option<u32>,
    /// Pad words of key the post-processing host can supply in all (pre-shared ones included).
    pub auth_key_words: u64,
    /// The adversary on the line, if any.
    pub attack: Option<LinkAttack>,
}

impl LinkModel {
    /// A perfect link with the scenario's timeout (no loss, no delay, every bit revealed).
    pub fn perfect(s: &Scenario) -> Self {
        Self::perfect_for((s.rep_rate_hz * 0.01).max(1.0) as u64, s.seed ^ 0x4C49_4E4B)
    }

    /// A perfect link whose endpoint expires answers after `answer_timeout_slots`; `seed` seeds
    /// the faults set on top of it.
    pub fn perfect_for(answer_timeout_slots: u64, seed: u64) -> Self {
        Self {
            loss: 0.0,
            dup: 0.0,
            reorder: 0.0,
            corrupt: 0.0,
            latency_slots: 0,
            reorder_slots: 50_000,
            seed,
            test_fraction: 1.0,
            answer_timeout_slots,
            flush_age_slots: 5000,
            batch: DEFAULT_BATCH,
            authenticated: true,
            auth_round_frames: None,
            auth_key_words: u64::MAX,
            attack: None,
        }
    }

    /// Check probabilities and sizes; the error names the option.
    pub fn validate(&self) -> Result<(), String> {
        for (name, p) in [
            ("--link-loss", self.loss),
            ("--link-dup", self.dup),
            ("--link-reorder", self.reorder),
            ("--link-corrupt", self.corrupt),
            ("--test-fraction", self.test_fraction),
        ] {
            if !(0.0..=1.0).contains(&p) {
                return Err(format!("{name} {p}: expected a probability in 0..=1"));
            }
        }
        if self.loss >= 1.0 {
            return Err("--link-loss 1: nothing would ever arrive".into());
        }
        if self.auth_round_frames == Some(0) {
            return Err("--link-round-frames 0: expected at least 1".into());
        }
        if !(1..=HOST_BATCH).contains(&self.batch) {
            return Err(format!(
                "--link-batch {}: expected 1..={HOST_BATCH}",
                self.batch
            ));
        }
        LinkConfig::new(self.answer_timeout_slots, self.flush_age_slots)
            .map_err(|e| format!("link timeout: {e}"))?;
        Ok(())
    }
}

/// What the model did to the frames of one direction.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct ChannelStats {
    /// Frames handed to the link.
    pub frames: u64,
    /// Frames lost.
    pub lost: u64,
    /// Frames delivered twice.
    pub duplicated: u64,
    /// Frames held back behind later ones.
    pub reordered: u64,
    /// Frames with overwritten bytes.
    pub corrupted: u64,
}

struct Channel {
    model: LinkModel,
    rng: Stream,
    /// (arrival slot, order) → frame bytes.
    queue: BinaryHeap<Reverse<(u64, u64, Vec<u8>)>>,
    order: u64,
    stats: ChannelStats,
}

impl Channel {
    fn new(model: LinkModel, stream: u64) -> Self {
        Self {
            model,
            rng: Stream::new(model.seed, stream),
            queue: BinaryHeap::new(),
            order: 0,
            stats: ChannelStats::default(),
        }
    }

    fn hold_slots(&mut self) -> u64 {
        1 + (self.rng.uniform() * self.model.reorder_slots as f64) as u64
    }

    fn send(&mut self, now: u64, mut frame: Vec<u8>) {
        let m = self.model;
        self.stats.frames += 1;
        if self.rng.bernoulli(m.loss) {
            self.stats.lost += 1;
            return;
        }
        if self.rng.bernoulli(m.corrupt) && frame.len() > 1 {
            self.stats.corrupted += 1;
            let hits = 1 + (self.rng.uniform() * 3.0) as usize;
            for _ in 0..hits {
                let at = (self.rng.uniform() * (frame.len() - 1) as f64) as usize;
                frame[at] = (self.rng.uniform() * 256.0) as u8;
            }
        }
        let mut at = now + m.latency_slots;
        if self.rng.bernoulli(m.reorder) {
            self.stats.reordered += 1;
            at += self.hold_slots();
        }
        if self.rng.bernoulli(m.dup) {
            self.stats.duplicated += 1;
            let again = at + self.hold_slots() / 4;
            self.push(again, frame.clone());
        }
        self.push(at, frame);
    }

    fn push(&mut self, at: u64, frame: Vec<u8>) {
        self.order += 1;
        self.queue.push(Reverse((at, self.order, frame)));
    }

    fn due(&mut self, now: u64) -> Vec<Vec<u8>> {
        let mut out = Vec::new();
        while self
            .queue
            .peek()
            .is_some_and(|Reverse((at, _, _))| *at <= now)
        {
            if let Some(Reverse((_, _, f))) = self.queue.pop() {
                out.push(f);
            }
        }
        out
    }

    fn last_arrival(&self) -> Option<u64> {
        self.queue.iter().map(|Reverse((at, _, _))| *at).max()
    }
}

struct Shared {
    now: u64,
    up: Channel,
    down: Channel,
    supply: Option<KeySupply>,
    adversary: Option<Adversary>,
    /// Fingerprints of the announce frames the receiver really sent.
    genuine_up: HashSet<u64>,
    /// Announce frames the transmitter accepted that the receiver never sent.
    forged_tx_accepted: u64,
    /// Bytes the endpoint wrote since the last delimiter.
    partial: Vec<u8>,
    /// Bytes arrived for the endpoint to read.
    inbox: VecDeque<u8>,
    tx: HostTransmitter,
}

fn fingerprint(frame: &[u8]) -> u64 {
    let mut h = DefaultHasher::new();
    frame.hash(&mut h);
    h.finish()
}

impl Shared {
    fn pump(&mut self) {
        let now = self.now;
        self.refill_tx();
        for f in self.up.due(now) {
            let before = self.verified_by_tx();
            let answers = self.tx.receive(&f);
            if self.verified_by_tx() > before && !self.genuine_up.contains(&fingerprint(&f)) {
                self.forged_tx_accepted += 1;
            }
            for answer in answers {
                self.send(true, now, answer);
            }
        }
        for f in self.down.due(now) {
            self.inbox.extend(f);
        }
    }

    fn verified_by_tx(&self) -> u64 {
        self.tx.auth().map_or(0, |a| a.counters().frames_verified)
    }

    /// Put a frame on the line, through the adversary when there is one.
    fn send(&mut self, down: bool, now: u64, frame: Vec<u8>) {
        if !down {
            self.genuine_up.insert(fingerprint(&frame));
        }
        let emits = match self.adversary.as_mut() {
            None => vec![auth::Emit {
                down,
                extra_slots: 0,
                frame,
            }],
            Some(a) if down => a.on_down(frame),
            Some(a) => a.on_up(frame),
        };
        for e in emits {
            let ch = if e.down { &mut self.down } else { &mut self.up };
            ch.send(now + e.extra_slots, e.frame);
        }
    }

    /// Top the transmitter's mirror pool up from the same key stream as the board's.
    fn refill_tx(&mut self) {
        let Some(supply) = self.supply else { return };
        while let Some(a) = self.tx.auth() {
            let (end, room) = (a.pool().end(), a.pool().room());
            let key = supply.words(end, room.min(slotwise::formats::refill::MAX_WORDS) as u64);
            if room < slotwise::formats::refill::MAX_WORDS || key.is_empty() {
                break;
            }
            if self.tx.refill(end, &key).is_err() {
                break;
            }
        }
    }
}

/// The endpoint's reading half: bytes the link delivered from the transmitter.
pub struct DownReader(Rc<RefCell<Shared>>);
/// The endpoint's writing half: bytes to the transmitter.
pub struct UpWriter(Rc<RefCell<Shared>>);

impl embedded_io::ErrorType for DownReader {
    type Error = Infallible;
}
impl embedded_io::ErrorType for UpWriter {
    type Error = Infallible;
}

impl embedded_io::ReadReady for DownReader {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        let mut s = self.0.borrow_mut();
        s.pump();
        Ok(!s.inbox.is_empty())
    }
}

impl embedded_io::Read for DownReader {
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        let mut s = self.0.borrow_mut();
        let n = buf.len().min(s.inbox.len());
        for (d, b) in buf.iter_mut().zip(s.inbox.drain(..n)) {
            *d = b;
        }
        Ok(n)
    }
}

impl embedded_io::Write for UpWriter {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        let mut s = self.0.borrow_mut();
        for &b in buf {
            s.partial.push(b);
            if b == 0 {
                let frame = std::mem::take(&mut s.partial);
                let now = s.now;
                s.send(false, now, frame);
            }
        }
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Infallible> {
        Ok(())
    }
}

/// The core's endpoint type on the host.
pub type HostEndpoint = ReceiverLink<DownReader, UpWriter, HOST_BATCH, HOST_OUT, HOST_KEY_WORDS>;

/// The receiver's transmitter as a framed link: the core's endpoint, the link model and the host
/// transmitter behind it.
pub struct FramedLink {
    ep: HostEndpoint,
    shared: Rc<RefCell<Shared>>,
    model: LinkModel,
    final_reports: u64,
    /// Answers the receiver took that the transmitter never gave.
    forged_rx_accepted: u64,
    /// Key-refill frames the board took.
    refill_frames: u64,
    /// Round mode: the round of every slot the receiver was answered (to name attacked rounds).
    answer_rounds: HashMap<u64, u64>,
    /// The board's round verdicts (record type 9) by their first slot.
    verdicts: BTreeMap<u64, RoundVerdict>,
    /// Slots of the answers the receiver took that the transmitter never gave.
    forged_slots: Vec<u64>,
}

impl FramedLink {
    /// A link with model `model` to a transmitter that knows the scenario's choices.
    pub fn new(s: &Scenario, model: LinkModel) -> Result<Self, String> {
        Self::with_transmitter(HostTransmitter::new(s, model.test_fraction), model)
    }

    /// A link with model `model` to the transmitter `tx`.
    pub fn with_transmitter(tx: HostTransmitter, model: LinkModel) -> Result<Self, String> {
        model.validate()?;
        let cfg = LinkConfig::new(model.answer_timeout_slots, model.flush_age_slots)
            .and_then(|c| c.with_max_batch(model.batch))
            .map_err(|e| e.to_string())?;
        let supply = model
            .authenticated
            .then(|| KeySupply::new(model.seed, model.auth_key_words));
        let rounds = model.auth_round_frames.filter(|_| model.authenticated);
        let tx = match (supply, rounds) {
            (Some(k), Some(f)) => tx.with_round_auth(Box::new(k.end()?), f)?,
            (Some(k), None) => tx.with_auth(Box::new(k.end()?)),
            (None, _) => tx,
        };
        let adversary = match model.attack {
            Some(a) => Some(Adversary::new(
                a,
                model.seed ^ 0xA77A_C4E5,
                model.answer_timeout_slots.saturating_mul(2),
                rounds.is_none(),
            )?),
            None => None,
        };
        let shared = Rc::new(RefCell::new(Shared {
            now: 0,
            up: Channel::new(model, 0x5550),
            down: Channel::new(model, 0x444F),
            supply,
            adversary,
            genuine_up: HashSet::new(),
            forged_tx_accepted: 0,
            partial: Vec::new(),
            inbox: VecDeque::new(),
            tx,
        }));
        let (down, up) = (DownReader(shared.clone()), UpWriter(shared.clone()));
        let ep = match (supply, rounds) {
            (Some(k), Some(f)) => HostEndpoint::new_round_authenticated(cfg, k.end()?, f, down, up)
                .map_err(|e| e.to_string())?,
            (Some(k), None) => HostEndpoint::new_authenticated(cfg, k.end()?, down, up),
            (None, _) => HostEndpoint::new(cfg, down, up),
        };
        let mut l = Self {
            ep,
            shared,
            model,
            final_reports: 0,
            forged_rx_accepted: 0,
            refill_frames: 0,
            answer_rounds: HashMap::new(),
            verdicts: BTreeMap::new(),
            forged_slots: Vec::new(),
        };
        l.refill_board();
        Ok(l)
    }

    /// Hand the board key-refill frames while its pool has room for a full record.
    fn refill_board(&mut self) {
        let Some(supply) = self.shared.borrow().supply else {
            return;
        };
        while let Some(pool) = self.ep.auth().map(|a| a.pool()) {
            let Some(frame) = supply.refill_frame(pool.end(), pool.room()) else {
                break;
            };
            if self.ep.take_refill_frame(&frame).is_err() {
                break;
            }
            self.refill_frames += 1;
        }
    }

    /// The core endpoint (its authentication state included).
    pub fn endpoint(&self) -> &HostEndpoint {
        &self.ep
    }

    /// Answers the receiver took that the transmitter never gave, and announce frames the
    /// transmitter took that the receiver never sent.
    pub fn forgeries_accepted(&self) -> (u64, u64) {
        (
            self.forged_rx_accepted,
            self.shared.borrow().forged_tx_accepted,
        )
    }

    /// Key-refill frames the board took.
    pub fn refill_frames(&self) -> u64 {
        self.refill_frames
    }

    /// What the adversary did, when there is one.
    pub fn attack_stats(&self) -> Option<(LinkAttack, AttackStats)> {
        self.shared
            .borrow()
            .adversary
            .as_ref()
            .map(|a| (a.attack(), a.stats()))
    }

    /// The model in use.
    pub fn model(&self) -> &LinkModel {
        &self.model
    }

    /// The core endpoint's counters.
    pub fn counters(&self) -> &LinkCounters {
        self.ep.counters()
    }

    /// Final reports sent (the closing report is repeated until the transmitter has one).
    pub fn final_reports(&self) -> u64 {
        self.final_reports
    }

    fn settle(&mut self) {
        let mut s = self.shared.borrow_mut();
        let last =
            s.up.last_arrival()
                .into_iter()
                .chain(s.down.last_arrival())
                .max();
        if let Some(t) = last {
            s.now = s.now.max(t);
        }
        s.pump();
        let last = s.down.last_arrival();
        if let Some(t) = last {
            s.now = s.now.max(t);
            s.pump();
        }
    }

    /// End of input: send the batch and let every frame in flight arrive (one round trip), so
    /// that the receiver can take the last answers before it finishes.
    pub fn drain(&mut self) {
        self.ep.flush();
        self.settle();
    }

    /// After the receiver finished: close the endpoint and repeat the final report until the
    /// transmitter has one (at most 64 tries). In round mode the report is also repeated while
    /// rounds wait for the transmitter's tag or the receiver's tags are still being repeated;
    /// rounds still waiting after that fail.
    pub fn close(&mut self) {
        self.ep.close();
        self.final_reports = 1;
        self.settle();
        self.drain_round_tags();
        while self.final_reports < 64 && (!self.shared.borrow().tx.closed() || self.rounds_busy()) {
            self.ep.send_final_report();
            self.final_reports += 1;
            self.settle();
            self.drain_round_tags();
        }
        if self.ep.rounds().is_some() {
            self.ep.give_up_rounds();
            for _ in 0..slotwise::wire::round::RESENDS {
                self.ep.send_final_report();
                self.settle();
            }
            self.drain_verdicts();
        }
    }

    fn rounds_busy(&self) -> bool {
        self.ep
            .rounds()
            .is_some_and(|r| r.waiting() > 0 || r.unsent() > 0)
    }

    /// Let the endpoint read what arrived (round tags after the last answers).
    fn drain_round_tags(&mut self) {
        if self.ep.rounds().is_some() {
            while self.poll_answer().is_some() {}
            self.drain_verdicts();
        }
    }

    fn drain_verdicts(&mut self) {
        while let Some(v) = self.ep.poll_verdict() {
            self.verdicts.insert(v.first_slot, v);
        }
    }

    /// Forged answers the receiver took whose key is kept (in round mode, those in verified
    /// rounds; otherwise every forged answer taken).
    pub fn forged_answers_kept(&self) -> u64 {
        self.forged_slots
            .iter()
            .filter(|&&s| self.keeps_slot(s))
            .count() as u64
    }

    /// Round mode: the rounds in which the receiver took a forged answer (each must fail).
    pub fn attacked_rounds(&self) -> Vec<u64> {
        let mut r: Vec<u64> = self
            .forged_slots
            .iter()
            .filter_map(|s| self.answer_rounds.get(s).copied())
            .collect();
        r.sort_unstable();
        r.dedup();
        r
    }

    /// Round mode: the board's verdicts so far (record type 9), in slot order.
    pub fn verdicts(&self) -> impl Iterator<Item = &RoundVerdict> {
        self.verdicts.values()
    }

    /// Whether the receiver's sifted bit of `slot` is kept: always on a frame-tagged or
    /// unauthenticated link; in round mode only when a verdict record says the round whose slot
    /// range holds it verified (what the post-processing host does with the board's records).
    pub fn keeps_slot(&self, slot: u64) -> bool {
        if self.ep.rounds().is_none() {
            return true;
        }
        self.verdicts
            .range(..=slot)
            .next_back()
            .is_some_and(|(_, v)| v.kept && slot <= v.last_slot)
    }

    /// Run `f` on the host transmitter.
    pub fn with_tx<R>(&self, f: impl FnOnce(&HostTransmitter) -> R) -> R {
        f(&self.shared.borrow().tx)
    }

    /// What the model did: (receiver → transmitter, transmitter → receiver).
    pub fn channel_stats(&self) -> (ChannelStats, ChannelStats) {
        let s = self.shared.borrow();
        (s.up.stats, s.down.stats)
    }
}

impl Transmitter for FramedLink {
    fn announce(&mut self, a: Announcement) {
        {
            let mut s = self.shared.borrow_mut();
            s.now = s.now.max(a.slot);
        }
        self.refill_board();
        self.ep.announce(a);
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        let a = self.ep.poll_answer();
        if self.ep.rounds().is_some() {
            self.drain_verdicts();
        }
        let a = a?;
        if let Some(r) = self.ep.answer_round() {
            self.answer_rounds.insert(a.slot, r);
        }
        if !self.shared.borrow_mut().tx.answered_as_sent(&a) {
            self.forged_rx_accepted += 1;
            self.forged_slots.push(a.slot);
        }
        Some(a)
    }

    fn answers_final_below(&self) -> Option<u64> {
        self.ep.answers_final_below()
    }
}

/// The transmitter a host session talks to: in memory, or over the framed link.
pub enum HostTx {
    /// Answers handed over at once, without loss ([`SimTransmitter`]).
    Direct(Box<SimTransmitter>),
    /// Answers as frames over the simulated link.
    Framed(Box<FramedLink>),
}

impl HostTx {
    /// The framed link, when there is one.
    pub fn framed(&self) -> Option<&FramedLink> {
        match self {
            Self::Framed(l) => Some(l),
            Self::Direct(_) => None,
        }
    }

    /// Announcements the transmitter took.
    pub fn announced(&self) -> u64 {
        match self {
            Self::Direct(t) => t.announcements(),
            Self::Framed(l) => l.with_tx(|t| t.counters().announcements),
        }
    }

    /// Announcements of slots the transmitter's source does not hold.
    pub fn unrecorded(&self) -> u64 {
        match self {
            Self::Direct(t) => t.unrecorded(),
            Self::Framed(l) => l.with_tx(|t| t.counters().unrecorded),
        }
    }

    /// Lowest and highest slot announced.
    pub fn announced_range(&self) -> Option<(u64, u64)> {
        match self {
            Self::Direct(t) => t.announced_range(),
            Self::Framed(l) => l.with_tx(|t| t.announced_range()),
        }
    }

    /// The framed link, mutably, when there is one.
    pub fn framed_mut(&mut self) -> Option<&mut FramedLink> {
        match self {
            Self::Framed(l) => Some(l),
            Self::Direct(_) => None,
        }
    }
}

impl Transmitter for HostTx {
    fn announce(&mut self, a: Announcement) {
        match self {
            Self::Direct(t) => t.announce(a),
            Self::Framed(l) => l.announce(a),
        }
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        match self {
            Self::Direct(t) => t.poll_answer(),
            Self::Framed(l) => l.poll_answer(),
        }
    }

    fn answers_final_below(&self) -> Option<u64> {
        match self {
            Self::Direct(t) => t.answers_final_below(),
            Self::Framed(l) => l.answers_final_below(),
        }
    }
}
