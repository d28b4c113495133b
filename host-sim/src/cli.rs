//! The `slotwise` command line: demo, simulate, replay, inspect.

use crate::capture::{self, CaptureHeader, CaptureWriter};
use crate::csv_io;
use crate::link::{keyfile, HostTx, LinkModel};
use crate::plots;
use crate::replay::{SessionResult, TruthTag};
use crate::scenario::Scenario;
pub use crate::setup::{receiver_setup, receiver_setup_for, ClockArgs};
use crate::sim::{self, Simulator};
use crate::summary::{summarize, Summary};
use clap::{Args, Parser, Subcommand};
use indicatif::{ProgressBar, ProgressStyle};
use slotwise::{SiftedBit, UnwrapConfig};
use std::fs::File;
use std::io::{BufWriter, IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::time::Instant;

mod alarm_args;
mod import_args;
mod profile_args;
mod replay_cmd;
mod session;
mod tx_record;

pub use alarm_args::AlarmArgs;
pub use replay_cmd::{replay_capture, ReplayArgs, ReplayPlan};
use session::{add_link, finish_session, host_tx, open_session};
pub use tx_record::TxRecordArgs;

type AnyErr = Box<dyn std::error::Error>;

const ABOUT: &str = "Receiver-side slot synchronisation, gating, sifting and QBER for QKD links";

const LONG_ABOUT: &str = "\
slotwise takes the detector timestamps of a QKD receiver (from the link simulator or from a
capture of real hardware), places each detection on the transmitter's slot grid, decides which
basis and bit it means, sifts against the transmitter's answers and tallies the QBER — all through
the same no_std core that runs on the receiver board.

Start with `slotwise demo`: it simulates the default bench link, writes a capture, replays it and
prints where every detection went. Then try `slotwise simulate` on a scenario of your own
(see docs/scenario.md), `slotwise inspect` on the capture, and `slotwise replay --plots DIR`.

QBER and rate figures are estimates under the stated model assumptions, not a security
certification.";

/// The slotwise command line.
#[derive(Parser, Debug)]
#[command(name = "slotwise", version, about = ABOUT, long_about = LONG_ABOUT)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Simulate the default scenario end to end: capture, replay, summary and plots.
    #[command(long_about = "\
Simulate a scenario (the invented default bench link unless --scenario is given), write its
capture, push every detection through the firmware core with the simulated transmitter answering,
then print the summary and write summary.json, the capture and plots into --out.

The summary shows where every detection went (the counters sum to the detections taken in), the
sifted bits, and the QBER per basis next to the channel model's expectation.

The sifting exchange runs as real frames (docs/wire-protocol.md) over a simulated link with mild
faults (--link-* options; --link direct to hand answers over in memory): the summary lists the
frames sent each way, refused by reason, the answers lost, and both sides' sifted keys. The
receiver's sifted key blocks go to DIR/sifted.swkey (`slotwise inspect` reads them).

The live-statistics table gives the board's window and since-start QBER with its upper bound and
the exact Clopper-Pearson interval, rates, dead time and the alarms raised (DIR/live_stats.png).
Alarm thresholds: the scenario's [alarms] table (docs/scenario.md), or --qber-ceiling and friends.")]
    Demo(DemoArgs),
    /// Run a scenario through the link simulator and write a capture (or CSV).
    #[command(long_about = "\
Run a scenario file through the physical link simulator (source, fibre, detectors, drifting
transmitter clock, TDC) and write the raw TDC events as a capture (docs/capture-format.md) or, with
--csv, as `t_ps,channel` lines. The scenario text is stored in the capture's header so that
`slotwise replay` can find the transmitter again.

Beside it goes the transmitter record of the run (docs/transmitter-record.md): OUT.swtx, what was
sent in every slot; when that would exceed 64 MiB, OUT.swtx.csv, the sparse form holding the slots
k-1, k, k+1 around each detection. --tx-record PATH writes it elsewhere, --no-tx-record skips it.")]
    Simulate(SimulateArgs),
    /// Replay a capture through the firmware core and report what happened.
    #[command(long_about = "\
