//! Round-tag record (type 8) and the round outcome hash: one Wegman-Carter tag per round of
//! the sifting conversation instead of one per frame.
//!
//! A tag on every frame costs 64 key bits per frame, far more than the sifted bits a frame
//! yields. Kiktenko et al. (arXiv:1903.10237) authenticate a whole round of the classical
//! exchange with one tag per direction. On a lossy link the two ends never hold the same frames,
//! so the round tag covers what they must agree on anyway: the round's **outcome**, every
//! announce frame's number and fate and, for an answered frame, its slots, the receiver's bases
//! and the answer entries. `docs/wire-protocol.md` §9.9 is the contract.
//!
//! Two POLYVAL layers (RFC 8452 §3): [`FrameDigest`] hashes one answered frame under the
//! session hash key `H` when its answers are taken (the board keeps 16 bytes per open frame, not
//! its entries), and [`RoundHash`] hashes the round's frames in number order under a second
//! key `H_R`. By composition (Stinson, "Universal hashing and authentication codes", 1994) the
//! whole is almost-XOR-universal with the two error bounds added.
//!
//! Record payload, little-endian: `count u8 | count × (round u64 | dir u8 | verdict u8 |
//! tag [8])`, `count` 1 ..= [`MAX_ENTRIES`].

use super::bytes::{varint_len, Reader, Writer};
use super::framing::{FrameError, TAG_LEN};
use super::tag::{Direction, BLOCK_LEN, HASH_KEY_LEN, PAD_LEN};
use polyval::universal_hash::UniversalHash;
use polyval::Polyval;

/// Bytes of one round-tag entry.
pub const ENTRY_LEN: usize = 18;
/// Most entries in one round-tag record.
pub const MAX_ENTRIES: usize = 16;
/// Bytes of the largest round-tag payload.
pub const MAX_LEN: usize = 1 + MAX_ENTRIES * ENTRY_LEN;
/// Pad words at the start of the key stream that form the outcome key `H_R` in round mode.
pub const ROUND_KEY_WORDS: u64 = (HASH_KEY_LEN / PAD_LEN) as u64;

/// Pad word of round `round`'s tag travelling `dir`: `2 + 2·round + dir` (words 0 and 1 are
/// `H_R`). Follows from the round number alone, so loss cannot shift it.
pub const fn round_pad_word(round: u64, dir: Direction) -> u64 {
    ROUND_KEY_WORDS
        .wrapping_add(round.wrapping_mul(2))
        .wrapping_add(dir as u64)
}

/// What a round-tag entry says about its round.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Verdict {
    /// The transmitter's tag: its outcome, no verdict yet.
    Open = 0,
    /// The receiver checked the transmitter's tag: the round's key is kept.
    Verified = 1,
    /// The receiver's check failed or no tag came: the round's key is discarded.
    Failed = 2,
}

impl Verdict {
    /// The wire code.
    pub const fn code(self) -> u8 {
        self as u8
    }

    /// The verdict for a wire code.
    pub const fn from_code(c: u8) -> Option<Self> {
        match c {
            0 => Some(Self::Open),
            1 => Some(Self::Verified),
            2 => Some(Self::Failed),
            _ => None,
        }
    }
}

/// One entry of a round-tag record.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RoundTag {
    /// Round number (announce frames `round·F .. (round+1)·F`).
    pub round: u64,
    /// Direction of the sender.
    pub dir: Direction,
    /// The sender's verdict (always [`Verdict::Open`] from the transmitter).
    pub verdict: Verdict,
    /// The tag.
    pub tag: [u8; TAG_LEN],
}

/// Parse a round-tag payload into `out`; returns the entries read.
pub fn parse(payload: &[u8], out: &mut [RoundTag; MAX_ENTRIES]) -> Result<usize, FrameError> {
    let mut r = Reader::new(payload);
    let n = usize::from(r.u8()?);
    if n == 0 || n > MAX_ENTRIES {
        return Err(FrameError::BadField {
            offset: 0,
            field: "count",
        });
    }
    for (i, o) in out.iter_mut().take(n).enumerate() {
        let at = 1 + i * ENTRY_LEN;
        let round = r.u64()?;
        let dir = match r.u8()? {
            0 => Direction::ToTransmitter,
            1 => Direction::ToReceiver,
            _ => {
                return Err(FrameError::BadField {
                    offset: at + 8,
                    field: "dir",
                })
            }
        };
        let verdict = Verdict::from_code(r.u8()?).ok_or(FrameError::BadField {
            offset: at + 9,
            field: "verdict",
        })?;
        let tag = r.array::<TAG_LEN>()?;
        *o = RoundTag {
            round,
            dir,
            verdict,
            tag,
        };
    }
    r.finish()?;
    Ok(n)
}

