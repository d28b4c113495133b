//! The `slotwise` binary end to end: demo, simulate, inspect, replay (with trace, plots, JSON),
//! CSV round trip, and the errors a user sees for bad input.

mod common;
use common::{fails, ok, slotwise, tmp as tmp_in};
use std::process::Command;

use std::path::Path;

fn json(path: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn accounting_sums(v: &serde_json::Value) {
    let total: u64 = v["accounting"]
        .as_object()
        .unwrap()
        .values()
        .map(|x| x.as_u64().unwrap())
        .sum();
    assert_eq!(total, v["detections_in"].as_u64().unwrap());
}

#[test]
fn demo_writes_summary_capture_and_plots() {
    let out = tmp("demo");
    let o = out.to_str().unwrap();
    let text = ok(&["demo", "--out", o, "--duration-s", "0.1"]);
    assert!(text.contains("QBER Z"), "{text}");
    assert!(text.contains("capture replay identical"), "{text}");
    let v = json(&out.join("summary.json"));
    accounting_sums(&v);
    assert!(v["sifted_bits"].as_u64().unwrap() > 1000);
    assert_eq!(v["truth"]["misassigned_sifted"].as_u64(), Some(0));
    assert!(v["period_ps"]["truth"].as_f64().is_some());
    // The clock was recovered from the data and the numbering aligned on the marker.
    assert_eq!(v["lock"]["acquired"].as_bool(), Some(true));
    assert!(v["accounting"]["marker"].as_u64().unwrap() > 0);
    assert!(out.join("fold.svg").exists() && out.join("qber_rate.svg").exists());
    assert!(out.join("live_stats.svg").exists());
    assert!(text.contains("live statistics"), "{text}");

    // The demo's capture replays over the framed link with plots: the summary has the `stats`
    // and `link` objects and the live-statistics picture is drawn.
    let cap = out.join("demo.swcap");
    let plots = out.join("replay-plots");
    let sj = out.join("replay.json");
    ok(&[
        "replay",
        cap.to_str().unwrap(),
        "--link",
        "framed",
        "--plots",
        plots.to_str().unwrap(),
        "--json",
        sj.to_str().unwrap(),
    ]);
    let r = json(&sj);
    accounting_sums(&r);
    assert!(
        r["stats"]["qber"].as_array().is_some_and(|q| !q.is_empty()),
        "{r}"
    );
    assert!(r["stats"]["monitor_ram_bytes"].as_u64().unwrap() > 0, "{r}");
    assert!(r["link"].is_object(), "{r}");
    assert!(plots.join("live_stats.svg").exists());

    // Readers that close the pipe early: no panic, a clean exit.
    for args in [
        vec!["inspect", cap.to_str().unwrap()],
        vec!["inspect", cap.to_str().unwrap(), "--json"],
        vec!["inspect", out.join("sifted.swkey").to_str().unwrap()],
    ] {
        closed_stdout(&args);
    }
}

/// Run slotwise with its standard output a pipe whose reading end is already closed, so every
/// write fails with EPIPE (what `| head` does once it has its lines), deterministically.
fn closed_stdout(args: &[&str]) {
    let (reader, writer) = std::io::pipe().unwrap();
    drop(reader);
    let out = Command::new(env!("CARGO_BIN_EXE_slotwise"))
        .args(args)
        .current_dir(env!("CARGO_MANIFEST_DIR"))
        .stdout(writer)
        .stderr(std::process::Stdio::piped())
        .output()
        .expect("run slotwise");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        !err.contains("panicked") && !err.contains("Broken pipe"),
        "{args:?}: {err}"
    );
    assert!(out.status.success(), "{args:?}: {:?} {err}", out.status);
}

