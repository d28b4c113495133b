//! Authentication of the sifting link: every frame tagged on the way out and checked on the way
//! in, with pads from the [`KeyPool`]; the link fails closed.
//!
//! QKD's security proofs assume an authenticated classical channel; a CRC catches noise, not an
//! adversary who recomputes it. [`LinkAuth`] is one end's state: the recycled POLYVAL hash key,
//! the pad pool, counters and two alarms. The tag is Wegman & Carter's (J. Comput. Syst. Sci. 22,
//! 265, 1981) as [`crate::formats::tag`] computes it. The hash key is kept for the whole session
//! and only the pads are fresh: Portmann (IEEE Trans. Inf. Theory 60, 4383, 2014,
//! arXiv:1202.1229) shows this stays ε-secure per round with an ε-almost-strongly-universal
//! family, errors adding up over the rounds, although each accept/reject decision leaks a
//! little about the key — which is why failed checks are bounded here: the attack alarm rises
//! after `alarm_refusals` refusals among the last 64 checks, and the link stops for good after
//! `stop_after_refusals` refusals.
//!
//! A check never changes anything unless it succeeds: a bad tag leaves its pad word unused and
//! no pending slot sees the frame. A pad word spent or abandoned refuses every later frame that
//! would need it, so replays and frames held back past their announce frame's fate are refused
//! on authenticated grounds alone.

use super::keypool::{KeyPool, PadState, RefillError};
use super::Reject;
use crate::formats::round::{pad_hash, FrameDigest};
use crate::formats::tag::{tag, tags_equal, Direction, TagInput, HASH_KEY_LEN, PAD_LEN};
use crate::formats::{Frame, FrameError, TAG_LEN};
use core::fmt;
use zeroize::Zeroize;

/// Why an authentication configuration or key was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AuthConfigError {
    /// `alarm_refusals` outside 1..=64.
    AlarmRefusals(u32),
    /// `stop_after_refusals` of zero.
    ZeroStop,
    /// An all-zero hash key (POLYVAL would map every message to zero).
    ZeroHashKey,
    /// The pre-shared pad key does not fit the pool or is not whole pad words.
    Preshared(RefillError),
}

impl fmt::Display for AuthConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::AlarmRefusals(n) => write!(f, "alarm_refusals {n}: expected 1..=64"),
            Self::ZeroStop => write!(f, "stop_after_refusals must be at least 1"),
            Self::ZeroHashKey => write!(f, "hash key is all zero"),
            Self::Preshared(e) => write!(f, "pre-shared key: {e}"),
        }
    }
}

impl core::error::Error for AuthConfigError {}

/// Validated alarm and stop thresholds of a [`LinkAuth`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AuthConfig {
    low_water_words: u32,
    alarm_refusals: u32,
    stop_after_refusals: u64,
}

impl AuthConfig {
    /// `low_water_words`: the low-key alarm rises below this many unused pad words;
    /// `alarm_refusals` (1..=64): the attack alarm rises at this many refusals among the last 64
    /// checks; `stop_after_refusals`: refusals after which the link stops for good.
    pub const fn new(
        low_water_words: u32,
        alarm_refusals: u32,
        stop_after_refusals: u64,
    ) -> Result<Self, AuthConfigError> {
        if alarm_refusals == 0 || alarm_refusals > 64 {
            return Err(AuthConfigError::AlarmRefusals(alarm_refusals));
        }
        if stop_after_refusals == 0 {
            return Err(AuthConfigError::ZeroStop);
        }
        Ok(Self {
            low_water_words,
            alarm_refusals,
            stop_after_refusals,
        })
    }

    /// The defaults: low-key alarm below 64 pad words, attack alarm at 8 refusals of 64 checks,
    /// stop after 65,536 refusals (the session bound of `docs/wire-protocol.md` §9).
    pub const DEFAULT: Self = Self {
        low_water_words: 64,
        alarm_refusals: 8,
        stop_after_refusals: 1 << 16,
    };

    /// Unused pad words below which the low-key alarm rises.
    pub const fn low_water_words(&self) -> u32 {
        self.low_water_words
    }

    /// Refusals among the last 64 checks that raise the attack alarm.
    pub const fn alarm_refusals(&self) -> u32 {
        self.alarm_refusals
    }

    /// Refusals after which the link stops.
    pub const fn stop_after_refusals(&self) -> u64 {
        self.stop_after_refusals
    }
}