Replay a capture (or a `t_ps,channel` CSV) through the firmware core exactly as the receiver
board would. The transmitter's answers come from the scenario (given with --scenario, or stored in
the capture's header). Prints the summary; --json writes it, --plots draws pictures, --trace
writes one CSV line per detection in a time range saying where it went and why. The summary
ends with the live-statistics table and alarms (thresholds as for `demo`); --link framed runs the
sifting exchange as frames and adds the link report, --key-out writes the sifted key blocks.

Damaged blocks stop the replay with an error naming the file, byte offset and field, unless
--skip-damaged is given: then they are stepped over and listed.")]
    Replay(ReplayArgs),
    /// Show a capture's header and block statistics, or a key file's blocks, and check every CRC.
    #[command(long_about = "\
Show a capture's header and block statistics, a sifted-key file's (`.swkey`) blocks, or a
transmitter record (`.swtx`, `.swtx.csv`: range, what was sent per basis and intensity), and check
every CRC. Damaged blocks are listed with block index, byte offset and field. The report ends with
a verdict (JSON: `verdict`): good; damaged (blocks lost, or the end checks failed); or incomplete
(no verified end record: cut short). Exit status: 0 for a good capture, 1 for a damaged or
incomplete one (after the full report) or a file that is not a capture.")]
    Inspect(InspectArgs),
    /// Secret-key-rate estimate from a summary's tallies (an estimate, not a certification).
    #[command(long_about = crate::keyrate::cmd::LONG_ABOUT)]
    Keyrate(crate::keyrate::cmd::KeyrateArgs),
    /// Benchmarks of the core on simulated links (figures come from here, not from tests).
    #[command(long_about = "\
Benchmarks of the core on simulated links; figures come from here, not from tests.

Without a subcommand, `slotwise bench` runs the pipeline benchmark (same as `slotwise bench
pipeline`): throughput of the whole receiver on three simulated captures (default link, 1 GHz
high rate, 1e-6 per slot), the read floor, stage shares and scaling tables. `slotwise bench sync`
is the clock-recovery benchmark; `slotwise bench import` measures `slotwise import`.")]
    Bench(BenchArgs),
    Import(import_args::ImportArgs),
    Profile(profile_args::ProfileArgs),
}

/// `slotwise bench`: a subcommand, or the pipeline benchmark's options.
#[derive(Args, Debug)]
#[command(args_conflicts_with_subcommands = true)]
pub struct BenchArgs {
    /// Which benchmark (default: pipeline).
    #[command(subcommand)]
    pub command: Option<BenchCommand>,
    /// Options of the pipeline benchmark when no subcommand is given.
    #[command(flatten)]
    pub pipeline: crate::bench_pipeline::PipelineArgs,
}

/// What `slotwise bench` measures.
#[derive(Subcommand, Debug)]
pub enum BenchCommand {
    /// Receiver throughput: detections per second and ns per detection on three simulated
    /// captures, against the read floor, with stage shares and scaling tables.
    Pipeline(crate::bench_pipeline::PipelineArgs),
    /// Clock recovery: period error against the Cramér-Rao bound, detections to lock, false locks
    /// on noise, relock after a blackout and a phase jump, cost per detection.
    Sync(crate::bench_sync::BenchSyncArgs),
    /// Import throughput: `import text` lines/s and `import binary` records/s against the read
    /// floor and the capture writer alone, on generated in-memory exports.
    Import(crate::bench_import::BenchImportArgs),
}

/// How the transmitter's answers reach the receiver.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum LinkMode {
    /// Real frames (docs/wire-protocol.md) through the core's link endpoint and a simulated link.
    Framed,
    /// Handed over in memory at once, without loss.
    Direct,
}

/// Whether the classical link is authenticated.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum AuthMode {
    /// One tag per round of frames each way, over the round's agreed sifting outcome
    /// (docs/wire-protocol.md §9.9): about 0.5 % of the sifted bits in key.
    Round,
    /// Every frame tagged and checked (a forged frame is refused on its own, at 64 key bits per
    /// frame).
    Frame,
    /// No tags (for comparison only: the key is then not secure against an active attacker).
    Off,
}

