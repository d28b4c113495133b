//! Authenticated link: tags both ways, refusals that change nothing, the pool failing closed.

use super::*;
use crate::formats::refill;
use crate::formats::tag::{self, Direction, TagInput, PAD_LEN};
use crate::formats::{encode_frame_tagged, TAG_LEN};
use crate::wire::auth::{widen_seq, AuthConfig, LinkAuth};
use crate::wire::keypool::{KeyPool, PadState};
use std::collections::HashSet;

const H: [u8; 16] = [0x42; 16];

fn key(words: usize, seed: u8) -> Vec<u8> {
    (0..words * PAD_LEN)
        .map(|i| ((i * 167 + 13) as u8) ^ seed)
        .collect()
}

fn auth<const W: usize>(words: usize) -> LinkAuth<W> {
    LinkAuth::new(AuthConfig::DEFAULT, H, &key(words, 0)).unwrap()
}

type ALink = ReceiverLink<Pipe, Pipe, 8, 64, 64>;

fn alink(words: usize) -> (ALink, Pipe, Pipe) {
    let (down, up) = (Pipe::default(), Pipe::default());
    let cfg = LinkConfig::new(1000, 1_000_000).unwrap();
    let l = ALink::new_authenticated(cfg, auth(words), down.clone(), up.clone());
    (l, down, up)
}

/// The transmitter's end, written from the document: checks each announce frame's tag with
/// its mirror pool, answers with a tagged answers frame using the announce frame's pad pair.
struct Tx {
    auth: LinkAuth<256>,
    highest: Option<u64>,
    next_seq: u16,
    sent: Vec<Vec<u8>>,
}

impl Tx {
    fn new(words: usize) -> Self {
        Self {
            auth: auth(words),
            highest: None,
            next_seq: 0,
            sent: Vec::new(),
        }
    }

    fn answer(&mut self, bytes: &[u8]) -> Vec<u8> {
        let mut d = FrameDecoder::new();
        let mut out = Vec::new();
        for &b in bytes {
            let Some(Ok(f)) = d.push(b) else { continue };
            let num = widen_seq(f.seq, self.highest.unwrap_or(0));
            let m = TagInput {
                dir: Direction::ToTransmitter,
                record: f.record,
                seq: f.seq,
                num,
                payload: f.payload,
            };
            if self.auth.verify(&m, f.tag.as_ref()).is_err() {
                continue;
            }
            self.highest = Some(self.highest.map_or(num, |h| h.max(num)));
            let v = AnnounceView::parse(f.payload).unwrap();
            if v.count == 0 {
                continue;
            }
            let e: Vec<AnswerEntry> = v
                .iter()
                .map(|a| AnswerEntry {
                    basis_match: a.slot % 3 != 0,
                    intensity: 0,
                    bit: Some((a.slot % 2) as u8),
                })
                .collect();
            let mut p = vec![0u8; 600];
            let n = answers::emit(f.seq, v.first_slot, &e, &mut p).unwrap();
            let m = TagInput {
                dir: Direction::ToReceiver,
                record: RecordType::Answers,
                seq: self.next_seq,
                num,
                payload: &p[..n],
            };
            let t = self.auth.seal(&m).unwrap();
            let frame = tagged(RecordType::Answers, self.next_seq, &p[..n], &t);
            self.next_seq += 1;
            self.sent.push(frame.clone());
            out.extend(frame);
        }
        out
    }
}

fn tagged(record: RecordType, seq: u16, payload: &[u8], t: &[u8; TAG_LEN]) -> Vec<u8> {
    let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
    let n = encode_frame_tagged(record, seq, payload, t, &mut raw, &mut out).unwrap();
    out.truncate(n);
    out
}

/// A copy of `frame` with answer entry `i`'s basis-match bit flipped and the CRC recomputed.
fn flip_answer(frame: &[u8], i: usize) -> Vec<u8> {
    let f = frames_in_tagged(frame).remove(0);
    let mut p = f.2.clone();
    p[answers::FIXED_LEN + i] ^= 1;
    tagged(f.0, f.1, &p, &f.3)
}

fn frames_in_tagged(bytes: &[u8]) -> Vec<(RecordType, u16, Vec<u8>, [u8; TAG_LEN])> {
    let mut d = FrameDecoder::new();
    let mut out = Vec::new();
    for &b in bytes {
        if let Some(Ok(f)) = d.push(b) {
            out.push((f.record, f.seq, f.payload.to_vec(), f.tag.unwrap()));
        }
    }
    out
}