#[test]
fn simulate_inspect_replay_trace_and_csv() {
    let dir = tmp("flow");
    let cap = dir.join("run.swcap");
    let scen = "../scenarios/efficient-bb84-1ghz-10km.toml";
    ok(&[
        "simulate",
        scen,
        "-o",
        cap.to_str().unwrap(),
        "--duration-s",
        "0.002",
    ]);
    let inspect = ok(&["inspect", cap.to_str().unwrap(), "--json"]);
    let iv: serde_json::Value = serde_json::from_str(&inspect).unwrap();
    assert!(iv.is_object());

    let sj = dir.join("s.json");
    let trace = dir.join("trace.csv");
    ok(&[
        "replay",
        cap.to_str().unwrap(),
        "--json",
        sj.to_str().unwrap(),
        "--trace",
        trace.to_str().unwrap(),
        "--trace-from-s",
        "0",
        "--trace-to-s",
        "1",
        "--plots",
        dir.join("plots").to_str().unwrap(),
        "--clock",
        "reference",
    ]);
    let v = json(&sj);
    accounting_sums(&v);
    // One trace line per detection in range (all of them here), plus the header.
    let lines = std::fs::read_to_string(&trace).unwrap();
    let n = lines.lines().count() as u64 - 1;
    assert_eq!(n, v["detections_in"].as_u64().unwrap());
    assert!(lines.starts_with("t_ps,channel,slot,phase,gate,basis,bit,decision,outcome"));
    assert!(lines.contains(",in_flight,sifted"));

    // CSV export then replay of the CSV gives the same counters.
    let csv = dir.join("run.csv");
    ok(&[
        "simulate",
        scen,
        "-o",
        csv.to_str().unwrap(),
        "--csv",
        "--duration-s",
        "0.002",
    ]);
    let cj = dir.join("c.json");
    ok(&[
        "replay",
        csv.to_str().unwrap(),
        "--scenario",
        scen,
        "--json",
        cj.to_str().unwrap(),
        "--clock",
        "reference",
    ]);
    let c = json(&cj);
    assert_eq!(c["detections_in"], v["detections_in"]);
    assert_eq!(c["sifted_bits"], v["sifted_bits"]);
}

#[test]
fn bad_inputs_name_the_file_and_the_problem() {
    let dir = tmp("bad");
    let junk = dir.join("junk.swcap");
    std::fs::write(&junk, b"not a capture at all").unwrap();
    let out = slotwise(&["inspect", junk.to_str().unwrap()]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("junk.swcap") && err.contains("magic"), "{err}");

    let bad = dir.join("bad.toml");
    std::fs::write(&bad, "seed = 1\n").unwrap();
    let out = slotwise(&["simulate", bad.to_str().unwrap(), "-o", "/dev/null"]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("bad.toml"), "{err}");

    let help = ok(&["replay", "--help"]);
    assert!(help.contains("--skip-damaged") && help.contains("--trace"));
    assert!(
        help.contains("--qber-ceiling") && help.contains("[alarms]"),
        "{help}"
    );

    // An alarm override out of range is refused before anything runs, naming its key.
    let out = slotwise(&[
        "demo",
        "--qber-ceiling",
        "60",
        "--out",
        dir.to_str().unwrap(),
    ]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("alarms.qber_ceiling_pct") && err.contains("(0,50]"),
        "{err}"
    );
}

/// Run `slotwise inspect FILE --json`: exit success, the JSON report, and standard error.
fn inspect_json(file: &Path) -> (bool, serde_json::Value, String) {
    let out = slotwise(&["inspect", file.to_str().unwrap(), "--json"]);
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    let v = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}: {err}"));
    (out.status.success(), v, err)
}

