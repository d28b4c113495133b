//! The whole receiver's run directory from a capture of `slotwise simulate` with the public
//! marker on: the receiver setup and board file the simulator's host session would use
//! (recovered clock, prior ±500 ppm, the simulated hint, the perfect framed link's timeouts, the
//! monitor with the scenario's block length and alarms), the answers frames of the host
//! transmitter (`slotwise_sim::link::tx::HostTransmitter`), and the frames the shared driver
//! ([`slotwise_hil::FullRun`]) writes on the host.
//!
//! The driver runs twice on the host: first with the host transmitter answering each announce
//! frame as it is written (its answers frames are recorded), then from the recorded answers
//! exactly as the firmware reads them. Both runs must write the same bytes, or `prepare` fails.

use crate::capture::VecFrames;
use crate::simulated::{self, PRIOR_PPM};
use serde_json::{json, Value};
use slotwise::wire::LinkConfig;
use slotwise::Summary;
use slotwise::TdcEvent;
use slotwise_hil::board::BOARD_LEN;
use slotwise_hil::transport::encode_event;
use slotwise_hil::{
    build_receiver, AnnounceOut, AnswersIn, BoardFrameOut, BoardSettings, EventSource, FullLink,
    FullMonitor, FullRun, FullTotals, LinkShared, Probe, Setup,
};
use slotwise_sim::capture::read_all;
use slotwise_sim::clocks::{recovered_params, simulated_hint, REACQUIRE_PPM};
use slotwise_sim::link::tx::HostTransmitter;
use slotwise_sim::link::LinkModel;
use slotwise_sim::scenario::Scenario;
use std::cell::RefCell;
use std::collections::{BTreeMap, VecDeque};
use std::convert::Infallible;
use std::fs;
use std::path::Path;
use std::rc::Rc;

/// The board file of a scenario, as the simulator's host session configures the same parts.
pub fn board_settings(s: &Scenario, setup: &Setup, source: &str) -> Result<BoardSettings, String> {
    let err = |e: &dyn std::fmt::Display| format!("{source}: {e}");
    let (acquire, track) = recovered_params(s, PRIOR_PPM);
    let (hint_t_ps, hint_tx_slot) = simulated_hint(s).map_err(|e| err(&e))?;
    let model = LinkModel::perfect(s);
    let link =
        LinkConfig::new(model.answer_timeout_slots, model.flush_age_slots).map_err(|e| err(&e))?;
    let cfg = setup.receiver_config().map_err(|e| err(&e))?;
    let stats = slotwise_sim::stats::stats_config(s, cfg.gates(), slotwise_sim::cli::bucket_s(s))
        .map_err(|e| err(&e))?;
    let board = BoardSettings {
        acquire,
        track,
        reacquire_ppm: REACQUIRE_PPM,
        hint_t_ps,
        hint_tx_slot,
        link,
        block_ps: stats.block_ps(),
        dead_time_ps: stats.dead_time_ps(),
        alarms: s.alarm_config().map_err(|e| err(&e))?,
    };
    let mut b = [0u8; BOARD_LEN];
    let n = board.encode(&mut b).map_err(|e| err(&e))?;
    let back = BoardSettings::decode(&b[..n]).map_err(|e| err(&e))?;
    if back != board || back.stats_config(cfg.gates()).ok() != Some(stats) {
        return Err(format!(
            "{source}: the board file does not read back as written"
        ));
    }
    Ok(board)
}

/// A growing byte queue: the answers records as the host transmitter makes them.
#[derive(Clone, Default)]
struct Queue(Rc<RefCell<VecDeque<u8>>>);

impl embedded_io::ErrorType for Queue {
    type Error = Infallible;
}

impl embedded_io::Read for Queue {
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, Infallible> {
        let mut q = self.0.borrow_mut();
        let n = buf.len().min(q.len());
        for (d, b) in buf.iter_mut().zip(q.drain(..n)) {
            *d = b;
        }
        Ok(n)
    }
}

/// Bytes written, kept.
#[derive(Default)]
struct Bytes(Vec<u8>);

impl embedded_io::ErrorType for Bytes {
    type Error = Infallible;
}

