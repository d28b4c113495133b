//! The receiver's side of round authentication: one tag per round of `F` announce frames each
//! way, over the round's agreed sifting outcome (Kiktenko et al., arXiv:1903.10237).
//!
//! A tag per frame spends 64 key bits per frame, more than the sifted bits a frame yields. Round
//! mode sends frames untagged and authenticates what both ends must agree on anyway: the
//! outcome of [`crate::formats::round`], fed in frame-number order as frames become final.
//! Round `r` holds announce frames `r·F .. (r+1)·F` and closes when the last of them is final
//! (or at the end of the session), so loss, duplication and reordering of frames change nothing
//! in it; a forged, altered, injected or replayed answer does, and the round fails on both ends.
//!
//! The exchange per round: the transmitter, once a report tells it every fate of the round,
//! sends its tag (pad word `2 + 2r + 1`) until the receiver's verdict comes; the receiver checks
//! it against its own outcome, decides (verified or failed) and sends its own tag over the
//! outcome *and the verdict* (pad word `2 + 2r`), repeated in its next [`RESENDS`]
//! round-tag records. The board keeps no key: a verdict goes out in [`RoundLedger::poll_verdict`]
//! and the post-processing host keeps or discards the round's key blocks by it.

use super::auth::LinkAuth;
use super::Reject;
use crate::formats::round::{
    failed_hash, round_pad_word, Fate, RoundHash, RoundTag, RoundVerdict, Verdict, MAX_ENTRIES,
};
use crate::formats::tag::{Direction, BLOCK_LEN, HASH_KEY_LEN};
use core::fmt;
use heapless::Deque;
use zeroize::Zeroize;

/// Closed rounds that may wait for the transmitter's tag at once; a round pushed out fails.
pub const PENDING_ROUNDS: usize = 4;
/// Times the receiver sends each of its round tags (in consecutive round-tag records).
pub const RESENDS: u8 = 4;
/// Round tags of this end waiting to be sent (each leaves after [`RESENDS`] records).
pub const OUTBOX: usize = 8;
/// Verdicts held for the post-processing host until it takes them.
pub const VERDICTS: usize = 8;
/// Announce frames per round unless configured otherwise (see `docs/wire-protocol.md` §9.9).
pub const DEFAULT_FRAMES_PER_ROUND: u32 = 512;

/// Why a round configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RoundConfigError {
    /// Zero frames per round.
    ZeroFrames,
    /// The outcome key `H_R` (pad words 0 and 1) is not in the pool, or is all zero.
    NoRoundKey,
}

impl fmt::Display for RoundConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::ZeroFrames => write!(f, "frames per round must be at least 1"),
            Self::NoRoundKey => write!(f, "no usable outcome key in pad words 0 and 1"),
        }
    }
}

impl core::error::Error for RoundConfigError {}

/// Why a round's key was discarded.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RoundFailure {
    /// The transmitter's tag did not match this end's outcome (an altered, forged, injected
    /// or replayed frame changed one side's view, or the tag itself was forged).
    BadTag,
    /// No tag came from the transmitter before the round was pushed out or the session ended.
    NoTag,
    /// No pad word to check or tag the round.
    NoKey,
}

impl RoundFailure {
    /// Short snake-case name for reports.
    pub const fn name(self) -> &'static str {
        match self {
            Self::BadTag => "bad_tag",
            Self::NoTag => "no_tag",
            Self::NoKey => "no_key",
        }
    }
}

/// What the receiver's round authentication did.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RoundCounters {
    /// Rounds closed (every frame final).
    pub closed: u64,
    /// Rounds whose transmitter tag checked: their key is kept.
    pub verified: u64,
    /// Rounds failed because the transmitter's tag did not match.
    pub failed_bad_tag: u64,
    /// Rounds failed because no transmitter tag came.
    pub failed_no_tag: u64,
    /// Rounds failed for want of a pad word.
    pub failed_no_key: u64,
    /// Round-tag entries for rounds not waiting (repeats, replays, unknown rounds).
    pub stale_tags: u64,
    /// Round-tag records sent.
    pub records_out: u64,
    /// Verdicts dropped because the host did not take them in time.
    pub verdicts_dropped: u64,
}