/// The classical link between receiver and transmitter.
#[derive(Args, Debug, Clone)]
pub struct LinkArgs {
    /// `framed`: run the sifting exchange as frames through the core's link endpoint, a
    /// simulated link with the faults below, and a host transmitter; `direct`: answers in memory.
    /// Default: framed for `demo`, direct for `replay`.
    #[arg(long, value_enum)]
    pub link: Option<LinkMode>,
    /// Probability that the link loses a frame (each direction, each frame).
    #[arg(long, default_value_t = 0.01, value_name = "P")]
    pub link_loss: f64,
    /// Probability that the link delivers a frame twice.
    #[arg(long, default_value_t = 0.01, value_name = "P")]
    pub link_dup: f64,
    /// Probability that the link holds a frame back behind later ones (see --link-reorder-slots).
    #[arg(long, default_value_t = 0.01, value_name = "P")]
    pub link_reorder: f64,
    /// How far a reordered frame is held back: uniform 1..=SLOTS extra slots (a duplicate
    /// arrives up to a quarter of that after the first copy).
    #[arg(long, default_value_t = 50_000, value_name = "SLOTS")]
    pub link_reorder_slots: u64,
    /// Probability that the link overwrites 1 to 3 bytes of a frame (the CRC catches it).
    #[arg(long, default_value_t = 0.001, value_name = "P")]
    pub link_corrupt: f64,
    /// One-way delay of the link, in slots of the transmitter's clock.
    #[arg(long, default_value_t = 2000, value_name = "SLOTS")]
    pub link_latency_slots: u64,
    /// Seed of the link's faults (default: derived from the scenario's seed).
    #[arg(long, value_name = "N")]
    pub link_seed: Option<u64>,
    /// Most announcements per announce frame (1..=512): larger frames spend fewer
    /// authentication tags per sifted bit.
    #[arg(long, default_value_t = crate::link::DEFAULT_BATCH, value_name = "N")]
    pub link_batch: usize,
    /// A batch leaves before a slot this many slots after its first would join it.
    #[arg(long, default_value_t = 5000, value_name = "SLOTS")]
    pub link_flush_age_slots: u64,
    /// `round`: one Wegman-Carter tag per round of announce frames each way over the round's
    /// sifting outcome, and a round's key is kept only when both tags check; `frame`: a tag
    /// on every frame (docs/wire-protocol.md §9); `off`: untagged frames, which an active
    /// attacker can forge. Both authenticated modes keep a key pool on each end.
    #[arg(long, value_enum, default_value_t = AuthMode::Round)]
    pub link_auth: AuthMode,
    /// Announce frames per authentication round (`--link-auth round`).
    #[arg(long, default_value_t = slotwise::wire::round::DEFAULT_FRAMES_PER_ROUND, value_name = "N")]
    pub link_round_frames: u32,
    /// Put an adversary on the link: flip (alter answers, recompute the CRC), inject (forged
    /// answers), replay (every frame twice), delay (hold frames past their timeout), impersonate
    /// (answer in the transmitter's place with another key).
    #[arg(long, value_enum, value_name = "MODE")]
    pub link_attack: Option<crate::link::auth::LinkAttack>,
    /// Key the post-processing host can supply for authentication in all, in bits (pre-shared
    /// key included; default: unlimited). When it runs out the link stops: it never sends an
    /// untagged frame.
    #[arg(long, value_name = "BITS")]
    pub auth_key_bits: Option<u64>,
    /// Share of answered slots whose transmitted bit is revealed for the QBER (0..=1).
    #[arg(long, default_value_t = 1.0, value_name = "F")]
    pub test_fraction: f64,
    /// Write the receiver's sifted key blocks to this file (key-block frames, see
    /// docs/wire-protocol.md; read it back with `slotwise inspect FILE.swkey`). `demo` writes
    /// DIR/sifted.swkey unless told otherwise.
    #[arg(long, value_name = "FILE.swkey")]
    pub key_out: Option<PathBuf>,
}

