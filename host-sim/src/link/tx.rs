//! The transmitter's half of the link on the host, built on the core's codec: decode announce
//! frames, look up its own choices, answer, and keep the bits of the frames the receiver reports
//! as answered — its own sifted key.
//!
//! On an authenticated link it keeps the mirror of the board's key pool (the core's
//! [`LinkAuth`]): it checks each announce frame's tag against pad word `2·n` (n the frame's
//! number, widened from its `seq`), tags its answers with pad word `2·n + 1`, and wipes the pad
//! words of every frame the receiver's report declares final.

use super::rounds::TxRounds;
use crate::scenario::Scenario;
use crate::sim::rng::{splitmix_at, stream_key, unit_f64};
use crate::sim::TxSource;
use slotwise::formats::round::{self as round_rec, RoundTag, MAX_ENTRIES as ROUND_ENTRIES};
use slotwise::formats::tag::{Direction, TagInput};
use slotwise::formats::{
    answers, encode_frame, encode_frame_tagged, Frame, RecordType, MAX_FRAME, MAX_PAYLOAD, MAX_RAW,
};
use slotwise::wire::check_frame;
use slotwise::wire::{
    widen_seq, AnnounceView, AnswerEntry, FrameDecoder, LinkAuth, Reject, RejectCounts, Report,
    SeqClass, SeqWindow,
};
use slotwise::{Answer, Basis};
use std::collections::{BTreeMap, HashMap};

/// Pad words of the host transmitter's mirror pool.
pub const TX_KEY_WORDS: usize = 4096;

/// Stream number of the test-bit choices.
const STREAM_REVEAL: u64 = 7;

/// One bit of the transmitter's sifted key.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TxKeyBit {
    /// The transmitted bit.
    pub bit: u8,
    /// Basis of both sides.
    pub basis: Basis,
    /// Intensity class.
    pub intensity: u8,
    /// Revealed for testing (public).
    pub revealed: bool,
}

#[derive(Clone, Debug)]
struct Answered {
    ann_seq: u16,
    /// Matched-basis slots with their bits.
    matched: Vec<(u64, TxKeyBit)>,
}

/// What the host transmitter did.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct TxCounters {
    /// Announce frames with a good CRC.
    pub frames_in: u64,
    /// Refused frames by reason.
    pub rejected: RejectCounts,
    /// Sequence numbers skipped over.
    pub seq_gaps: u64,
    /// Frames behind the highest sequence number.
    pub late_frames: u64,
    /// Announcements taken.
    pub announcements: u64,
    /// Announcements of marker slots (answered as a basis mismatch: never key).
    pub marker_announcements: u64,
    /// Answers frames sent.
    pub frames_out: u64,
    /// Bytes sent.
    pub bytes_out: u64,
    /// Answered frames the receiver reported as used: their matched bits are key.
    pub confirmed_frames: u64,
    /// Answered frames the receiver reported as expired: their bits are dropped.
    pub expired_frames: u64,
    /// Answered frames whose fate fell out of the report window unseen (dropped, counted).
    pub fate_unknown: u64,
    /// Reports marked final seen.
    pub final_reports: u64,
    /// Announcements of slots the transmitter's source does not hold (answered as a basis
    /// mismatch with no bit revealed: never key, nothing invented).
    pub unrecorded: u64,
}

/// The transmitter behind the link.
pub struct HostTransmitter {
    choices: TxSource,
    reveal_key: u64,
    test_fraction: f64,
    dec: FrameDecoder,
    seen: SeqWindow,
    next_seq: u16,
    waiting: Vec<Answered>,
    key: BTreeMap<u64, TxKeyBit>,
    closed: bool,
    counters: TxCounters,
    announced: Option<(u64, u64)>,
    raw: Vec<u8>,
    enc: Vec<u8>,
    auth: Option<Box<LinkAuth<TX_KEY_WORDS>>>,
    /// Highest announce-frame number authenticated.
    highest_num: Option<u64>,
    /// What the receiver should derive from each answer sent, by slot (to spot forgeries).
    given: HashMap<u64, Answer>,
    /// Round mode: untagged frames, one tag per round over the outcome.
    rounds: Option<TxRounds>,
    /// Sequence number of the next round-tag record.
    round_seq: u16,
}

impl HostTransmitter {
    /// A transmitter with the scenario's choices revealing `test_fraction` of the answered bits.
    pub fn new(s: &Scenario, test_fraction: f64) -> Self {
        Self::with_source(TxSource::seeded(s), s.seed, test_fraction)
    }