impl RoundCounters {
    /// Rounds failed, for every reason.
    pub const fn failed(&self) -> u64 {
        self.failed_bad_tag + self.failed_no_tag + self.failed_no_key
    }
}

/// A round's outcome and the slots its announce frames covered.
struct Round {
    t: RoundHash,
    first_slot: u64,
    last_slot: u64,
}

impl Round {
    fn round(&self) -> u64 {
        self.t.round()
    }
}

struct Outgoing {
    tag: RoundTag,
    left: u8,
}

/// The receiver's round state: outcome key, the open round, closed rounds waiting for the
/// transmitter's tag, tags to send, and verdicts for the host.
pub struct RoundLedger {
    frames_per_round: u32,
    hr: [u8; HASH_KEY_LEN],
    cur: Option<Round>,
    pending: Deque<Round, PENDING_ROUNDS>,
    outbox: Deque<Outgoing, OUTBOX>,
    verdicts: Deque<RoundVerdict, VERDICTS>,
    counters: RoundCounters,
}

impl Drop for RoundLedger {
    fn drop(&mut self) {
        self.hr.zeroize();
    }
}

impl RoundLedger {
    /// Rounds of `frames_per_round` announce frames; takes the outcome key `H_R` from pad
    /// words 0 and 1 of `auth`'s pool.
    pub fn new<const W: usize>(
        frames_per_round: u32,
        auth: &mut LinkAuth<W>,
    ) -> Result<Self, RoundConfigError> {
        if frames_per_round == 0 {
            return Err(RoundConfigError::ZeroFrames);
        }
        let mut hr = [0u8; HASH_KEY_LEN];
        auth.take_words(0, &mut hr)
            .map_err(|_| RoundConfigError::NoRoundKey)?;
        if hr == [0; HASH_KEY_LEN] {
            return Err(RoundConfigError::NoRoundKey);
        }
        Ok(Self {
            frames_per_round,
            hr,
            cur: None,
            pending: Deque::new(),
            outbox: Deque::new(),
            verdicts: Deque::new(),
            counters: RoundCounters::default(),
        })
    }

    /// Announce frames per round.
    pub const fn frames_per_round(&self) -> u32 {
        self.frames_per_round
    }

    /// The round of announce frame `num`.
    pub const fn round_of(&self, num: u64) -> u64 {
        num / self.frames_per_round as u64
    }

    /// What the ledger did so far.
    pub const fn counters(&self) -> &RoundCounters {
        &self.counters
    }

    /// Closed rounds still waiting for the transmitter's tag.
    pub fn waiting(&self) -> usize {
        self.pending.len()
    }

    /// Round tags still to be sent.
    pub fn unsent(&self) -> usize {
        self.outbox.len()
    }

    /// Announce frame `num`, which announced slots `first_slot ..= last_slot`, became final
    /// (frames come in number order): add it to its round's outcome, and close the round after
    /// its last frame.
    pub fn frame_final<const W: usize>(
        &mut self,
        auth: &mut LinkAuth<W>,
        num: u64,
        slots: (u64, u64),
        digest: Option<&[u8; BLOCK_LEN]>,
    ) {
        let round = self.round_of(num);
        if self.cur.as_ref().is_some_and(|t| t.round() != round) {
            self.close_round(auth);
        }
        let r = self.cur.get_or_insert_with(|| Round {
            t: RoundHash::new(&self.hr, round, self.frames_per_round),
            first_slot: slots.0,
            last_slot: slots.1,
        });
        let fate = if digest.is_some() {
            Fate::Answered
        } else {
            Fate::Expired
        };
        r.t.add(num, fate, digest);
        r.first_slot = r.first_slot.min(slots.0);
        r.last_slot = r.last_slot.max(slots.1);
        if (num + 1).is_multiple_of(u64::from(self.frames_per_round)) {
            self.close_round(auth);
        }
    }

