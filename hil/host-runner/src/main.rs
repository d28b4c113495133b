//! `hil-host`: the host side of the HIL check.
//!
//! - `prepare` reads a capture of `slotwise simulate` (or makes a synthetic one), runs it through
//!   the core on the host (answering each announcement and recording the answers), and writes the
//!   firmware's input files and the host's frames into a run directory;
//! - `compare` reads the firmware's frames and report from that directory after QEMU ran,
//!   compares every frame byte for byte, and prints one JSON line; it exits 1 on any mismatch;
//! - `station` writes the run directory of the C interface's check (`firmware-c`) and the Rust
//!   reference frames it must reproduce.

mod capture;
mod full;
mod simulated;
mod station;
mod synth;

use capture::{check_stream, host_replay, split_frames, write_inputs, Capture};
use clap::{Parser, Subcommand, ValueEnum};
use serde_json::{json, Value};
use std::collections::BTreeMap;
use std::fs;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

#[derive(Parser)]
#[command(about = "Host side of the slotwise HIL check")]
struct Cli {
    #[command(subcommand)]
    cmd: Cmd,
}

/// Which synthetic capture to make.
#[derive(Clone, Copy, Debug, ValueEnum)]
enum SyntheticSource {
    /// Synthetic bench link, clean.
    Default,
    /// Synthetic bench link with blackout, reordered neighbours, unknown channel, too-wide counts.
    Fault,
}

#[derive(Subcommand)]
enum Cmd {
    /// Make a capture, replay it on the host, write the firmware inputs and the host's frames.
    Prepare {
        /// A capture written by `slotwise simulate` (its scenario comes from the header).
        #[arg(
            long,
            conflicts_with = "synthetic",
            required_unless_present = "synthetic"
        )]
        from: Option<PathBuf>,
        /// Make a synthetic capture instead (transport faults the simulator does not model).
        #[arg(long, value_enum)]
        synthetic: Option<SyntheticSource>,
        /// Capture name in reports.
        #[arg(long)]
        name: String,
        /// Number of slots of a synthetic capture.
        #[arg(long, default_value_t = 20_000_000)]
        slots: u64,
        /// Run directory to fill.
        #[arg(long)]
        out: PathBuf,
        /// Inputs of the whole receiver (recovered clock with the marker, link endpoint,
        /// monitor) instead of the configured clock's; needs a capture with `marker = true`.
        #[arg(long, requires = "from")]
        full: bool,
    },
    /// Compare the firmware's frames with the host's and print one JSON line.
    Compare {
        /// Run directory (after QEMU).
        #[arg(long)]
        dir: PathBuf,
        /// Target triple of the firmware.
        #[arg(long)]
        target: String,
        /// Capture name for the report.
        #[arg(long)]
        capture: String,
        /// The firmware ELF (for its flash image size).
        #[arg(long)]
        elf: PathBuf,
        /// QEMU's exit code.
        #[arg(long)]
        qemu_exit: i32,
    },
    /// Read `compare` JSON lines on stdin: print the board's targets as met or missed, and fail
    /// when a figure exceeds the committed budget file by more than 10 %.
    Budgets {
        /// The committed figures (`hil/budget.json`).
        #[arg(long)]
        committed: PathBuf,
        /// Write the figures read as the new committed ones.
        #[arg(long)]
        update: bool,
    },
    /// Write the C interface's run directory (profile with hint, raw words, recorded answers) and
    /// the frames the Rust station writes from them; print one JSON line.
    Station {
        /// Profile blob from `slotwise profile compile` with a raw-word layout.
        #[arg(long)]
        profile: PathBuf,
        /// A capture written by `slotwise simulate` with `marker = true`.
        #[arg(long)]
        from: PathBuf,
        /// Run directory to fill.
        #[arg(long)]
        out: PathBuf,
        /// Damage the raw words: one malformed record, one lost rollover record.
        #[arg(long)]
        faults: bool,
        /// Authenticate the classical channel (round mode, the simulator's key supply); writes
        /// auth.bin and refill-link.bin too, and every round must verify.
        #[arg(long)]
        auth: bool,
        /// Announce frames per authentication round (with --auth).
        #[arg(long, default_value_t = station::ROUND_FRAMES, value_name = "N")]
        round_frames: u32,
    },
    /// Turn the firmware's stage-by-stage profile into one JSON line (instructions per event).
    Profile {
        /// Run directory of a profile run.
        #[arg(long)]
        dir: PathBuf,
        /// Target triple of the firmware.
        #[arg(long)]
        target: String,
        /// The full run's instructions per detection (from `compare`), for the replay share.
        #[arg(long)]
        full: Option<f64>,
    },
}