impl embedded_io::Write for Bytes {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        self.0.extend_from_slice(buf);
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Infallible> {
        Ok(())
    }
}

/// The transmitter behind the link: each announce frame written goes to the host transmitter,
/// whose answers frames become records (announce index, frame) in the queue and the log.
struct TxFeed {
    tx: HostTransmitter,
    partial: Vec<u8>,
    announce: Vec<u8>,
    frames: u32,
    queue: Queue,
    records: Vec<u8>,
}

impl embedded_io::ErrorType for TxFeed {
    type Error = Infallible;
}

impl embedded_io::Write for TxFeed {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        self.announce.extend_from_slice(buf);
        for &b in buf {
            self.partial.push(b);
            if b != 0 {
                continue;
            }
            for answer in self.tx.receive(&self.partial) {
                let mut rec = self.frames.to_le_bytes().to_vec();
                rec.extend_from_slice(&answer);
                self.queue.0.borrow_mut().extend(rec.iter().copied());
                self.records.extend_from_slice(&rec);
            }
            self.partial.clear();
            self.frames += 1;
        }
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Infallible> {
        Ok(())
    }
}

struct SliceEvents<'a>(&'a [TdcEvent]);

impl EventSource for SliceEvents<'_> {
    type Error = Infallible;
    fn read_events(&mut self, buf: &mut [TdcEvent]) -> Result<usize, Infallible> {
        let n = self.0.len().min(buf.len());
        buf[..n].copy_from_slice(&self.0[..n]);
        self.0 = &self.0[n..];
        Ok(n)
    }
}

/// What one host run of the shared driver produced.
pub struct HostFull {
    /// Frames out (key blocks, alarms, statistics, summary).
    pub frames: VecFrames,
    /// Announce frames written to the link.
    pub announce: Vec<u8>,
    /// Answers records (live run: as recorded; replayed run: empty).
    pub records: Vec<u8>,
    /// The receiver's counters at the end.
    pub summary: Summary,
    /// The driver's totals.
    pub totals: FullTotals,
    /// The link endpoint's counters.
    pub link: slotwise::LinkCounters,
    /// Whether the numbering was aligned at the end.
    pub aligned: bool,
}

/// Run the shared driver on the host: answers from the host transmitter (`recorded = None`) or
/// from recorded answers records.
fn run(
    setup: &Setup,
    board: &BoardSettings,
    events: &[TdcEvent],
    s: &Scenario,
    recorded: Option<&[u8]>,
) -> Result<HostFull, String> {
    let cfg = setup.receiver_config().map_err(|e| e.to_string())?;
    let mut rx = Box::new(build_receiver(setup, board).map_err(|e| e.to_string())?);
    let mut monitor = Box::new(FullMonitor::new(
        board.stats_config(cfg.gates()).map_err(|e| e.to_string())?,
        board.alarms,
    ));
    let mut out = Box::new(BoardFrameOut::new(VecFrames::default()));
    let shared = LinkShared::new(Probe::NONE);
    let mut ev = SliceEvents(events);
    macro_rules! drive {
        ($reader:expr, $writer:expr) => {{
            let mut link = Box::new(FullLink::new(
                board.link,
                AnswersIn::new($reader, &shared),
                AnnounceOut::new($writer, &shared),
            ));
            let mut r = FullRun {
                rx: &mut *rx,
                link: &mut *link,
                monitor: &mut *monitor,
                out: &mut *out,
                probe: Probe::NONE,
            };
            let Ok(totals) = r.run(&mut ev, board.hint_t_ps, board.hint_tx_slot);
            (totals, *link.counters(), link)
        }};
    }
    let (totals, link, announce, records) = match recorded {
        None => {
            let queue = Queue::default();
            let feed = TxFeed {
                tx: HostTransmitter::new(s, LinkModel::perfect(s).test_fraction),
                partial: Vec::new(),
                announce: Vec::new(),
                frames: 0,
                queue: queue.clone(),
                records: Vec::new(),
            };
            let (t, c, mut link) = drive!(queue, feed);
            let feed = link.writer_mut().inner_mut();
            (
                t,
                c,
                std::mem::take(&mut feed.announce),
                std::mem::take(&mut feed.records),
            )
        }
        Some(rec) => {
            let (t, c, mut link) = drive!(rec, Bytes::default());
            (
                t,
                c,
                std::mem::take(&mut link.writer_mut().inner_mut().0),
                Vec::new(),
            )
        }
    };
    let summary = Summary::of(&*rx);
    let aligned = rx.numbering().aligned();
    let out = *out;
    Ok(HostFull {
        frames: out.into_sink(),
        announce,
        records,
        summary,
        totals,
        link,
        aligned,
    })
}

