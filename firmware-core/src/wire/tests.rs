use super::endpoint::MAX_OPEN_FRAMES;
use super::*;
use crate::formats::announce::FLAG_FINAL;
use crate::formats::{self, cobs, encode_frame, RecordType, MAX_FRAME, MAX_RAW};
use crate::formats::{announce, answers};
use crate::gates::Basis;
use crate::sift::{Announcement, Answer, Transmitter};
use proptest::prelude::*;
use std::cell::RefCell;
use std::collections::VecDeque;
use std::convert::Infallible;
use std::rc::Rc;

/// A byte pipe shared by a writer and a reader (an in-memory UART).
#[derive(Clone, Default)]
struct Pipe(Rc<RefCell<VecDeque<u8>>>);

impl embedded_io::ErrorType for Pipe {
    type Error = Infallible;
}
impl embedded_io::Read for Pipe {
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        let mut q = self.0.borrow_mut();
        let n = buf.len().min(q.len());
        for b in buf.iter_mut().take(n) {
            *b = q.pop_front().unwrap();
        }
        Ok(n)
    }
}
impl embedded_io::ReadReady for Pipe {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        Ok(!self.0.borrow().is_empty())
    }
}
impl embedded_io::Write for Pipe {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        self.0.borrow_mut().extend(buf);
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Infallible> {
        Ok(())
    }
}

type Link = ReceiverLink<Pipe, Pipe, 8, 64>;

fn link(timeout: u64) -> (Link, Pipe, Pipe) {
    let (down, up) = (Pipe::default(), Pipe::default());
    let cfg = LinkConfig::new(timeout, 1_000_000).unwrap();
    (Link::new(cfg, down.clone(), up.clone()), down, up)
}

fn frame_bytes(record: RecordType, seq: u16, payload: &[u8]) -> Vec<u8> {
    let mut raw = vec![0u8; MAX_RAW];
    let mut out = vec![0u8; MAX_FRAME];
    let n = encode_frame(record, seq, payload, &mut raw, &mut out).unwrap();
    out.truncate(n);
    out
}

/// Every frame in `bytes`, decoded: (type, seq, payload).
fn frames_in(bytes: &[u8]) -> Vec<(RecordType, u16, Vec<u8>)> {
    let mut d = FrameDecoder::new();
    let mut out = Vec::new();
    for &b in bytes {
        if let Some(Ok(f)) = d.push(b) {
            out.push((f.record, f.seq, f.payload.to_vec()));
        }
    }
    out
}

fn drain(p: &Pipe) -> Vec<u8> {
    p.0.borrow_mut().drain(..).collect()
}

/// Answers to three announced slots: matched with its bit revealed, mismatched, matched.
fn three_answers() -> [AnswerEntry; 3] {
    [
        AnswerEntry {
            basis_match: true,
            intensity: 0,
            bit: Some(1),
        },
        AnswerEntry {
            basis_match: false,
            intensity: 1,
            bit: None,
        },
        AnswerEntry {
            basis_match: true,
            intensity: 0,
            bit: None,
        },
    ]
}

fn ann(slot: u64, x: bool) -> Announcement {
    Announcement {
        slot,
        basis: if x { Basis::X } else { Basis::Z },
    }
}