    /// A transmitter answering from `source`, revealing `test_fraction` of the answered bits as
    /// drawn from `seed` (the scenario's seed).
    pub fn with_source(source: TxSource, seed: u64, test_fraction: f64) -> Self {
        Self {
            choices: source,
            reveal_key: stream_key(seed, STREAM_REVEAL),
            test_fraction,
            dec: FrameDecoder::new(),
            seen: SeqWindow::new(),
            next_seq: 0,
            waiting: Vec::new(),
            key: BTreeMap::new(),
            closed: false,
            counters: TxCounters::default(),
            announced: None,
            raw: vec![0; MAX_RAW],
            enc: vec![0; MAX_FRAME],
            auth: None,
            highest_num: None,
            given: HashMap::new(),
            rounds: None,
            round_seq: 0,
        }
    }

    /// The same transmitter on a round-authenticated link (`docs/wire-protocol.md` §9.9):
    /// rounds of `frames_per_round` announce frames, mirror pool `auth`.
    pub fn with_round_auth(
        mut self,
        mut auth: Box<LinkAuth<TX_KEY_WORDS>>,
        frames_per_round: u32,
    ) -> Result<Self, String> {
        self.rounds = Some(TxRounds::new(frames_per_round, &mut auth)?);
        self.auth = Some(auth);
        Ok(self)
    }

    /// The round state, in round mode.
    pub fn rounds(&self) -> Option<&TxRounds> {
        self.rounds.as_ref()
    }

    /// The same transmitter on an authenticated link, holding the mirror pool `auth`.
    pub fn with_auth(mut self, auth: Box<LinkAuth<TX_KEY_WORDS>>) -> Self {
        self.auth = Some(auth);
        self
    }

    /// The mirror pool, on an authenticated link.
    pub fn auth(&self) -> Option<&LinkAuth<TX_KEY_WORDS>> {
        self.auth.as_deref()
    }

    /// Load refill key into the mirror pool (pad words from `first_word` on).
    pub fn refill(&mut self, first_word: u64, key: &[u8]) -> Result<usize, String> {
        match self.auth.as_mut() {
            Some(a) => a.refill(first_word, key).map_err(|e| e.to_string()),
            None => Err("the link is not authenticated".into()),
        }
    }

    /// Whether the receiver took `a` exactly as this transmitter answered it; the answer is
    /// forgotten either way (each slot is answered once).
    pub fn answered_as_sent(&mut self, a: &Answer) -> bool {
        self.given.remove(&a.slot).is_some_and(|g| g == *a)
    }

    /// Whether a final report arrived.
    pub fn closed(&self) -> bool {
        self.closed
    }

    /// Lowest and highest slot announced so far.
    pub fn announced_range(&self) -> Option<(u64, u64)> {
        self.announced
    }

    /// Counters.
    pub fn counters(&self) -> &TxCounters {
        &self.counters
    }

    /// The transmitter's sifted key: confirmed matched-basis slots and their bits.
    pub fn key(&self) -> &BTreeMap<u64, TxKeyBit> {
        &self.key
    }

    /// Answered frames whose fate is still open.
    pub fn unresolved_frames(&self) -> usize {
        self.waiting.len()
    }

    fn revealed(&self, slot: u64) -> bool {
        self.test_fraction >= 1.0
            || unit_f64(splitmix_at(self.reveal_key, slot)) < self.test_fraction
    }

    fn apply(&mut self, report: Report, is_final: bool) {
        let mut keep = Vec::new();
        for a in std::mem::take(&mut self.waiting) {
            match report.fate(a.ann_seq) {
                Some(true) => {
                    self.counters.confirmed_frames += 1;
                    self.key.extend(a.matched);
                }
                Some(false) => self.counters.expired_frames += 1,
                None if is_final || report.beyond_window(a.ann_seq) => {
                    self.counters.fate_unknown += 1
                }
                None => keep.push(a),
            }
        }
        self.waiting = keep;
    }