/// What one end's authentication did; key bits loaded = consumed + abandoned + left.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AuthCounters {
    /// Frames tagged and sent.
    pub frames_tagged: u64,
    /// Frames whose tag checked (each spent one pad word).
    pub frames_verified: u64,
    /// Frames refused by the check (bad tag, pad gone, no key, untagged).
    pub refusals: u64,
    /// Frames not sent because no pad word was left (the link stops at the first).
    pub starved_frames: u64,
    /// Key bits loaded into the pad pool (pre-shared and refilled; the hash key not counted).
    pub key_bits_loaded: u64,
    /// Key bits spent on tags.
    pub key_bits_consumed: u64,
    /// Key bits wiped unused (frames lost, expired or never answered).
    pub key_bits_abandoned: u64,
    /// Times the low-key alarm rose.
    pub low_key_alarms: u64,
    /// Times the attack alarm rose.
    pub attack_alarms: u64,
}

/// One end's authentication state: hash key, pad pool of `WORDS` words, counters and alarms.
pub struct LinkAuth<const WORDS: usize> {
    cfg: AuthConfig,
    hash_key: [u8; HASH_KEY_LEN],
    pool: KeyPool<WORDS>,
    /// Bit i: check i back was refused.
    recent: u64,
    attack: bool,
    low: bool,
    /// Out of key for a new frame: nothing new is sent, checks and closing reports go on.
    starved: bool,
    /// Too many refusals: nothing is sent or accepted any more.
    stopped: bool,
    counters: AuthCounters,
}

impl<const WORDS: usize> Drop for LinkAuth<WORDS> {
    fn drop(&mut self) {
        self.hash_key.zeroize();
    }
}

impl<const WORDS: usize> LinkAuth<WORDS> {
    /// An end holding `hash_key` and the pre-shared pad key `preshared` (pad words 0, 1, ...).
    pub fn new(
        cfg: AuthConfig,
        hash_key: [u8; HASH_KEY_LEN],
        preshared: &[u8],
    ) -> Result<Self, AuthConfigError> {
        if hash_key == [0; HASH_KEY_LEN] {
            return Err(AuthConfigError::ZeroHashKey);
        }
        let mut a = Self {
            cfg,
            hash_key,
            pool: KeyPool::new(),
            recent: 0,
            attack: false,
            low: false,
            starved: false,
            stopped: false,
            counters: AuthCounters::default(),
        };
        a.refill(0, preshared).map_err(AuthConfigError::Preshared)?;
        Ok(a)
    }

    /// What this end did so far.
    pub const fn counters(&self) -> &AuthCounters {
        &self.counters
    }

    /// The thresholds in use.
    pub const fn config(&self) -> &AuthConfig {
        &self.cfg
    }

    /// The pad pool.
    pub const fn pool(&self) -> &KeyPool<WORDS> {
        &self.pool
    }

    /// Unused key bits in the pool.
    pub const fn key_bits_left(&self) -> u64 {
        self.pool.fresh_words() as u64 * PAD_LEN as u64 * 8
    }

    /// Whether the attack alarm is up (enough refusals among the last 64 checks).
    pub const fn attack_alarm(&self) -> bool {
        self.attack
    }

    /// Whether the low-key alarm is up.
    pub const fn low_key_alarm(&self) -> bool {
        self.low
    }

    /// Whether the link has stopped after too many refusals: it never sends or accepts a frame
    /// again.
    pub const fn stopped(&self) -> bool {
        self.stopped
    }

    /// Whether the pool ran out of key for a new frame: the link sends no new frame (it still
    /// checks answers to frames already sent, and closes with key it kept for that).
    pub const fn starved(&self) -> bool {
        self.starved
    }

    /// Load refill key `key` as pad words from `first_word` on (all or nothing); returns the
    /// words loaded.
    pub fn refill(&mut self, first_word: u64, key: &[u8]) -> Result<usize, RefillError> {
        let n = self.pool.load(first_word, key)?;
        self.sync_bits();
        Ok(n)
    }

    /// Whether pad word `word` is there to tag a frame.
    pub fn can_tag(&self, word: u64) -> bool {
        !self.stopped && self.pool.state(word) == PadState::Fresh
    }

    /// A frame could not be sent for want of key: count it; no new frame is sent from now on.
    pub fn starve(&mut self) {
        self.counters.starved_frames += 1;
        self.starved = true;
    }

