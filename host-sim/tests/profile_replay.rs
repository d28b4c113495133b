//! Replay with a receiver profile and a transmitter record, no scenario: a simulated capture
//! replays through `profile from-scenario` and its record to exactly the counters of the scenario
//! replay; a profile without a record, a record of another run and an imported capture without a
//! description are refused with the file and the flag to give.

mod common;
use common::{fails, ok, tmp as tmp_in};

use serde_json::Value;
use std::path::{Path, PathBuf};

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn tmp(name: &str) -> PathBuf {
    tmp_in("profile-replay", name)
}

const SCENARIO: &str = "../scenarios/bench-100mhz-30km.toml";

/// A 50 ms simulated capture (long enough for the marker numbering to align), its transmitter record and the profile of its receiver.
fn simulated(d: &Path) -> (PathBuf, PathBuf, PathBuf) {
    let cap = d.join("run.swcap");
    let profile = d.join("receiver.toml");
    ok(&["simulate", SCENARIO, "-o", s(&cap), "--duration-s", "0.05"]);
    ok(&["profile", "from-scenario", SCENARIO, "-o", s(&profile)]);
    (cap, d.join("run.swtx"), profile)
}

fn json(p: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
}

#[test]
fn profile_and_record_replay_to_the_scenario_replays_counters() {
    let d = tmp("roundtrip");
    let (cap, record, profile) = simulated(&d);
    for clock in ["recovered", "reference"] {
        let (a, b) = (
            d.join(format!("p-{clock}.json")),
            d.join(format!("s-{clock}.json")),
        );
        let by_profile = ok(&[
            "replay",
            s(&cap),
            "--profile",
            s(&profile),
            "--tx-record",
            s(&record),
            "--clock",
            clock,
            "--json",
            s(&a),
        ]);
        ok(&["replay", s(&cap), "--clock", clock, "--json", s(&b)]);
        let (a, b) = (json(&a), json(&b));
        assert_eq!(a["accounting"], b["accounting"], "{clock}\n{by_profile}");
        assert_eq!(a["sifted_bits"], b["sifted_bits"], "{clock}");
        assert_eq!(a["qber"], b["qber"], "{clock}");
        assert!(a["sifted_bits"].as_u64().unwrap() > 1000, "{clock}: {a}");
        // No scenario, no truth: the summary leaves it out instead of inventing it.
        assert!(a.get("scenario").is_none_or(Value::is_null), "{a}");
        assert!(b["scenario"].is_string(), "{b}");
    }
}

#[test]
fn a_profile_alone_names_the_record_flag() {
    let d = tmp("norecord");
    let (cap, _, profile) = simulated(&d);
    let err = fails(&["replay", s(&cap), "--profile", s(&profile)]);
    assert!(
        err.contains("receiver.toml") && err.contains("--tx-record"),
        "{err}"
    );
    assert!(err.contains("run.swtx is beside the capture"), "{err}");
}

#[test]
fn a_record_of_another_slot_range_is_refused_with_both_ranges() {
    let d = tmp("otherrange");
    let (cap, _, profile) = simulated(&d);
    let other = d.join("other.swtx.csv");
    std::fs::write(
        &other,
        "# slotwise transmitter record, sparse\n# first_slot = 900000000000\n\
         # slot_count = 1000\nslot,basis,bit,intensity\n900000000001,Z,0,0\n",
    )
    .unwrap();
    let err = fails(&[
        "replay",
        s(&cap),
        "--profile",
        s(&profile),
        "--tx-record",
        s(&other),
        "--clock",
        "reference",
    ]);
    assert!(
        err.contains("other.swtx.csv") && err.contains("900000000000..900000001000"),
        "{err}"
    );
    assert!(err.contains("the run needs slots "), "{err}");
}

#[test]
fn a_profile_at_another_rate_than_the_capture_is_warned_about_with_both_rates() {
    let d = tmp("otherrate");
    let (cap, record, profile) = simulated(&d);
    let text = std::fs::read_to_string(&profile)
        .unwrap()
        .replace("rep_rate_hz = 100000000.0", "rep_rate_hz = 50000000.0");
    let other = d.join("half-rate.toml");
    std::fs::write(&other, text).unwrap();
    let out = common::slotwise(&[
        "replay",
        s(&cap),
        "--profile",
        s(&other),
        "--tx-record",
        s(&record),
    ]);
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("at 100000000 Hz") && err.contains("expects 50000000 Hz"),
        "{err}"
    );
}