/// Write a round-tag payload of `tags` (1 ..= [`MAX_ENTRIES`]) into `out`; returns its length.
pub fn emit(tags: &[RoundTag], out: &mut [u8]) -> Result<usize, FrameError> {
    if tags.is_empty() || tags.len() > MAX_ENTRIES {
        return Err(FrameError::BadField {
            offset: 0,
            field: "count",
        });
    }
    let n = 1 + tags.len() * ENTRY_LEN;
    let dst = out
        .get_mut(..n)
        .ok_or(FrameError::BufferTooSmall { needed: n })?;
    let mut w = Writer::new(dst);
    w.u8(tags.len() as u8)?;
    for t in tags {
        w.u64(t.round)?;
        w.u8(t.dir.code())?;
        w.u8(t.verdict.code())?;
        w.bytes(&t.tag)?;
    }
    Ok(n)
}

/// Bytes of a round-verdict payload (record type 9).
pub const VERDICT_LEN: usize = 25;

/// A round's verdict as the board reports it to the post-processing host (record type 9):
/// `round u64 | kept u8 | first_slot u64 | last_slot u64`. The round's announce frames covered
/// slots `first_slot ..= last_slot` (rounds never overlap); the host keeps the key bits of those
/// slots only if `kept`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RoundVerdict {
    /// Round number.
    pub round: u64,
    /// Both tags checked: the round's key is kept.
    pub kept: bool,
    /// First slot announced in the round.
    pub first_slot: u64,
    /// Last slot announced in the round.
    pub last_slot: u64,
}

impl RoundVerdict {
    /// Parse a round-verdict payload.
    pub fn parse(payload: &[u8]) -> Result<Self, FrameError> {
        let mut r = Reader::new(payload);
        let round = r.u64()?;
        let kept = match r.u8()? {
            0 => false,
            1 => true,
            _ => {
                return Err(FrameError::BadField {
                    offset: 8,
                    field: "kept",
                })
            }
        };
        let first_slot = r.u64()?;
        let last_slot = r.u64()?;
        r.finish()?;
        if last_slot < first_slot {
            return Err(FrameError::BadField {
                offset: 17,
                field: "last_slot",
            });
        }
        Ok(Self {
            round,
            kept,
            first_slot,
            last_slot,
        })
    }

    /// Write the payload into `out`; returns [`VERDICT_LEN`].
    pub fn emit(&self, out: &mut [u8]) -> Result<usize, FrameError> {
        let dst = out
            .get_mut(..VERDICT_LEN)
            .ok_or(FrameError::BufferTooSmall {
                needed: VERDICT_LEN,
            })?;
        let mut w = Writer::new(dst);
        w.u64(self.round)?;
        w.u8(u8::from(self.kept))?;
        w.u64(self.first_slot)?;
        w.u64(self.last_slot)?;
        Ok(VERDICT_LEN)
    }
}

/// POLYVAL over a byte stream cut into 16-byte blocks as it comes (zero-padded at the end).
#[derive(Clone)]
struct Blocks {
    p: Polyval,
    buf: [u8; BLOCK_LEN],
    fill: usize,
}

impl Blocks {
    fn new(key: &[u8; HASH_KEY_LEN]) -> Self {
        Self {
            p: Polyval::new(&(*key).into()),
            buf: [0; BLOCK_LEN],
            fill: 0,
        }
    }

    fn push(&mut self, bytes: &[u8]) {
        for &b in bytes {
            if let Some(d) = self.buf.get_mut(self.fill) {
                *d = b;
            }
            self.fill += 1;
            if self.fill == BLOCK_LEN {
                self.p.update(&[self.buf.into()]);
                self.fill = 0;
            }
        }
    }

