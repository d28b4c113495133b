//! The receiver's end of the link: a [`Transmitter`] on top of `embedded-io` reader and writer.
//!
//! Announcements collect in one fixed buffer and leave as one announce frame when `BATCH` are
//! held, when the payload would outgrow [`LINK_MAX_PAYLOAD`], when a new slot lies more than
//! `flush_age_slots` after the batch's first, or on [`ReceiverLink::flush`]. Sent frames wait
//! (at most [`MAX_OPEN_FRAMES`], their slots in a ring of `OUT` entries of 8 bytes) until their
//! answers frame arrives or their last slot falls `answer_timeout_slots` behind the newest
//! announced slot; then they are final, and [`Transmitter::answers_final_below`] lets the
//! receiver expire what the link will no longer answer. Each frame's fate goes back to the
//! transmitter in the [`Report`] of every later announce frame.
//!
//! The link, not the receiver, decides when answers expire: give the receiver an answer timeout
//! longer than any wait the link allows (the host uses `u64::MAX / 4`), so that every answer the
//! link accepts still finds its slot pending. A shorter one still loses nothing silently (such
//! answers count as `unmatched` in [`AnswerErrors`](crate::AnswerErrors)), but both sides' keys
//! may then differ.

use super::auth::{LinkAuth, RefillFrameError};
use super::config::{LinkConfig, LinkCounters};
use super::decoder::FrameDecoder;
use super::keypool::RefillError;
use super::round::RoundLedger;
use super::seqwin::{SeqClass, SeqWindow};
use super::{Reject, RejectCounts};
use crate::formats::announce::{
    emit_fixed, Report, FIXED_LEN as ANNOUNCE_FIXED, FLAG_FINAL, MAX_ENTRIES,
};
use crate::formats::answers::{AnswerEntry, AnswersView};
use crate::formats::bytes::{varint_len, Writer};
use crate::formats::framing::{
    decode_frame, seal_in_place, seal_in_place_tagged, FrameError, RecordType, HEADER_LEN,
    LINK_MAX_PAYLOAD, MAX_FRAME, MAX_RAW,
};
use crate::formats::refill::RefillView;
use crate::formats::round::{self as round_rec, round_pad_word, RoundTag};
use crate::formats::tag::{Direction, TagInput, BLOCK_LEN};
use crate::gates::Basis;
use crate::sift::{Announcement, Answer, Transmitter};
use embedded_io::{Read, ReadReady, Write};
use heapless::Deque;
use zeroize::Zeroize;

mod rounds;
mod tag_check;

use tag_check::check_tag;

/// Announce frames that may wait for their answers at once.
pub const MAX_OPEN_FRAMES: usize = 32;
/// Bytes read from the link per call to `read`.
pub const READ_CHUNK: usize = 64;
/// Final reports an authenticated endpoint keeps key for: it sends no announce frame that would
/// leave it unable to close (the transmitter keeps an answered frame's bits only once a report
/// says so).
pub const CLOSE_RESERVE: u64 = 4;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum FrameState {
    Waiting,
    Answered,
    Expired,
}

#[derive(Clone, Copy, Debug)]
struct OpenFrame {
    seq: u16,
    /// Full frame number (the low 16 bits are `seq`).
    num: u64,
    /// Running index of the frame's first announcement.
    start: u64,
    count: u16,
    first_slot: u64,
    last_slot: u64,
    state: FrameState,
    /// Round mode: the digest of the frame's outcome entry, once answered.
    digest: Option<[u8; BLOCK_LEN]>,
}

/// An incoming frame reduced to what the endpoint checks (so the decoder's borrow ends).
enum Got {
    Answers {
        seq: u16,
        ann_seq: u16,
        first_slot: u64,
        count: usize,
    },
    /// Round tags parsed into the endpoint's `round_in`, this many.
    RoundTags(usize),
    Refused(Reject),
}

