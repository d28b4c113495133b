//! The authentication key pool: one-time-pad words for the link's tags, each used once and
//! wiped, in bounded memory.
//!
//! Wegman-Carter authentication (J. Comput. Syst. Sci. 22, 265, 1981) needs fresh secret bits for
//! every tag. Both ends of the link hold the same key stream, cut into [`PAD_LEN`]-byte pad
//! words numbered from 0: the pre-shared key first, then the refill records of the
//! post-processing host ([`crate::formats::refill`]). A frame's pad word is found from its
//! authenticated direction and number ([`Direction::pad_word`](crate::formats::tag::Direction)),
//! never from a running cursor, so a lost or forged frame cannot put the two pools out of step.
//!
//! The pool is a ring of `WORDS` words from the oldest word still held. A word ends in exactly
//! one way: spent on a tag, or abandoned (its frame can no longer be sent or accepted); either
//! way its bytes are zeroed at once (with `zeroize`, so the compiler cannot drop the store) and
//! it is never handed out again. The ring drops words from its front once they are gone.

use crate::formats::tag::PAD_LEN;
use core::fmt;
use zeroize::Zeroize;

/// Why key could not be loaded into the pool.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum RefillError {
    /// The key does not start where the pool's key stream ends (gap or overlap).
    NotContiguous {
        /// The pad-word index the pool expects next.
        expected: u64,
        /// The pad-word index the key starts at.
        got: u64,
    },
    /// The key is not a whole number of pad words.
    Ragged {
        /// Key length, bytes.
        bytes: usize,
    },
    /// The link is not authenticated: it holds no key pool.
    Unauthenticated,
    /// The key does not fit beside the words held.
    NoRoom {
        /// Pad words offered.
        words: usize,
        /// Pad words of room left.
        room: usize,
    },
}

impl fmt::Display for RefillError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NotContiguous { expected, got } => {
                write!(
                    f,
                    "key starts at pad word {got}; the pool expects {expected}"
                )
            }
            Self::Ragged { bytes } => {
                write!(
                    f,
                    "{bytes} key bytes are not whole {PAD_LEN}-byte pad words"
                )
            }
            Self::Unauthenticated => write!(f, "the link is not authenticated: no key pool"),
            Self::NoRoom { words, room } => {
                write!(f, "{words} pad words offered, room for {room}")
            }
        }
    }
}

impl core::error::Error for RefillError {}

/// Where a pad word stands.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum PadState {
    /// Held and unused.
    Fresh,
    /// Spent or abandoned (wiped), or older than the pool holds.
    Gone,
    /// Not loaded yet.
    Absent,
}

/// What the pool did with its words; loaded = spent + abandoned + fresh at every moment.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct PoolCounters {
    /// Pad words loaded (pre-shared and refilled).
    pub loaded_words: u64,
    /// Pad words spent on tags (sent or accepted).
    pub spent_words: u64,
    /// Pad words wiped unused (their frame can no longer be sent or accepted).
    pub abandoned_words: u64,
}

/// A ring of `WORDS` one-time-pad words of [`PAD_LEN`] bytes (`WORDS · 9` bytes).
pub struct KeyPool<const WORDS: usize> {
    words: [[u8; PAD_LEN]; WORDS],
    fresh: [bool; WORDS],
    /// Ring index of pad word `base`.
    head: usize,
    /// Index of the oldest word held.
    base: u64,
    /// Words held from `base` (fresh or gone, not yet dropped from the ring).
    held: usize,
    /// Words below this are never handed out.
    floor: u64,
    fresh_n: usize,
    counters: PoolCounters,
}

impl<const WORDS: usize> Default for KeyPool<WORDS> {
    fn default() -> Self {
        Self::new()
    }
}

impl<const WORDS: usize> KeyPool<WORDS> {
    /// An empty pool expecting pad word 0 first.
    pub const fn new() -> Self {
        Self {
            words: [[0; PAD_LEN]; WORDS],
            fresh: [false; WORDS],
            head: 0,
            base: 0,
            held: 0,
            floor: 0,
            fresh_n: 0,
            counters: PoolCounters {
                loaded_words: 0,
                spent_words: 0,
                abandoned_words: 0,
            },
        }
    }

    /// Index of the next pad word a refill must start at.
    pub const fn end(&self) -> u64 {
        self.base + self.held as u64
    }

    /// Pad words of room for refills.
    pub const fn room(&self) -> usize {
        WORDS - self.held
    }

    /// Unused pad words held.
    pub const fn fresh_words(&self) -> usize {
        self.fresh_n
    }

    /// What the pool did so far.
    pub const fn counters(&self) -> &PoolCounters {
        &self.counters
    }

    fn ring(&self, word: u64) -> Option<usize> {
        let off = word.checked_sub(self.base)?;
        if off >= self.held as u64 || WORDS == 0 {
            return None;
        }
        Some((self.head + off as usize) % WORDS)
    }

