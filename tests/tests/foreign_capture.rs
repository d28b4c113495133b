//! Replay of a capture from hardware the simulator cannot produce, against an independent model.
//!
//! `tests/python/foreign_capture.py` (numpy only, written from the documents alone, no project
//! code) plays an invented 250 MHz BB84 transmitter with the public marker of docs/marker.md §1
//! and an invented four-detector receiver (TDC inputs 1, 2, 5, 7, cable skews, 50 ps jitter, a
//! passive basis splitter, 2 % misalignment, dark counts uniform in time, a transmitter clock
//! 3 ppm fast). It writes a text export and two 32-bit binary exports with rollover words
//! (docs/capture-format.md §10), the receiver profile (docs/receiver-profile.md), sparse
//! transmitter records with hellos on each import's time base (docs/transmitter-record.md §4,
//! docs/capture-format.md §1) and its own truth. This test imports every export with
//! `slotwise import`, replays it with `slotwise replay --profile --tx-record --trace`, and
//! checks the replay against the script's truth. Without python, venv, pip or network it prints
//! "skipped: <reason>" and passes.

use clap::Parser;
use serde_json::Value;
use slotwise_sim::cli::{run, Cli};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// Slots the script simulates: 0.2 s at 250 MHz, about 170 000 detections. Alignment by the
/// marker needs about 25 000 to 42 000 gated detections (docs/marker.md §6), so most of the run
/// is numbered.
const SLOTS: &str = "50000000";

/// Run the `slotwise` command line in-process with `args`.
fn slotwise(args: &[&str]) {
    let cli = Cli::try_parse_from(std::iter::once("slotwise").chain(args.iter().copied()))
        .unwrap_or_else(|e| panic!("slotwise {}: {e}", args.join(" ")));
    if let Err(e) = run(cli) {
        panic!("slotwise {}: {e}", args.join(" "));
    }
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// The script's truth for one time base: (t_ps, channel) → true slot (None for noise); times
/// shared by two detections on one channel are left out.
fn truth_map(truth: &Value, times: &str) -> HashMap<(u64, u8), Option<u64>> {
    let t = truth[times].as_array().unwrap();
    let ch = truth["channel"].as_array().unwrap();
    let slot = truth["true_slot"].as_array().unwrap();
    let mut map = HashMap::new();
    let mut shared = Vec::new();
    for ((t, c), k) in t.iter().zip(ch).zip(slot) {
        let key = (t.as_u64().unwrap(), c.as_u64().unwrap() as u8);
        if map.insert(key, k.as_u64()).is_some() {
            shared.push(key);
        }
    }
    for key in shared {
        map.remove(&key);
    }
    map
}

/// What the trace's `sifted` lines say against the truth.
#[derive(Debug, Default)]
struct Sifted {
    /// Detections with a true slot, sifted in it.
    right: u64,
    /// Detections with a true slot, sifted in another.
    wrong: u64,
    /// Noise detections sifted (in whatever slot their time falls).
    noise: u64,
}

/// Compare every `sifted` line of `trace` (columns
/// `t_ps,channel,slot,phase,gate,basis,bit,decision,outcome`) with the truth.
fn check_trace(trace: &Path, truth: &HashMap<(u64, u8), Option<u64>>) -> Sifted {
    let text = std::fs::read_to_string(trace).unwrap();
    let mut lines = text.lines();
    assert_eq!(
        lines.next(),
        Some("t_ps,channel,slot,phase,gate,basis,bit,decision,outcome")
    );
    let mut out = Sifted::default();
    for line in lines {
        let f: Vec<&str> = line.split(',').collect();
        if f.get(8) != Some(&"sifted") {
            continue;
        }
        let key = (f[0].parse::<u64>().unwrap(), f[1].parse::<u8>().unwrap());
        let slot: u64 = f[2].parse().unwrap();
        match truth.get(&key) {
            Some(Some(k)) if *k == slot => out.right += 1,
            Some(Some(_)) => out.wrong += 1,
            Some(None) => out.noise += 1,
            None => {}
        }
    }
    out
}

/// One import and replay: the export, how to import it, its record and its time base.
struct Case<'a> {
    name: &'a str,
    how: &'a str,
    export: &'a str,
    record: &'a str,
    /// Key of the truth's detection times and run end on this export's time base.
    times: &'a str,
    end: &'a str,
}

/// Import the case's export, replay it against its record; returns the summary and the trace's
/// sifted lines against the truth.
fn import_and_replay(dir: &Path, truth: &Value, c: &Case) -> (Value, Sifted) {
    let capture = dir.join(format!("{}.swcap", c.name));
    let export = dir.join(c.export);
    let mut args = vec!["import", c.how, s(&export), "-o", s(&capture)];
    let options = truth["import"][c.how].as_array().unwrap();
    args.extend(options.iter().map(|v| v.as_str().unwrap()));
    slotwise(&args);
    let json = dir.join(format!("{}.json", c.name));
    let trace = dir.join(format!("{}-trace.csv", c.name));
    let run_end_ps = truth["run_end_ps"][c.end].as_u64().unwrap();
    let to_s = format!("{}", run_end_ps as f64 * 1e-12 + 1e-3);
    slotwise(&[
        "replay",
        s(&capture),
        "--profile",
        s(&dir.join("receiver.toml")),
        "--tx-record",
        s(&dir.join(c.record)),
        "--json",
        s(&json),
        "--trace",
        s(&trace),
        "--trace-from-s",
        "0",
        "--trace-to-s",
        &to_s,
    ]);
    let summary: Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    (summary, check_trace(&trace, &truth_map(truth, c.times)))
}

fn numpy_python() -> Result<PathBuf, String> {
    slotwise_tests::python_with(
        &Path::new(env!("CARGO_TARGET_TMPDIR")).join("py-numpy"),
        &["numpy"],
    )
}