    /// Take bytes from the link; returns the answers frames to send back.
    pub fn receive(&mut self, bytes: &[u8]) -> Vec<Vec<u8>> {
        let mut out = Vec::new();
        let frame_auth = self.rounds.is_none();
        for &b in bytes {
            let Some(r) = self.dec.push(b) else {
                continue;
            };
            let payload_of = match r {
                Err(e) => {
                    self.counters.rejected.add(Reject::from(e));
                    continue;
                }
                Ok(f) if f.record == RecordType::RoundTag && !frame_auth => {
                    let mut tags = [RoundTag {
                        round: 0,
                        dir: Direction::ToTransmitter,
                        verdict: round_rec::Verdict::Open,
                        tag: [0; 8],
                    }; ROUND_ENTRIES];
                    match (f.tag, round_rec::parse(f.payload, &mut tags)) {
                        (Some(_), _) => self.counters.rejected.add(Reject::Untagged),
                        (None, Err(e)) => self.counters.rejected.add(Reject::from(e)),
                        (None, Ok(n)) => {
                            if let (Some(r), Some(a)) = (self.rounds.as_mut(), self.auth.as_mut()) {
                                for t in tags.iter().take(n) {
                                    r.take(a, t, &mut self.key);
                                }
                            }
                        }
                    }
                    continue;
                }
                Ok(f) if f.record != RecordType::Announce => {
                    self.counters.rejected.add(Reject::UnexpectedType);
                    continue;
                }
                Ok(f) => match authenticate(
                    self.auth.as_deref_mut().filter(|_| frame_auth),
                    self.highest_num,
                    &f,
                ) {
                    Err(r) => {
                        self.counters.rejected.add(r);
                        continue;
                    }
                    Ok(num) => {
                        if self.auth.is_some() {
                            // Round mode widens against unauthenticated numbers: a forged
                            // number can only make rounds fail.
                            self.highest_num = Some(self.highest_num.map_or(num, |h| h.max(num)));
                        }
                        (f.seq, num, f.payload.to_vec())
                    }
                },
            };
            let (seq, num, payload) = payload_of;
            if let Some(frame) = self.announce_frame(seq, num, &payload) {
                out.push(frame);
            }
            if let Some(frame) = self.round_tags() {
                out.push(frame);
            }
        }
        out
    }

    /// Round mode: a record repeating the tags of every round waiting for its verdict.
    fn round_tags(&mut self) -> Option<Vec<u8>> {
        let tags = self.rounds.as_ref()?.outgoing();
        if tags.is_empty() {
            return None;
        }
        let mut p = vec![0u8; round_rec::MAX_LEN];
        let n = round_rec::emit(&tags, &mut p).ok()?;
        let seq = self.round_seq;
        self.round_seq = seq.wrapping_add(1);
        let m = encode_frame(
            RecordType::RoundTag,
            seq,
            p.get(..n)?,
            &mut self.raw,
            &mut self.enc,
        )
        .ok()?;
        self.counters.bytes_out += m as u64;
        self.enc.get(..m).map(<[u8]>::to_vec)
    }

