//! Authentication on the simulated link: the shared key both ends draw from, and an adversary
//! on the line.
//!
//! [`KeySupply`] stands in for what a deployment gets from elsewhere: the pre-shared key (hash
//! key and first pad words) and the post-processing host's refills, here drawn from the
//! simulator's SplitMix64 stream so that a run is reproducible. It is a simulation stand-in, not
//! a key source: the strength of the real link rests on the secrecy of those two paths.
//!
//! [`Adversary`] sits on the wire between the link model and both ends and does one of the
//! [`LinkAttack`]s: alter answers (recomputing the CRC), inject forged answers, replay old
//! frames, hold frames back past their timeout, or answer in the transmitter's place with a key
//! of its own. It works only from what travels on the line.

use crate::sim::rng::{splitmix_at, stream_key, Stream};
use serde::Serialize;
use slotwise::formats::tag::{Direction, TagInput, HASH_KEY_LEN, PAD_LEN};
use slotwise::formats::{
    answers, decode_frame, encode_frame_tagged, refill, RecordType, MAX_FRAME, MAX_PAYLOAD,
    MAX_RAW, TAG_LEN,
};
use slotwise::wire::{widen_seq, AnnounceView, AnswerEntry, AuthConfig, LinkAuth};

/// Pad words of the pre-shared key both ends start with (2 KiB, 16,384 bits).
pub const PRESHARED_WORDS: u64 = 256;

/// Stream of the key supply under the link seed.
const STREAM_KEY: u64 = 0x004B_4559;

/// The key both ends share: a hash key and a stream of pad words, indexed from 0.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct KeySupply {
    key: u64,
    /// Pad words the post-processing host can hand out in all (pre-shared ones included).
    budget_words: u64,
}

impl KeySupply {
    /// The supply under `seed`, with `budget_words` pad words in all.
    pub fn new(seed: u64, budget_words: u64) -> Self {
        Self {
            key: stream_key(seed, STREAM_KEY),
            budget_words,
        }
    }

    /// The POLYVAL hash key (never zero).
    pub fn hash_key(&self) -> [u8; HASH_KEY_LEN] {
        let mut h = [0u8; HASH_KEY_LEN];
        let (a, b) = h.split_at_mut(8);
        a.copy_from_slice(&splitmix_at(!self.key, 0).to_le_bytes());
        b.copy_from_slice(&(splitmix_at(!self.key, 1) | 1).to_le_bytes());
        h
    }

    /// Pad words `first .. first + n` of the stream, as bytes (cut at the budget).
    pub fn words(&self, first: u64, n: u64) -> Vec<u8> {
        let end = (first + n).min(self.budget_words);
        (first..end)
            .flat_map(|i| splitmix_at(self.key, i).to_le_bytes())
            .collect()
    }

    /// A fresh end: hash key and the pre-shared words, with the default thresholds.
    pub fn end<const W: usize>(&self) -> Result<LinkAuth<W>, String> {
        let pre = self.words(0, PRESHARED_WORDS.min(W as u64));
        LinkAuth::new(AuthConfig::DEFAULT, self.hash_key(), &pre).map_err(|e| e.to_string())
    }

    /// The next refill record for a pool whose key stream ends at `end` with `room` words free:
    /// a stuffed key-refill frame, when there is room for a full record and key left.
    pub fn refill_frame(&self, end: u64, room: usize) -> Option<Vec<u8>> {
        if room < refill::MAX_WORDS || end >= self.budget_words {
            return None;
        }
        let key = self.words(end, refill::MAX_WORDS as u64);
        let mut p = vec![0u8; MAX_PAYLOAD];
        let n = refill::emit(end, &key, &mut p).ok()?;
        let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
        let m =
            slotwise::formats::encode_frame(RecordType::KeyRefill, 0, &p[..n], &mut raw, &mut out)
                .ok()?;
        out.truncate(m);
        Some(out)
    }
}

/// What the adversary on the line does.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum LinkAttack {
    /// Flip a basis-match bit in every other answers frame and recompute the CRC.
    Flip,
    /// Inject a forged answers frame (every slot "matched", bits made up) for every announce
    /// frame, ahead of the real one.
    Inject,
    /// Send every frame, both ways, a second time just after the first.
    Replay,
    /// Hold every fourth answers frame back past the answer timeout, and every third announce
    /// frame back behind the next one.
    Delay,
    /// Answer every announce frame first, posing as the transmitter with a key of its own.
    Impersonate,
}

/// What the adversary did.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct AttackStats {
    /// Frames it altered or made up.
    pub forged: u64,
    /// Frames it sent again.
    pub replayed: u64,
    /// Frames it held back.
    pub delayed: u64,
}

/// One frame the adversary puts on the line: towards the receiver (`down`) or the transmitter,
/// `extra_slots` later than now.
pub struct Emit {
    /// Towards the receiver.
    pub down: bool,
    /// Slots of extra delay.
    pub extra_slots: u64,
    /// The stuffed frame.
    pub frame: Vec<u8>,
}

/// An adversary between the link model and both ends.
pub struct Adversary {
    attack: LinkAttack,
    rng: Stream,
    hold_slots: u64,
    answers_seen: u64,
    announces_seen: u64,
    own: Option<Box<LinkAuth<1024>>>,
    /// Whether the link tags every frame (else its forgeries go untagged, as genuine frames do).
    frame_tags: bool,
    highest: u64,
    next_seq: u16,
    stats: AttackStats,
}