fn apoll(l: &mut ALink) -> Vec<Answer> {
    std::iter::from_fn(|| l.poll_answer()).collect()
}

#[test]
fn tags_check_once_and_refusals_change_nothing() {
    let (mut a, mut b) = (auth::<16>(10), auth::<16>(10));
    let m = |num, payload| TagInput {
        dir: Direction::ToTransmitter,
        record: RecordType::Announce,
        seq: num as u16,
        num,
        payload,
    };
    let t0 = a.seal(&m(0, &[1, 2, 3])).unwrap();
    assert_eq!(b.verify(&m(0, &[1, 2, 3]), Some(&t0)), Ok(()));
    assert_eq!(
        b.verify(&m(0, &[1, 2, 3]), Some(&t0)),
        Err(Reject::Replayed)
    );
    let t1 = a.seal(&m(1, &[9])).unwrap();
    assert_eq!(b.verify(&m(1, &[8]), Some(&t1)), Err(Reject::BadTag));
    assert_eq!(b.verify(&m(1, &[9]), None), Err(Reject::Untagged));
    assert_eq!(b.pool().state(2), PadState::Fresh);
    assert_eq!(b.verify(&m(1, &[9]), Some(&t1)), Ok(()));
    assert_eq!(b.verify(&m(9, &[9]), Some(&t1)), Err(Reject::NoKey));
    // A wrong hash key never verifies, even with the right pads.
    let mut c = LinkAuth::<16>::new(AuthConfig::DEFAULT, [7; 16], &key(10, 0)).unwrap();
    let t2 = c.seal(&m(2, &[5])).unwrap();
    assert_eq!(b.verify(&m(2, &[5]), Some(&t2)), Err(Reject::BadTag));
    for e in [&a, &b] {
        let k = e.counters();
        assert_eq!(k.key_bits_loaded, 10 * 64);
        assert_eq!(
            k.key_bits_loaded,
            k.key_bits_consumed + k.key_bits_abandoned + e.key_bits_left()
        );
    }
    let k = b.counters();
    assert_eq!(
        (k.frames_verified, k.refusals, k.key_bits_consumed),
        (2, 5, 128)
    );
    assert!(!b.attack_alarm() && b.low_key_alarm());
    assert!(LinkAuth::<16>::new(AuthConfig::DEFAULT, [0; 16], &[]).is_err());
    assert!(LinkAuth::<4>::new(AuthConfig::DEFAULT, H, &key(5, 0)).is_err());
}

#[test]
fn repeated_refusals_raise_the_alarm_and_stop_the_link() {
    let cfg = AuthConfig::new(0, 3, 5).unwrap();
    let mut b = LinkAuth::<16>::new(cfg, H, &key(10, 0)).unwrap();
    let m = TagInput {
        dir: Direction::ToReceiver,
        record: RecordType::Answers,
        seq: 0,
        num: 0,
        payload: &[],
    };
    for i in 0..5 {
        assert_eq!(b.verify(&m, Some(&[i; TAG_LEN])), Err(Reject::BadTag));
        assert_eq!(b.attack_alarm(), i >= 2, "{i}");
    }
    assert_eq!(b.counters().attack_alarms, 1);
    assert!(b.stopped());
    assert_eq!(b.pool().fresh_words(), 10);
    assert!(AuthConfig::new(0, 65, 1).is_err() && AuthConfig::new(0, 1, 0).is_err());
}