    /// Close the open round (at its last frame, or at the end of the session).
    pub fn close_round<const W: usize>(&mut self, auth: &mut LinkAuth<W>) {
        let Some(t) = self.cur.take() else { return };
        self.counters.closed += 1;
        if self.pending.is_full() {
            if let Some(old) = self.pending.pop_front() {
                self.decide(auth, &old, Err(RoundFailure::NoTag));
            }
        }
        // Room was just made.
        let _ = self.pending.push_back(t);
    }

    /// Take one round-tag entry from the transmitter.
    pub fn take<const W: usize>(&mut self, auth: &mut LinkAuth<W>, e: &RoundTag) {
        if e.dir != Direction::ToReceiver || e.verdict != Verdict::Open {
            self.counters.stale_tags += 1;
            auth.note_check(true);
            return;
        }
        let Some(at) = self.pending.iter().position(|t| t.round() == e.round) else {
            self.counters.stale_tags += 1;
            return;
        };
        // Take the round out of the queue, keeping the others in order.
        let n = self.pending.len();
        self.rotate(at);
        let Some(t) = self.pending.pop_front() else {
            return;
        };
        self.rotate(n - 1 - at);
        let full = t.t.hash_for(Direction::ToReceiver, Verdict::Open);
        let word = round_pad_word(t.round(), Direction::ToReceiver);
        let r = match auth.verify_hash(word, &full, &e.tag) {
            Ok(()) => Ok(()),
            Err(Reject::BadTag) | Err(Reject::Replayed) => Err(RoundFailure::BadTag),
            Err(_) => Err(RoundFailure::NoKey),
        };
        self.decide(auth, &t, r);
    }

    fn rotate(&mut self, k: usize) {
        for _ in 0..k {
            if let Some(t) = self.pending.pop_front() {
                let _ = self.pending.push_back(t);
            }
        }
    }

    /// End of the session: every round still waiting fails (no tag came).
    pub fn give_up<const W: usize>(&mut self, auth: &mut LinkAuth<W>) {
        self.close_round(auth);
        while let Some(t) = self.pending.pop_front() {
            self.decide(auth, &t, Err(RoundFailure::NoTag));
        }
    }

    fn decide<const W: usize>(
        &mut self,
        auth: &mut LinkAuth<W>,
        t: &Round,
        r: Result<(), RoundFailure>,
    ) {
        let round = t.round();
        let verdict = if r.is_ok() {
            Verdict::Verified
        } else {
            Verdict::Failed
        };
        // A verified verdict is tagged over the outcome, a failed one over the empty
        // outcome (the transmitter's differs, and it must still learn the verdict).
        let full = match verdict {
            Verdict::Verified => t.t.hash_for(Direction::ToTransmitter, verdict),
            _ => failed_hash(&self.hr, round, self.frames_per_round),
        };
        let word = round_pad_word(round, Direction::ToTransmitter);
        // Without a tag the transmitter never learns the verdict and discards the round: so
        // must this end.
        let (r, sealed) = match auth.seal_hash(word, &full) {
            Ok(tag) => (r, Some(tag)),
            Err(_) => (Err(RoundFailure::NoKey), None),
        };
        match r {
            Ok(()) => self.counters.verified += 1,
            Err(RoundFailure::BadTag) => {
                self.counters.failed_bad_tag += 1;
                auth.raise_attack_alarm();
            }
            Err(RoundFailure::NoTag) => self.counters.failed_no_tag += 1,
            Err(RoundFailure::NoKey) => self.counters.failed_no_key += 1,
        }
        if let Some(tag) = sealed {
            // The tag was made for `verdict`; a failure to seal already left nothing to send.
            if self.outbox.is_full() {
                self.outbox.pop_front();
            }
            let _ = self.outbox.push_back(Outgoing {
                tag: RoundTag {
                    round,
                    dir: Direction::ToTransmitter,
                    verdict,
                    tag,
                },
                left: RESENDS,
            });
        }
        if self.verdicts.is_full() {
            self.verdicts.pop_front();
            self.counters.verdicts_dropped += 1;
        }
        let _ = self.verdicts.push_back(RoundVerdict {
            round,
            kept: r.is_ok(),
            first_slot: t.first_slot,
            last_slot: t.last_slot,
        });
        // Pads of rounds below the lowest one still undecided can serve no tag: wipe them (a
        // round that failed without a check leaves its check word unused).
        let low = self
            .pending
            .iter()
            .map(Round::round)
            .fold(round + 1, u64::min);
        auth.abandon_below(round_pad_word(low, Direction::ToTransmitter));
    }

