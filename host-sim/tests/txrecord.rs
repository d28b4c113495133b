//! The transmitter record end to end: `simulate` writes it, `inspect` reads it, every seeded
//! choice reads back equal, and a receiver answered from a record that lacks slots counts those
//! detections unanswered instead of sifting invented answers.

mod common;

use common::{fails, ok};
use slotwise::{Fate, KeySink, SiftedBit};
use slotwise_sim::clocks::{self, ClockMode};
use slotwise_sim::replay::HOST_PENDING;
use slotwise_sim::scenario::Scenario;
use slotwise_sim::setup::{receiver_setup, ClockArgs};
use slotwise_sim::sim::{SimTransmitter, Simulator, TxChoices, TxSource};
use slotwise_sim::txrecord::{DenseWriter, TxRecord, TxRecordHeader};
use std::collections::BTreeSet;
use std::io::BufWriter;
use std::path::PathBuf;
use std::rc::Rc;

const BENCH: &str = "../scenarios/bench-100mhz-30km.toml";

fn tmp(name: &str) -> PathBuf {
    common::tmp("txrecord", name)
}

fn scenario(path: &str, duration_s: f64) -> Scenario {
    let mut s = Scenario::load(concat!(env!("CARGO_MANIFEST_DIR"), "/").to_owned() + path).unwrap();
    s.duration_s = duration_s;
    s
}

#[test]
fn simulate_writes_the_dense_record_and_every_seeded_choice_reads_back() {
    let dir = tmp("dense");
    let cap = dir.join("run.swc");
    let out = ok(&[
        "simulate",
        BENCH,
        "-o",
        cap.to_str().unwrap(),
        "--duration-s",
        "0.003",
    ]);
    let rec_path = dir.join("run.swtx");
    assert!(
        out.contains(&format!(
            "{}: transmitter record, dense",
            rec_path.display()
        )),
        "{out}"
    );
    let s = scenario(BENCH, 0.003);
    let r = TxRecord::load(&rec_path).unwrap();
    assert_eq!(r.range(), 0..s.slots() + 4096);
    assert_eq!(r.hello(), Some(clocks::simulated_hint(&s).unwrap()));
    assert!(r.header().marker());
    let seeded = TxChoices::new(&s);
    for k in r.range() {
        assert_eq!(r.choice(k), Some(seeded.choice(k)), "slot {k}");
    }
    assert_eq!(r.choice(r.range().end), None);
    assert_eq!(r.count_sent(0..s.slots()), seeded.count_sent(0..s.slots()));
    assert!(r.check_range(0..s.slots()).is_ok());

    let report = ok(&["inspect", rec_path.to_str().unwrap()]);
    assert!(report.contains("verdict              good"), "{report}");
    let json = ok(&["inspect", rec_path.to_str().unwrap(), "--json"]);
    let v: serde_json::Value = serde_json::from_str(&json).unwrap();
    assert_eq!(v["verdict"], "good");
    assert_eq!(v["recorded"], r.slot_count());

    // Cut short: inspect reports it and exits non-zero; loading names the place.
    let bytes = std::fs::read(&rec_path).unwrap();
    let cut = dir.join("cut.swtx");
    std::fs::write(&cut, &bytes[..bytes.len() - 40]).unwrap();
    let err = fails(&["inspect", cut.to_str().unwrap()]);
    assert!(err.contains("incomplete"), "{err}");
    let e = TxRecord::load(&cut).unwrap_err();
    assert_eq!(e.offset(), Some(bytes.len() as u64 - 40), "{e}");
    // A damaged block: listed, non-zero exit.
    let mut bad = bytes.clone();
    bad[200] ^= 0xFF;
    let damaged = dir.join("damaged.swtx");
    std::fs::write(&damaged, &bad).unwrap();
    let err = fails(&["inspect", damaged.to_str().unwrap()]);
    assert!(err.contains("damaged: 1 damaged blocks"), "{err}");
}

#[test]
fn record_path_flags() {
    let dir = tmp("flags");
    let cap = dir.join("a.swc");
    let c = cap.to_str().unwrap();
    ok(&[
        "simulate",
        BENCH,
        "-o",
        c,
        "--duration-s",
        "0.0005",
        "--no-tx-record",
    ]);
    assert!(!dir.join("a.swtx").exists());
    let elsewhere = dir.join("tx.bin");
    let out = ok(&[
        "simulate",
        BENCH,
        "-o",
        c,
        "--duration-s",
        "0.0005",
        "--tx-record",
        elsewhere.to_str().unwrap(),
    ]);
    assert!(out.contains("tx.bin: transmitter record, dense"), "{out}");
    assert!(TxRecord::load(&elsewhere).is_ok());
    assert!(!dir.join("a.swtx").exists());
}