#[test]
fn authenticated_endpoint_refuses_every_attack() {
    let (mut l, down, up) = alink(64);
    let mut tx = Tx::new(64);
    let slots: Vec<u64> = (0..16).map(|k| 100 + 3 * k).collect();
    for &s in &slots {
        l.announce(ann(s, false));
    }
    let sent = drain(&up);
    assert!(frames_in_tagged(&sent)
        .iter()
        .all(|f| f.0 == RecordType::Announce));
    let answers = tx.answer(&sent);
    assert_eq!(tx.sent.len(), 2);
    let (f0, f1) = (tx.sent[0].clone(), tx.sent[1].clone());
    // Altered answers with a good CRC, an untagged copy, a frame tagged with a wrong key.
    let f = frames_in_tagged(&f0).remove(0);
    let mut attacks = flip_answer(&f0, 0);
    attacks.extend(frame_bytes(RecordType::Answers, f.1, &f.2));
    let mut wrong = LinkAuth::<16>::new(AuthConfig::DEFAULT, [9; 16], &key(8, 1)).unwrap();
    let t = wrong
        .seal(&TagInput {
            dir: Direction::ToReceiver,
            record: RecordType::Answers,
            seq: f.1,
            num: 0,
            payload: &f.2,
        })
        .unwrap();
    attacks.extend(tagged(RecordType::Answers, f.1, &f.2, &t));
    down.0.borrow_mut().extend(&attacks);
    assert!(apoll(&mut l).is_empty());
    assert_eq!(l.waiting_announcements(), 16);
    let c = l.counters().rejected;
    assert_eq!((c.get(Reject::BadTag), c.get(Reject::Untagged)), (2, 1));
    // The genuine answers still get through, once; a replay is refused.
    down.0.borrow_mut().extend(&answers);
    assert_eq!(apoll(&mut l).len(), 16);
    down.0.borrow_mut().extend(f0.iter().chain(&f1));
    assert!(apoll(&mut l).is_empty());
    assert_eq!(l.counters().rejected.get(Reject::Replayed), 2);
    let a = l.auth().unwrap().counters();
    assert_eq!((a.frames_tagged, a.frames_verified, a.refusals), (2, 2, 5));
    assert_eq!(a.key_bits_consumed, 4 * 64);
    // The transmitter refuses a replayed and an altered announce frame.
    assert!(tx.answer(&sent).is_empty());
    let g = frames_in_tagged(&sent).remove(0);
    let mut p = g.2.clone();
    p[21 + 1] ^= 1;
    assert!(tx.answer(&tagged(g.0, g.1, &p, &g.3)).is_empty());
    assert_eq!(tx.auth.counters().refusals, 3);
}

#[test]
fn an_empty_pool_stops_the_link() {
    // Frame 0 takes pad words 0 and 1 and keeps words 2, 4, 6, 8 for closing reports; frame 1
    // would leave too little to close, so the link stops before sending it.
    let (mut l, down, up) = alink(10);
    let mut tx = Tx::new(10);
    for s in 0..8 {
        l.announce(ann(10 + s, false));
    }
    let sent = drain(&up);
    assert_eq!(frames_in_tagged(&sent).len(), 1);
    for s in 0..8 {
        l.announce(ann(30 + s, false));
    }
    assert!(drain(&up).is_empty());
    assert!(l.stopped());
    l.announce(ann(100, false));
    let c = l.counters();
    assert_eq!((c.announcements, c.refused_announcements), (8, 9));
    assert_eq!(l.auth().unwrap().counters().starved_frames, 1);
    // Frames already sent are still answered, and the link closes with the key it kept.
    down.0.borrow_mut().extend(tx.answer(&sent));
    assert_eq!(apoll(&mut l).len(), 8);
    l.close();
    let fin = drain(&up);
    assert_eq!(frames_in_tagged(&fin).len(), 1);
    assert!(tx.answer(&fin).is_empty());
    assert_eq!(tx.auth.counters().frames_verified, 2);
    // A refill does not restart a starved link: it fails closed until a new session.
    assert_eq!(l.refill(10, &key(4, 3)), Ok(4));
    l.announce(ann(200, false));
    assert!(l.stopped() && drain(&up).is_empty());
}

#[test]
fn refill_frames_load_the_pool() {
    let (mut l, _, up) = alink(8);
    // A batch half built when the refill arrives is not disturbed by it.
    for s in [10, 13, 400] {
        l.announce(ann(s, s == 13));
    }
    let k = key(3, 5);
    let mut p = vec![0u8; 64];
    let n = refill::emit(8, &k, &mut p).unwrap();
    let good = frame_bytes(RecordType::KeyRefill, 0, &p[..n]);
    assert_eq!(l.take_refill_frame(&good), Ok(3));
    assert!(l.take_refill_frame(&good).is_err());
    assert!(l
        .take_refill_frame(&frame_bytes(RecordType::Answers, 0, &p[..n]))
        .is_err());
    let mut bad = good.clone();
    bad[5] ^= 1;
    assert!(l.take_refill_frame(&bad).is_err());
    assert_eq!(l.auth().unwrap().key_bits_left(), 11 * 64);
    l.flush();
    let f = frames_in_tagged(&drain(&up)).remove(0);
    let v = AnnounceView::parse(&f.2).unwrap();
    assert_eq!(v.iter().map(|a| a.slot).collect::<Vec<_>>(), [10, 13, 400]);
    let (mut u, _, _) = link(10);
    assert!(u.take_refill_frame(&good).is_err());
}