    /// Load `key` (whole pad words) as the words from `first_word` on; all or nothing. Returns the
    /// words loaded. Words below an abandoned floor are wiped at once.
    pub fn load(&mut self, first_word: u64, key: &[u8]) -> Result<usize, RefillError> {
        if !key.len().is_multiple_of(PAD_LEN) {
            return Err(RefillError::Ragged { bytes: key.len() });
        }
        if first_word != self.end() {
            return Err(RefillError::NotContiguous {
                expected: self.end(),
                got: first_word,
            });
        }
        let n = key.len() / PAD_LEN;
        if n > self.room() {
            return Err(RefillError::NoRoom {
                words: n,
                room: self.room(),
            });
        }
        for chunk in key.chunks_exact(PAD_LEN) {
            let word = self.end();
            let at = (self.head + self.held) % WORDS.max(1);
            self.held += 1;
            self.counters.loaded_words += 1;
            let live = word >= self.floor;
            if let (Some(d), Some(f)) = (self.words.get_mut(at), self.fresh.get_mut(at)) {
                if live {
                    d.copy_from_slice(chunk);
                    self.fresh_n += 1;
                } else {
                    d.zeroize();
                    self.counters.abandoned_words += 1;
                }
                *f = live;
            }
        }
        self.drop_front();
        Ok(n)
    }

    /// Where pad word `word` stands.
    pub fn state(&self, word: u64) -> PadState {
        if word >= self.end() {
            return PadState::Absent;
        }
        match self.ring(word).and_then(|i| self.fresh.get(i)) {
            Some(true) => PadState::Fresh,
            _ => PadState::Gone,
        }
    }

    /// A copy of fresh pad word `word`, leaving it unused (to check a tag before spending it).
    pub fn peek(&self, word: u64) -> Option<[u8; PAD_LEN]> {
        let i = self.ring(word)?;
        if !self.fresh.get(i).copied().unwrap_or(false) {
            return None;
        }
        self.words.get(i).copied()
    }

    /// Take fresh pad word `word` for a tag: a copy out, the word wiped and never handed out again.
    pub fn spend(&mut self, word: u64) -> Option<[u8; PAD_LEN]> {
        let pad = self.peek(word)?;
        self.retire(word);
        self.counters.spent_words += 1;
        self.drop_front();
        Some(pad)
    }

    /// Wipe every fresh word below `word` unused, and never load or hand out one below it.
    pub fn abandon_below(&mut self, word: u64) {
        if word <= self.floor {
            return;
        }
        let top = word.min(self.end());
        let mut w = self.floor.max(self.base);
        while w < top {
            if self.state(w) == PadState::Fresh {
                self.retire(w);
                self.counters.abandoned_words += 1;
            }
            w += 1;
        }
        self.floor = word;
        self.drop_front();
    }

    fn retire(&mut self, word: u64) {
        if let Some(i) = self.ring(word) {
            if let (Some(d), Some(f)) = (self.words.get_mut(i), self.fresh.get_mut(i)) {
                d.zeroize();
                if *f {
                    self.fresh_n -= 1;
                }
                *f = false;
            }
        }
    }

    fn drop_front(&mut self) {
        while self.held > 0 && !self.fresh.get(self.head).copied().unwrap_or(true) {
            self.head = (self.head + 1) % WORDS.max(1);
            self.base += 1;
            self.held -= 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn key(words: usize, seed: u8) -> Vec<u8> {
        (0..words * PAD_LEN)
            .map(|i| (i as u8).wrapping_mul(31) ^ seed)
            .collect()
    }

    #[test]
    fn words_are_used_once_and_wiped() {
        let mut p = KeyPool::<4>::new();
        assert_eq!(p.load(0, &key(3, 1)), Ok(3));
        assert_eq!(p.state(1), PadState::Fresh);
        let w1 = p.spend(1).unwrap();
        assert_eq!(&w1[..], &key(3, 1)[8..16]);
        assert_eq!((p.state(1), p.spend(1)), (PadState::Gone, None));
        assert_eq!(p.words.iter().filter(|w| **w == [0; PAD_LEN]).count(), 2);
        // Word 0 is still fresh, so the ring keeps word 1's place.
        assert_eq!(p.room(), 1);
        p.spend(0).unwrap();
        assert_eq!((p.room(), p.fresh_words()), (3, 1));
        assert_eq!(
            p.load(5, &key(1, 2)),
            Err(RefillError::NotContiguous {
                expected: 3,
                got: 5
            })
        );
        assert_eq!(
            p.load(3, &key(4, 2)),
            Err(RefillError::NoRoom { words: 4, room: 3 })
        );
        assert_eq!(
            p.load(3, &key(1, 2)[..5]),
            Err(RefillError::Ragged { bytes: 5 })
        );
        assert_eq!(p.load(3, &key(3, 2)), Ok(3));
        assert_eq!(p.state(6), PadState::Absent);
        p.abandon_below(5);
        assert_eq!(
            (p.state(2), p.state(4), p.state(5)),
            (PadState::Gone, PadState::Gone, PadState::Fresh)
        );
        let c = *p.counters();
        assert_eq!(
            (c.loaded_words, c.spent_words, c.abandoned_words),
            (6, 2, 3)
        );
        assert_eq!(
            c.loaded_words,
            c.spent_words + c.abandoned_words + p.fresh_words() as u64
        );
    }

    #[test]
    fn words_below_the_floor_load_wiped() {
        let mut p = KeyPool::<8>::new();
        p.load(0, &key(2, 0)).unwrap();
        p.abandon_below(4);
        p.load(2, &key(4, 0)).unwrap();
        assert_eq!(
            (p.state(3), p.state(4), p.state(5)),
            (PadState::Gone, PadState::Fresh, PadState::Fresh)
        );
        assert_eq!(p.counters().abandoned_words, 4);
    }
}