impl LinkArgs {
    /// The link model on top of `base` (e.g. [`LinkModel::perfect`] for a scenario), or `None`
    /// for the direct exchange.
    pub fn model(&self, base: LinkModel, default: LinkMode) -> Result<Option<LinkModel>, AnyErr> {
        if self.link.unwrap_or(default) == LinkMode::Direct {
            return Ok(None);
        }
        let m = LinkModel {
            loss: self.link_loss,
            dup: self.link_dup,
            reorder: self.link_reorder,
            corrupt: self.link_corrupt,
            latency_slots: self.link_latency_slots,
            reorder_slots: self.link_reorder_slots,
            seed: self.link_seed.unwrap_or(base.seed),
            test_fraction: self.test_fraction,
            batch: self.link_batch,
            flush_age_slots: self.link_flush_age_slots,
            authenticated: self.link_auth != AuthMode::Off,
            auth_round_frames: (self.link_auth == AuthMode::Round)
                .then_some(self.link_round_frames),
            auth_key_words: self
                .auth_key_bits
                .map_or(u64::MAX, |b| b / (8 * slotwise::formats::TAG_LEN as u64)),
            attack: self.link_attack,
            ..base
        };
        m.validate()?;
        Ok(Some(m))
    }
}

#[derive(Args, Debug)]
pub struct DemoArgs {
    #[command(flatten)]
    pub clock: ClockArgs,
    #[command(flatten)]
    pub link: LinkArgs,
    #[command(flatten)]
    pub alarms: AlarmArgs,
    /// Output folder for the capture, summary.json and plots.
    #[arg(long, default_value = "out/demo")]
    pub out: PathBuf,
    /// Scenario file (TOML); the built-in default bench scenario when omitted.
    #[arg(long)]
    pub scenario: Option<PathBuf>,
    /// Override the scenario's duration in seconds.
    #[arg(long)]
    pub duration_s: Option<f64>,
}

#[derive(Args, Debug)]
pub struct SimulateArgs {
    /// Scenario file (TOML), see docs/scenario.md.
    pub scenario: PathBuf,
    /// Output file (capture, or CSV with --csv).
    #[arg(short, long)]
    pub out: PathBuf,
    /// Write `t_ps,channel` CSV instead of a capture.
    #[arg(long)]
    pub csv: bool,
    /// Override the scenario's duration in seconds.
    #[arg(long)]
    pub duration_s: Option<f64>,
    #[command(flatten)]
    pub record: TxRecordArgs,
}

#[derive(Args, Debug)]
pub struct InspectArgs {
    /// Capture file, a sifted-key file (`.swkey`), or a transmitter record (`.swtx`,
    /// `.swtx.csv`).
    pub capture: PathBuf,
    /// Print the report as JSON.
    #[arg(long)]
    pub json: bool,
}

/// Run the command line.
pub fn run(cli: Cli) -> Result<(), AnyErr> {
    match cli.command {
        Command::Demo(a) => demo(a),
        Command::Simulate(a) => simulate(a),
        Command::Replay(a) => replay_cmd::run(a),
        Command::Inspect(a) => inspect(a),
        Command::Keyrate(a) => crate::keyrate::cmd::run(&a),
        Command::Import(a) => import_args::run(&a),
        Command::Profile(a) => profile_args::run(&a),
        Command::Bench(b) => match b.command {
            Some(BenchCommand::Sync(a)) => bench_sync(&a),
            Some(BenchCommand::Pipeline(a)) => bench_pipeline(&a),
            Some(BenchCommand::Import(a)) => emit(a.json, &crate::bench_import::run(&a)?),
            None => bench_pipeline(&b.pipeline),
        },
    }
}

fn load_scenario(path: Option<&Path>, duration_s: Option<f64>) -> Result<Scenario, AnyErr> {
    let mut s = match path {
        Some(p) => Scenario::load(p)?,
        None => Scenario::default_bench(),
    };
    if let Some(d) = duration_s {
        s.duration_s = d;
        s.validate("--duration-s")?;
    }
    Ok(s)
}

fn progress(total: u64, what: &str) -> ProgressBar {
    if !std::io::stderr().is_terminal() {
        return ProgressBar::hidden();
    }
    let pb = ProgressBar::new(total);
    pb.set_style(
        ProgressStyle::with_template("{msg:12} [{bar:40}] {percent:>3}% {elapsed} (eta {eta})")
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> "),
    );
    pb.set_message(what.to_string());
    pb
}