#[test]
fn announce_and_answers_payloads_round_trip() {
    let entries = [
        ann(10, false),
        ann(11, true),
        ann(300, true),
        ann(1 << 40, false),
    ];
    let report = Report {
        resolved_below: 7,
        answered_map: 0b101,
    };
    let mut p = [0u8; 64];
    let n = announce::emit(&entries, report, 0, &mut p).unwrap();
    // 21 fixed + varints 1, 2, 6 + 1 bitmap byte
    assert_eq!(n, 21 + 1 + 2 + 6 + 1);
    let v = AnnounceView::parse(&p[..n]).unwrap();
    assert_eq!(v.report, report);
    assert_eq!(v.iter().collect::<Vec<_>>(), entries);
    assert!(AnnounceView::parse(&p[..n - 1]).is_err());
    assert_eq!(report.fate(6), Some(true));
    assert_eq!(report.fate(5), Some(false));
    assert_eq!(report.fate(4), Some(true));
    assert_eq!(report.fate(7), None);

    let e = [
        AnswerEntry {
            basis_match: true,
            intensity: 1,
            bit: Some(1),
        },
        AnswerEntry {
            basis_match: false,
            intensity: 0,
            bit: None,
        },
    ];
    let n = answers::emit(3, 10, &e, &mut p).unwrap();
    let v = AnswersView::parse(&p[..n]).unwrap();
    assert_eq!((v.ann_seq, v.first_slot), (3, 10));
    assert_eq!(v.iter().collect::<Vec<_>>(), e);
    // bit 2 without the revealed flag, and reserved bits, are refused
    assert_eq!(AnswerEntry::from_byte(0b100), None);
    assert_eq!(AnswerEntry::from_byte(0x20), None);
}

#[test]
fn sequence_window() {
    let mut w = SeqWindow::new();
    assert_eq!(w.observe(65534), SeqClass::First);
    assert_eq!(w.observe(65535), SeqClass::Ahead { missing: 0 });
    assert_eq!(w.observe(2), SeqClass::Ahead { missing: 2 });
    assert_eq!(w.observe(0), SeqClass::Late);
    assert_eq!(w.observe(0), SeqClass::Duplicate);
    assert_eq!(w.observe(2), SeqClass::Duplicate);
    assert_eq!(w.observe(200), SeqClass::Ahead { missing: 197 });
    assert_eq!(w.observe(100), SeqClass::TooOld);
}

#[test]
fn decoder_resynchronises_after_garbage() {
    let good = frame_bytes(RecordType::Answers, 5, &[1, 2, 3]);
    let mut stream = vec![0x11, 0x22, 0x00];
    stream.extend(vec![0x33; MAX_FRAME + 10]);
    stream.push(0);
    stream.extend(&good);
    let mut d = FrameDecoder::new();
    let mut results = Vec::new();
    for &b in &stream {
        if let Some(r) = d.push(b) {
            results.push(r.map(|f| (f.seq, f.payload.to_vec())));
        }
    }
    assert_eq!(results.len(), 3);
    assert!(results[0].is_err());
    assert!(matches!(
        results[1],
        Err(formats::FrameError::Overlong { .. })
    ));
    assert_eq!(results[2], Ok((5, vec![1, 2, 3])));
}

/// A transmitter written from the document: answers every announce frame in `bytes`.
fn answer_all(bytes: &[u8], seq0: u16, tx_basis: impl Fn(u64) -> Basis) -> Vec<u8> {
    let mut out = Vec::new();
    for (k, (record, seq, payload)) in frames_in(bytes).into_iter().enumerate() {
        assert_eq!(record, RecordType::Announce);
        let v = AnnounceView::parse(&payload).unwrap();
        if v.count == 0 {
            continue;
        }
        let e: Vec<AnswerEntry> = v
            .iter()
            .map(|a| AnswerEntry {
                basis_match: tx_basis(a.slot) == a.basis,
                intensity: (a.slot % 3) as u8,
                bit: Some((a.slot % 2) as u8),
            })
            .collect();
        let mut p = vec![0u8; 600];
        let n = answers::emit(seq, v.first_slot, &e, &mut p).unwrap();
        out.extend(frame_bytes(RecordType::Answers, seq0 + k as u16, &p[..n]));
    }
    out
}

fn poll_all(l: &mut Link) -> Vec<Answer> {
    std::iter::from_fn(|| l.poll_answer()).collect()
}

