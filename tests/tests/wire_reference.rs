//! The link's frames read back by a transmitter written in Python from `docs/wire-protocol.md`
//! alone, with general-purpose libraries for the framing: the PyPI `cobs` package (Consistent
//! Overhead Byte Stuffing, Cheshire & Baker 1999) to unstuff, `crccheck`'s `Crc32c`
//! (CRC-32/ISCSI of Cook's catalogue) for the check value. The script parses every field by the
//! document's offsets and LEB128 rule; the test compares what it read with what was encoded.
//! A second check recomputes the Wegman-Carter tags of §9 with a POLYVAL written in pure Python
//! from the document (checked there against RFC 8452's Appendix A vector), and the core verifies
//! the tags the Python transmitter makes. A third recomputes the round tags of §9.9 (frame
//! digests, round outcomes, both directions and the failed verdict). Skipped (with a note) when Python or the packages cannot
//! be had.

use serde_json::Value;
use slotwise::formats::announce::{self, FLAG_FINAL};
use slotwise::formats::{answers, encode_frame, RecordType, MAX_FRAME, MAX_PAYLOAD, MAX_RAW};
use slotwise::sift::Announcement;
use slotwise::wire::{AnswerEntry, Report};
use slotwise::Basis;
use std::path::{Path, PathBuf};

const SCRIPT: &str = r#"
import json, struct, sys
from cobs import cobs
from crccheck.crc import Crc32c

def leb128(b, at):
    v, shift = 0, 0
    while True:
        x = b[at]; at += 1
        v |= (x & 0x7F) << shift; shift += 7
        if x & 0x80 == 0:
            return v, at

