//! The transmitter's side of round authentication (`docs/wire-protocol.md` §9.9), built on the
//! core's outcome hash ([`slotwise::formats::round`]) and key pool.
//!
//! The transmitter digests each announce frame it answers, learns every frame's fate from the
//! receiver's cumulative reports, and closes round `r` once it knows the fates of all its frames:
//! it hashes the outcome, tags it with pad word `2 + 2r + 1` and repeats the tag after every
//! frame it handles until the receiver's verdict comes. The round's matched bits stay aside
//! until then: a verified verdict under a good tag makes them key, anything else discards them.
//! A round-tag entry with a bad tag decides nothing (an adversary's entry must not make this end
//! discard a round the receiver keeps); the round waits for the genuine verdict.

use super::tx::TxKeyBit;
use serde::Serialize;
use slotwise::formats::round::{
    failed_hash, round_pad_word, Fate, RoundHash, RoundTag, Verdict, MAX_ENTRIES,
};
use slotwise::formats::tag::{Direction, BLOCK_LEN, HASH_KEY_LEN};
use slotwise::wire::LinkAuth;
use std::collections::BTreeMap;

/// What the transmitter's round authentication did.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct TxRoundCounters {
    /// Rounds closed and tagged.
    pub closed: u64,
    /// Rounds the receiver reported verified under a good tag: their bits are key.
    pub verified: u64,
    /// Rounds the receiver reported failed under a good tag: their bits are discarded.
    pub failed: u64,
    /// Rounds with no verdict at the end of the session (discarded).
    pub undecided: u64,
    /// Round-tag entries refused by their tag (the round keeps waiting).
    pub bad_tags: u64,
    /// Entries for rounds not waiting (repeats, replays, unknown rounds).
    pub stale: u64,
    /// Frames whose fate never reached this end (hashed as unknown: their round fails).
    pub unknown_fates: u64,
}

/// Matched-basis slots of a frame with their bits.
type MatchedBits = Vec<(u64, TxKeyBit)>;

struct Closed {
    t: RoundHash,
    tag: [u8; 8],
    bits: Vec<(u64, TxKeyBit)>,
}

/// The transmitter's round state.
pub struct TxRounds {
    frames_per_round: u32,
    hr: [u8; HASH_KEY_LEN],
    /// Frames this end answered: number → (digest, matched bits).
    answered: BTreeMap<u64, ([u8; BLOCK_LEN], MatchedBits)>,
    /// Fates from the receiver's reports: number → answered.
    fates: BTreeMap<u64, bool>,
    next_round: u64,
    resolved_below: u64,
    final_end: Option<u64>,
    pending: BTreeMap<u64, Closed>,
    /// Rounds decided: round → key kept.
    decided: BTreeMap<u64, bool>,
    counters: TxRoundCounters,
    /// Frames answered and reported answered / expired / unknown.
    pub fates_seen: (u64, u64, u64),
}

impl TxRounds {
    /// Rounds of `frames_per_round` frames; the outcome key `H_R` comes from pad words 0 and
    /// 1 of `auth`.
    pub fn new<const W: usize>(
        frames_per_round: u32,
        auth: &mut LinkAuth<W>,
    ) -> Result<Self, String> {
        if frames_per_round == 0 {
            return Err("frames per round must be at least 1".into());
        }
        let mut hr = [0u8; HASH_KEY_LEN];
        auth.take_words(0, &mut hr)
            .map_err(|e| format!("outcome key: {e}"))?;
        Ok(Self {
            frames_per_round,
            hr,
            answered: BTreeMap::new(),
            fates: BTreeMap::new(),
            next_round: 0,
            resolved_below: 0,
            final_end: None,
            pending: BTreeMap::new(),
            decided: BTreeMap::new(),
            counters: TxRoundCounters::default(),
            fates_seen: (0, 0, 0),
        })
    }

    /// Counters (undecided rounds counted as they stand).
    pub fn counters(&self) -> TxRoundCounters {
        TxRoundCounters {
            undecided: self.pending.len() as u64,
            ..self.counters
        }
    }

    /// Rounds decided: round → key kept.
    pub fn decided(&self) -> &BTreeMap<u64, bool> {
        &self.decided
    }

    /// Announce frame `num` answered: its outcome digest and matched bits.
    pub fn answered(&mut self, num: u64, digest: [u8; BLOCK_LEN], matched: Vec<(u64, TxKeyBit)>) {
        if num >= self.next_round * u64::from(self.frames_per_round) {
            self.answered.insert(num, (digest, matched));
        }
    }