#[test]
fn endpoint_batches_and_matches_answers() {
    let (mut l, down, up) = link(1000);
    let slots: Vec<u64> = (0..20).map(|k| 100 + 3 * k).collect();
    for &s in &slots {
        l.announce(ann(s, s.is_multiple_of(2)));
    }
    l.flush();
    // 20 announcements in batches of 8: three frames
    assert_eq!(l.counters().frames_out, 3);
    assert_eq!(l.counters().announcements, 20);
    let tx_basis = |s: u64| {
        if s.is_multiple_of(4) {
            Basis::X
        } else {
            Basis::Z
        }
    };
    down.0
        .borrow_mut()
        .extend(answer_all(&drain(&up), 0, tx_basis));
    let got = poll_all(&mut l);
    assert_eq!(got.len(), 20);
    for (a, &s) in got.iter().zip(&slots) {
        assert_eq!(
            (a.slot, a.basis, a.intensity),
            (s, tx_basis(s), (s % 3) as u8)
        );
        assert_eq!(a.bit, Some((s % 2) as u8));
    }
    assert_eq!(l.counters().answered_frames, 3);
    assert_eq!(l.answers_final_below(), Some(slots[19] + 1));
    // The next frame reports the three answered frames.
    l.announce(ann(1000, false));
    l.flush();
    let f = frames_in(&drain(&up));
    let v = AnnounceView::parse(&f[0].2).unwrap();
    assert_eq!(v.report.resolved_below, 3);
    assert_eq!(v.report.answered_map & 0b111, 0b111);
}

#[test]
fn endpoint_counts_every_kind_of_bad_answer() {
    let (mut l, down, up) = link(50);
    for s in 0..8 {
        l.announce(ann(s, false));
    }
    let answers = answer_all(&drain(&up), 0, |_| Basis::Z);
    let mut d = down.0.borrow_mut();
    // bad CRC: flip a payload byte of a copy
    let mut bad = answers.clone();
    bad[8] ^= 0x01;
    d.extend(&bad);
    d.extend(&answers);
    d.extend(&answers); // duplicate frame (same seq)
    let mut p = [0u8; 64];
    let e = [AnswerEntry {
        basis_match: true,
        intensity: 0,
        bit: None,
    }];
    let n = answers::emit(9, 0, &e, &mut p).unwrap();
    d.extend(frame_bytes(RecordType::Answers, 1, &p[..n])); // never announced
    let n = answers::emit(0, 0, &e, &mut p).unwrap();
    d.extend(frame_bytes(RecordType::Answers, 2, &p[..n])); // already answered
    d.extend(frame_bytes(RecordType::KeyBlock, 3, &[0; 4])); // wrong direction
    d.extend([0x42, 0x17, 0x00]); // line garbage, then a delimiter
    d.extend(frame_bytes(RecordType::Answers, 4, &[1])); // payload too short
    drop(d);
    assert_eq!(poll_all(&mut l).len(), 8);
    let r = &l.counters().rejected;
    assert_eq!(r.get(Reject::BadCrc), 1, "{r:?}");
    assert_eq!(r.get(Reject::Cobs), 1, "{r:?}");
    assert_eq!(r.get(Reject::DuplicateFrame), 1);
    assert_eq!(r.get(Reject::NeverAnnounced), 1);
    assert_eq!(r.get(Reject::DuplicateAnswers), 1);
    assert_eq!(r.get(Reject::UnexpectedType), 1);
    assert_eq!(r.get(Reject::Truncated), 1, "{r:?}");

    // A frame nobody answers expires 50 slots after its last slot; its answers come too late.
    for s in 100..108 {
        l.announce(ann(s, true));
    }
    let late = answer_all(&drain(&up), 10, |_| Basis::Z);
    l.announce(ann(200, false));
    assert_eq!(l.counters().expired_announcements, 8);
    assert_eq!(l.answers_final_below(), Some(200));
    down.0.borrow_mut().extend(&late);
    assert!(poll_all(&mut l).is_empty());
    assert_eq!(l.counters().rejected.get(Reject::LateAnswers), 1);
    // Answers whose echo of the first slot is wrong.
    l.flush();
    let f = frames_in(&drain(&up));
    let n = answers::emit(f[0].1, 201, &e, &mut p).unwrap();
    down.0
        .borrow_mut()
        .extend(frame_bytes(RecordType::Answers, 20, &p[..n]));
    assert!(poll_all(&mut l).is_empty());
    assert_eq!(l.counters().rejected.get(Reject::SlotMismatch), 1);
    l.close();
    let c = l.counters();
    assert_eq!(c.announcements, 17);
    assert_eq!(c.answers_in + c.expired_announcements, c.announcements);
    let last = frames_in(&drain(&up)).pop().unwrap();
    let v = AnnounceView::parse(&last.2).unwrap();
    assert!(v.is_final());
    assert_eq!(v.report.resolved_below, 3);
    assert_eq!(v.report.answered_map & 0b111, 0b100);
}