out = []
for hexframe in json.load(open(sys.argv[1])):
    wire = bytes.fromhex(hexframe)
    assert wire[-1] == 0 and 0 not in wire[:-1]
    raw = cobs.decode(wire[:-1])
    version, rtype, seq, length = struct.unpack_from("<BBHH", raw, 0)
    payload = raw[6:6 + length]
    (crc,) = struct.unpack_from("<I", raw, 6 + length)
    rec = {"version": version, "type": rtype, "seq": seq, "len_ok": len(raw) == 10 + length,
           "crc_ok": Crc32c.calc(raw[:6 + length]) == crc}
    if rtype == 3:
        first, count, rb, amap, flags = struct.unpack_from("<QHHQB", payload, 0)
        at, slots = 21, []
        if count:
            slots.append(first)
        for _ in range(count - 1):
            d, at = leb128(payload, at)
            slots.append(slots[-1] + d)
        bases = [(payload[at + i // 8] >> (i % 8)) & 1 for i in range(count)]
        rec.update(slots=slots, bases=bases, resolved_below=rb, answered_map=str(amap),
                   final=bool(flags & 1), exact=at + (count + 7) // 8 == length)
    elif rtype == 4:
        ann_seq, count, first = struct.unpack_from("<HHQ", payload, 0)
        entries = []
        for b in payload[12:12 + count]:
            entries.append([b & 1, (b >> 1) & 1, (b >> 2) & 1, (b >> 3) & 3])
        rec.update(ann_seq=ann_seq, first_slot=first, entries=entries, exact=12 + count == length)
    out.append(rec)
print(json.dumps(out))
"#;

/// Python with `cobs` and `crccheck` in `<target>/tmp/py-wire`, or why not.
fn python() -> Result<PathBuf, String> {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("py-wire");
    slotwise_tests::python_with(&dir, &["cobs", "crccheck"])
}

fn frame(record: RecordType, seq: u16, payload: &[u8]) -> Vec<u8> {
    let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
    let n = encode_frame(record, seq, payload, &mut raw, &mut out).unwrap();
    out.truncate(n);
    out
}

enum Sent {
    Ann(Vec<Announcement>, Report, u8),
    Ans(u16, u64, Vec<AnswerEntry>),
}

/// Frames of every shape: empty and final reports, batches of 1 to 512 with deltas from 1 to
/// 2^40 (long runs of non-zero bytes: several COBS blocks), answers of every entry kind.
fn frames() -> Vec<(u16, Sent)> {
    let mut x = 0x9E37_79B9_7F4A_7C15u64;
    let mut next = move || {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        x
    };
    let mut out = Vec::new();
    for (k, n) in [0usize, 1, 3, 64, 150, 512].into_iter().enumerate() {
        let mut slot = next() >> 20;
        let e = (0..n)
            .map(|_| {
                // Up to 2^40 (6 LEB128 bytes) in the smaller frames; one byte in the largest.
                slot += 1 + if n <= 150 {
                    next() >> (24 + next() % 40)
                } else {
                    next() % 100
                };
                Announcement {
                    slot,
                    basis: if next() & 1 == 1 { Basis::X } else { Basis::Z },
                }
            })
            .collect();
        let r = Report {
            resolved_below: next() as u16,
            answered_map: next(),
        };
        let flags = if n == 0 { FLAG_FINAL } else { 0 };
        out.push((k as u16, Sent::Ann(e, r, flags)));
    }
    for (k, n) in [1usize, 7, 512].into_iter().enumerate() {
        let e = (0..n)
            .map(|_| {
                let v = next();
                AnswerEntry {
                    basis_match: v & 1 == 1,
                    intensity: ((v >> 1) % 4) as u8,
                    bit: (v & 8 != 0).then_some(((v >> 4) & 1) as u8),
                }
            })
            .collect();
        out.push((100 + k as u16, Sent::Ans(next() as u16, next(), e)));
    }
    out
}

#[test]
fn wire_frames_read_by_a_python_transmitter_from_the_document() {
    let py = match python() {
        Ok(p) => p,
        Err(why) => {
            eprintln!("skipped: {why}");
            return;
        }
    };
    let sent = frames();
    let mut hex = Vec::new();
    for (seq, s) in &sent {
        let mut p = vec![0u8; MAX_PAYLOAD];
        let (t, n) = match s {
            Sent::Ann(e, r, f) => (RecordType::Announce, announce::emit(e, *r, *f, &mut p)),
            Sent::Ans(a, f, e) => (RecordType::Answers, answers::emit(*a, *f, e, &mut p)),
        };
        let f = frame(t, *seq, &p[..n.unwrap()]);
        hex.push(f.iter().map(|b| format!("{b:02x}")).collect::<String>());
    }
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"));
    let input = dir.join("wire_reference_input.json");
    std::fs::write(&input, serde_json::to_string(&hex).unwrap()).unwrap();
    let script = dir.join("wire_reference.py");
    std::fs::write(&script, SCRIPT).unwrap();
    let out = slotwise_tests::run_python(&py, [&script, &input]);
    let got: Vec<Value> = serde_json::from_slice(&out).unwrap();
    assert_eq!(got.len(), sent.len());
    for ((seq, s), g) in sent.iter().zip(&got) {
        assert_eq!(g["version"], 1);
        assert_eq!(g["seq"], *seq);
        assert_eq!(g["crc_ok"], true, "{g}");
        assert_eq!(g["len_ok"], true);
        assert_eq!(
            g["exact"], true,
            "payload length as the document computes it"
        );
        match s {
            Sent::Ann(e, r, f) => {
                assert_eq!(g["type"], 3);
                let slots: Vec<u64> = e.iter().map(|a| a.slot).collect();
                let bases: Vec<u64> = e.iter().map(|a| u64::from(a.basis == Basis::X)).collect();
                assert_eq!(g["slots"], serde_json::json!(slots));
                assert_eq!(g["bases"], serde_json::json!(bases));
                assert_eq!(g["resolved_below"], r.resolved_below);
                assert_eq!(g["answered_map"], r.answered_map.to_string());
                assert_eq!(g["final"], *f == FLAG_FINAL);
            }
            Sent::Ans(a, f, e) => {
                assert_eq!(g["type"], 4);
                assert_eq!(g["ann_seq"], *a);
                assert_eq!(g["first_slot"], *f);
                let want: Vec<[u8; 4]> = e
                    .iter()
                    .map(|x| {
                        [
                            u8::from(x.basis_match),
                            u8::from(x.bit.is_some()),
                            x.bit.unwrap_or(0),
                            x.intensity,
                        ]
                    })
                    .collect();
                assert_eq!(g["entries"], serde_json::json!(want));
            }
        }
    }
}

/// POLYVAL and the Wegman-Carter tag of `docs/wire-protocol.md` §9, in pure Python: GF(2^128)
/// with the polynomial x^128 + x^127 + x^126 + x^121 + 1, elements little-endian (bit i of the
/// 16 bytes read as a little-endian integer is the coefficient of x^i), dot(a, b) = a·b·x^−128
/// (RFC 8452, §3). The transmitter checks each announce frame's tag with pad word 2n, answers it
/// with a tagged answers frame using pad word 2n + 1, and refuses what does not check.
const TAG_SCRIPT: &str = r#"
import json, struct, sys
from cobs import cobs
from crccheck.crc import Crc32c

P = (1 << 128) | (1 << 127) | (1 << 126) | (1 << 121) | 1

def clmul(a, b):
    r = 0
    while b:
        if b & 1:
            r ^= a
        a <<= 1
        b >>= 1
    return r

def reduce(r):
    for i in range(r.bit_length() - 1, 127, -1):
        if r >> i & 1:
            r ^= P << (i - 128)
    return r

def times_x_inverse(a):
    # P = x*Q + 1, so x^-1 = Q: a*x^-1 = a/x when a has no x^0 term, else (a + P)/x.
    return (a ^ P) >> 1 if a & 1 else a >> 1

def dot(a, b):
    r = reduce(clmul(a, b))
    for _ in range(128):
        r = times_x_inverse(r)
    return r

def polyval(h, data):
    hi, s = int.from_bytes(h, "little"), 0
    data = data + bytes(-len(data) % 16)
    for i in range(0, len(data), 16):
        s = dot(s ^ int.from_bytes(data[i:i + 16], "little"), hi)
    return s.to_bytes(16, "little")

# RFC 8452, Appendix A: POLYVAL(H, X_1, X_2).
assert polyval(bytes.fromhex("25629347589242761d31f826ba4b757b"),
               bytes.fromhex("4f4f95668c83dfb6401762bb2d01a262d1a24ddd2721d006bbe45f20d3c9f362")) \
    == bytes.fromhex("f7a3b47b846119fae5b7866cf5e5b77e")

def tag(h, pad, rtype, direction, seq, n, payload):
    block0 = struct.pack("<BBHHHQ", rtype, direction, seq, len(payload), 0, n)
    full = polyval(h, block0 + payload)
    return bytes(a ^ b for a, b in zip(full[:8], pad))

def frame(version, rtype, seq, payload, t):
    raw = struct.pack("<BBHH", version, rtype, seq, len(payload)) + payload + t
    raw += struct.pack("<I", Crc32c.calc(raw))
    return cobs.encode(raw) + b"\0"

args = json.load(open(sys.argv[1]))
h, key = bytes.fromhex(args["hash_key"]), bytes.fromhex(args["key"])
pad = lambda word: key[8 * word:8 * word + 8]
out, highest, next_seq = [], 0, 0
for hexframe in args["frames"]:
    raw = cobs.decode(bytes.fromhex(hexframe)[:-1])
    version, rtype, seq, length = struct.unpack_from("<BBHH", raw, 0)
    payload, got = raw[6:6 + length], raw[6 + length:6 + length + 8]
    crc_ok = Crc32c.calc(raw[:-4]) == struct.unpack_from("<I", raw, len(raw) - 4)[0]
    # Widen seq to the frame number nearest the highest authenticated one (RFC 1982).
    d = (seq - highest) & 0xFFFF
    n = highest + d if d < 0x8000 else max(highest - (0x10000 - d), 0)
    ok = version == 2 and rtype == 3 and crc_ok and got == tag(h, pad(2 * n), 3, 0, seq, n, payload)
    rec = {"tag_ok": ok, "n": n}
    count = struct.unpack_from("<H", payload, 8)[0] if ok else 0
    if ok:
        highest = max(highest, n)
    if count:
        first = struct.unpack_from("<Q", payload, 0)[0]
        answers = struct.pack("<HHQ", seq, count, first) + bytes([1, 0b111, 0b1000][i % 3] for i in range(count))
        t = tag(h, pad(2 * n + 1), 4, 1, next_seq, n, answers)
        rec["answers"] = frame(2, 4, next_seq, answers, t).hex()
        next_seq += 1
    out.append(rec)
print(json.dumps(out))
"#;

#[test]
fn tags_checked_and_made_by_a_python_polyval_from_the_document() {
    use slotwise::formats::tag::{Direction, TagInput};
    use slotwise::formats::{decode_frame, encode_frame_tagged};
    use slotwise::wire::{AuthConfig, LinkAuth};
    let py = match python() {
        Ok(p) => p,
        Err(why) => {
            eprintln!("skipped: {why}");
            return;
        }
    };
    let h: [u8; 16] = core::array::from_fn(|i| (i as u8).wrapping_mul(37) ^ 0xA5);
    let key: Vec<u8> = (0..64 * 8)
        .map(|i| (i as u8).wrapping_mul(101) ^ 0x3C)
        .collect();
    let (mut rx, mut tx_mirror) = (
        LinkAuth::<64>::new(AuthConfig::DEFAULT, h, &key).unwrap(),
        LinkAuth::<64>::new(AuthConfig::DEFAULT, h, &key).unwrap(),
    );
    let mut hex = Vec::new();
    let mut expect = Vec::new();
    let anns: Vec<_> = frames()
        .into_iter()
        .filter_map(|(_, s)| match s {
            Sent::Ann(e, r, f) => Some((e, r, f)),
            Sent::Ans(..) => None,
        })
        .collect();
    for (num, (e, r, f)) in anns.iter().enumerate() {
        let num = num as u64;
        let mut p = vec![0u8; MAX_PAYLOAD];
        let n = announce::emit(e, *r, *f, &mut p).unwrap();
        let m = TagInput {
            dir: Direction::ToTransmitter,
            record: RecordType::Announce,
            seq: num as u16,
            num,
            payload: &p[..n],
        };
        let mut t = rx.seal(&m).unwrap();
        // Frame 2 goes out with one tag bit flipped: the Python side must refuse it.
        if num == 2 {
            t[3] ^= 0x10;
        } else {
            assert_eq!(tx_mirror.verify(&m, Some(&t)), Ok(()));
        }
        let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
        let k = encode_frame_tagged(
            RecordType::Announce,
            num as u16,
            &p[..n],
            &t,
            &mut raw,
            &mut out,
        )
        .unwrap();
        hex.push(
            out[..k]
                .iter()
                .map(|b| format!("{b:02x}"))
                .collect::<String>(),
        );
        expect.push((num != 2, !e.is_empty() && num != 2));
    }
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"));
    let input = dir.join("wire_tags_input.json");
    let to_hex = |b: &[u8]| b.iter().map(|x| format!("{x:02x}")).collect::<String>();
    let args = serde_json::json!({"hash_key": to_hex(&h), "key": to_hex(&key), "frames": hex});
    std::fs::write(&input, args.to_string()).unwrap();
    let script = dir.join("wire_tags.py");
    std::fs::write(&script, TAG_SCRIPT).unwrap();
    let out = slotwise_tests::run_python(&py, [&script, &input]);
    let got: Vec<Value> = serde_json::from_slice(&out).unwrap();
    assert_eq!(got.len(), expect.len());
    let mut answered = 0;
    for (num, (g, (tag_ok, answers))) in got.iter().zip(&expect).enumerate() {
        assert_eq!(g["tag_ok"], *tag_ok, "frame {num}: {g}");
        assert_eq!(g["n"], num as u64);
        assert_eq!(g.get("answers").is_some(), *answers, "frame {num}: {g}");
        let Some(a) = g["answers"].as_str() else {
            continue;
        };
        // The Python transmitter's tag, checked by the core's verifier with pad word 2n + 1.
        let bytes: Vec<u8> = (0..a.len())
            .step_by(2)
            .map(|i| u8::from_str_radix(&a[i..i + 2], 16).unwrap())
            .collect();
        let mut scratch = vec![0u8; MAX_RAW];
        let f = decode_frame(&bytes, &mut scratch).unwrap();
        let m = TagInput {
            dir: Direction::ToReceiver,
            record: f.record,
            seq: f.seq,
            num: num as u64,
            payload: f.payload,
        };
        assert_eq!(
            rx.verify(&m, f.tag.as_ref()),
            Ok(()),
            "answers to frame {num}"
        );
        answered += 1;
    }
    assert_eq!(answered, 4);
    assert_eq!(rx.counters().frames_verified, 4);
}

/// Round tags of `docs/wire-protocol.md` §9.9 in pure Python: the frame digest, the round
/// outcome, the tags both ways and the failed verdict's tag, from the document's block
/// layouts, with the POLYVAL of [`TAG_SCRIPT`] (RFC 8452 vector checked again here).
const ROUND_SCRIPT: &str = r#"
import json, struct, sys

P = (1 << 128) | (1 << 127) | (1 << 126) | (1 << 121) | 1

def clmul(a, b):
    r = 0
    while b:
        if b & 1:
            r ^= a
        a <<= 1
        b >>= 1
    return r

def dot(a, b):
    r = clmul(a, b)
    for i in range(r.bit_length() - 1, 127, -1):
        if r >> i & 1:
            r ^= P << (i - 128)
    for _ in range(128):
        r = (r ^ P) >> 1 if r & 1 else r >> 1
    return r

def polyval(h, data):
    hi, s = int.from_bytes(h, "little"), 0
    data = data + bytes(-len(data) % 16)
    for i in range(0, len(data), 16):
        s = dot(s ^ int.from_bytes(data[i:i + 16], "little"), hi)
    return s.to_bytes(16, "little")

assert polyval(bytes.fromhex("25629347589242761d31f826ba4b757b"),
               bytes.fromhex("4f4f95668c83dfb6401762bb2d01a262d1a24ddd2721d006bbe45f20d3c9f362")) \
    == bytes.fromhex("f7a3b47b846119fae5b7866cf5e5b77e")

def leb128(v):
    out = bytearray()
    while True:
        b = v & 0x7F
        v >>= 7
        out.append(b | (0x80 if v else 0))
        if not v:
            return bytes(out)

def digest(h, first_slot, anns):
    data = struct.pack("<H6xQ", len(anns), first_slot)
    prev = first_slot
    for slot, basis_x, entry in anns:
        data += leb128(slot - prev) + bytes([entry & 0x7F | basis_x << 7])
        prev = slot
    return polyval(h, data)

def round_hash(hr, rnd, f, frames, direction, verdict):
    data = struct.pack("<QIB3x", rnd, f, 0x52)
    for fr in frames:
        data += struct.pack("<QB7x", fr["num"], fr["fate"])
        if fr["fate"] == 1:
            data += fr["digest"]
    data += struct.pack("<BB6xQ", direction, verdict, len(frames))
    return polyval(hr, data)

args = json.load(open(sys.argv[1]))
h, hr, key = (bytes.fromhex(args[k]) for k in ("h", "hr", "key"))
f = args["f"]
pad = lambda word: key[8 * word:8 * word + 8]
xor = lambda a, b: bytes(x ^ y for x, y in zip(a, b))
out = []
for rnd in args["rounds"]:
    r = rnd["round"]
    frames = []
    for fr in rnd["frames"]:
        if fr["fate"] == 1:
            fr["digest"] = digest(h, fr["anns"][0][0], fr["anns"])
        frames.append(fr)
    tx = xor(round_hash(hr, r, f, frames, 1, 0)[:8], pad(2 + 2 * r + 1))
    rx = xor(round_hash(hr, r, f, frames, 0, 1)[:8], pad(2 + 2 * r))
    failed = xor(round_hash(hr, r, f, [], 0, 2)[:8], pad(2 + 2 * r))
    out.append({"tx": tx.hex(), "rx": rx.hex(), "failed": failed.hex()})
print(json.dumps(out))
"#;

#[test]
fn round_tags_recomputed_by_a_python_polyval_from_the_document() {
    use slotwise::formats::round::{
        failed_hash, pad_hash, round_pad_word, Fate, FrameDigest, RoundHash, Verdict,
    };
    use slotwise::formats::tag::Direction;
    let py = match python() {
        Ok(p) => p,
        Err(why) => {
            eprintln!("skipped: {why}");
            return;
        }
    };
    let h: [u8; 16] = core::array::from_fn(|i| (i as u8).wrapping_mul(53) ^ 0x5A);
    let hr: [u8; 16] = core::array::from_fn(|i| (i as u8).wrapping_mul(29) ^ 0xC3);
    let key: Vec<u8> = (0..64 * 8)
        .map(|i| (i as u8).wrapping_mul(97) ^ 0x17)
        .collect();
    let pad = |w: u64| -> [u8; 8] { core::array::from_fn(|i| key[w as usize * 8 + i]) };
    let f = 4u32;
    let hex = |b: &[u8]| b.iter().map(|x| format!("{x:02x}")).collect::<String>();
    let mut rounds = Vec::new();
    let mut want = Vec::new();
    for r in 0..3u64 {
        let mut t = RoundHash::new(&hr, r, f);
        let mut frames = Vec::new();
        for k in 0..u64::from(f) {
            let num = r * u64::from(f) + k;
            if (num + r) % 3 == 2 {
                t.add(num, Fate::Expired, None);
                frames.push(serde_json::json!({"num": num, "fate": 2}));
                continue;
            }
            // Slot gaps from 1 to past the one-byte LEB128 range, both bases, varied entries.
            let anns: Vec<(u64, bool, u8)> = (0..(5 + num * 7) % 40 + 1)
                .scan(1_000 + num * 100_000, |s, i| {
                    *s += 1 + (i * i * 37 + num) % 300;
                    Some((*s, (i + num) % 2 == 1, ((i * 5 + num) % 32) as u8))
                })
                .collect();
            let mut d = FrameDigest::new(&h, anns.len() as u16, anns[0].0);
            for &(s, x, e) in &anns {
                d.add(s, x, e);
            }
            t.add(num, Fate::Answered, Some(&d.finish()));
            frames.push(serde_json::json!({"num": num, "fate": 1, "anns": anns}));
        }
        let tx = pad_hash(
            &t.hash_for(Direction::ToReceiver, Verdict::Open),
            &pad(round_pad_word(r, Direction::ToReceiver)),
        );
        let rx = pad_hash(
            &t.hash_for(Direction::ToTransmitter, Verdict::Verified),
            &pad(round_pad_word(r, Direction::ToTransmitter)),
        );
        let failed = pad_hash(
            &failed_hash(&hr, r, f),
            &pad(round_pad_word(r, Direction::ToTransmitter)),
        );
        want.push(serde_json::json!({"tx": hex(&tx), "rx": hex(&rx), "failed": hex(&failed)}));
        rounds.push(serde_json::json!({"round": r, "frames": frames}));
    }
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"));
    let input = dir.join("round_tags_input.json");
    let args = serde_json::json!({"h": hex(&h), "hr": hex(&hr), "key": hex(&key), "f": f,
        "rounds": rounds});
    std::fs::write(&input, args.to_string()).unwrap();
    let script = dir.join("round_tags.py");
    std::fs::write(&script, ROUND_SCRIPT).unwrap();
    let out = slotwise_tests::run_python(&py, [&script, &input]);
    let got: Vec<Value> = serde_json::from_slice(&out).unwrap();
    assert_eq!(got, want);
}