    /// Tag an outgoing frame with its pad word (spent and wiped); without one the link starves.
    pub fn seal(&mut self, m: &TagInput<'_>) -> Result<[u8; TAG_LEN], Reject> {
        let word = m.dir.pad_word(m.num);
        let pad = if self.stopped {
            None
        } else {
            self.pool.spend(word)
        };
        let Some(mut pad) = pad else {
            self.starve();
            return Err(Reject::NoKey);
        };
        let t = tag(&self.hash_key, &pad, m);
        pad.zeroize();
        self.counters.frames_tagged += 1;
        self.sync_bits();
        Ok(t)
    }

    /// Check an incoming frame's tag. On success its pad word is spent; on any refusal nothing
    /// changes but the counters and the alarm window.
    pub fn verify(&mut self, m: &TagInput<'_>, got: Option<&[u8; TAG_LEN]>) -> Result<(), Reject> {
        let r = self.check(m, got);
        self.record(r)
    }

    /// Start digesting one answered announce frame under the session hash key (round mode).
    pub fn frame_digest(&self, count: u16, first_slot: u64) -> FrameDigest {
        FrameDigest::new(&self.hash_key, count, first_slot)
    }

    /// Spend pad words `first ..` into `out` (a whole number of words), e.g. the round mode's
    /// outcome key; nothing is spent unless every word is there.
    pub fn take_words(&mut self, first: u64, out: &mut [u8]) -> Result<(), Reject> {
        let words = out.len() / PAD_LEN;
        if (first..first + words as u64).any(|w| self.pool.state(w) != PadState::Fresh) {
            return Err(Reject::NoKey);
        }
        for (w, chunk) in (first..).zip(out.chunks_exact_mut(PAD_LEN)) {
            let mut pad = self.pool.spend(w).ok_or(Reject::NoKey)?;
            chunk.copy_from_slice(&pad);
            pad.zeroize();
        }
        self.sync_bits();
        Ok(())
    }

    /// Tag a 16-byte hash (a round outcome) with pad word `word`, spent and wiped.
    pub fn seal_hash(&mut self, word: u64, full: &[u8; 16]) -> Result<[u8; TAG_LEN], Reject> {
        let pad = if self.stopped {
            None
        } else {
            self.pool.spend(word)
        };
        let Some(mut pad) = pad else {
            self.counters.starved_frames += 1;
            return Err(Reject::NoKey);
        };
        let t = pad_hash(full, &pad);
        pad.zeroize();
        self.counters.frames_tagged += 1;
        self.sync_bits();
        Ok(t)
    }

    /// Check a tag over a 16-byte hash with pad word `word`. The word is spent whatever the
    /// outcome: a round is decided by its first check.
    pub fn verify_hash(
        &mut self,
        word: u64,
        full: &[u8; 16],
        got: &[u8; TAG_LEN],
    ) -> Result<(), Reject> {
        self.check_pad(word, full, got, true)
    }

    /// Check a tag over a 16-byte hash with pad word `word`, spending the word only when the tag
    /// matches: a refused entry decides nothing, and the genuine one can still come.
    pub fn check_hash(
        &mut self,
        word: u64,
        full: &[u8; 16],
        got: &[u8; TAG_LEN],
    ) -> Result<(), Reject> {
        self.check_pad(word, full, got, false)
    }

    /// [`Self::verify_hash`] (`spend_always`) or [`Self::check_hash`]: the word is spent when the
    /// tag matches, and also when it does not if `spend_always`.
    fn check_pad(
        &mut self,
        word: u64,
        full: &[u8; 16],
        got: &[u8; TAG_LEN],
        spend_always: bool,
    ) -> Result<(), Reject> {
        let r = if self.stopped {
            Err(Reject::NoKey)
        } else {
            match self.pool.state(word) {
                PadState::Gone => Err(Reject::Replayed),
                PadState::Absent => Err(Reject::NoKey),
                PadState::Fresh => match self.pool.peek(word) {
                    None => Err(Reject::NoKey),
                    Some(mut pad) => {
                        let want = pad_hash(full, &pad);
                        pad.zeroize();
                        let ok = tags_equal(&want, got);
                        if ok || spend_always {
                            if let Some(mut spent) = self.pool.spend(word) {
                                spent.zeroize();
                            }
                        }
                        if ok {
                            Ok(())
                        } else {
                            Err(Reject::BadTag)
                        }
                    }
                },
            }
        };
        self.record(r)
    }

    /// Count one check made outside the tag (round mode: a duplicate, late or mismatched frame)
    /// in the attack alarm's window, without counting it as a refusal of the tag.
    pub fn note_check(&mut self, suspicious: bool) {
        self.recent = self.recent << 1 | u64::from(suspicious);
        self.update_alarm();
    }