#[test]
fn simulate_writes_the_sparse_record_when_the_dense_one_is_too_large() {
    let dir = tmp("sparse");
    let cap = dir.join("run.swc");
    let scen = "../scenarios/sparse-100mhz-1e-6-per-slot.toml";
    let out = ok(&[
        "simulate",
        scen,
        "-o",
        cap.to_str().unwrap(),
        "--duration-s",
        "2",
    ]);
    let path = dir.join("run.swtx.csv");
    assert!(out.contains("transmitter record, sparse"), "{out}");
    let s = scenario(scen, 2.0);
    let r = TxRecord::load(&path).unwrap();
    assert!(r.is_sparse());
    assert_eq!(r.range(), 0..s.slots() + 4096);
    let seeded = TxChoices::new(&s);
    let mut held = 0;
    for (k, c) in r.iter() {
        assert_eq!(c, seeded.choice(k), "slot {k}");
        held += 1;
    }
    // Every signal detection's slot and its neighbours are held; nothing else is.
    let mut want = BTreeSet::new();
    for e in Simulator::new(&s) {
        if let Some(k) = e.truth.slot {
            want.extend([k.saturating_sub(1), k, k + 1]);
        }
    }
    assert!(!want.is_empty());
    assert!(want.iter().all(|&k| r.choice(k).is_some()));
    assert!(
        held >= want.len() && held <= 3 * out_detections(&out),
        "{held}"
    );
    assert_eq!(r.choice(*want.last().unwrap() + 2), None);
    let report = ok(&["inspect", path.to_str().unwrap()]);
    assert!(
        report.contains("(sparse,") && report.contains("verdict"),
        "{report}"
    );
}

fn out_detections(out: &str) -> usize {
    let after = out.split("run.swc: ").nth(1).unwrap();
    after.split_whitespace().next().unwrap().parse().unwrap()
}

#[derive(Default)]
struct Bits(Vec<SiftedBit>);

impl KeySink for Bits {
    fn sifted(&mut self, bit: SiftedBit) {
        self.0.push(bit);
    }
}

/// Push the scenario through the receiver (reference clock: the transmitter's numbering) with
/// `tx`; returns the in-flight detections per slot, unanswered count, sifted slots, and whether
/// every detection ended in exactly one counter.
fn run(s: &Scenario, mut tx: SimTransmitter) -> (Vec<u64>, u64, Vec<u64>, bool) {
    let args = ClockArgs {
        clock: ClockMode::Reference,
        prior_ppm: Some(500),
    };
    let (cfg, stages) = receiver_setup(s, &args).unwrap();
    let mut rx = stages.receiver::<HOST_PENDING>(cfg);
    let mut bits = Bits::default();
    let mut in_flight = Vec::new();
    for e in Simulator::new(s) {
        let t = rx.push(e.event, &mut tx, &mut bits);
        if t.fate == Fate::InFlight {
            in_flight.push(t.slot.unwrap().0);
        }
    }
    rx.finish(&mut tx, &mut bits);
    let acc = rx.accounting();
    let whole = acc.total() == rx.detections_in() && acc[Fate::InFlight] == 0;
    let sifted = bits.0.iter().map(|b| b.slot).collect();
    (in_flight, acc[Fate::Unanswered], sifted, whole)
}

#[test]
fn detections_in_slots_the_record_lacks_end_unanswered() {
    let s = scenario(BENCH, 0.01);
    let seeded = TxChoices::new(&s);
    let lacks = |k: u64| k % 7 == 3;
    let path = tmp("rx").join("holes.swtx");
    let header =
        TxRecordHeader::new(0..s.slots() + 4096, s.intensities.len() as u8).with_marker(s.marker);
    let file = BufWriter::new(std::fs::File::create(&path).unwrap());
    let mut w = DenseWriter::new(file, header).unwrap();
    for k in 0..s.slots() + 4096 {
        w.push((!lacks(k)).then(|| seeded.choice(k))).unwrap();
    }
    w.finish().unwrap();
    let record = Rc::new(TxRecord::load(&path).unwrap());

    let (flight0, unanswered0, sifted0, whole0) = run(&s, SimTransmitter::new(&s));
    let tx = SimTransmitter::with_source(TxSource::Record(record));
    let (flight1, unanswered1, sifted1, whole1) = run(&s, tx);
    assert!(
        whole0 && whole1,
        "every detection ends in exactly one counter"
    );
    assert_eq!(
        flight0, flight1,
        "the receiver's side does not depend on the answers"
    );
    assert_eq!(unanswered0, 0);
    // A slot with two detections is one multi-click event, its detections counted multi_click;
    // every detection alone in a slot the record lacks is counted unanswered.
    let mut per_slot = std::collections::BTreeMap::<u64, u64>::new();
    for &k in flight1.iter().filter(|&&k| lacks(k)) {
        *per_slot.entry(k).or_default() += 1;
    }
    let expected = per_slot.values().filter(|&&n| n == 1).count() as u64;
    assert!(expected > 0);
    assert_eq!(unanswered1, expected);
    // The rest is sifted exactly as with every answer known; nothing is sifted in a hole.
    let mut want: Vec<u64> = sifted0.into_iter().filter(|&k| !lacks(k)).collect();
    let mut got = sifted1;
    want.sort_unstable();
    got.sort_unstable();
    assert_eq!(got, want);
}