/// The board's targets (thumbv7em): name, JSON field, limit. Reported as met or missed.
const TARGETS: [(&str, &str, f64); 5] = [
    (
        "instructions per detection, whole receiver, steady state",
        "instructions_per_detection_steady",
        100.0,
    ),
    (
        "RAM for everything the board holds, bytes",
        "ram_total_bytes",
        32.0 * 1024.0,
    ),
    ("flash image, bytes", "flash_bytes", 64.0 * 1024.0),
    (
        "instructions to the first clock lock",
        "instructions_acquisition",
        20e6,
    ),
    (
        "instructions per detection over the whole run (the configured-clock build's budget)",
        "instructions_per_detection",
        150.0,
    ),
];

/// Figures held to the committed budget file: a run may not exceed its committed value by more
/// than [`MARGIN`].
const HELD: [&str; 5] = [
    "instructions_per_detection",
    "instructions_per_detection_steady",
    "instructions_acquisition",
    "ram_total_bytes",
    "flash_bytes",
];

/// Allowed growth over the committed figure.
const MARGIN: f64 = 0.10;

/// Read `compare` JSON lines on stdin: print the board's targets as met or missed (reported) and
/// check every held figure against `committed` (fails on more than [`MARGIN`] above it); with
/// `update`, write the figures read as the new committed ones instead.
fn budgets(committed: &Path, update: bool) -> Result<bool, String> {
    let mut measured = serde_json::Map::new();
    for line in std::io::stdin().lines() {
        let line = line.map_err(|e| format!("stdin: {e}"))?;
        let Ok(r) = serde_json::from_str::<Value>(&line) else {
            continue;
        };
        let (Some(target), Some(capture)) = (r["target"].as_str(), r["capture"].as_str()) else {
            continue;
        };
        if target.starts_with("thumbv7em") {
            for (name, field, limit) in TARGETS {
                if let Some(v) = r[field].as_f64() {
                    let verdict = if v <= limit { "met" } else { "MISSED" };
                    println!("{target} {capture}: {name} {v} (target {limit}) {verdict}");
                }
            }
        }
        for field in HELD {
            if let Some(v) = r[field].as_f64() {
                measured.insert(format!("{target}/{capture}/{field}"), json!(v));
            }
        }
    }
    if update {
        let text =
            serde_json::to_string_pretty(&Value::Object(measured)).map_err(|e| e.to_string())?;
        fs::write(committed, text + "\n").map_err(|e| format!("{}: {e}", committed.display()))?;
        println!("budget file rewritten: {}", committed.display());
        return Ok(true);
    }
    let text =
        fs::read_to_string(committed).map_err(|e| format!("{}: {e}", committed.display()))?;
    let budget: Value = serde_json::from_str(&text)
        .map_err(|e| format!("{}: not JSON: {e}", committed.display()))?;
    let mut ok = true;
    for (key, v) in &measured {
        let v = v.as_f64().unwrap_or(0.0);
        match budget[key.as_str()].as_f64() {
            Some(b) if v > b * (1.0 + MARGIN) => {
                println!("REGRESSION {key}: {v} against the committed {b} (more than 10 % above)");
                ok = false;
            }
            Some(_) => {}
            None => println!("{key}: {v} has no committed figure (hil/check.sh --update-budget)"),
        }
    }
    if ok {
        println!("every figure within 10 % of {}", committed.display());
    }
    Ok(ok)
}