/// The receiver's end of the link: batches announcements into frames of up to `BATCH`
/// (1..=512), keeps the slots of up to `OUT` (≥ `BATCH`) unanswered announcements and, when
/// authenticated, a pool of `KEYW` one-time-pad words (9 bytes each).
pub struct ReceiverLink<R, W, const BATCH: usize, const OUT: usize, const KEYW: usize = 0> {
    cfg: LinkConfig,
    reader: R,
    writer: W,
    dec: FrameDecoder,
    rbuf: [u8; READ_CHUNK],
    rpos: usize,
    rlen: usize,
    raw: [u8; MAX_RAW],
    enc: [u8; MAX_FRAME],
    batch_n: usize,
    batch_first: u64,
    batch_prev: u64,
    batch_deltas: usize,
    bases: [u8; MAX_ENTRIES / 8],
    /// Number of the next announce frame (its `seq` is the low 16 bits).
    next_num: u64,
    auth: Option<LinkAuth<KEYW>>,
    /// Round mode: frames go untagged and one tag per round covers the sifting outcome.
    rounds: Option<RoundLedger>,
    /// Sequence number of the next round-tag record.
    round_seq: u16,
    /// Number of the announce frame whose answers are being handed out.
    cur_num: u64,
    /// Round tags of the last round-tag record taken.
    round_in: [RoundTag; round_rec::MAX_ENTRIES],
    /// Slot << 1 | basis of every announcement in an open frame or the batch.
    slots: Deque<u64, OUT>,
    /// Running index of `slots`' front.
    front: u64,
    open: Deque<OpenFrame, MAX_OPEN_FRAMES>,
    report: Report,
    newest_slot: Option<u64>,
    seen: SeqWindow,
    cur: [u8; MAX_ENTRIES],
    cur_n: usize,
    cur_pos: usize,
    cur_start: u64,
    cur_seq: Option<u16>,
    closed: bool,
    counters: LinkCounters,
}

impl<R, W, const BATCH: usize, const OUT: usize, const KEYW: usize>
    ReceiverLink<R, W, BATCH, OUT, KEYW>