    fn announce_frame(&mut self, seq: u16, num: u64, payload: &[u8]) -> Option<Vec<u8>> {
        let v = match AnnounceView::parse(payload) {
            Ok(v) => v,
            Err(e) => {
                self.counters.rejected.add(Reject::from(e));
                return None;
            }
        };
        self.counters.frames_in += 1;
        match self.seen.observe(seq) {
            SeqClass::Duplicate => {
                self.counters.rejected.add(Reject::DuplicateFrame);
                return None;
            }
            SeqClass::Ahead { missing } => self.counters.seq_gaps += u64::from(missing),
            SeqClass::Late => self.counters.late_frames += 1,
            SeqClass::TooOld | SeqClass::First => {}
        }
        if let (Some(r), Some(a)) = (self.rounds.as_mut(), self.auth.as_mut()) {
            let below = widen_seq(v.report.resolved_below, num);
            r.report(a, below, v.report.answered_map, v.is_final());
        } else {
            self.apply(v.report, v.is_final());
        }
        if let (Some(a), None) = (self.auth.as_mut(), self.rounds.as_ref()) {
            // Frames before the report's cursor are final at the receiver: their pads are of no
            // further use, and a late copy of one is refused.
            let below = widen_seq(v.report.resolved_below, num);
            a.abandon_below(Direction::ToTransmitter.pad_word(below.min(num)));
        }
        if v.is_final() {
            self.counters.final_reports += 1;
            self.closed = true;
        }
        if v.count == 0 || self.closed {
            return None;
        }
        let mut entries = Vec::with_capacity(usize::from(v.count));
        let mut matched = Vec::new();
        for a in v.iter() {
            self.counters.announcements += 1;
            let (lo, hi) = self.announced.unwrap_or((a.slot, a.slot));
            self.announced = Some((lo.min(a.slot), hi.max(a.slot)));
            let c = self.choices.choice(a.slot);
            let revealed = self.revealed(a.slot);
            // The answers record has no "no answer" entry: a slot without content is answered
            // as a mismatch that reveals nothing, so no key bit can come from it.
            let withheld = AnswerEntry {
                basis_match: false,
                intensity: 0,
                bit: None,
            };
            let other = if a.basis == Basis::X {
                Basis::Z
            } else {
                Basis::X
            };
            let given = &mut self.given;
            let mut give = |e: AnswerEntry| {
                let basis = if e.basis_match { a.basis } else { other };
                given.insert(
                    a.slot,
                    Answer {
                        slot: a.slot,
                        basis,
                        intensity: e.intensity,
                        bit: e.bit,
                    },
                );
                entries.push(e);
            };
            if c.is_some_and(|c| c.intensity > 3) || self.choices.is_marker_slot(a.slot) {
                self.counters.marker_announcements += 1;
                give(withheld);
                continue;
            }
            let Some(c) = c else {
                self.counters.unrecorded += 1;
                give(withheld);
                continue;
            };
            let basis_match = c.basis == a.basis;
            if basis_match {
                matched.push((
                    a.slot,
                    TxKeyBit {
                        bit: c.bit,
                        basis: c.basis,
                        intensity: c.intensity,
                        revealed,
                    },
                ));
            }
            give(AnswerEntry {
                basis_match,
                intensity: c.intensity,
                bit: revealed.then_some(c.bit),
            });
        }
        let mut p = vec![0u8; MAX_PAYLOAD];
        let n = answers::emit(seq, v.first_slot, &entries, &mut p).ok()?;
        let payload = p.get(..n)?;
        let m = match self.auth.as_mut().filter(|_| self.rounds.is_none()) {
            None => encode_frame(
                RecordType::Answers,
                self.next_seq,
                payload,
                &mut self.raw,
                &mut self.enc,
            ),
            Some(a) => {
                let m = TagInput {
                    dir: Direction::ToReceiver,
                    record: RecordType::Answers,
                    seq: self.next_seq,
                    num,
                    payload,
                };
                // Out of key: nothing is sent, the receiver's frame expires (fails closed).
                let tag = a.seal(&m).ok()?;
                encode_frame_tagged(
                    RecordType::Answers,
                    self.next_seq,
                    payload,
                    &tag,
                    &mut self.raw,
                    &mut self.enc,
                )
            }
        }
        .ok()?;
        self.next_seq = self.next_seq.wrapping_add(1);
        self.counters.frames_out += 1;
        self.counters.bytes_out += m as u64;
        if let (Some(r), Some(a)) = (self.rounds.as_mut(), self.auth.as_ref()) {
            let mut d = a.frame_digest(v.count, v.first_slot);
            for (x, e) in v.iter().zip(&entries) {
                d.add(x.slot, x.basis == Basis::X, e.to_byte().unwrap_or(0));
            }
            r.answered(num, d.finish(), matched);
        } else {
            self.waiting.push(Answered {
                ann_seq: seq,
                matched,
            });
        }
        self.enc.get(..m).map(<[u8]>::to_vec)
    }
}