fn main() -> ExitCode {
    let result = match Cli::parse().cmd {
        Cmd::Prepare {
            from,
            synthetic,
            name,
            slots,
            out,
            full,
        } => match (full, from.as_deref()) {
            (true, Some(path)) => full::prepare(path, &name, &out).and_then(|line| {
                fs::write(out.join("host-summary.json"), format!("{line}\n"))
                    .map(|()| true)
                    .map_err(|e| format!("{}: {e}", out.display()))
            }),
            _ => prepare(from.as_deref(), synthetic, &name, slots, &out),
        },
        Cmd::Compare {
            dir,
            target,
            capture,
            elf,
            qemu_exit,
        } => compare(&dir, &target, &capture, &elf, qemu_exit),
        Cmd::Station {
            profile,
            from,
            out,
            faults,
            auth,
            round_frames,
        } => station::prepare(&profile, &from, &out, faults, auth.then_some(round_frames)).map(
            |line| {
                println!("{line}");
                true
            },
        ),
        Cmd::Budgets { committed, update } => budgets(&committed, update),
        Cmd::Profile { dir, target, full } => profile(&dir, &target, full),
    };
    match result {
        Ok(true) => ExitCode::SUCCESS,
        Ok(false) => ExitCode::from(1),
        Err(e) => {
            eprintln!("hil-host: {e}");
            ExitCode::from(2)
        }
    }
}

fn prepare(
    from: Option<&Path>,
    synthetic: Option<SyntheticSource>,
    name: &str,
    slots: u64,
    out: &Path,
) -> Result<bool, String> {
    let mut cap: Capture = match (from, synthetic) {
        (Some(path), _) => simulated::capture(path, name)?,
        (None, Some(SyntheticSource::Default)) => {
            synth::capture(synth::Variant::Default, slots, name)
        }
        (None, Some(SyntheticSource::Fault)) => synth::capture(synth::Variant::Fault, slots, name),
        (None, None) => return Err("prepare: give --from CAPTURE or --synthetic".into()),
    };
    let host = host_replay(&mut cap).map_err(|e| format!("host replay: {e}"))?;
    write_inputs(out, &cap, &host).map_err(|e| format!("{}: {e}", out.display()))?;
    if let Some(path) = from {
        let params = simulated::acquire_params(&simulated::scenario_of(path)?);
        fs::write(out.join("acquire.bin"), params)
            .map_err(|e| format!("{}: {e}", out.display()))?;
    }
    let s = &host.summary;
    let acc: BTreeMap<_, _> = s.accounting.fields().into_iter().collect();
    let line = json!({
        "capture": cap.name,
        "detections": s.detections_in,
        "sifted_bits": s.sifted_bits,
        "frames": host.frames.frames,
        "accounting": acc,
        "answers": host.answers.len(),
        "answer_errors": {
            "unmatched": s.answer_errors.unmatched,
            "malformed": s.answer_errors.malformed,
        },
        "multi_click_events": {
            "sifted": s.multi.sifted,
            "basis_mismatch": s.multi.basis_mismatch,
            "unanswered": s.multi.unanswered,
            "cross_basis": s.multi.cross_basis,
        },
    });
    fs::write(out.join("host-summary.json"), format!("{line}\n"))
        .map_err(|e| format!("{}: {e}", out.display()))?;
    if s.accounting.total() != s.detections_in {
        return Err(format!(
            "host accounting sums to {} for {} detections",
            s.accounting.total(),
            s.detections_in
        ));
    }
    Ok(true)
}

/// The firmware's `key value` report lines.
fn read_report(path: &Path) -> Result<BTreeMap<String, String>, String> {
    let text = fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let mut m = BTreeMap::new();
    for (i, line) in text.lines().enumerate() {
        let (k, v) = line
            .split_once(' ')
            .ok_or_else(|| format!("{}: line {}: no value", path.display(), i + 1))?;
        m.insert(k.to_string(), v.to_string());
    }
    Ok(m)
}

fn num(report: &BTreeMap<String, String>, key: &str) -> Result<u64, String> {
    report
        .get(key)
        .ok_or_else(|| format!("report-fw.txt: field {key} missing"))?
        .parse()
        .map_err(|e| format!("report-fw.txt: field {key}: {e}"))
}

