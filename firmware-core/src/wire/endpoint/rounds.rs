//! Round mode of the receiver's endpoint (`docs/wire-protocol.md` §9.9): frames travel untagged
//! and one tag per round each way covers the round's sifting outcome ([`super::super::round`]).

use super::{Got, Read, ReadReady, ReceiverLink, Write};
use crate::formats::framing::{seal_in_place, RecordType, HEADER_LEN};
use crate::formats::round::{self as round_rec, RoundTag, RoundVerdict, Verdict};
use crate::formats::tag::{Direction, BLOCK_LEN};
use crate::formats::Frame;
use crate::wire::auth::LinkAuth;
use crate::wire::config::LinkConfig;
use crate::wire::round::{RoundConfigError, RoundLedger};
use crate::wire::Reject;

/// A blank round-tag entry, to fill buffers.
pub(super) const NO_TAG: RoundTag = RoundTag {
    round: 0,
    dir: Direction::ToReceiver,
    verdict: Verdict::Open,
    tag: [0; 8],
};

impl<R, W, const BATCH: usize, const OUT: usize, const KEYW: usize>
    ReceiverLink<R, W, BATCH, OUT, KEYW>
where
    R: Read + ReadReady,
    W: Write,
{
    /// A round-authenticated endpoint: frames travel untagged and one tag per round of
    /// `frames_per_round` announce frames, each way, covers the round's sifting outcome
    /// ([`crate::wire::round`]); the outcome key is taken from pad words 0 and 1 of `auth`.
    pub fn new_round_authenticated(
        cfg: LinkConfig,
        mut auth: LinkAuth<KEYW>,
        frames_per_round: u32,
        reader: R,
        writer: W,
    ) -> Result<Self, RoundConfigError> {
        let rounds = RoundLedger::new(frames_per_round, &mut auth)?;
        let mut l = Self::new_authenticated(cfg, auth, reader, writer);
        l.rounds = Some(rounds);
        Ok(l)
    }

    /// The round ledger, in round mode.
    pub const fn rounds(&self) -> Option<&RoundLedger> {
        self.rounds.as_ref()
    }

    /// Round mode: the round of the answers [`crate::Transmitter::poll_answer`] last handed out (its
    /// key is kept only if [`Self::poll_verdict`] later says so).
    pub fn answer_round(&self) -> Option<u64> {
        self.rounds.as_ref().map(|r| r.round_of(self.cur_num))
    }

    /// Round mode: the next round verdict for the post-processing host (send it as record type
    /// 9 on the key-block stream: the host keeps the key bits of its slots only if it verified).
    pub fn poll_verdict(&mut self) -> Option<RoundVerdict> {
        self.rounds.as_mut().and_then(RoundLedger::poll_verdict)
    }

    /// Round mode, end of the session: every round still waiting for the transmitter's tag
    /// fails; the verdicts go out with the next final report.
    pub fn give_up_rounds(&mut self) {
        if let (Some(l), Some(a)) = (self.rounds.as_mut(), self.auth.as_mut()) {
            l.give_up(a);
        }
    }

    /// Round mode: send the round tags due (after each announce frame).
    pub(super) fn send_round_tags(&mut self) {
        let Some(l) = self.rounds.as_mut() else {
            return;
        };
        let mut tags = [NO_TAG; round_rec::MAX_ENTRIES];
        let n = l.outgoing(&mut tags);
        let area = self.raw.get_mut(HEADER_LEN..).unwrap_or_default();
        let Some(len) = tags.get(..n).and_then(|t| round_rec::emit(t, area).ok()) else {
            return;
        };
        let seq = self.round_seq;
        self.round_seq = seq.wrapping_add(1);
        match seal_in_place(RecordType::RoundTag, seq, len, &mut self.raw, &mut self.enc) {
            Ok(m) => {
                self.counters.bytes_out += m as u64;
                let bytes = self.enc.get(..m).unwrap_or_default();
                if self.writer.write_all(bytes).is_err() {
                    self.counters.write_errors += 1;
                }
            }
            Err(_) => self.counters.write_errors += 1,
        }
    }

    /// Round mode: the digest of the answers frame just taken (its slots, bases and entries).
    pub(super) fn digest_current(&self, first_slot: u64) -> Option<[u8; BLOCK_LEN]> {
        self.rounds.as_ref()?;
        let a = self.auth.as_ref()?;
        let mut d = a.frame_digest(self.cur_n as u16, first_slot);
        for i in 0..self.cur_n {
            let at = (self.cur_start + i as u64).checked_sub(self.front);
            let packed = at.and_then(|k| self.slots.get(k as usize)).copied()?;
            let e = self.cur.get(i).copied()?;
            d.add(packed >> 1, packed & 1 == 1, e);
        }
        Some(d.finish())
    }

    /// Check the transmitter's round tags against this end's closed rounds.
    pub(super) fn take_round_tags(&mut self, n: usize) {
        if let (Some(l), Some(a)) = (self.rounds.as_mut(), self.auth.as_mut()) {
            for t in self.round_in.iter().take(n) {
                l.take(a, t);
            }
        }
    }
}

/// A round-tag frame from the transmitter, parsed (it travels untagged: its entries are tags).
pub(super) fn parse_tags(f: &Frame<'_>, tags: &mut [RoundTag; round_rec::MAX_ENTRIES]) -> Got {
    match (f.tag, round_rec::parse(f.payload, tags)) {
        (Some(_), _) => Got::Refused(Reject::Untagged),
        (None, Err(e)) => Got::Refused(e.into()),
        (None, Ok(n)) => Got::RoundTags(n),
    }
}