fn capture_header(s: &Scenario) -> Result<CaptureHeader, AnyErr> {
    let tdc = UnwrapConfig::new(s.tdc_bits, s.tdc_resolution_ps)?;
    Ok(CaptureHeader::new(tdc, sim::pnr::capture_channel_count(s))
        .with_metadata(s.to_toml_string())
        .with_flags(capture::FLAG_SIMULATED))
}

/// The channel model's QBER per basis (Z, X), averaged over intensity classes by their
/// matched-basis detection rates, afterpulses counted as noise.
pub fn model_qber(s: &Scenario) -> (f64, f64) {
    let m = sim::channel_model(s);
    let mut out = [0.0; 2];
    for (b, o) in out.iter_mut().enumerate() {
        let (mut num, mut den) = (0.0, 0.0);
        for (i, im) in m.intensities.iter().enumerate() {
            let w = im.prob * im.matched_gain[b];
            num += w * m.qber_with_afterpulses(s, i)[b];
            den += w;
        }
        *o = if den > 0.0 { num / den } else { 0.0 };
    }
    (out[0], out[1])
}

/// Time resolution of a session's series and monitor blocks: a fiftieth of the run, in s.
pub fn bucket_s(s: &Scenario) -> f64 {
    s.monitor_block_s()
}

/// Simulate a scenario and push every detection through the core with the simulator's truth
/// beside it; optionally write the capture too. The function behind `slotwise demo` and the
/// end-to-end tests (answers handed over directly; see [`run_simulated_linked`] for frames).
pub fn run_simulated(
    s: &Scenario,
    clock: &ClockArgs,
    capture: Option<&Path>,
) -> Result<(Summary, SessionResult<HostTx>), AnyErr> {
    let (summary, res, _) = run_simulated_linked(s, clock, capture, None, None)?;
    Ok((summary, res))
}

/// As [`run_simulated`], with the exchange over the framed link `link` (when given) and the
/// sifted key blocks written to `key_out`. Also returns the receiver's sifted bits.
pub fn run_simulated_linked(
    s: &Scenario,
    clock: &ClockArgs,
    capture: Option<&Path>,
    link: Option<LinkModel>,
    key_out: Option<&Path>,
) -> Result<(Summary, SessionResult<HostTx>, Vec<SiftedBit>), AnyErr> {
    let started = Instant::now();
    let plan = ReplayPlan::of_scenario(s)?;
    let (cfg, host_clock) = plan.setup.receiver(clock, link.is_some())?;
    let truth = sim::clock_truth(s)?;
    let tx = host_tx(plan.source, plan.reveal_seed, link)?;
    let (mut session, tap) = open_session(cfg, host_clock, &plan.setup, tx, plan.hint, true, None)?;
    let mut writer = match capture {
        Some(p) => Some(CaptureWriter::new(
            BufWriter::new(File::create(p).map_err(|e| format!("{}: {e}", p.display()))?),
            capture_header(s)?,
        )?),
        None => None,
    };
    let mut simulator = Simulator::new(s);
    let pb = progress(1000, "simulating");
    let mut block = Vec::with_capacity(4096);
    loop {
        block.clear();
        if simulator.next_block(&mut block, 4096) == 0 {
            break;
        }
        for e in &block {
            if let Some(w) = writer.as_mut() {
                w.push(e.event)?;
            }
            session.push(e.event, Some(TruthTag { slot: e.truth.slot }));
        }
        if let Some(last) = block.last() {
            pb.set_position((last.truth.true_t_ps * 1e-12 / s.duration_s * 1000.0) as u64);
        }
        if !pb.is_hidden() {
            pb.set_message(format!("simulating {}", session.live_status()));
        }
    }
    pb.finish_and_clear();
    if let Some(w) = writer {
        w.finish()?.flush()?;
    }
    let (res, bits, blocks) = finish_session(session, &tap, key_out)?;
    let mut summary = summarize(
        &s.name,
        &res,
        res.rx.clock().period_ps().unwrap_or(f64::NAN),
        Some(truth.period_ps),
        Some(model_qber(s)),
        started.elapsed().as_secs_f64(),
    );
    add_link(&mut summary, &res, &bits, blocks, key_out);
    let summary = summary.with_scenario(s);
    Ok((summary, res, bits))
}