/// Bytes a programmer writes to flash: the file contents of the ELF's PT_LOAD segments.
fn flash_image_bytes(elf: &Path) -> Result<u64, String> {
    let b = fs::read(elf).map_err(|e| format!("{}: {e}", elf.display()))?;
    let bad = |what: &str| format!("{}: {what}", elf.display());
    if b.len() < 52 || &b[..4] != b"\x7fELF" || b[4] != 1 || b[5] != 1 {
        return Err(bad("not a little-endian ELF32 file"));
    }
    let u16_at = |o: usize| u16::from_le_bytes([b[o], b[o + 1]]) as usize;
    let u32_at = |o: usize| u32::from_le_bytes([b[o], b[o + 1], b[o + 2], b[o + 3]]);
    let phoff = u32_at(28) as usize;
    let (phentsize, phnum) = (u16_at(42), u16_at(44));
    if phoff + phentsize * phnum > b.len() || phentsize < 32 {
        return Err(bad("program headers past the end of the file"));
    }
    Ok((0..phnum)
        .map(|i| phoff + i * phentsize)
        .filter(|&o| u32_at(o) == 1)
        .map(|o| u64::from(u32_at(o + 16)))
        .sum())
}

fn profile(dir: &Path, target: &str, full: Option<f64>) -> Result<bool, String> {
    if dir.join("profile-full-fw.txt").exists() {
        return full::profile(dir, target);
    }
    let p = read_report(&dir.join("profile-fw.txt"))?;
    let n = |k: &str| -> Result<f64, String> {
        let v = p
            .get(k)
            .ok_or_else(|| format!("profile-fw.txt: field {k} missing"))?;
        v.parse::<f64>()
            .map_err(|e| format!("profile-fw.txt: field {k}: {e}"))
    };
    // Instructions per counter unit, from the firmware's loop of known length.
    let scale = n("calib_instructions")? / n("calib_counts")?.max(1.0);
    let events = n("events")?;
    let per =
        |k: &str| -> Result<f64, String> { Ok((n(k)? * scale / events * 10.0).round() / 10.0) };
    let receiver = per("receiver_echo_tx_null_sink_counts")?;
    let with_frames = per("receiver_echo_tx_frames_counts")?;
    let stages =
        per("unwrap_counts")? + per("delay_and_locate_counts")? + per("gate_lookup_counts")?;
    let line = json!({
        "target": target,
        "profile": "instructions per event, default capture",
        "unwrap": per("unwrap_counts")?,
        "delay_and_locate": per("delay_and_locate_counts")?,
        "gate_lookup": per("gate_lookup_counts")?,
        "slots_sifting_tally": ((receiver - stages) * 10.0).round() / 10.0,
        "receiver_total": receiver,
        "frame_out": ((with_frames - receiver) * 10.0).round() / 10.0,
        "frame_out_per_sifted_bit": (n("frame_out_sifted_only_counts")? * scale
            / n("sifted_bits_echo")? * 10.0).round() / 10.0,
        "answer_replay": full.map(|f| ((f - with_frames) * 10.0).round() / 10.0),
    });
    println!("{line}");
    Ok(true)
}