    /// A report of announce frame `num`: every frame below `resolved_below` (widened) is final,
    /// `map` bit `i` says whether frame `resolved_below − 1 − i` was answered.
    pub fn report<const W: usize>(
        &mut self,
        auth: &mut LinkAuth<W>,
        resolved_below: u64,
        map: u64,
        is_final: bool,
    ) {
        let floor = self.next_round * u64::from(self.frames_per_round);
        for i in 0..64u64 {
            let Some(num) = resolved_below.checked_sub(i + 1) else {
                break;
            };
            if num < floor {
                break;
            }
            self.fates.entry(num).or_insert(map >> i & 1 == 1);
        }
        self.resolved_below = self.resolved_below.max(resolved_below);
        if is_final && self.final_end.is_none() {
            self.final_end = Some(resolved_below);
        }
        self.close_ready(auth);
    }

    fn close_ready<const W: usize>(&mut self, auth: &mut LinkAuth<W>) {
        let f = u64::from(self.frames_per_round);
        loop {
            let start = self.next_round * f;
            let end = match self.final_end {
                Some(e) if start >= e => return,
                Some(e) => (start + f).min(e),
                None => start + f,
            };
            let known = (start..end).all(|n| self.fates.contains_key(&n));
            let ready = self.resolved_below >= end
                && (known || self.final_end.is_some() || self.resolved_below >= end + 64);
            if !ready {
                return;
            }
            self.close(auth, self.next_round, start, end);
            self.next_round += 1;
        }
    }

    fn close<const W: usize>(&mut self, auth: &mut LinkAuth<W>, round: u64, start: u64, end: u64) {
        let mut t = RoundHash::new(&self.hr, round, self.frames_per_round);
        let mut bits = Vec::new();
        for num in start..end {
            let fate = self.fates.remove(&num);
            let mine = self.answered.remove(&num);
            match (fate, mine) {
                (Some(true), Some((d, matched))) => {
                    t.add(num, Fate::Answered, Some(&d));
                    bits.extend(matched);
                    self.fates_seen.0 += 1;
                }
                (Some(false), mine) => {
                    t.add(num, Fate::Expired, None);
                    self.fates_seen.1 += u64::from(mine.is_some());
                }
                (None, mine) => {
                    t.add(num, Fate::Unknown, None);
                    self.counters.unknown_fates += 1;
                    self.fates_seen.2 += u64::from(mine.is_some());
                }
                (Some(true), None) => t.add(num, Fate::Unknown, None),
            }
        }
        self.counters.closed += 1;
        let full = t.hash_for(Direction::ToReceiver, Verdict::Open);
        // Out of key: no tag, the receiver's round fails, and so does this end's.
        if let Ok(tag) = auth.seal_hash(round_pad_word(round, Direction::ToReceiver), &full) {
            self.pending.insert(round, Closed { t, tag, bits });
        }
    }

    /// The tags to repeat: every closed round without a verdict (at most [`MAX_ENTRIES`]).
    pub fn outgoing(&self) -> Vec<RoundTag> {
        self.pending
            .iter()
            .take(MAX_ENTRIES)
            .map(|(&round, c)| RoundTag {
                round,
                dir: Direction::ToReceiver,
                verdict: Verdict::Open,
                tag: c.tag,
            })
            .collect()
    }

    /// Take one round-tag entry from the receiver; a verified round's bits go into `key`.
    pub fn take<const W: usize>(
        &mut self,
        auth: &mut LinkAuth<W>,
        e: &RoundTag,
        key: &mut BTreeMap<u64, TxKeyBit>,
    ) {
        if e.dir != Direction::ToTransmitter || e.verdict == Verdict::Open {
            self.counters.bad_tags += 1;
            auth.note_check(true);
            return;
        }
        let Some(c) = self.pending.get(&e.round) else {
            self.counters.stale += 1;
            return;
        };
        let full = match e.verdict {
            Verdict::Verified => c.t.hash_for(Direction::ToTransmitter, e.verdict),
            _ => failed_hash(&self.hr, e.round, self.frames_per_round),
        };
        let word = round_pad_word(e.round, Direction::ToTransmitter);
        if auth.check_hash(word, &full, &e.tag).is_err() {
            self.counters.bad_tags += 1;
            return;
        }
        let Some(c) = self.pending.remove(&e.round) else {
            return;
        };
        let keep = e.verdict == Verdict::Verified;
        if keep {
            self.counters.verified += 1;
            key.extend(c.bits);
        } else {
            // The receiver raised its alarm if the failure was a bad tag; a round can also fail
            // for want of a tag in time, which is no sign of an attack.
            self.counters.failed += 1;
        }
        self.decided.insert(e.round, keep);
        // Pads of rounds below the lowest one still undecided can serve no tag.
        let low = self
            .pending
            .keys()
            .next()
            .copied()
            .unwrap_or(self.next_round);
        auth.abandon_below(round_pad_word(low, Direction::ToTransmitter));
    }
}