where
    R: Read + ReadReady,
    W: Write,
{
    /// An unauthenticated endpoint reading answers from `reader` and writing announcements to
    /// `writer`. Its frames carry no tag and it refuses tagged ones: without authentication an
    /// active attacker on the link voids every key figure (use [`Self::new_authenticated`]).
    pub const fn new(cfg: LinkConfig, reader: R, writer: W) -> Self {
        const {
            assert!(
                BATCH > 0 && BATCH <= MAX_ENTRIES,
                "BATCH must lie in 1..=512"
            );
            assert!(OUT >= BATCH, "OUT must hold at least one full batch");
        };
        Self {
            cfg,
            reader,
            writer,
            dec: FrameDecoder::new(),
            rbuf: [0; READ_CHUNK],
            rpos: 0,
            rlen: 0,
            raw: [0; MAX_RAW],
            enc: [0; MAX_FRAME],
            batch_n: 0,
            batch_first: 0,
            batch_prev: 0,
            batch_deltas: 0,
            bases: [0; MAX_ENTRIES / 8],
            next_num: 0,
            auth: None,
            rounds: None,
            round_seq: 0,
            cur_num: 0,
            round_in: [rounds::NO_TAG; round_rec::MAX_ENTRIES],
            slots: Deque::new(),
            front: 0,
            open: Deque::new(),
            report: Report {
                resolved_below: 0,
                answered_map: 0,
            },
            newest_slot: None,
            seen: SeqWindow::new(),
            cur: [0; MAX_ENTRIES],
            cur_n: 0,
            cur_pos: 0,
            cur_start: 0,
            cur_seq: None,
            closed: false,
            counters: LinkCounters {
                frames_out: 0,
                bytes_out: 0,
                write_errors: 0,
                announcements: 0,
                refused_announcements: 0,
                bytes_in: 0,
                read_errors: 0,
                frames_in: 0,
                rejected: RejectCounts::new(),
                seq_gaps: 0,
                late_frames: 0,
                too_old_frames: 0,
                answered_frames: 0,
                answers_in: 0,
                expired_frames: 0,
                expired_announcements: 0,
                evicted_frames: 0,
            },
        }
    }

    /// An authenticated endpoint: every frame it sends carries a tag from `auth`'s pool, every
    /// frame it takes must carry a good one, and it stops for good when the pool runs dry.
    pub fn new_authenticated(cfg: LinkConfig, auth: LinkAuth<KEYW>, reader: R, writer: W) -> Self {
        let mut l = Self::new(cfg, reader, writer);
        l.auth = Some(auth);
        l
    }

    /// The authentication state, when the link is authenticated.
    pub const fn auth(&self) -> Option<&LinkAuth<KEYW>> {
        self.auth.as_ref()
    }

    /// Load fresh key from the post-processing host into the pool (pad words from `first_word`
    /// on); an unauthenticated link refuses it.
    pub fn refill(&mut self, first_word: u64, key: &[u8]) -> Result<usize, RefillError> {
        match self.auth.as_mut() {
            Some(a) => a.refill(first_word, key),
            None => Err(RefillError::Unauthenticated),
        }
    }

    /// Take one stuffed key-refill frame ([`RecordType::KeyRefill`]) from the local link and load
    /// its key; returns the pad words loaded. Never panics, whatever the bytes.
    pub fn take_refill_frame(&mut self, stuffed: &[u8]) -> Result<usize, RefillFrameError> {
        // `enc` is free between frames; `raw` may hold the batch being built.
        let f = decode_frame(stuffed, &mut self.enc).map_err(RefillFrameError::Frame)?;
        if f.record != RecordType::KeyRefill || f.tag.is_some() {
            return Err(RefillFrameError::Frame(FrameError::UnknownType(
                f.record.code(),
            )));
        }
        let v = RefillView::parse(f.payload).map_err(RefillFrameError::Frame)?;
        let r = match self.auth.as_mut() {
            Some(a) => a.refill(v.first_word, v.key),
            None => Err(RefillError::Unauthenticated),
        };
        self.enc.zeroize();
        r.map_err(RefillFrameError::Pool)
    }

    /// Whether the link has stopped for want of key or after too many refusals (authenticated
    /// links only): it sends no new announce frame, and every announcement is refused and counted.
    pub fn stopped(&self) -> bool {
        self.auth
            .as_ref()
            .is_some_and(|a| a.stopped() || a.starved())
    }

    /// What the endpoint did so far.
    pub const fn counters(&self) -> &LinkCounters {
        &self.counters
    }

    /// The settings in use.
    pub const fn config(&self) -> &LinkConfig {
        &self.cfg
    }

    /// The reader (to inspect a transport).
    pub const fn reader(&self) -> &R {
        &self.reader
    }

    /// The writer (to inspect a transport).
    pub const fn writer(&self) -> &W {
        &self.writer
    }

    /// The reader, mutably (to inspect or drive a transport).
    pub fn reader_mut(&mut self) -> &mut R {
        &mut self.reader
    }

    /// The writer, mutably (to inspect or drive a transport).
    pub fn writer_mut(&mut self) -> &mut W {
        &mut self.writer
    }

    /// Announcements sent and still waiting for their answers.
    pub fn waiting_announcements(&self) -> u64 {
        self.open
            .iter()
            .filter(|f| f.state == FrameState::Waiting)
            .map(|f| u64::from(f.count))
            .sum()
    }

    /// Announcements held in the batch, not yet sent.
    pub const fn batched(&self) -> usize {
        self.batch_n
    }

    /// The report the next announce frame will carry.
    pub const fn report(&self) -> Report {
        self.report
    }

    /// Send the batch now (nothing when it is empty), then flush the writer.
    pub fn flush(&mut self) {
        self.send_batch();
        if self.writer.flush().is_err() {
            self.counters.write_errors += 1;
        }
    }

    /// End of the session: send the batch, expire every waiting frame, and send the final report
    /// (an announce frame without announcements, flag [`FLAG_FINAL`]). Later announcements and
    /// answers are refused. Call [`Self::send_final_report`] again to repeat the report.
    pub fn close(&mut self) {
        self.send_batch();
        self.cur_pos = self.cur_n;
        self.cur_seq = None;
        for f in self.open.iter_mut() {
            if f.state == FrameState::Waiting {
                f.state = FrameState::Expired;
                self.counters.expired_frames += 1;
                self.counters.expired_announcements += u64::from(f.count);
            }
        }
        self.pop_resolved();
        if let (Some(l), Some(a)) = (self.rounds.as_mut(), self.auth.as_mut()) {
            l.close_round(a);
        }
        self.closed = true;
        self.send_final_report();
    }

    /// Send the final report once more (after [`Self::close`]; before it, nothing happens).
    pub fn send_final_report(&mut self) {
        if !self.closed {
            return;
        }
        let area = self.raw.get_mut(HEADER_LEN..).unwrap_or_default();
        if emit_fixed(area, 0, 0, self.report, FLAG_FINAL).is_ok() && self.emit(ANNOUNCE_FIXED) {
            // No answers come for a report: its answers pad word is of no further use.
            let answers_word = Direction::ToReceiver.pad_word(self.next_num - 1);
            if let (Some(a), None) = (self.auth.as_mut(), self.rounds.as_ref()) {
                a.abandon_below(answers_word + 1);
            }
        }
        if self.writer.flush().is_err() {
            self.counters.write_errors += 1;
        }
    }

    /// Seal and write the announce frame whose payload is in `raw`; false when it could not be
    /// tagged (no key: the link stops) and nothing was sent.
    fn emit(&mut self, len: usize) -> bool {
        let num = self.next_num;
        let seq = num as u16;
        let frame_auth = self.auth.as_mut().filter(|_| self.rounds.is_none());
        let sealed = match frame_auth {
            None => seal_in_place(RecordType::Announce, seq, len, &mut self.raw, &mut self.enc),
            Some(a) => {
                let m = TagInput {
                    dir: Direction::ToTransmitter,
                    record: RecordType::Announce,
                    seq,
                    num,
                    payload: self
                        .raw
                        .get(HEADER_LEN..HEADER_LEN + len)
                        .unwrap_or_default(),
                };
                match a.seal(&m) {
                    Ok(tag) => seal_in_place_tagged(
                        RecordType::Announce,
                        seq,
                        len,
                        &tag,
                        &mut self.raw,
                        &mut self.enc,
                    ),
                    Err(_) => return false,
                }
            }
        };
        self.next_num = num + 1;
        self.counters.frames_out += 1;
        match sealed {
            Ok(n) => {
                self.counters.bytes_out += n as u64;
                let bytes = self.enc.get(..n).unwrap_or_default();
                if self.writer.write_all(bytes).is_err() {
                    self.counters.write_errors += 1;
                }
            }
            Err(_) => self.counters.write_errors += 1,
        }
        self.send_round_tags();
        true
    }

    fn batch_limit(&self) -> usize {
        if self.cfg.max_batch() < BATCH {
            self.cfg.max_batch()
        } else {
            BATCH
        }
    }

    /// Whether the next announce frame can be tagged with key to spare for closing: the pad
    /// words of [`CLOSE_RESERVE`] final reports after it must be loaded too (always true when
    /// unauthenticated).
    fn can_send(&self) -> bool {
        if let (Some(l), Some(a)) = (self.rounds.as_ref(), self.auth.as_ref()) {
            let r = l.round_of(self.next_num);
            return a.can_tag(round_pad_word(r, Direction::ToTransmitter))
                && a.can_tag(round_pad_word(r, Direction::ToReceiver));
        }
        let word = Direction::ToTransmitter.pad_word(self.next_num);
        let reserve = Direction::ToTransmitter.pad_word(self.next_num + CLOSE_RESERVE);
        self.auth
            .as_ref()
            .is_none_or(|a| a.can_tag(word) && a.can_tag(reserve))
    }

    fn batch_fits(&self, slot: u64) -> bool {
        if self.batch_n == 0 {
            return true;
        }
        let d = slot.wrapping_sub(self.batch_prev);
        self.batch_n < self.batch_limit()
            && ANNOUNCE_FIXED + self.batch_deltas + varint_len(d) + (self.batch_n + 1).div_ceil(8)
                <= LINK_MAX_PAYLOAD
    }

    fn send_batch(&mut self) {
        let n = self.batch_n;
        if n == 0 {
            return;
        }
        if self.open.is_full() {
            self.evict_oldest();
        }
        let start = self.front + self.slots.len() as u64 - n as u64;
        let starved = !self.can_send();
        if starved && !self.stopped() {
            if let Some(a) = self.auth.as_mut() {
                a.starve();
            }
        }
        if self.open.is_full() || starved {
            // Only while answers are being handed over; the caller expires these slots.
            for _ in 0..n {
                self.slots.pop_back();
            }
            self.counters.refused_announcements += n as u64;
            self.reset_batch();
            return;
        }
        let m = n.div_ceil(8);
        let at = HEADER_LEN + ANNOUNCE_FIXED + self.batch_deltas;
        if let (Some(d), Some(s)) = (self.raw.get_mut(at..at + m), self.bases.get(..m)) {
            d.copy_from_slice(s);
        }
        let area = self.raw.get_mut(HEADER_LEN..).unwrap_or_default();
        let fixed = emit_fixed(area, self.batch_first, n as u16, self.report, 0);
        let rec = OpenFrame {
            seq: self.next_num as u16,
            num: self.next_num,
            start,
            count: n as u16,
            first_slot: self.batch_first,
            last_slot: self.batch_prev,
            state: FrameState::Waiting,
            digest: None,
        };
        if fixed.is_ok() && self.open.push_back(rec).is_ok() {
            if self.emit(ANNOUNCE_FIXED + self.batch_deltas + m) {
                self.counters.announcements += n as u64;
            } else {
                self.open.pop_back();
                for _ in 0..n {
                    self.slots.pop_back();
                }
                self.counters.refused_announcements += n as u64;
            }
        }
        self.reset_batch();
    }

    fn reset_batch(&mut self) {
        self.batch_n = 0;
        self.batch_deltas = 0;
        self.bases.fill(0);
    }

    /// Expire the oldest open frame (if waiting) and drop what is final; false if none could go.
    fn evict_oldest(&mut self) -> bool {
        let Some(f) = self.open.front_mut() else {
            return false;
        };
        if Some(f.seq) == self.cur_seq {
            return false;
        }
        if f.state == FrameState::Waiting {
            f.state = FrameState::Expired;
            self.counters.expired_frames += 1;
            self.counters.evicted_frames += 1;
            self.counters.expired_announcements += u64::from(f.count);
        }
        self.pop_resolved();
        true
    }

    fn expire_old(&mut self, now_slot: u64) {
        let timeout = self.cfg.answer_timeout_slots();
        for f in self.open.iter_mut() {
            if f.state != FrameState::Waiting {
                continue;
            }
            if f.last_slot.saturating_add(timeout) >= now_slot {
                break;
            }
            f.state = FrameState::Expired;
            self.counters.expired_frames += 1;
            self.counters.expired_announcements += u64::from(f.count);
        }
        self.pop_resolved();
    }

    fn pop_resolved(&mut self) {
        while let Some(f) = self.open.front().copied() {
            if f.state == FrameState::Waiting || Some(f.seq) == self.cur_seq {
                break;
            }
            self.open.pop_front();
            for _ in 0..f.count {
                if self.slots.pop_front().is_some() {
                    self.front += 1;
                }
            }
            match (self.auth.as_mut(), self.rounds.as_mut()) {
                (Some(a), Some(l)) => {
                    l.frame_final(a, f.num, (f.first_slot, f.last_slot), f.digest.as_ref())
                }
                (Some(a), None) => a.abandon_below(Direction::ToReceiver.pad_word(f.num) + 1),
                _ => {}
            }
            let answered = u64::from(f.state == FrameState::Answered);
            self.report.answered_map = self.report.answered_map << 1 | answered;
            self.report.resolved_below = f.seq.wrapping_add(1);
        }
    }

    fn next_answer(&mut self) -> Option<Answer> {
        while self.cur_pos < self.cur_n {
            let i = self.cur_pos;
            self.cur_pos += 1;
            let e = self.cur.get(i).copied().and_then(AnswerEntry::from_byte);
            let at = (self.cur_start + i as u64).checked_sub(self.front);
            let packed = at.and_then(|k| self.slots.get(k as usize)).copied();
            if let (Some(e), Some(p)) = (e, packed) {
                let rx = if p & 1 == 1 { Basis::X } else { Basis::Z };
                let other = if rx == Basis::X { Basis::Z } else { Basis::X };
                self.counters.answers_in += 1;
                return Some(Answer {
                    slot: p >> 1,
                    basis: if e.basis_match { rx } else { other },
                    intensity: e.intensity,
                    bit: e.bit,
                });
            }
        }
        None
    }

    fn next_byte(&mut self) -> Option<u8> {
        if self.rpos >= self.rlen {
            match self.reader.read_ready() {
                Ok(true) => {}
                Ok(false) => return None,
                Err(_) => {
                    self.counters.read_errors += 1;
                    return None;
                }
            }
            match self.reader.read(&mut self.rbuf) {
                Ok(0) => return None,
                Ok(n) => {
                    self.rpos = 0;
                    self.rlen = n.min(READ_CHUNK);
                    self.counters.bytes_in += self.rlen as u64;
                }
                Err(_) => {
                    self.counters.read_errors += 1;
                    return None;
                }
            }
        }
        let b = self.rbuf.get(self.rpos).copied();
        self.rpos += 1;
        b
    }

    /// Check one decoded answers frame against the open frames; true when it was taken.
    fn take(&mut self, seq: u16, ann_seq: u16, first_slot: u64, count: usize) -> bool {
        self.counters.frames_in += 1;
        match self.seen.observe(seq) {
            SeqClass::Duplicate => {
                self.counters.rejected.add(Reject::DuplicateFrame);
                return false;
            }
            SeqClass::Ahead { missing } => self.counters.seq_gaps += u64::from(missing),
            SeqClass::Late => self.counters.late_frames += 1,
            SeqClass::TooOld => self.counters.too_old_frames += 1,
            SeqClass::First => {}
        }
        let Some(f) = self.open.iter_mut().find(|f| f.seq == ann_seq) else {
            let reason = if ann_seq.wrapping_sub(self.next_num as u16) < 0x8000 {
                Reject::NeverAnnounced
            } else if self.report.fate(ann_seq) == Some(true) {
                Reject::DuplicateAnswers
            } else {
                Reject::LateAnswers
            };
            self.counters.rejected.add(reason);
            return false;
        };
        let reason = match f.state {
            FrameState::Answered => Reject::DuplicateAnswers,
            FrameState::Expired => Reject::LateAnswers,
            FrameState::Waiting if usize::from(f.count) != count || f.first_slot != first_slot => {
                Reject::SlotMismatch
            }
            FrameState::Waiting => {
                f.state = FrameState::Answered;
                self.cur_seq = Some(f.seq);
                self.cur_num = f.num;
                self.cur_start = f.start;
                self.cur_n = count;
                self.cur_pos = 0;
                self.counters.answered_frames += 1;
                let digest = self.digest_current(first_slot);
                if let Some(f) = self.open.iter_mut().find(|f| f.seq == ann_seq) {
                    f.digest = digest;
                }
                return true;
            }
        };
        self.counters.rejected.add(reason);
        false
    }
}