fn demo(a: DemoArgs) -> Result<(), AnyErr> {
    let mut s = load_scenario(a.scenario.as_deref(), a.duration_s)?;
    a.alarms.apply(&mut s)?;
    std::fs::create_dir_all(&a.out)?;
    let cap_path = a.out.join("demo.swcap");
    let link = a.link.model(LinkModel::perfect(&s), LinkMode::Framed)?;
    let key_path = a
        .link
        .key_out
        .clone()
        .unwrap_or_else(|| a.out.join("sifted.swkey"));
    let (summary, res, _) =
        run_simulated_linked(&s, &a.clock, Some(&cap_path), link, Some(&key_path))?;
    let cfg = *res.rx.config();
    // The capture must replay to exactly the same result through the same core (and link), with
    // the receiver read back from the profile file the demo writes: the path a capture from real
    // hardware takes.
    let profile_path = a.out.join("receiver.toml");
    std::fs::write(
        &profile_path,
        crate::profile::Profile::from_scenario(&s).to_toml_string(),
    )?;
    let plan_profile = crate::setup::ReceiverSetup::load(&profile_path)?;
    let plan = ReplayPlan {
        setup: plan_profile.clone(),
        ..ReplayPlan::of_scenario(&s)?
    };
    let (cfg2, clock2) = plan.setup.receiver(&a.clock, link.is_some())?;
    let again = replay_capture(&cap_path, cfg2, clock2, plan, false, None, None, link, None)?;
    let same = again.accounting == summary.accounting && again.sifted_bits == summary.sifted_bits;
    let json = a.out.join("summary.json");
    std::fs::write(&json, serde_json::to_string_pretty(&summary)? + "\n")?;
    let gates_svg = a.out.join("gates.svg");
    std::fs::write(
        &gates_svg,
        crate::profile::gate_layout_svg(&plan_profile.profile, &plan_profile.checked),
    )?;
    let mut files = vec![cap_path.clone(), json, key_path, profile_path, gates_svg];
    // The same receiver as the blob a board reads (docs/board-integration.md); a scenario
    // without the public marker has no board receiver, and no blob.
    let blob = crate::board_blob::compile(
        &plan_profile.profile,
        &plan_profile.checked,
        None,
        None,
        "receiver.toml",
    );
    if let Ok(blob) = blob {
        let blob_path = a.out.join("receiver.swblob");
        std::fs::write(&blob_path, blob)?;
        files.push(blob_path);
    }
    files.extend(plots::fold_profile(
        &a.out,
        &res.fold,
        cfg.gates(),
        &format!("Fold profile — {}", s.name),
    )?);
    let tx_clock = sim::TxClock::from_scenario(&s);
    let truth_period = |t_s: f64| tx_clock.period_at_ps(tx_clock.start_ps() + t_s * 1e12);
    files.extend(plots::clock_series(
        &a.out,
        &res.buckets,
        Some(&truth_period),
        &res.clock_events,
    )?);
    files.extend(plots::qber_and_rate(
        &a.out,
        &res.buckets,
        usize::from(cfg.gates().channels()),
    )?);
    files.extend(plots::stats::live_stats(&a.out, &res)?);
    let mut out = stdout();
    write!(out, "{summary}")?;
    writeln!(out, "{}", crate::keyrate::cmd::demo_line(&summary, &s))?;
    writeln!(
        out,
        "capture replay {} (the written capture replays to the same counters through the \
         receiver profile receiver.toml)",
        if same { "identical" } else { "DIFFERENT" }
    )?;
    writeln!(out, "files:")?;
    for f in files {
        writeln!(out, "  {}", f.display())?;
    }
    out.flush()?;
    if !same {
        return Err("replaying the written capture gave different counters".into());
    }
    Ok(())
}