/// Check an announce frame's tag (authenticated link) or its lack of one; returns the frame's
/// full number.
fn authenticate(
    auth: Option<&mut LinkAuth<TX_KEY_WORDS>>,
    highest: Option<u64>,
    f: &Frame<'_>,
) -> Result<u64, Reject> {
    let num = widen_seq(f.seq, highest.unwrap_or(0));
    check_frame(auth, Direction::ToTransmitter, num, f).map(|()| num)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::TxChoices;
    use crate::txrecord::{TxRecord, TxRecordHeader};
    use slotwise::formats::announce::{self, FLAG_FINAL};
    use slotwise::formats::decode_frame;
    use slotwise::wire::AnswersView;
    use slotwise::Announcement;

    fn announce_frame(seq: u16, slots: &[(u64, Basis)], report: Report, flags: u8) -> Vec<u8> {
        let a: Vec<Announcement> = slots
            .iter()
            .map(|&(slot, basis)| Announcement { slot, basis })
            .collect();
        let mut p = vec![0u8; MAX_PAYLOAD];
        let n = announce::emit(&a, report, flags, &mut p).unwrap();
        let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
        let m = encode_frame(RecordType::Announce, seq, &p[..n], &mut raw, &mut out).unwrap();
        out.truncate(m);
        out
    }

    #[test]
    fn answers_from_its_choices_and_keeps_only_reported_frames() {
        let s = Scenario::default_bench();
        let mut tx = HostTransmitter::new(&s, 1.0);
        let choices = TxChoices::new(&s);
        // Key slots only (not on the 64-slot marker grid), in both bases.
        let slots: Vec<(u64, Basis)> = (1..40u64)
            .filter(|k| !choices.is_marker_slot(*k))
            .map(|k| (k, if k % 3 == 0 { Basis::X } else { Basis::Z }))
            .collect();
        let (first, second) = slots.split_at(20);
        let out = tx.receive(&announce_frame(0, first, Report::default(), 0));
        assert_eq!(out.len(), 1);
        let mut scratch = vec![0u8; MAX_RAW];
        let f = decode_frame(&out[0], &mut scratch).unwrap();
        assert_eq!((f.record, f.seq), (RecordType::Answers, 0));
        let v = AnswersView::parse(f.payload).unwrap();
        assert_eq!(
            (v.ann_seq, v.first_slot, v.count()),
            (0, first[0].0, first.len())
        );
        for (e, &(slot, basis)) in v.iter().zip(first) {
            let c = choices.choice(slot);
            assert_eq!(e.basis_match, c.basis == basis, "slot {slot}");
            assert_eq!((e.intensity, e.bit), (c.intensity, Some(c.bit)));
        }
        // A duplicate announce frame is not answered again.
        assert!(tx
            .receive(&announce_frame(0, first, Report::default(), 0))
            .is_empty());
        assert_eq!(tx.counters().rejected.get(Reject::DuplicateFrame), 1);
        // Frame 1 is answered but the receiver reports it expired; frame 0 answered.
        assert_eq!(
            tx.receive(&announce_frame(1, second, Report::default(), 0))
                .len(),
            1
        );
        assert!(tx.key().is_empty());
        let report = Report {
            resolved_below: 2,
            answered_map: 0b10,
        };
        tx.receive(&announce_frame(2, &[], report, FLAG_FINAL));
        let want: Vec<u64> = first
            .iter()
            .filter(|&&(k, b)| choices.choice(k).basis == b)
            .map(|&(k, _)| k)
            .collect();
        assert!(!want.is_empty());
        assert_eq!(tx.key().keys().copied().collect::<Vec<_>>(), want);
        let c = tx.counters();
        assert_eq!(
            (c.confirmed_frames, c.expired_frames, c.fate_unknown),
            (1, 1, 0)
        );
        assert!(tx.closed() && tx.unresolved_frames() == 0);
    }

    #[test]
    fn slots_the_record_lacks_are_withheld_and_counted() {
        let s = Scenario::default_bench();
        let choices = TxChoices::new(&s);
        // The record holds the odd key slots of 1..40 only.
        let held = (1..40u64).filter(|k| k % 2 == 1 && !choices.is_marker_slot(*k));
        let header = TxRecordHeader::new(0..100, 3).with_marker(true);
        let record =
            TxRecord::from_slots(header, held.map(|k| (k, choices.choice(k))), "mem").unwrap();
        let mut tx =
            HostTransmitter::with_source(TxSource::Record(std::rc::Rc::new(record)), s.seed, 1.0);
        let slots: Vec<(u64, Basis)> = (1..40u64)
            .filter(|k| !choices.is_marker_slot(*k))
            .map(|k| (k, choices.choice(k).basis))
            .collect();
        let out = tx.receive(&announce_frame(0, &slots, Report::default(), 0));
        let mut scratch = vec![0u8; MAX_RAW];
        let f = decode_frame(&out[0], &mut scratch).unwrap();
        let v = AnswersView::parse(f.payload).unwrap();
        let mut missing = 0;
        for (e, &(slot, _)) in v.iter().zip(&slots) {
            if slot % 2 == 0 {
                missing += 1;
                assert_eq!(
                    (e.basis_match, e.bit, e.intensity),
                    (false, None, 0),
                    "{slot}"
                );
            } else {
                let c = choices.choice(slot);
                assert_eq!((e.basis_match, e.bit), (true, Some(c.bit)), "{slot}");
            }
        }
        assert_eq!(tx.counters().unrecorded, missing);
        assert_eq!(tx.counters().marker_announcements, 0);
        let report = Report {
            resolved_below: 1,
            answered_map: 0b1,
        };
        tx.receive(&announce_frame(1, &[], report, FLAG_FINAL));
        // Only recorded slots became key; the withheld ones were never matched.
        assert!(!tx.key().is_empty());
        assert!(tx.key().keys().all(|k| k % 2 == 1));
    }
}