impl<R, W, const BATCH: usize, const OUT: usize, const KEYW: usize> Transmitter
    for ReceiverLink<R, W, BATCH, OUT, KEYW>
where
    R: Read + ReadReady,
    W: Write,
{
    fn announce(&mut self, a: Announcement) {
        let in_order = self.batch_n == 0 || a.slot > self.batch_prev;
        let after_open = self
            .open
            .back()
            .is_none_or(|f| a.slot > f.last_slot || self.batch_n > 0);
        if self.closed || self.stopped() || a.slot >= 1 << 63 || !in_order || !after_open {
            self.counters.refused_announcements += 1;
            return;
        }
        self.newest_slot = Some(self.newest_slot.map_or(a.slot, |s| s.max(a.slot)));
        self.expire_old(a.slot);
        let too_old = self.batch_n > 0 && a.slot - self.batch_first > self.cfg.flush_age_slots();
        if self.batch_n > 0 && (too_old || !self.batch_fits(a.slot)) {
            self.send_batch();
        }
        while self.slots.is_full() {
            if !self.evict_oldest() {
                self.send_batch();
                if !self.evict_oldest() {
                    self.counters.refused_announcements += 1;
                    return;
                }
            }
        }
        if self.batch_n > 0 {
            let at = HEADER_LEN + ANNOUNCE_FIXED + self.batch_deltas;
            let area = self.raw.get_mut(at..).unwrap_or_default();
            // `batch_fits` left room for this delta; a refusal here is counted, never dropped.
            match Writer::new(area).varint(a.slot - self.batch_prev) {
                Ok(n) => self.batch_deltas += n,
                Err(_) => {
                    self.counters.refused_announcements += 1;
                    return;
                }
            }
        } else {
            self.batch_first = a.slot;
        }
        if a.basis == Basis::X {
            if let Some(b) = self.bases.get_mut(self.batch_n / 8) {
                *b |= 1 << (self.batch_n % 8);
            }
        }
        self.batch_prev = a.slot;
        self.batch_n += 1;
        if self.slots.push_back(a.slot << 1 | a.basis as u64).is_err() {
            self.counters.refused_announcements += 1;
        }
        if self.batch_n >= self.batch_limit() {
            self.send_batch();
        }
    }

    fn poll_answer(&mut self) -> Option<Answer> {
        loop {
            if let Some(a) = self.next_answer() {
                return Some(a);
            }
            if self.cur_seq.take().is_some() {
                self.pop_resolved();
            }
            // After the close only round mode reads on: the last rounds' tags still come.
            if self.closed && self.rounds.is_none() {
                return None;
            }
            let b = self.next_byte()?;
            let got = match self.dec.push(b) {
                None => continue,
                Some(Err(e)) => Got::Refused(e.into()),
                Some(Ok(f)) if f.record == RecordType::RoundTag && self.rounds.is_some() => {
                    rounds::parse_tags(&f, &mut self.round_in)
                }
                Some(Ok(f)) if f.record != RecordType::Answers => {
                    Got::Refused(Reject::UnexpectedType)
                }
                Some(Ok(f)) => match AnswersView::parse(f.payload) {
                    Err(e) => Got::Refused(e.into()),
                    Ok(v) => match check_tag(
                        self.auth.as_mut().filter(|_| self.rounds.is_none()),
                        &self.open,
                        self.next_num,
                        &f,
                        v.ann_seq,
                    ) {
                        Err(r) => Got::Refused(r),
                        Ok(()) => {
                            let count = v.count();
                            if let Some(d) = self.cur.get_mut(..count) {
                                d.copy_from_slice(v.entry_bytes());
                            }
                            Got::Answers {
                                seq: f.seq,
                                ann_seq: v.ann_seq,
                                first_slot: v.first_slot,
                                count,
                            }
                        }
                    },
                },
            };
            match got {
                Got::Refused(r) => self.counters.rejected.add(r),
                Got::RoundTags(n) => self.take_round_tags(n),
                Got::Answers {
                    seq,
                    ann_seq,
                    first_slot,
                    count,
                } => {
                    let taken = self.take(seq, ann_seq, first_slot, count);
                    // Round mode: duplicate, late and mismatched answers count in the attack
                    // alarm's window, as refused tags do on a frame-tagged link.
                    if let (Some(a), Some(_)) = (self.auth.as_mut(), self.rounds.as_ref()) {
                        a.note_check(!taken);
                    }
                }
            }
        }
    }

    fn answers_final_below(&self) -> Option<u64> {
        if let Some(f) = self.open.iter().find(|f| f.state == FrameState::Waiting) {
            return Some(f.first_slot);
        }
        if self.batch_n > 0 {
            return Some(self.batch_first);
        }
        self.newest_slot.map(|s| s.saturating_add(1))
    }
}