fn simulate(a: SimulateArgs) -> Result<(), AnyErr> {
    let s = load_scenario(Some(&a.scenario), a.duration_s)?;
    let mut simulator = Simulator::new(&s);
    let pb = progress(1000, "simulating");
    let mut block = Vec::with_capacity(4096);
    let mut n = 0u64;
    let out =
        BufWriter::new(File::create(&a.out).map_err(|e| format!("{}: {e}", a.out.display()))?);
    enum Sink {
        Cap(CaptureWriter<BufWriter<File>>),
        Csv(csv_io::CsvWriter<BufWriter<File>>),
    }
    let mut sink = if a.csv {
        Sink::Csv(csv_io::CsvWriter::new(
            out,
            csv_io::CsvTime::Unwrapped(UnwrapConfig::new(s.tdc_bits, s.tdc_resolution_ps)?),
        )?)
    } else {
        Sink::Cap(CaptureWriter::new(out, capture_header(&s)?)?)
    };
    let mut record = tx_record::RecordOut::open(&a.record, &a.out, &s)?;
    loop {
        block.clear();
        if simulator.next_block(&mut block, 4096) == 0 {
            break;
        }
        for e in &block {
            match &mut sink {
                Sink::Cap(w) => w.push(e.event)?,
                Sink::Csv(w) => w.push(e.event)?,
            }
            if let Some(r) = record.as_mut() {
                r.observe(e)?;
            }
        }
        n += block.len() as u64;
        if let Some(last) = block.last() {
            pb.set_position((last.truth.true_t_ps * 1e-12 / s.duration_s * 1000.0) as u64);
        }
    }
    pb.finish_and_clear();
    match sink {
        Sink::Cap(w) => {
            w.finish_seek()?;
        }
        Sink::Csv(w) => {
            w.finish()?;
        }
    }
    let mut out = stdout();
    writeln!(
        out,
        "{}: {n} detections from scenario '{}' ({} s at {} Hz)",
        a.out.display(),
        s.name,
        s.duration_s,
        s.rep_rate_hz
    )?;
    if let Some(r) = record {
        writeln!(out, "{}", r.finish()?)?;
    }
    out.flush()?;
    Ok(())
}

fn inspect(a: InspectArgs) -> Result<(), AnyErr> {
    if keyfile::is_key_file(&a.capture) {
        let r = keyfile::inspect(&a.capture)?;
        emit(a.json, &r)?;
        return r.problem().map_or(Ok(()), |p| Err(p.into()));
    }
    if crate::txrecord::is_record_file(&a.capture) {
        let r = crate::txrecord::inspect(&a.capture)?;
        emit(a.json, &r)?;
        return r.problem().map_or(Ok(()), |p| Err(p.into()));
    }
    let r = capture::inspect(&a.capture)?;
    emit(a.json, &r)?;
    // The report is out in full; the exit status is what tells a script it was not good.
    r.problem().map_or(Ok(()), |p| Err(p.into()))
}

fn bench_pipeline(a: &crate::bench_pipeline::PipelineArgs) -> Result<(), AnyErr> {
    if a.count_only {
        for line in crate::bench_pipeline::count_only(a)? {
            println!("{line}");
        }
        return Ok(());
    }
    emit(a.json, &crate::bench_pipeline::run(a)?)
}

fn bench_sync(a: &crate::bench_sync::BenchSyncArgs) -> Result<(), AnyErr> {
    emit(a.json, &crate::bench_sync::run(a)?)
}

/// Buffered standard output. Writes return errors instead of panicking as `print!` does, so a
/// reader that closes the pipe early (`| head`) ends the command through `main`'s quiet path.
fn stdout() -> BufWriter<std::io::Stdout> {
    BufWriter::new(std::io::stdout())
}

/// Print a report to standard output, as pretty JSON or as its text table.
fn emit(json: bool, report: &(impl serde::Serialize + std::fmt::Display)) -> Result<(), AnyErr> {
    let mut out = stdout();
    if json {
        writeln!(out, "{}", serde_json::to_string_pretty(report)?)?;
    } else {
        write!(out, "{report}")?;
    }
    out.flush()?;
    Ok(())
}