    fn finish(mut self) -> [u8; BLOCK_LEN] {
        if self.fill > 0 {
            for d in self.buf.iter_mut().skip(self.fill) {
                *d = 0;
            }
            self.p.update(&[self.buf.into()]);
        }
        self.p.finalize().into()
    }
}

/// The 16-byte digest of one answered announce frame, built announcement by announcement:
///
/// ```text
/// block 0:  count u16 | 0 × 6 | first_slot u64
/// then per announcement: LEB128(slot − previous slot; 0 for the first) | entry | basis << 7
/// zero-padded to whole blocks
/// ```
#[derive(Clone)]
pub struct FrameDigest {
    b: Blocks,
    prev: u64,
}

impl FrameDigest {
    /// Start the digest of a frame of `count` announcements from `first_slot`, under hash key `h`.
    pub fn new(h: &[u8; HASH_KEY_LEN], count: u16, first_slot: u64) -> Self {
        let mut b = Blocks::new(h);
        let c = count.to_le_bytes();
        let mut head = [0u8; BLOCK_LEN];
        head[0] = c[0];
        head[1] = c[1];
        head[8..].copy_from_slice(&first_slot.to_le_bytes());
        b.push(&head);
        Self {
            b,
            prev: first_slot,
        }
    }

    /// Add the next announcement: its slot, the receiver's basis (0 Z, 1 X) and the answer's
    /// entry byte.
    pub fn add(&mut self, slot: u64, basis_x: bool, entry: u8) {
        let mut v = slot.wrapping_sub(self.prev);
        self.prev = slot;
        let mut tmp = [0u8; 11];
        let n = varint_len(v);
        for d in tmp.iter_mut().take(n) {
            *d = (v & 0x7F) as u8 | if v > 0x7F { 0x80 } else { 0 };
            v >>= 7;
        }
        if let Some(d) = tmp.get_mut(n) {
            *d = entry & 0x7F | u8::from(basis_x) << 7;
        }
        self.b.push(tmp.get(..=n).unwrap_or_default());
    }

    /// The digest.
    pub fn finish(self) -> [u8; BLOCK_LEN] {
        self.b.finish()
    }
}

/// Fate of an announce frame in an outcome.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Fate {
    /// Answered: its digest follows.
    Answered = 1,
    /// Expired or evicted: none of its entries is used.
    Expired = 2,
    /// Not known to this end (the transmitter missed its fate, or was told "answered" for a
    /// frame it never answered): the round cannot verify.
    Unknown = 3,
}

/// The hash of one round's outcome under `H_R`, fed frame by frame in number order:
///
/// ```text
/// block 0:            round u64 | frames_per_round u32 | 0x52 0 0 0
/// per frame:          num u64 | fate u8 | 0 × 7      then, if answered, its 16-byte digest
/// last (per tag):     dir u8 | verdict u8 | 0 × 6 | frames u64
/// ```
#[derive(Clone)]
pub struct RoundHash {
    b: Blocks,
    round: u64,
    frames: u64,
}

impl RoundHash {
    /// Start round `round` of `frames_per_round` frames under the outcome key `hr`.
    pub fn new(hr: &[u8; HASH_KEY_LEN], round: u64, frames_per_round: u32) -> Self {
        let mut b = Blocks::new(hr);
        let mut head = [0u8; BLOCK_LEN];
        head[..8].copy_from_slice(&round.to_le_bytes());
        head[8..12].copy_from_slice(&frames_per_round.to_le_bytes());
        head[12] = 0x52;
        b.push(&head);
        Self {
            b,
            round,
            frames: 0,
        }
    }

    /// The round hashed.
    pub const fn round(&self) -> u64 {
        self.round
    }

    /// Frames fed so far.
    pub const fn frames(&self) -> u64 {
        self.frames
    }

    /// Add announce frame `num` with its fate (and its digest when answered).
    pub fn add(&mut self, num: u64, fate: Fate, digest: Option<&[u8; BLOCK_LEN]>) {
        let mut blk = [0u8; BLOCK_LEN];
        blk[..8].copy_from_slice(&num.to_le_bytes());
        blk[8] = fate as u8;
        self.b.push(&blk);
        if let (Fate::Answered, Some(d)) = (fate, digest) {
            self.b.push(d);
        }
        self.frames += 1;
    }