#[test]
fn inspect_exit_status_tells_good_from_damaged_and_cut_short() {
    let dir = tmp("verdict");
    let cap = dir.join("good.swcap");
    let scen = "../scenarios/efficient-bb84-1ghz-10km.toml";
    let c = cap.to_str().unwrap();
    ok(&["simulate", scen, "-o", c, "--duration-s", "0.002"]);
    let (good, v, _) = inspect_json(&cap);
    assert!(good);
    assert_eq!(v["verdict"], "good");
    assert!(ok(&["inspect", c]).contains("verdict              good"));
    let bytes = std::fs::read(&cap).unwrap();
    let first_block = v["header_bytes"].as_u64().unwrap();
    assert!(v["good_blocks"].as_u64().unwrap() > 1, "{v}");

    // One flipped byte in block 0's payload (its 28-byte head comes first, docs/capture-format.md
    // §4): the full report still comes out, names block 0 at its offset, and the exit fails.
    let flipped = dir.join("flipped.swcap");
    let mut b = bytes.clone();
    b[first_block as usize + 40] ^= 0x10;
    std::fs::write(&flipped, &b).unwrap();
    let (good, v, err) = inspect_json(&flipped);
    assert!(!good, "{err}");
    assert_eq!(v["verdict"], "damaged");
    assert_eq!(v["damage"][0]["index"], 0);
    assert_eq!(v["damage"][0]["offset"], first_block);
    assert!(
        err.contains("flipped.swcap") && err.contains("damaged"),
        "{err}"
    );
    let out = slotwise(&["inspect", flipped.to_str().unwrap()]);
    assert!(!out.status.success());
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains(&format!("block 0 at byte {first_block}:")) && text.contains("block_crc"),
        "{text}"
    );
    assert!(text.contains("verdict              damaged"), "{text}");

    // Cut short: without the 24-byte end record, and in the middle of a block.
    for (name, len) in [("noend", bytes.len() - 24), ("half", bytes.len() / 2)] {
        let cut = dir.join(format!("{name}.swcap"));
        std::fs::write(&cut, &bytes[..len]).unwrap();
        let (good, v, err) = inspect_json(&cut);
        assert!(!good, "{name}: {err}");
        assert_eq!(v["verdict"], "incomplete", "{name}");
        assert_eq!(v["end_record_ok"], false, "{name}");
        assert!(err.contains("incomplete"), "{name}: {err}");
    }

    let help = ok(&["inspect", "--help"]);
    assert!(
        help.contains("Exit status") && help.contains("incomplete"),
        "{help}"
    );
}

#[test]
fn csv_replay_without_scenario_names_the_flag() {
    let dir = tmp("csvnoscen");
    let csv = dir.join("events.csv");
    std::fs::write(&csv, "t_ps,channel\n1000,0\n2000,1\n").unwrap();
    let out = slotwise(&["replay", csv.to_str().unwrap()]);
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(
        err.contains("events.csv")
            && err.contains("no receiver description")
            && err.contains("--scenario S.toml")
            && err.contains("--profile P.toml")
            && err.contains("--tx-record"),
        "{err}"
    );
    assert!(!err.contains("magic"), "{err}");
}

fn tmp(name: &str) -> std::path::PathBuf {
    tmp_in("cli", name)
}

#[test]
fn replay_refuses_a_receiver_that_contradicts_the_capture() {
    let d = tmp("contradiction");
    let cap = d.join("bench.swcap");
    let cap = cap.to_str().unwrap();
    ok(&[
        "simulate",
        "../scenarios/bench-100mhz-30km.toml",
        "-o",
        cap,
        "--duration-s",
        "0.002",
    ]);
    // The bench link's TDC is 48 bits at 1 ps; the polarization scenario describes 32 bits.
    let err = fails(&[
        "replay",
        cap,
        "--scenario",
        "../scenarios/polarization-bb84-50mhz.toml",
    ]);
    assert!(err.contains("counter_bits"), "{err}");
    assert!(err.contains("48") && err.contains("32"), "{err}");
    assert!(err.contains("bench.swcap"), "{err}");
    // The scenario that made it replays without a word about the receiver.
    let out = slotwise(&["replay", cap]);
    assert!(out.status.success());
    assert!(!String::from_utf8_lossy(&out.stderr).contains("warning"));
}

#[test]
fn plain_bench_is_the_pipeline_benchmark_and_sync_still_parses() {
    use clap::Parser;
    use slotwise_sim::bench_pipeline::CaptureName;
    use slotwise_sim::cli::{BenchArgs, BenchCommand, Cli, Command};
    fn bench(args: &[&str]) -> BenchArgs {
        let cli = Cli::try_parse_from(["slotwise", "bench"].iter().chain(args)).unwrap();
        match cli.command {
            Command::Bench(b) => b,
            other => panic!("{other:?}"),
        }
    }
    let b = bench(&["--json", "--capture", "default,sparse", "--reps", "3"]);
    assert!(b.command.is_none());
    assert!(b.pipeline.json);
    assert_eq!(
        b.pipeline.capture,
        vec![CaptureName::Default, CaptureName::Sparse]
    );
    assert_eq!(b.pipeline.reps, Some(3));
    let b = bench(&["pipeline", "--count-only"]);
    assert!(matches!(b.command, Some(BenchCommand::Pipeline(a)) if a.count_only));
    let b = bench(&["sync", "--quick"]);
    assert!(matches!(b.command, Some(BenchCommand::Sync(a)) if a.quick));
}