impl Adversary {
    /// An adversary doing `attack`, holding frames back `hold_slots` when it delays them, on a
    /// link whose frames carry tags (`frame_tags`) or not (round mode).
    pub fn new(
        attack: LinkAttack,
        seed: u64,
        hold_slots: u64,
        frame_tags: bool,
    ) -> Result<Self, String> {
        let own = match attack {
            LinkAttack::Impersonate => Some(Box::new(KeySupply::new(!seed, u64::MAX).end()?)),
            _ => None,
        };
        Ok(Self {
            attack,
            rng: Stream::new(seed, 0xADE),
            hold_slots,
            answers_seen: 0,
            announces_seen: 0,
            own,
            frame_tags,
            highest: 0,
            next_seq: 0x7000,
            stats: AttackStats::default(),
        })
    }

    /// What it did.
    pub fn stats(&self) -> AttackStats {
        self.stats
    }

    /// The attack.
    pub fn attack(&self) -> LinkAttack {
        self.attack
    }

    /// A frame from the receiver: what goes on the line instead.
    pub fn on_up(&mut self, frame: Vec<u8>) -> Vec<Emit> {
        self.announces_seen += 1;
        let mut out = Vec::new();
        let up = |frame, extra_slots| Emit {
            down: false,
            extra_slots,
            frame,
        };
        match self.attack {
            LinkAttack::Replay => {
                self.stats.replayed += 1;
                out.push(up(frame.clone(), 1));
            }
            LinkAttack::Delay if self.announces_seen.is_multiple_of(3) => {
                self.stats.delayed += 1;
                out.push(up(frame, self.hold_slots / 16));
                return out;
            }
            LinkAttack::Inject | LinkAttack::Impersonate => {
                if let Some(f) = self.forge_answers(&frame) {
                    self.stats.forged += 1;
                    out.push(Emit {
                        down: true,
                        extra_slots: 0,
                        frame: f,
                    });
                }
            }
            _ => {}
        }
        out.insert(0, up(frame, 0));
        out
    }

    /// A frame from the transmitter: what goes on the line instead.
    pub fn on_down(&mut self, frame: Vec<u8>) -> Vec<Emit> {
        self.answers_seen += 1;
        let down = |frame, extra_slots| Emit {
            down: true,
            extra_slots,
            frame,
        };
        match self.attack {
            LinkAttack::Flip if self.answers_seen.is_multiple_of(2) => match flip(&frame) {
                Some(f) => {
                    self.stats.forged += 1;
                    vec![down(f, 0)]
                }
                None => vec![down(frame, 0)],
            },
            LinkAttack::Replay => {
                self.stats.replayed += 1;
                vec![down(frame.clone(), 0), down(frame, 1)]
            }
            LinkAttack::Delay if self.answers_seen.is_multiple_of(4) => {
                self.stats.delayed += 1;
                vec![down(frame, self.hold_slots)]
            }
            _ => vec![down(frame, 0)],
        }
    }

    /// Answers to an announce frame it saw, made up: every slot matched, bits at random,
    /// tagged with random bytes, or (posing as the transmitter) with its own key.
    fn forge_answers(&mut self, frame: &[u8]) -> Option<Vec<u8>> {
        let mut scratch = vec![0u8; MAX_RAW];
        let f = decode_frame(frame, &mut scratch).ok()?;
        let v = AnnounceView::parse(f.payload).ok()?;
        if v.count == 0 {
            return None;
        }
        let e: Vec<AnswerEntry> = v
            .iter()
            .map(|_| AnswerEntry {
                basis_match: true,
                intensity: 0,
                bit: Some((self.rng.next_u64() & 1) as u8),
            })
            .collect();
        let mut p = vec![0u8; MAX_PAYLOAD];
        let n = answers::emit(f.seq, v.first_slot, &e, &mut p).ok()?;
        let seq = self.next_seq;
        self.next_seq = seq.wrapping_add(1);
        let num = widen_seq(f.seq, self.highest);
        self.highest = self.highest.max(num);
        if !self.frame_tags {
            let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
            let m = slotwise::formats::encode_frame(
                RecordType::Answers,
                seq,
                &p[..n],
                &mut raw,
                &mut out,
            )
            .ok()?;
            out.truncate(m);
            return Some(out);
        }
        let tag = match self.own.as_mut() {
            Some(a) => {
                let m = TagInput {
                    dir: Direction::ToReceiver,
                    record: RecordType::Answers,
                    seq,
                    num,
                    payload: &p[..n],
                };
                // The impersonator's own pool runs out in long runs; then it makes tags up.
                a.seal(&m)
                    .unwrap_or_else(|_| self.rng.next_u64().to_le_bytes())
            }
            None => self.rng.next_u64().to_le_bytes(),
        };
        tagged(RecordType::Answers, seq, &p[..n], &tag)
    }
}

fn tagged(record: RecordType, seq: u16, payload: &[u8], tag: &[u8; TAG_LEN]) -> Option<Vec<u8>> {
    let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
    let m = encode_frame_tagged(record, seq, payload, tag, &mut raw, &mut out).ok()?;
    out.truncate(m);
    Some(out)
}

/// An answers frame with its first entry's basis-match bit flipped and a correct CRC: what an
/// adversary who can only recompute checksums does.
fn flip(frame: &[u8]) -> Option<Vec<u8>> {
    let mut scratch = vec![0u8; MAX_RAW];
    let f = decode_frame(frame, &mut scratch).ok()?;
    let mut p = f.payload.to_vec();
    *p.get_mut(answers::FIXED_LEN)? ^= 1;
    let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
    let m = match f.tag {
        Some(t) => encode_frame_tagged(f.record, f.seq, &p, &t, &mut raw, &mut out),
        None => slotwise::formats::encode_frame(f.record, f.seq, &p, &mut raw, &mut out),
    }
    .ok()?;
    out.truncate(m);
    Some(out)
}

const _: () = assert!(PAD_LEN == TAG_LEN);