#[test]
fn open_frames_are_bounded() {
    let cfg = LinkConfig::new(u64::MAX / 4, 1_000_000).unwrap();
    let mut l = ReceiverLink::<Pipe, Pipe, 8, 512>::new(cfg, Pipe::default(), Pipe::default());
    for s in 0..(8 * (MAX_OPEN_FRAMES as u64 + 4)) {
        l.announce(ann(s, false));
    }
    // Frame records run out first: the four oldest frames are pushed out, counted as expired.
    let c = l.counters();
    assert_eq!((c.evicted_frames, c.expired_announcements), (4, 32));
    assert_eq!(l.waiting_announcements(), 8 * MAX_OPEN_FRAMES as u64);
    assert_eq!(l.answers_final_below(), Some(32));
    // A ring of 64 slots pushes frames out sooner.
    let (mut small, _d, _u) = link(u64::MAX / 4);
    for s in 0..100 {
        small.announce(ann(s, false));
    }
    assert_eq!(small.counters().expired_announcements, 40);
}

// RAM of the endpoint as the host instantiates it (64-announcement batches, 1024 open slots).
// Round mode adds its ledger (five outcome states, eight outgoing tags, eight verdicts; on the
// host each POLYVAL state holds both of the crate's backends), a 16-byte digest per open frame and
// one round-tag record's entries: 17,584 bytes in all here.
#[test]
fn endpoint_size() {
    let n = core::mem::size_of::<ReceiverLink<Pipe, Pipe, 64, 1024>>();
    println!("ReceiverLink<_, _, 64, 1024>: {n} bytes");
    assert!(n < 18 * 1024, "{n}");
}

fn independent_crc_ok(piece: &[u8]) -> bool {
    // CRC-32/ISCSI from the `crc` crate's catalogue entry (Cook's catalogue parameters).
    let crc = crc::Crc::<u32>::new(&crc::CRC_32_ISCSI);
    let mut raw = vec![0u8; piece.len()];
    let Ok(n) = cobs::decode(piece, &mut raw) else {
        return false;
    };
    if n < 10 {
        return false;
    }
    let (body, c) = raw[..n].split_at(n - 4);
    crc.checksum(body) == u32::from_le_bytes(c.try_into().unwrap())
}

fn arb_announce() -> impl Strategy<Value = (Vec<Announcement>, Report, u8)> {
    (
        proptest::collection::vec((1u64..1 << 40, any::<bool>()), 0..80),
        any::<u16>(),
        any::<u64>(),
        any::<bool>(),
        0u64..1 << 50,
    )
        .prop_map(|(d, r, m, fin, start)| {
            let mut slot = start;
            let e = d
                .into_iter()
                .map(|(delta, x)| {
                    slot += delta;
                    ann(slot, x)
                })
                .collect();
            (
                e,
                Report {
                    resolved_below: r,
                    answered_map: m,
                },
                if fin { FLAG_FINAL } else { 0 },
            )
        })
}

fn arb_answers() -> impl Strategy<Value = (u16, u64, Vec<AnswerEntry>)> {
    (
        any::<u16>(),
        any::<u64>(),
        proptest::collection::vec(
            (any::<bool>(), 0u8..4, proptest::option::of(0u8..2)),
            1..100,
        ),
    )
        .prop_map(|(s, f, e)| {
            let e = e
                .into_iter()
                .map(|(m, i, b)| AnswerEntry {
                    basis_match: m,
                    intensity: i,
                    bit: b,
                })
                .collect();
            (s, f, e)
        })
}