#[test]
fn unauthenticated_endpoint_refuses_tagged_frames() {
    let (mut l, down, up) = link(1000);
    for s in 0..8 {
        l.announce(ann(10 + s, false));
    }
    let f = frames_in(&drain(&up)).remove(0);
    let v = AnnounceView::parse(&f.2).unwrap();
    let e = vec![
        AnswerEntry {
            basis_match: true,
            intensity: 0,
            bit: None
        };
        8
    ];
    let mut p = vec![0u8; 64];
    let n = answers::emit(f.1, v.first_slot, &e, &mut p).unwrap();
    down.0
        .borrow_mut()
        .extend(tagged(RecordType::Answers, 0, &p[..n], &[0; TAG_LEN]));
    assert!(poll_all(&mut l).is_empty());
    assert_eq!(l.counters().rejected.get(Reject::Untagged), 1);
}

proptest! {
    /// No frame built without the key is ever accepted, whatever its fields and tag, and it
    /// never spends a pad word.
    #[test]
    fn frames_without_the_key_are_never_accepted(
        frames in proptest::collection::vec(
            (any::<u16>(), any::<u16>(), proptest::collection::vec(0u8..32, 1..12),
             any::<[u8; TAG_LEN]>(), any::<[u8; 16]>(), any::<bool>()),
            1..24),
    ) {
        let (mut l, down, up) = alink(64);
        for s in 0..16 {
            l.announce(ann(100 + s, false));
        }
        let firsts: Vec<u64> = frames_in_tagged(&drain(&up))
            .iter()
            .map(|f| AnnounceView::parse(&f.2).unwrap().first_slot)
            .collect();
        let fresh = l.auth().unwrap().pool().fresh_words();
        for (seq, ann_seq, entries, t, h, pad_guess) in frames {
            let ann_seq = ann_seq % 3;
            let e: Vec<AnswerEntry> =
                entries.iter().filter_map(|&b| AnswerEntry::from_byte(b & 0x1F)).collect();
            prop_assume!(!e.is_empty());
            let mut p = vec![0u8; 64];
            let first = firsts.get(usize::from(ann_seq)).copied().unwrap_or(0);
            let n = answers::emit(ann_seq, first, &e, &mut p).unwrap();
            // Either random tag bytes, or a proper tag under a guessed hash key and pad.
            let t = if pad_guess && h != H {
                let m = TagInput {
                    dir: Direction::ToReceiver,
                    record: RecordType::Answers,
                    seq,
                    num: u64::from(ann_seq),
                    payload: &p[..n],
                };
                tag::tag(&h, &t, &m)
            } else {
                t
            };
            down.0.borrow_mut().extend(tagged(RecordType::Answers, seq, &p[..n], &t));
            prop_assert!(l.poll_answer().is_none());
        }
        let a = l.auth().unwrap();
        prop_assert_eq!(a.counters().frames_verified, 0);
        prop_assert_eq!(a.pool().fresh_words(), fresh);
        prop_assert_eq!(l.counters().answers_in, 0);
    }

    /// Whatever the order of loads, checks, spends and abandons, no pad word is handed out twice
    /// and every word handed out is the key loaded at its place.
    #[test]
    fn no_pad_word_is_used_twice(ops in proptest::collection::vec((0u8..4, 0u64..40), 1..200)) {
        let stream = key(64, 7);
        let mut p = KeyPool::<12>::new();
        let mut spent = HashSet::new();
        for (op, w) in ops {
            match op {
                0 => {
                    let end = p.end() as usize;
                    let n = (w as usize % 4).min(p.room()).min(64 - end.min(64));
                    let bytes = &stream[end * PAD_LEN..(end + n) * PAD_LEN];
                    prop_assert!(p.load(end as u64, bytes).is_ok());
                }
                1 => {
                    if let Some(pad) = p.spend(w) {
                        prop_assert!(spent.insert(w), "word {} spent twice", w);
                        let at = w as usize * PAD_LEN;
                        prop_assert_eq!(&pad[..], &stream[at..at + PAD_LEN]);
                    }
                }
                2 => p.abandon_below(w / 4),
                _ => {
                    if spent.contains(&w) {
                        prop_assert_eq!(p.state(w), PadState::Gone);
                        prop_assert!(p.peek(w).is_none());
                    }
                }
            }
            let c = p.counters();
            prop_assert_eq!(c.loaded_words, c.spent_words + c.abandoned_words + p.fresh_words() as u64);
        }
    }
}