    /// The full 16-byte hash for a tag sent `dir` with `verdict` (the outcome stays usable).
    pub fn hash_for(&self, dir: Direction, verdict: Verdict) -> [u8; BLOCK_LEN] {
        let mut b = self.b.clone();
        let mut last = [0u8; BLOCK_LEN];
        last[0] = dir.code();
        last[1] = verdict.code();
        last[8..].copy_from_slice(&self.frames.to_le_bytes());
        b.push(&last);
        b.finish()
    }
}

/// The hash a failed verdict is tagged over: the empty outcome of `round`, which the other
/// end can rebuild whatever its own outcome says (a failed round's outcomes differ).
pub fn failed_hash(hr: &[u8; HASH_KEY_LEN], round: u64, frames_per_round: u32) -> [u8; BLOCK_LEN] {
    RoundHash::new(hr, round, frames_per_round).hash_for(Direction::ToTransmitter, Verdict::Failed)
}

/// The tag of a 16-byte hash with pad `pad`: its first 8 bytes XOR the pad.
pub fn pad_hash(full: &[u8; BLOCK_LEN], pad: &[u8; PAD_LEN]) -> [u8; TAG_LEN] {
    let mut t = [0u8; TAG_LEN];
    for ((d, a), b) in t.iter_mut().zip(full.iter()).zip(pad.iter()) {
        *d = a ^ b;
    }
    t
}

#[cfg(test)]
mod tests {
    use super::*;

    const H: [u8; 16] = [7; 16];

    #[test]
    fn records_round_trip_and_refuse_bad_fields() {
        let t = [
            RoundTag {
                round: 3,
                dir: Direction::ToReceiver,
                verdict: Verdict::Open,
                tag: [1; 8],
            },
            RoundTag {
                round: 1 << 40,
                dir: Direction::ToTransmitter,
                verdict: Verdict::Failed,
                tag: [0xEE; 8],
            },
        ];
        let mut buf = [0u8; MAX_LEN];
        let n = emit(&t, &mut buf).unwrap();
        assert_eq!(n, 1 + 2 * ENTRY_LEN);
        let mut out = [t[0]; MAX_ENTRIES];
        assert_eq!(parse(&buf[..n], &mut out), Ok(2));
        assert_eq!(&out[..2], &t);
        let mut bad = buf;
        bad[1 + 8] = 2;
        assert!(parse(&bad[..n], &mut out).is_err());
        bad = buf;
        bad[1 + 9] = 3;
        assert!(parse(&bad[..n], &mut out).is_err());
        assert!(parse(&buf[..n - 1], &mut out).is_err());
        assert!(parse(&[0], &mut out).is_err());
        assert!(emit(&[], &mut buf).is_err());
    }

    #[test]
    fn verdicts_round_trip_and_refuse_bad_fields() {
        let v = RoundVerdict {
            round: 7,
            kept: true,
            first_slot: 1000,
            last_slot: 1 << 40,
        };
        let mut buf = [0u8; VERDICT_LEN];
        assert_eq!(v.emit(&mut buf), Ok(VERDICT_LEN));
        assert_eq!(RoundVerdict::parse(&buf), Ok(v));
        let mut bad = buf;
        bad[8] = 2;
        assert!(RoundVerdict::parse(&bad).is_err());
        let back = RoundVerdict {
            last_slot: 999,
            ..v
        };
        back.emit(&mut bad).unwrap();
        assert!(RoundVerdict::parse(&bad).is_err());
        assert!(RoundVerdict::parse(&buf[..24]).is_err());
        assert!(v.emit(&mut [0u8; 24]).is_err());
    }

    #[test]
    fn pads_follow_round_and_direction() {
        assert_eq!(round_pad_word(0, Direction::ToTransmitter), 2);
        assert_eq!(round_pad_word(0, Direction::ToReceiver), 3);
        assert_eq!(round_pad_word(5, Direction::ToReceiver), 13);
    }