#[derive(Clone, Debug)]
enum Rec {
    Ann(Vec<Announcement>, Report, u8),
    Ans(u16, u64, Vec<AnswerEntry>),
}

proptest! {
    #[test]
    fn random_bytes_never_yield_a_frame_with_a_bad_crc(
        garbage in proptest::collection::vec(any::<u8>(), 0..3000),
        valid in proptest::collection::vec(any::<u8>(), 0..40),
        flips in proptest::collection::vec((any::<usize>(), any::<u8>()), 0..6),
    ) {
        // Random bytes, then a valid frame, with random bytes overwritten.
        let mut stream = garbage;
        stream.extend(frame_bytes(RecordType::Answers, 1, &valid));
        let len = stream.len();
        for (at, v) in flips {
            stream[at % len] = v;
        }
        let mut d = FrameDecoder::new();
        let mut piece = Vec::new();
        for &b in &stream {
            let out = d.push(b).map(|r| r.is_ok());
            if b == 0 {
                if out == Some(true) {
                    prop_assert!(independent_crc_ok(&piece), "frame with a bad CRC");
                }
                piece.clear();
            } else {
                piece.push(b);
            }
        }
    }

    #[test]
    fn frame_sequences_round_trip_in_any_chunking(
        recs in proptest::collection::vec(prop_oneof![
            arb_announce().prop_map(|(e, r, f)| Rec::Ann(e, r, f)),
            arb_answers().prop_map(|(s, f, e)| Rec::Ans(s, f, e)),
        ], 1..12),
        cuts in proptest::collection::vec(1usize..97, 1..50),
    ) {
        let mut stream = Vec::new();
        for (seq, r) in recs.iter().enumerate() {
            let mut p = vec![0u8; formats::MAX_PAYLOAD];
            let (t, n) = match r {
                Rec::Ann(e, rep, f) => (RecordType::Announce, announce::emit(e, *rep, *f, &mut p).unwrap()),
                Rec::Ans(s, f, e) => (RecordType::Answers, answers::emit(*s, *f, e, &mut p).unwrap()),
            };
            stream.extend(frame_bytes(t, seq as u16, &p[..n]));
        }
        let mut d = FrameDecoder::new();
        let mut got = Vec::new();
        let (mut at, mut k) = (0, 0);
        while at < stream.len() {
            let end = (at + cuts[k % cuts.len()]).min(stream.len());
            k += 1;
            for &b in &stream[at..end] {
                if let Some(r) = d.push(b) {
                    let f = r.unwrap();
                    let r = match f.record {
                        RecordType::Announce => {
                            let v = AnnounceView::parse(f.payload).unwrap();
                            Rec::Ann(v.iter().collect(), v.report, v.flags)
                        }
                        _ => {
                            let v = AnswersView::parse(f.payload).unwrap();
                            Rec::Ans(v.ann_seq, v.first_slot, v.iter().collect())
                        }
                    };
                    got.push((f.seq, r));
                }
            }
            at = end;
        }
        prop_assert_eq!(got.len(), recs.len());
        for (i, ((seq, g), want)) in got.iter().zip(&recs).enumerate() {
            prop_assert_eq!(usize::from(*seq), i);
            prop_assert_eq!(format!("{g:?}"), format!("{want:?}"));
        }
    }
}

fn hex(b: &[u8]) -> String {
    b.iter()
        .map(|x| format!("{x:02X}"))
        .collect::<Vec<_>>()
        .join(" ")
}