/// |observed − expected| ≤ 4 binomial sigmas of `n` trials at the expected rate.
fn within_4_sigma(what: &str, observed: u64, n: u64, p: f64) {
    let sigma = (p * (1.0 - p) / n as f64).sqrt();
    let q = observed as f64 / n as f64;
    assert!(
        (q - p).abs() <= 4.0 * sigma,
        "{what}: {q:.5} ({observed} of {n}) against the model's {p:.5} ± 4 × {sigma:.5}"
    );
}

#[test]
fn foreign_capture_replays_onto_the_transmitters_slots() {
    let py = match numpy_python() {
        Ok(p) => p,
        Err(why) => {
            eprintln!("skipped: {why}");
            return;
        }
    };
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("foreign-capture");
    let _ = std::fs::remove_dir_all(&dir);
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("python/foreign_capture.py");
    slotwise_tests::run_python(
        &py,
        [s(&script), s(&dir), "--seed", "20261205", "--slots", SLOTS],
    );
    let truth: Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("truth.json")).unwrap()).unwrap();
    let case = |name, how, export, record, times, end| Case {
        name,
        how,
        export,
        record,
        times,
        end,
    };
    let whole = |name, how, export| case(name, how, export, "record.swtx.csv", "t_ps", "whole");
    let (text, text_sifted) = import_and_replay(&dir, &truth, &whole("text", "text", "export.txt"));
    let (binary, binary_sifted) =
        import_and_replay(&dir, &truth, &whole("binary", "binary", "export.bin"));
    // The binary file cut to start at the first detection: its time base starts at the first
    // event's narrow counter value (docs/capture-format.md §1), and so does its record's hello.
    let cut = case(
        "cut",
        "binary",
        "export-cut.bin",
        "record-cut.swtx.csv",
        "t_cut_ps",
        "cut",
    );
    let (shifted, shifted_sifted) = import_and_replay(&dir, &truth, &cut);
    eprintln!("text: {text_sifted:?}; binary: {binary_sifted:?}; cut binary: {shifted_sifted:?}");

    // Both exports of one time base carry the same detections: the core sees the same events.
    assert_eq!(text["accounting"], binary["accounting"]);
    assert_eq!(text["sifted_bits"], binary["sifted_bits"]);
    assert_eq!(text["qber"], binary["qber"]);
    assert_eq!(text_sifted.right, binary_sifted.right);

    let expected_qber = truth["expected_qber_signal"].as_f64().unwrap();
    let noise_share = truth["expected_noise_share_sifted"].as_f64().unwrap();
    for (name, summary, sifted) in [
        ("text", &text, &text_sifted),
        ("cut binary", &shifted, &shifted_sifted),
    ] {
        // The marker numbering aligned (docs/marker.md §4) with the hello of the record.
        assert_eq!(summary["lock"]["numbering"], "aligned", "{name}");
        // Every sifted detection with a true slot is numbered as the transmitter numbered it.
        assert_eq!(
            sifted.wrong, 0,
            "{name}: sifted in a slot other than the true one"
        );
        assert!(
            sifted.right >= 50_000,
            "{name}: only {} sifted detections with a true slot",
            sifted.right
        );
        // Noise lands in the gates in proportion to their width and is sifted when the basis
        // matches the one sent: its share of the sifted lines is the model's, within 4 binomial
        // sigmas (normal approximation, common practice).
        let all = sifted.right + sifted.noise;
        within_4_sigma(
            &format!("{name}: noise share of sifted"),
            sifted.noise,
            all,
            noise_share,
        );
        // The trace and the accounting agree: a detection of a multi-click slot is `multi_click`
        // in both, so the sifted lines are exactly the sifted detections.
        let acc = |k: &str| summary["accounting"][k].as_u64().unwrap();
        assert_eq!(
            acc("sifted"),
            all + sifted.wrong,
            "{name}: {all} sifted lines against the accounting {}",
            summary["accounting"]
        );
        // QBER of sifted signal-class detections per basis against the script's model:
        // misalignment plus half of the noise share (common practice), within 4 binomial sigmas.
        for basis in ["z", "x"] {
            let f = &summary["qber"]["per_intensity"][0][basis];
            within_4_sigma(
                &format!("{name}: QBER {basis} of the signal class"),
                f["errors"].as_u64().unwrap(),
                f["tested"].as_u64().unwrap(),
                expected_qber,
            );
        }
    }
}

/// The committed example replays with the commands of its README: the marker numbering aligns
/// and bits are sifted (examples/foreign-capture/README.md).
#[test]
fn the_foreign_capture_example_replays_as_its_readme_says() {
    let example = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/foreign-capture");
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("foreign-capture-example");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    let capture = dir.join("run.swcap");
    let json = dir.join("summary.json");
    slotwise(&[
        "import",
        "binary",
        s(&example.join("export.bin")),
        "-o",
        s(&capture),
        "--record-bytes",
        "4",
        "--endian",
        "little",
        "--time",
        "0:22",
        "--channel",
        "22:3",
        "--kind",
        "30:2",
        "--event-kind",
        "1",
        "--rollover-kind",
        "2",
        "--rollover-count",
        "25:5",
        "--max-channel",
        "3",
        "--tick-ps",
        "4",
    ]);
    slotwise(&["profile", "check", s(&example.join("receiver.toml"))]);
    slotwise(&[
        "replay",
        s(&capture),
        "--profile",
        s(&example.join("receiver.toml")),
        "--tx-record",
        s(&example.join("record.swtx.csv")),
        "--json",
        s(&json),
    ]);
    let summary: Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(summary["lock"]["numbering"], "aligned");
    assert!(summary["sifted_bits"].as_u64().unwrap() > 1000);
}