    /// The round tags to send in the next record (each sent [`RESENDS`] times in all); returns
    /// how many were written to `out`.
    pub fn outgoing(&mut self, out: &mut [RoundTag; MAX_ENTRIES]) -> usize {
        let mut n = 0;
        for (o, d) in self.outbox.iter_mut().zip(out.iter_mut()) {
            *d = o.tag;
            o.left = o.left.saturating_sub(1);
            n += 1;
        }
        while self.outbox.front().is_some_and(|o| o.left == 0) {
            self.outbox.pop_front();
        }
        if n > 0 {
            self.counters.records_out += 1;
        }
        n
    }

    /// The next round verdict for the post-processing host (record type 9).
    pub fn poll_verdict(&mut self) -> Option<RoundVerdict> {
        self.verdicts.pop_front()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::formats::round::{failed_hash, pad_hash};
    use crate::wire::auth::AuthConfig;
    use proptest::prelude::*;

    const H: [u8; 16] = [0x25; 16];

    fn key(words: usize) -> [u8; 8 * 64] {
        let mut k = [0u8; 8 * 64];
        for (i, b) in k.iter_mut().enumerate().take(words * 8) {
            *b = (i as u8).wrapping_mul(31).wrapping_add(1);
        }
        k
    }

    fn end() -> LinkAuth<64> {
        LinkAuth::new(AuthConfig::DEFAULT, H, &key(64)).unwrap()
    }

    /// A round of two frames (one answered, one expired) fed to `l`; returns the transmitter's
    /// outcome of the same round.
    fn one_round(l: &mut RoundLedger, a: &mut LinkAuth<64>) -> RoundHash {
        let mut d = a.frame_digest(2, 500);
        d.add(500, false, 0x07);
        d.add(503, true, 0x08);
        let d = d.finish();
        l.frame_final(a, 0, (500, 503), Some(&d));
        l.frame_final(a, 1, (600, 640), None);
        let hr = {
            let k = key(2);
            let mut h = [0u8; 16];
            h.copy_from_slice(&k[..16]);
            h
        };
        let mut t = RoundHash::new(&hr, 0, 2);
        t.add(0, Fate::Answered, Some(&d));
        t.add(1, Fate::Expired, None);
        t
    }

    /// Round 0's verdict: its frames announced slots 500 ..= 640.
    fn verdict(kept: bool) -> RoundVerdict {
        RoundVerdict {
            round: 0,
            kept,
            first_slot: 500,
            last_slot: 640,
        }
    }

    fn pad(word: u64) -> [u8; 8] {
        let k = key(64);
        let at = word as usize * 8;
        let mut p = [0u8; 8];
        p.copy_from_slice(&k[at..at + 8]);
        p
    }

    #[test]
    fn agreed_outcomes_verify_and_the_verdict_goes_back_tagged() {
        let mut a = end();
        let mut l = RoundLedger::new(2, &mut a).unwrap();
        let t = one_round(&mut l, &mut a);
        assert_eq!((l.counters().closed, l.waiting()), (1, 1));
        let full = t.hash_for(Direction::ToReceiver, Verdict::Open);
        let tag = pad_hash(&full, &pad(round_pad_word(0, Direction::ToReceiver)));
        let e = RoundTag {
            round: 0,
            dir: Direction::ToReceiver,
            verdict: Verdict::Open,
            tag,
        };
        l.take(&mut a, &e);
        assert_eq!(l.poll_verdict(), Some(verdict(true)));
        assert_eq!(l.counters().verified, 1);
        // A repeat decides nothing more.
        l.take(&mut a, &e);
        assert_eq!((l.counters().stale_tags, l.poll_verdict()), (1, None));
        let mut out = [e; MAX_ENTRIES];
        for _ in 0..RESENDS {
            assert_eq!(l.outgoing(&mut out), 1);
        }
        assert_eq!(l.outgoing(&mut out), 0);
        let want = pad_hash(
            &t.hash_for(Direction::ToTransmitter, Verdict::Verified),
            &pad(round_pad_word(0, Direction::ToTransmitter)),
        );
        assert_eq!((out[0].verdict, out[0].tag), (Verdict::Verified, want));
        // Words 0, 1 (outcome key) and the round's two pads: 4 words spent.
        assert_eq!(a.counters().key_bits_consumed, 4 * 64);
    }

    #[test]
    fn a_round_without_a_tag_fails_at_the_end_and_says_so_under_a_tag() {
        let mut a = end();
        let mut l = RoundLedger::new(2, &mut a).unwrap();
        one_round(&mut l, &mut a);
        l.give_up(&mut a);
        assert_eq!(l.poll_verdict(), Some(verdict(false)));
        assert_eq!(l.counters().failed_no_tag, 1);
        // The outcome key and the verdict's tag spent; the unused check word wiped, so the
        // pool's ring moves on.
        assert_eq!(a.counters().key_bits_consumed, 3 * 64);
        assert_eq!(a.counters().key_bits_abandoned, 64);
        let mut out = [RoundTag {
            round: 9,
            dir: Direction::ToReceiver,
            verdict: Verdict::Open,
            tag: [0; 8],
        }; MAX_ENTRIES];
        assert_eq!(l.outgoing(&mut out), 1);
        let mut hr = [0u8; 16];
        hr.copy_from_slice(&key(2)[..16]);
        let want = pad_hash(
            &failed_hash(&hr, 0, 2),
            &pad(round_pad_word(0, Direction::ToTransmitter)),
        );
        assert_eq!((out[0].verdict, out[0].tag), (Verdict::Failed, want));
    }

    proptest! {
        /// No round tag made without the key verifies, whatever its bytes, whether it is made
        /// up or computed over the right outcome with another key; the round fails and the
        /// attack alarm rises.
        #[test]
        fn round_tags_without_the_key_never_verify(
            tag in any::<[u8; 8]>(),
            other_hr in any::<[u8; 16]>(),
            other_pad in any::<[u8; 8]>(),
            computed in any::<bool>(),
        ) {
            let mut a = end();
            let mut l = RoundLedger::new(2, &mut a).unwrap();
            let t = one_round(&mut l, &mut a);
            let genuine = pad_hash(
                &t.hash_for(Direction::ToReceiver, Verdict::Open),
                &pad(round_pad_word(0, Direction::ToReceiver)),
            );
            let tag = if computed {
                let mut f = RoundHash::new(&other_hr, 0, 2);
                f.add(0, Fate::Expired, None);
                f.add(1, Fate::Expired, None);
                pad_hash(&f.hash_for(Direction::ToReceiver, Verdict::Open), &other_pad)
            } else {
                tag
            };
            prop_assume!(tag != genuine);
            l.take(&mut a, &RoundTag { round: 0, dir: Direction::ToReceiver, verdict: Verdict::Open, tag });
            prop_assert_eq!(l.poll_verdict(), Some(verdict(false)));
            prop_assert_eq!(l.counters().failed_bad_tag, 1);
            prop_assert!(a.attack_alarm());
            // The round is decided: the genuine tag, coming later, changes nothing.
            l.take(&mut a, &RoundTag { round: 0, dir: Direction::ToReceiver, verdict: Verdict::Open, tag: genuine });
            prop_assert_eq!(l.counters().verified, 0);
        }
    }
}