// The worked example of docs/wire-protocol.md, byte for byte.
#[test]
fn documented_example_frames() {
    let entries = [ann(1000, false), ann(1003, true), ann(1300, false)];
    let report = Report {
        resolved_below: 4,
        answered_map: 0b1011,
    };
    let mut p = [0u8; 64];
    let n = announce::emit(&entries, report, 0, &mut p).unwrap();
    let a = frame_bytes(RecordType::Announce, 5, &p[..n]);
    let e = three_answers();
    let n = answers::emit(5, 1000, &e, &mut p).unwrap();
    let b = frame_bytes(RecordType::Answers, 9, &p[..n]);
    let unstuff = |f: &[u8]| {
        let mut raw = [0u8; 64];
        let k = cobs::decode(&f[..f.len() - 1], &mut raw).unwrap();
        raw[..k].to_vec()
    };
    let (ra, rb) = (unstuff(&a), unstuff(&b));
    assert_eq!(
        hex(&ra),
        "01 03 05 00 19 00 E8 03 00 00 00 00 00 00 03 00 04 00 0B 00 00 00 00 00 00 00 00 03 \
         A9 02 02 D5 D3 B1 4B"
            .split_whitespace()
            .collect::<Vec<_>>()
            .join(" ")
    );
    assert_eq!(
        hex(&a),
        "04 01 03 05 02 19 03 E8 03 01 01 01 01 01 02 03 02 04 02 0B 01 01 01 01 01 01 01 09 \
         03 A9 02 02 D5 D3 B1 4B 00"
            .split_whitespace()
            .collect::<Vec<_>>()
            .join(" ")
    );
    assert_eq!(
        hex(&rb),
        "01 04 09 00 0F 00 05 00 03 00 E8 03 00 00 00 00 00 00 07 08 01 62 5A 15 7F"
    );
    assert_eq!(
        hex(&b),
        "04 01 04 09 02 0F 02 05 02 03 03 E8 03 01 01 01 01 01 08 07 08 01 62 5A 15 7F 00"
    );
    // The CRC fields checked with the `crc` crate's CRC-32/ISCSI (Cook's catalogue parameters).
    let crc = crc::Crc::<u32>::new(&crc::CRC_32_ISCSI);
    assert_eq!(crc.checksum(&ra[..ra.len() - 4]), 0x4BB1_D3D5);
    assert_eq!(crc.checksum(&rb[..rb.len() - 4]), 0x7F15_5A62);
}

proptest! {
    #[test]
    fn endpoint_takes_any_bytes_and_accounts_for_every_announcement(
        garbage in proptest::collection::vec(proptest::collection::vec(any::<u8>(), 0..300), 0..12),
        valid_after in any::<usize>(),
        n in 1u64..60,
    ) {
        let (mut l, down, up) = link(10_000);
        let slots: Vec<u64> = (0..n).map(|k| 10 + 3 * k).collect();
        for &s in &slots {
            l.announce(ann(s, s.is_multiple_of(2)));
        }
        l.flush();
        let answers = answer_all(&drain(&up), 0, |_| Basis::Z);
        let at = valid_after % (garbage.len() + 1);
        for (i, g) in garbage.iter().enumerate() {
            if i == at {
                down.0.borrow_mut().push_back(0);
                down.0.borrow_mut().extend(&answers);
            }
            down.0.borrow_mut().extend(g);
        }
        if at == garbage.len() {
            down.0.borrow_mut().push_back(0);
            down.0.borrow_mut().extend(&answers);
        }
        let got = poll_all(&mut l);
        let c = *l.counters();
        // Garbage costs nothing but itself: every answer behind a delimiter gets through.
        prop_assert_eq!(got.len() as u64, n);
        prop_assert_eq!(got.len() as u64, c.answers_in);
        let mut seen = std::collections::HashSet::new();
        for a in &got {
            prop_assert!(slots.contains(&a.slot) && seen.insert(a.slot), "slot {}", a.slot);
        }
        prop_assert_eq!(
            c.announcements,
            c.answers_in + c.expired_announcements + l.waiting_announcements()
        );
        l.close();
        let c = *l.counters();
        prop_assert_eq!(c.announcements, c.answers_in + c.expired_announcements);
    }
}

mod auth;