/// Read the capture, make the inputs, run the driver on the host twice, write the run directory;
/// returns the host summary line.
pub fn prepare(path: &Path, name: &str, out: &Path) -> Result<Value, String> {
    let source = path.display().to_string();
    let (header, events) = read_all(path).map_err(|e| e.to_string())?;
    let s = Scenario::from_toml_str(&header.metadata, &format!("{source}: header metadata"))
        .map_err(|e| e.to_string())?;
    if !s.marker {
        return Err(format!(
            "{source}: header metadata: scenario '{}' field marker: the whole receiver numbers \
             slots through the public marker; make this capture with `marker = true`",
            s.name
        ));
    }
    let setup = simulated::setup_for(&s, &source, true)?;
    let board = board_settings(&s, &setup, &source)?;
    let live = run(&setup, &board, &events, &s, None)?;
    let again = run(&setup, &board, &events, &s, Some(&live.records))?;
    if again.frames.bytes != live.frames.bytes
        || again.announce != live.announce
        || again.link != live.link
    {
        return Err(format!(
            "{source}: the driver fed from the recorded answers wrote other bytes than with the \
             host transmitter answering live (frames, announce frames or link counters)"
        ));
    }
    write(out, &setup, &board, &events, &live).map_err(|e| format!("{}: {e}", out.display()))?;
    let s_ = &live.summary;
    if s_.accounting.total() != s_.detections_in {
        return Err(format!(
            "host accounting sums to {} for {} detections",
            s_.accounting.total(),
            s_.detections_in
        ));
    }
    let acc: BTreeMap<_, _> = s_.accounting.fields().into_iter().collect();
    let l = &live.link;
    Ok(json!({
        "capture": name,
        "detections": s_.detections_in,
        "sifted_bits": s_.sifted_bits,
        "frames": live.frames.frames,
        "alarm_frames": live.totals.alarm_frames,
        "stats_frames": live.totals.stats_frames,
        "aligned": live.aligned,
        "accounting": acc,
        "link": {
            "announce_frames": l.frames_out,
            "announcements": l.announcements,
            "answers_frames": l.answered_frames,
            "answers": l.answers_in,
            "expired_frames": l.expired_frames,
            "rejected": l.rejected.total(),
        },
    }))
}

fn write(
    dir: &Path,
    setup: &Setup,
    board: &BoardSettings,
    events: &[TdcEvent],
    host: &HostFull,
) -> std::io::Result<()> {
    let bad = |e: &dyn std::fmt::Display| std::io::Error::other(e.to_string());
    fs::create_dir_all(dir)?;
    let mut b = vec![0u8; slotwise_hil::setup::MAX_SETUP_LEN];
    let n = setup.encode(&mut b).map_err(|e| bad(&e))?;
    fs::write(dir.join("setup.bin"), &b[..n])?;
    let mut b = [0u8; BOARD_LEN];
    let n = board.encode(&mut b).map_err(|e| bad(&e))?;
    fs::write(dir.join("board.bin"), &b[..n])?;
    let ev: Vec<u8> = events.iter().flat_map(encode_event).collect();
    fs::write(dir.join("events.bin"), ev)?;
    fs::write(dir.join("answers-link.bin"), &host.records)?;
    fs::write(dir.join("frames-host.bin"), &host.frames.bytes)?;
    fs::write(dir.join("announce-host.bin"), &host.announce)?;
    for stale in ["frames-fw.bin", "announce-fw.bin", "report-fw.txt"] {
        match fs::remove_file(dir.join(stale)) {
            Err(e) if e.kind() != std::io::ErrorKind::NotFound => return Err(e),
            _ => {}
        }
    }
    Ok(())
}