    fn digest(entries: &[(u64, bool, u8)]) -> [u8; 16] {
        let mut d = FrameDigest::new(&H, entries.len() as u16, entries[0].0);
        for &(s, b, e) in entries {
            d.add(s, b, e);
        }
        d.finish()
    }

    #[test]
    fn any_change_of_a_frame_or_a_fate_changes_the_hash() {
        let base = [(1000, false, 7), (1003, true, 8), (1300, false, 1)];
        let d0 = digest(&base);
        for k in 0..3 {
            let mut m = base;
            m[k].2 ^= 1;
            assert_ne!(digest(&m), d0, "entry {k}");
            let mut m = base;
            m[k].1 = !m[k].1;
            assert_ne!(digest(&m), d0, "basis {k}");
        }
        let mut m = base;
        m[2].0 += 1;
        assert_ne!(digest(&m), d0);
        let round = |fate: Fate, d: &[u8; 16]| {
            let mut t = RoundHash::new(&[9; 16], 2, 4);
            t.add(8, Fate::Expired, None);
            t.add(9, fate, Some(d));
            t.hash_for(Direction::ToReceiver, Verdict::Open)
        };
        let h0 = round(Fate::Answered, &d0);
        assert_ne!(round(Fate::Expired, &d0), h0);
        assert_ne!(round(Fate::Unknown, &d0), h0);
        assert_ne!(round(Fate::Answered, &digest(&m)), h0);
        let mut t = RoundHash::new(&[9; 16], 2, 4);
        t.add(8, Fate::Expired, None);
        t.add(9, Fate::Answered, Some(&d0));
        assert_eq!(t.hash_for(Direction::ToReceiver, Verdict::Open), h0);
        assert_ne!(t.hash_for(Direction::ToTransmitter, Verdict::Open), h0);
        assert_ne!(
            t.hash_for(Direction::ToTransmitter, Verdict::Verified),
            t.hash_for(Direction::ToTransmitter, Verdict::Failed)
        );
    }

    fn hex(b: &[u8]) -> String {
        b.iter()
            .map(|x| format!("{x:02X}"))
            .collect::<Vec<_>>()
            .join(" ")
    }

    /// The worked example of `docs/wire-protocol.md` §9.9, byte for byte.
    #[test]
    fn documented_round_tags() {
        // RFC 8452 Appendix A's POLYVAL key, as in §9.7.
        let h: [u8; 16] = [
            0x25, 0x62, 0x93, 0x47, 0x58, 0x92, 0x42, 0x76, 0x1d, 0x31, 0xf8, 0x26, 0xba, 0x4b,
            0x75, 0x7b,
        ];
        let hr: [u8; 16] = core::array::from_fn(|i| i as u8);
        let mut d = FrameDigest::new(&h, 3, 1000);
        d.add(1000, false, 0x07);
        d.add(1003, true, 0x08);
        d.add(1300, false, 0x01);
        let d = d.finish();
        let mut t = RoundHash::new(&hr, 5, 1);
        t.add(5, Fate::Answered, Some(&d));
        let tx = t.hash_for(Direction::ToReceiver, Verdict::Open);
        let rx = t.hash_for(Direction::ToTransmitter, Verdict::Verified);
        let pad = |w: u8| -> [u8; 8] { core::array::from_fn(|i| w * 8 + i as u8) };
        assert_eq!(round_pad_word(5, Direction::ToReceiver), 13);
        let got = [
            hex(&d),
            hex(&tx),
            hex(&pad_hash(&tx, &pad(13))),
            hex(&rx),
            hex(&pad_hash(&rx, &pad(12))),
            hex(&failed_hash(&hr, 5, 1)),
        ];
        let want = [
            "58 54 E8 2F 85 3A CD BD 5F 8E 62 54 B2 50 6C B8",
            "4A 0E 93 4A 69 A1 EC 34 FE A8 77 80 69 6E 73 F9",
            "22 67 F9 21 05 CC 82 5B",
            "87 49 53 05 AE E6 2C 6B 37 EF B7 CF AE 29 B3 F8",
            "E7 28 31 66 CA 83 4A 0C",
            "80 9D EE 1E F4 30 CE F2 33 B3 41 20 5F F0 48 2B",
        ];
        assert_eq!(got, want.map(std::string::String::from));
    }
}
