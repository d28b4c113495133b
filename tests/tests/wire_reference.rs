//! The link's frames read back by a transmitter written in Python from `docs/wire-protocol.md`
//! alone, with general-purpose libraries for the framing: the PyPI `cobs` package (Consistent
//! Overhead Byte Stuffing, Cheshire & Baker 1999) to unstuff, `crccheck`'s `Crc32c`
//! (CRC-32/ISCSI of Cook's catalogue) for the check value. The script parses every field by the
//! document's offsets and LEB128 rule; the test compares what it read with what was encoded.
//! Skipped (with a note) when Python or the packages cannot be had.

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