/// The tagged example of docs/wire-protocol.md §9: the §7 frames, authenticated with the hash key
/// of RFC 8452's Appendix A and a pre-shared key whose byte i is i.
#[test]
fn documented_tagged_frames() {
    let h: [u8; 16] = [
        0x25, 0x62, 0x93, 0x47, 0x58, 0x92, 0x42, 0x76, 0x1d, 0x31, 0xf8, 0x26, 0xba, 0x4b, 0x75,
        0x7b,
    ];
    let pre: Vec<u8> = (0..=255u8).collect();
    let (mut rx, mut tx) = (
        LinkAuth::<32>::new(AuthConfig::DEFAULT, h, &pre).unwrap(),
        LinkAuth::<32>::new(AuthConfig::DEFAULT, h, &pre).unwrap(),
    );
    let entries = [ann(1000, false), ann(1003, true), ann(1300, false)];
    let report = Report {
        resolved_below: 4,
        answered_map: 0b1011,
    };
    let mut p = [0u8; 64];
    let n = announce::emit(&entries, report, 0, &mut p).unwrap();
    let m = TagInput {
        dir: Direction::ToTransmitter,
        record: RecordType::Announce,
        seq: 5,
        num: 5,
        payload: &p[..n],
    };
    let full_a = tag::polyval_hash(&h, Some(&m.header_block()), m.payload);
    let ta = rx.seal(&m).unwrap();
    assert_eq!(tx.verify(&m, Some(&ta)), Ok(()));
    let a = tagged(RecordType::Announce, 5, &p[..n], &ta);
    let hb_a = m.header_block();
    let e = three_answers();
    let n = answers::emit(5, 1000, &e, &mut p).unwrap();
    let m = TagInput {
        dir: Direction::ToReceiver,
        record: RecordType::Answers,
        seq: 9,
        num: 5,
        payload: &p[..n],
    };
    let full_b = tag::polyval_hash(&h, Some(&m.header_block()), m.payload);
    let tb = tx.seal(&m).unwrap();
    assert_eq!(rx.verify(&m, Some(&tb)), Ok(()));
    let b = tagged(RecordType::Answers, 9, &p[..n], &tb);
    let hb_b = m.header_block();
    let unstuff = |f: &[u8]| {
        let mut raw = [0u8; 80];
        let k = cobs::decode(&f[..f.len() - 1], &mut raw).unwrap();
        raw[..k].to_vec()
    };
    for (name, v) in [
        ("block0 a", hb_a.to_vec()),
        ("polyval a", full_a.to_vec()),
        ("tag a", ta.to_vec()),
        ("raw a", unstuff(&a)),
        ("wire a", a.clone()),
        ("block0 b", hb_b.to_vec()),
        ("polyval b", full_b.to_vec()),
        ("tag b", tb.to_vec()),
        ("raw b", unstuff(&b)),
        ("wire b", b.clone()),
    ] {
        println!("{name}: {}", hex(&v));
    }
    assert_eq!(
        hex(&full_a),
        "F6 AE 6E B6 BF F0 B5 56 B6 15 EB CD DA 36 7B 81"
    );
    assert_eq!(
        hex(&unstuff(&a)),
        "02 03 05 00 19 00 E8 03 00 00 00 00 00 00 03 00 04 00 0B 00 00 00 00 00 00 00 00 03 A9 \
         02 02 A6 FF 3C E5 EB A5 E3 01 4E F5 25 24"
    );
    assert_eq!(
        hex(&full_b),
        "00 29 0A 2C F5 5F FB 07 66 B1 7C C5 40 CD 07 3E"
    );
    assert_eq!(
        hex(&unstuff(&b)),
        "02 04 09 00 0F 00 05 00 03 00 E8 03 00 00 00 00 00 00 07 08 01 58 70 50 77 A9 02 A5 58 \
         6C 04 3C 1E"
    );
    // Pad words 10 and 11 (bytes 0x50..0x5F of the pre-shared key): frame 5's pad pair.
    let pad_a: Vec<u8> = (0x50..0x58).collect();
    let pad_b: Vec<u8> = (0x58..0x60).collect();
    for ((t, f), pad) in [(ta, full_a), (tb, full_b)].iter().zip([pad_a, pad_b]) {
        for i in 0..TAG_LEN {
            assert_eq!(t[i], f[i] ^ pad[i]);
        }
    }
}