fn compare(
    dir: &Path,
    target: &str,
    capture: &str,
    elf: &Path,
    qemu_exit: i32,
) -> Result<bool, String> {
    let read = |name: &str| fs::read(dir.join(name)).map_err(|e| format!("{name}: {e}"));
    let flash = flash_image_bytes(elf)?;
    if dir.join("board.bin").exists() {
        return full::compare(dir, target, capture, flash, qemu_exit);
    }
    let host = read("frames-host.bin")?;
    let mut line = json!({
        "target": target,
        "capture": capture,
        "qemu_exit": qemu_exit,
        "flash_bytes": flash,
        "clock": "reference",
        "marker": false,
        "link": false,
        "monitor": false,
        "instructions_acquisition": Value::Null,
    });
    if qemu_exit != 0 {
        line["error"] = json!(format!("firmware exited with code {qemu_exit}"));
        println!("{line}");
        return Ok(false);
    }
    let fw = read("frames-fw.bin")?;
    let report = read_report(&dir.join("report-fw.txt"))?;
    let hf = split_frames(&host);
    let ff = split_frames(&fw);
    let mismatched = (0..hf.len().max(ff.len()))
        .filter(|&i| hf.get(i).map(|f| f.1) != ff.get(i).map(|f| f.1))
        .count();
    let host_summary = check_stream("frames-host.bin", &host)?;
    let decode_error = check_stream("frames-fw.bin", &fw).err();
    let detections = num(&report, "detections")?;
    let calib_instr = num(&report, "calib_instructions")? as f64;
    let calib_counts = num(&report, "calib_counts")? as f64;
    let per_count = if calib_counts > 0.0 {
        calib_instr / calib_counts
    } else {
        0.0
    };
    let push = num(&report, "push_counts")? as f64 * per_count;
    let ipd = if detections > 0 {
        push / detections as f64
    } else {
        0.0
    };
    let receiver = num(&report, "receiver_bytes")?;
    let frame_out = num(&report, "frame_out_bytes")?;
    let replay_bad = [
        "replay_mismatched",
        "replay_missing",
        "replay_bad_records",
        "replay_queue_full",
        "replay_io_errors",
        "answers_unused",
        "frame_write_errors",
        "frame_build_errors",
    ]
    .iter()
    .map(|k| num(&report, k))
    .sum::<Result<u64, String>>()?;
    line["detections"] = json!(detections);
    line["frames"] = json!(ff.len());
    line["host_frames"] = json!(hf.len());
    line["mismatched_frames"] = json!(mismatched);
    line["instructions_per_detection"] = json!((ipd * 10.0).round() / 10.0);
    line["instructions_per_count"] = json!((per_count * 1000.0).round() / 1000.0);
    line["counter"] = json!(report.get("counter"));
    line["ram_bytes"] = json!(receiver + frame_out);
    // Everything the board holds: the receiver, the frame writer and the event block (the
    // replaying transmitter stands in for a link and is not counted).
    line["ram_total_bytes"] = json!(receiver + frame_out + num(&report, "event_buffer_bytes")?);
    line["receiver_bytes"] = json!(receiver);
    line["frame_out_bytes"] = json!(frame_out);
    line["sifted_bits"] = json!(num(&report, "sifted_bits")?);
    line["recovered_clock_bytes"] = json!(num(&report, "recovered_clock_bytes").ok());
    let mut acquisition_ok = true;
    let acq_path = dir.join("acquire-fw.txt");
    if acq_path.exists() {
        let a = read_report(&acq_path)?;
        let field = |k: &str| -> Result<u64, String> {
            a.get(k)
                .ok_or_else(|| format!("acquire-fw.txt: field {k} missing"))?
                .parse()
                .map_err(|e| format!("acquire-fw.txt: field {k}: {e}"))
        };
        let scale = field("calib_instructions")? as f64 / (field("calib_counts")? as f64).max(1.0);
        let locked = field("locked")? == 1;
        line["instructions_acquisition"] = if locked {
            json!((field("acquisition_counts")? as f64 * scale).round() as u64)
        } else {
            Value::Null
        };
        line["detections_to_lock"] = json!(field("events_to_lock")?);
        // The period at the first lock against the scenario's true period (the setup's clock).
        let setup_bytes = read("setup.bin")?;
        let setup =
            slotwise_hil::Setup::decode(&setup_bytes).map_err(|e| format!("setup.bin: {e}"))?;
        let truth = setup.period_ps.to_num::<f64>();
        let got = slotwise::fixed::types::U32F32::from_bits(field("locked_period_ps_q32")?)
            .to_num::<f64>();
        // A lock more than 1 ppm off the true period is a wrong lock, not an acquisition.
        let error_ppm = (got / truth - 1.0) * 1e6;
        acquisition_ok = locked && error_ppm.abs() <= 1.0;
        if locked {
            line["acquired_period_error_ppm"] = json!((error_ppm * 1000.0).round() / 1000.0);
        }
        line["recovered_clock_bytes"] = json!(field("recovered_clock_bytes")?);
    }
    line["replay_problems"] = json!(replay_bad);
    if let Some(e) = &decode_error {
        line["error"] = json!(e);
    }
    println!("{line}");
    let ok = acquisition_ok
        && mismatched == 0
        && hf.len() == ff.len()
        && decode_error.is_none()
        && replay_bad == 0
        && detections == host_summary.detections_in;
    Ok(ok)
}