/// Instructions per part from the firmware's report, with the marks' own cost taken out:
/// (part name, instructions).
fn part_instructions(
    report: &BTreeMap<String, String>,
    per_count: f64,
) -> Result<Vec<(&'static str, f64)>, String> {
    counted_instructions(report, "part", per_count)
}

/// As [`part_instructions`] for the counts under `prefix` (`part`: the whole run; `steady`: from
/// the steady state on).
fn counted_instructions(
    report: &BTreeMap<String, String>,
    prefix: &str,
    per_count: f64,
) -> Result<Vec<(&'static str, f64)>, String> {
    let n = |k: &str| crate::num(report, k).map(|v| v as f64);
    let own = n("mark_pair_own_counts_10000")? / 10_000.0;
    let parent = n("mark_pair_parent_counts_10000")? / 10_000.0;
    slotwise_hil::Part::ALL
        .iter()
        .map(|p| {
            let k = |what: &str| n(&format!("{prefix}_{}_{what}", p.name()));
            let net = k("counts")? - k("calls")? * own - k("nested")? * parent;
            Ok((p.name(), net.max(0.0) * per_count))
        })
        .collect()
}

/// Compare a run of the whole receiver (`slotwise-hil-full`): every frame out and every announce
/// frame byte for byte; prints one JSON line and says whether it passed.
pub fn compare(
    dir: &Path,
    target: &str,
    capture: &str,
    flash: u64,
    qemu_exit: i32,
) -> Result<bool, String> {
    let read = |name: &str| fs::read(dir.join(name)).map_err(|e| format!("{name}: {e}"));
    let mut line = json!({
        "target": target,
        "capture": capture,
        "qemu_exit": qemu_exit,
        "flash_bytes": flash,
        "clock": "recovered",
        "marker": true,
        "link": true,
        "monitor": true,
        "instructions_acquisition": Value::Null,
    });
    if qemu_exit != 0 {
        line["error"] = json!(format!("firmware exited with code {qemu_exit}"));
        println!("{line}");
        return Ok(false);
    }
    let report = crate::read_report(&dir.join("report-fw.txt"))?;
    let num = |k: &str| crate::num(&report, k);
    let mismatches = |host: &[u8], fw: &[u8]| {
        let (h, f) = (crate::split_frames(host), crate::split_frames(fw));
        let bad = (0..h.len().max(f.len()))
            .filter(|&i| h.get(i).map(|x| x.1) != f.get(i).map(|x| x.1))
            .count();
        (h.len(), f.len(), bad)
    };
    let (host, fw) = (read("frames-host.bin")?, read("frames-fw.bin")?);
    let (hf, ff, bad_frames) = mismatches(&host, &fw);
    let (host_a, fw_a) = (read("announce-host.bin")?, read("announce-fw.bin")?);
    let (ha, fa, bad_announce) = mismatches(&host_a, &fw_a);
    let host_summary = crate::check_stream("frames-host.bin", &host)?;
    let decode_error = crate::check_stream("frames-fw.bin", &fw).err();
    let detections = num("detections")?;
    let per_count = num("calib_instructions")? as f64 / (num("calib_counts")? as f64).max(1.0);
    let parts = part_instructions(&report, per_count)?;
    let per_det = |v: f64| (v / detections.max(1) as f64 * 10.0).round() / 10.0;
    let core: f64 = parts
        .iter()
        .zip(slotwise_hil::Part::ALL)
        .filter(|(_, p)| p.is_core())
        .map(|((_, v), _)| v)
        .sum();
    let shim: f64 = parts
        .iter()
        .filter(|(n, _)| *n == slotwise_hil::Part::Shim.name())
        .map(|(_, v)| v)
        .sum();
    let problems = [
        "link_rejected",
        "link_read_errors",
        "link_write_errors",
        "shim_read_errors",
        "frame_write_errors",
        "frame_build_errors",
    ]
    .iter()
    .map(|k| num(k))
    .sum::<Result<u64, String>>()?;
    let receiver = num("receiver_bytes")?;
    let frame_out = num("frame_out_bytes")?;
    line["detections"] = json!(detections);
    line["frames"] = json!(ff);
    line["host_frames"] = json!(hf);
    line["mismatched_frames"] = json!(bad_frames);
    line["announce_frames"] = json!(fa);
    line["host_announce_frames"] = json!(ha);
    line["mismatched_announce_frames"] = json!(bad_announce);
    line["instructions_per_detection"] = json!(per_det(core));
    line["instructions_per_detection_by_part"] = json!(parts
        .iter()
        .filter(|(n, v)| *n != slotwise_hil::Part::Shim.name() && *v > 0.0)
        .map(|(n, v)| (n.to_string(), per_det(*v)))
        .collect::<BTreeMap<_, _>>());
    line["instructions_shim_per_detection"] = json!(per_det(shim));
    // From the first detection that reached the sifter (clock locked, slots numbered) on.
    let steady_from = num("steady_from")?;
    let steady_n = detections.saturating_sub(steady_from).max(1) as f64;
    let steady = counted_instructions(&report, "steady", per_count)?;
    let steady_core: f64 = steady
        .iter()
        .zip(slotwise_hil::Part::ALL)
        .filter(|(_, p)| p.is_core())
        .map(|((_, v), _)| v)
        .sum();
    line["steady_from_detection"] = json!(steady_from);
    line["instructions_per_detection_steady"] =
        json!((steady_core / steady_n * 10.0).round() / 10.0);
    line["instructions_per_detection_steady_by_part"] = json!(steady
        .iter()
        .filter(|(n, v)| *n != slotwise_hil::Part::Shim.name() && *v > 0.0)
        .map(|(n, v)| (n.to_string(), (v / steady_n * 10.0).round() / 10.0))
        .collect::<BTreeMap<_, _>>());
    line["instructions_per_count"] = json!((per_count * 1000.0).round() / 1000.0);
    line["counter"] = json!(report.get("counter"));
    line["ram_total_bytes"] = json!(num("ram_total_bytes")?);
    line["ram_bytes"] = json!(receiver + frame_out);
    line["receiver_bytes"] = json!(receiver);
    line["recovered_clock_bytes"] = json!(num("clock_bytes")?);
    line["link_bytes"] = json!(num("link_bytes")?);
    line["monitor_bytes"] = json!(num("monitor_bytes")?);
    line["frame_out_bytes"] = json!(frame_out);
    line["sifted_bits"] = json!(num("sifted_bits")?);
    line["alarm_frames"] = json!(num("alarm_frames")?);
    line["stats_frames"] = json!(num("stats_frames")?);
    line["aligned"] = json!(num("aligned")? == 1);
    line["replay_problems"] = json!(problems);
    if let Some(e) = &decode_error {
        line["error"] = json!(e);
    }
    println!("{line}");
    Ok(bad_frames == 0
        && bad_announce == 0
        && hf == ff
        && ha == fa
        && decode_error.is_none()
        && problems == 0
        && num("aligned")? == 1
        && detections == host_summary.detections_in)
}

/// The profile firmware's whole-receiver breakdown as one JSON line: instructions per detection
/// for each part (the core's parts, then the harness's shim and semihosting I/O).
pub fn profile(dir: &Path, target: &str) -> Result<bool, String> {
    let p = crate::read_report(&dir.join("profile-full-fw.txt"))?;
    let n = |k: &str| crate::num(&p, k).map(|v| v as f64);
    let per_count = n("calib_instructions")? / n("calib_counts")?.max(1.0);
    let detections = n("detections")?.max(1.0);
    let per_det = |v: f64| (v / detections * 10.0).round() / 10.0;
    let parts = part_instructions(&p, per_count)?;
    let mut line = json!({
        "target": target,
        "profile": "instructions per detection, whole receiver, default scenario with marker",
    });
    let mut core = 0.0;
    for (name, v) in &parts {
        line[*name] = json!(per_det(*v));
        if *name != slotwise_hil::Part::Shim.name() {
            core += v;
        }
    }
    line["core_total"] = json!(per_det(core));
    line["harness_semihosting_io"] = json!(per_det(n("io_excluded_counts")? * per_count));
    println!("{line}");
    Ok(true)
}