    /// Raise the attack alarm at once (round mode: a round's tag failed, which noise cannot
    /// cause).
    pub fn raise_attack_alarm(&mut self) {
        if !self.attack {
            self.counters.attack_alarms += 1;
        }
        self.attack = true;
    }

    fn update_alarm(&mut self) {
        let active = self.recent.count_ones() >= self.cfg.alarm_refusals;
        if active && !self.attack {
            self.counters.attack_alarms += 1;
        }
        self.attack = active;
    }

    fn record(&mut self, r: Result<(), Reject>) -> Result<(), Reject> {
        self.recent = self.recent << 1 | u64::from(r.is_err());
        self.update_alarm();
        if r.is_err() {
            self.counters.refusals += 1;
            if self.counters.refusals >= self.cfg.stop_after_refusals {
                self.stopped = true;
            }
        } else {
            self.counters.frames_verified += 1;
        }
        self.sync_bits();
        r
    }

    fn check(&mut self, m: &TagInput<'_>, got: Option<&[u8; TAG_LEN]>) -> Result<(), Reject> {
        let got = got.ok_or(Reject::Untagged)?;
        if self.stopped {
            return Err(Reject::NoKey);
        }
        let word = m.dir.pad_word(m.num);
        let mut pad = match self.pool.state(word) {
            PadState::Gone => return Err(Reject::Replayed),
            PadState::Absent => return Err(Reject::NoKey),
            PadState::Fresh => self.pool.peek(word).ok_or(Reject::NoKey)?,
        };
        let want = tag(&self.hash_key, &pad, m);
        pad.zeroize();
        if !tags_equal(&want, got) {
            return Err(Reject::BadTag);
        }
        self.pool.spend(word);
        Ok(())
    }

    /// Wipe every unused pad word below `word`: their frames can no longer be sent or accepted.
    pub fn abandon_below(&mut self, word: u64) {
        self.pool.abandon_below(word);
        self.sync_bits();
    }

    fn sync_bits(&mut self) {
        let c = self.pool.counters();
        let bits = PAD_LEN as u64 * 8;
        self.counters.key_bits_loaded = c.loaded_words * bits;
        self.counters.key_bits_consumed = c.spent_words * bits;
        self.counters.key_bits_abandoned = c.abandoned_words * bits;
        let low = (self.pool.fresh_words() as u64) < u64::from(self.cfg.low_water_words);
        if low && !self.low {
            self.counters.low_key_alarms += 1;
        }
        self.low = low;
    }
}

/// Why a key-refill frame was not loaded.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RefillFrameError {
    /// The frame or its payload is broken, or it is not an untagged refill record.
    Frame(FrameError),
    /// The pool refused the key (gap, overlap, no room, or an unauthenticated link).
    Pool(RefillError),
}

impl fmt::Display for RefillFrameError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Frame(e) => write!(f, "refill frame: {e}"),
            Self::Pool(e) => write!(f, "refill key: {e}"),
        }
    }
}

impl core::error::Error for RefillFrameError {}

/// Check a decoded frame travelling `dir` with frame number `num`: its tag on an authenticated
/// end (`auth` given), its lack of one on an unauthenticated end. Both ends of the link use it.
pub fn check_frame<const W: usize>(
    auth: Option<&mut LinkAuth<W>>,
    dir: Direction,
    num: u64,
    f: &Frame<'_>,
) -> Result<(), Reject> {
    let Some(auth) = auth else {
        return match f.tag {
            Some(_) => Err(Reject::Untagged),
            None => Ok(()),
        };
    };
    let m = TagInput {
        dir,
        record: f.record,
        seq: f.seq,
        num,
        payload: f.payload,
    };
    auth.verify(&m, f.tag.as_ref())
}

/// The full frame number whose low 16 bits are `seq`, nearest to `near` (serial-number
/// arithmetic, RFC 1982): how a transmitter widens an announce frame's `seq` against the highest
/// number it has authenticated (numbers below 0 become 0, and then fail the tag check).
pub const fn widen_seq(seq: u16, near: u64) -> u64 {
    let d = seq.wrapping_sub(near as u16) as i16;
    if d >= 0 {
        near.wrapping_add(d as u64)
    } else {
        near.saturating_sub(d.unsigned_abs() as u64)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn widening_follows_serial_arithmetic() {
        assert_eq!(widen_seq(5, 0), 5);
        assert_eq!(widen_seq(3, 70_000), 65_539);
        assert_eq!(widen_seq(65_535, 65_536), 65_535);
        assert_eq!(widen_seq(1, 65_535), 65_537);
        assert_eq!(widen_seq(65_000, 10), 0);
    }
}
