//! `slotwise replay`: a capture through the firmware core, with the receiver described by a
//! profile (or a scenario's receiver), the transmitter's answers from its record (or a scenario's
//! seeded generator), and the summary, plots and trace of what happened.

use super::session::{add_link, finish_session, host_tx, open_session};
use super::{progress, stdout, AlarmArgs, AnyErr, LinkArgs, LinkMode};
use crate::capture::{BlockOutcome, CaptureReader, SkipReport};
use crate::clocks::{self, ClockMode, ClockStages};
use crate::csv_io;
use crate::link::{HostTx, LinkModel};
use crate::plots;
use crate::replay::TraceRequest;
use crate::scenario::Scenario;
use crate::setup::{ClockArgs, ReceiverSetup};
use crate::sim::{self, TxSource};
use crate::summary::{summarize, Summary};
use crate::txrecord::TxRecord;
use clap::Args;
use slotwise::ReceiverConfig;
use std::fs::File;
use std::io::{BufReader, BufWriter, Write};
use std::path::{Path, PathBuf};
use std::rc::Rc;
use std::time::Instant;

#[derive(Args, Debug)]
pub struct ReplayArgs {
    #[command(flatten)]
    pub clock: ClockArgs,
    #[command(flatten)]
    pub link: LinkArgs,
    #[command(flatten)]
    pub alarms: AlarmArgs,
    /// Capture file, or a CSV file (`.csv`) of `t_ps,channel` lines.
    pub capture: PathBuf,
    /// Receiver profile (TOML, docs/receiver-profile.md): the receiver that recorded the capture.
    /// Give it with --tx-record for a capture from your own hardware.
    #[arg(long, value_name = "P.toml", conflicts_with = "scenario")]
    pub profile: Option<PathBuf>,
    /// What the transmitter sent (docs/transmitter-record.md): the answers come from it; a slot
    /// it does not hold is never answered (it ends `unanswered`).
    #[arg(long, value_name = "R.swtx")]
    pub tx_record: Option<PathBuf>,
    /// Scenario of a simulated link (default: the one stored in a simulated capture's header):
    /// its receiver, and its seeded transmitter unless --tx-record is given.
    #[arg(long, value_name = "S.toml")]
    pub scenario: Option<PathBuf>,
    /// Write the JSON summary here.
    #[arg(long)]
    pub json: Option<PathBuf>,
    /// Draw plots into this folder: fold profile, clock, QBER and rate over time, live statistics
    /// with bounds and alarms (SVG, and PNG when a font is found).
    #[arg(long)]
    pub plots: Option<PathBuf>,
    /// Write a per-detection trace (CSV) for the time range below.
    #[arg(long)]
    pub trace: Option<PathBuf>,
    /// Start of the traced range, in seconds on the capture's time base.
    #[arg(long, default_value_t = 0.0)]
    pub trace_from_s: f64,
    /// End of the traced range, in seconds (default: 1 ms after the start).
    #[arg(long)]
    pub trace_to_s: Option<f64>,
    /// Step over damaged blocks instead of stopping at the first one.
    #[arg(long)]
    pub skip_damaged: bool,
}

/// What a replay answers from: the receiver, the transmitter's choices, the hello that anchors
/// the numbering, and the scenario when the capture is simulated (its truth goes in the summary).
pub struct ReplayPlan {
    /// The receiver.
    pub setup: ReceiverSetup,
    /// What the transmitter sent: a scenario's generator or a transmitter record.
    pub source: TxSource,
    /// Seed of the framed transmitter's choice of revealed bits.
    pub reveal_seed: u64,
    /// The classical channel's hello: a receiver time (ps) and the transmitter's slot then.
    pub hint: Option<(u64, u64)>,
    /// The simulated link, when there is one.
    pub scenario: Option<Scenario>,
}

impl ReplayPlan {
    /// A simulated link: the scenario's receiver, seeded transmitter and simulated hello.
    pub fn of_scenario(s: &Scenario) -> Result<Self, AnyErr> {
        Ok(Self {
            setup: ReceiverSetup::from_scenario(s)?,
            source: TxSource::seeded(s),
            reveal_seed: s.seed,
            hint: Some(clocks::simulated_hint(s)?),
            scenario: Some(s.clone()),
        })
    }

    /// A receiver described by a profile, answered from a transmitter record (whose hello, if
    /// any, anchors the numbering); no truth.
    pub fn of_profile(setup: ReceiverSetup, record: TxRecord) -> Self {
        let record = Rc::new(record);
        Self {
            reveal_seed: setup.profile.sifting.squash_seed,
            setup,
            hint: record.hello(),
            source: TxSource::Record(record),
            scenario: None,
        }
    }

    /// Answer from a transmitter record instead (its hello anchors the numbering when it has
    /// one; otherwise a scenario's simulated hello stays).
    pub fn with_record(mut self, record: TxRecord) -> Self {
        let r = Rc::new(record);
        if let Some(h) = r.hello() {
            self.hint = Some(h);
        }
        self.source = TxSource::Record(r);
        self
    }

    /// The transmitter record the answers come from, if they do.
    pub fn record(&self) -> Option<&Rc<TxRecord>> {
        match &self.source {
            TxSource::Record(r) => Some(r),
            TxSource::Seeded(_) => None,
        }
    }

    /// The link model for `--link` options on this plan.
    fn link_base(&self) -> LinkModel {
        match &self.scenario {
            Some(s) => LinkModel::perfect(s),
            None => self
                .setup
                .link_base(self.setup.profile.sifting.squash_seed ^ 0x4C49_4E4B),
        }
    }
}

/// A record that answered none of the receiver's announcements is for another run: refuse it,
/// naming both slot ranges.
fn check_record_range(r: &TxRecord, tx: &HostTx) -> Result<(), AnyErr> {
    let Some((lo, hi)) = tx.announced_range() else {
        return Ok(());
    };
    if tx.unrecorded() > 0 && tx.unrecorded() == tx.announced() {
        r.check_range(lo..hi + 1)?;
    }
    Ok(())
}

/// Replay a capture file through the core (answers over the framed link `link` when given,
/// sifted key blocks to `key_out`); returns the summary.
#[allow(clippy::too_many_arguments)]
pub fn replay_capture(
    path: &Path,
    cfg: ReceiverConfig,
    clock: ClockStages,
    plan: ReplayPlan,
    skip_damaged: bool,
    trace: Option<TraceRequest>,
    plots_dir: Option<&Path>,
    link: Option<LinkModel>,
    key_out: Option<&Path>,
) -> Result<Summary, AnyErr> {
    let started = Instant::now();
    let name = path.display().to_string();
    let file = File::open(path).map_err(|e| format!("{name}: {e}"))?;
    let size = file.metadata().map(|m| m.len()).unwrap_or(0);
    let record = plan.record().cloned();
    let tx = host_tx(plan.source, plan.reveal_seed, link)?;
    let (mut session, tap) = open_session(cfg, clock, &plan.setup, tx, plan.hint, false, trace)?;
    let mut skipped = None;
    let pb = progress(size, "replaying");
    if csv_io::is_csv_path(path) {
        let r = csv_io::CsvReader::new(BufReader::new(file), &name)?;
        let mut block = Vec::with_capacity(4096);
        for ev in r {
            block.push(ev?);
            if block.len() == 4096 {
                session.push_block(&block);
                block.clear();
            }
        }
        session.push_block(&block);
    } else {
        let mut r = CaptureReader::new(BufReader::new(file), &name)?;
        r.header().check_receiver(cfg.tdc(), cfg.gates(), &name)?;
        let mut block = Vec::new();
        loop {
            if skip_damaged {
                match r.next_block_skipping(&mut block)? {
                    None => break,
                    Some(BlockOutcome::Block(_)) => session.push_block(&block),
                    Some(BlockOutcome::Skipped(sk)) => skipped
                        .get_or_insert_with(SkipReport::default)
                        .push(&sk, r.header().max_block_events),
                }
            } else if r.next_block(&mut block)?.is_some() {
                session.push_block(&block);
            } else {
                break;
            }
            pb.set_position(r.offset());
            if !pb.is_hidden() {
                pb.set_message(format!("replaying {}", session.live_status()));
            }
        }
        if let Some(rep) = skipped.as_mut() {
            rep.finish(r.declared_events(), r.events_read());
        }
    }
    pb.finish_and_clear();
    let (res, bits, blocks) = finish_session(session, &tap, key_out)?;
    if let Some(r) = &record {
        check_record_range(r, &res.tx)?;
    }
    let mut summary = summarize(
        &name,
        &res,
        res.rx.clock().period_ps().unwrap_or(f64::NAN),
        None,
        None,
        started.elapsed().as_secs_f64(),
    );
    if let Some(s) = plan.scenario.as_ref() {
        summary = summary.with_scenario(s);
    }
    add_link(&mut summary, &res, &bits, blocks, key_out);
    summary.skipped = skipped;
    if let Some(dir) = plots_dir {
        std::fs::create_dir_all(dir)?;
        let mut files = plots::fold_profile(
            dir,
            &res.fold,
            cfg.gates(),
            &format!("Fold profile — {name}"),
        )?;
        let tx_clock = plan.scenario.as_ref().map(sim::TxClock::from_scenario);
        let truth_period = tx_clock
            .as_ref()
            .map(|c| move |t_s: f64| c.period_at_ps(c.start_ps() + t_s * 1e12));
        let truth: Option<&dyn Fn(f64) -> f64> = truth_period.as_ref().map(|f| f as _);
        files.extend(plots::clock_series(
            dir,
            &res.buckets,
            truth,
            &res.clock_events,
        )?);
        files.extend(plots::qber_and_rate(
            dir,
            &res.buckets,
            usize::from(cfg.gates().channels()),
        )?);
        files.extend(plots::stats::live_stats(dir, &res)?);
        for f in files {
            eprintln!("wrote {}", f.display());
        }
    }
    Ok(summary)
}

/// The scenario stored in a simulated capture's header, if any (none in a CSV or an import).
fn header_scenario(path: &Path, name: &str) -> Result<Option<Scenario>, AnyErr> {
    // By extension, as `replay_capture` picks CSV by it: a content sniff could name the flag for
    // a file that would then still be read as a capture.
    if csv_io::is_csv_path(path) {
        return Ok(None);
    }
    let f = File::open(path).map_err(|e| format!("{name}: {e}"))?;
    let r = CaptureReader::new(BufReader::new(f), name)?;
    let meta = &r.header().metadata;
    if meta.trim().is_empty() {
        return Ok(None);
    }
    Ok(Some(Scenario::from_toml_str(
        meta,
        &format!("{name} (header metadata)"),
    )?))
}

/// What to tell a user whose capture carries no receiver description.
fn no_receiver(path: &Path, name: &str) -> String {
    let what = if csv_io::is_csv_path(path) {
        "a `t_ps,channel` CSV carries no receiver description (no scenario)"
    } else {
        "the capture header holds no scenario (an imported capture?)"
    };
    format!(
        "{name}: {what}; describe your receiver with --profile P.toml (docs/receiver-profile.md) \
         and give what the transmitter sent with --tx-record R.swtx \
         (docs/transmitter-record.md), or give a simulated link with --scenario S.toml"
    )
}

/// Build the plan of `slotwise replay` from its options.
fn plan(a: &ReplayArgs) -> Result<ReplayPlan, AnyErr> {
    let name = a.capture.display().to_string();
    let record = match &a.tx_record {
        Some(p) => Some(TxRecord::load(p)?),
        None => None,
    };
    let header = header_scenario(&a.capture, &name);
    let plan = if let Some(p) = &a.profile {
        let setup = ReceiverSetup::load(p)?;
        let mut alarms = setup.profile.alarms.clone();
        a.alarms.apply_to(&mut alarms);
        let setup = setup.with_alarms(alarms, "command line")?;
        let Some(record) = record else {
            return Err(format!(
                "{}: a profile describes the receiver only; give what the transmitter sent with \
                 --tx-record R.swtx (docs/transmitter-record.md){}",
                p.display(),
                sibling_record(&a.capture)
                    .map(|r| format!(" — {} is beside the capture", r.display()))
                    .unwrap_or_default()
            )
            .into());
        };
        ReplayPlan::of_profile(setup, record)
    } else {
        let mut s = match &a.scenario {
            Some(p) => Scenario::load(p)?,
            None => header
                .as_ref()
                .map_err(|e| e.to_string())?
                .clone()
                .ok_or_else(|| no_receiver(&a.capture, &name))?,
        };
        a.alarms.apply(&mut s)?;
        let plan = ReplayPlan::of_scenario(&s)?;
        match record {
            Some(r) => plan.with_record(r),
            None => plan,
        }
    };
    if let Ok(Some(h)) = &header {
        let rate = plan.setup.profile.clock.rep_rate_hz;
        if h.rep_rate_hz != rate {
            eprintln!(
                "warning: {name} was recorded from a link at {} Hz (its header's scenario '{}'), \
                 but the receiver given expects {rate} Hz: gates and clock will not fit",
                h.rep_rate_hz, h.name
            );
        }
    }
    let needs_hello = a.clock.clock == ClockMode::Recovered && plan.setup.checked.frame.is_some();
    if plan.hint.is_none() && needs_hello {
        eprintln!(
            "warning: no hello (receiver time and transmitter slot) in the transmitter record: the \
             marker gives slot numbers only modulo its period, so gated detections stay \
             `unaligned` (docs/transmitter-record.md, hello)"
        );
    }
    if let (Some(r), Some((_, slot))) = (plan.record(), plan.hint) {
        r.check_range(slot..slot + 1)?;
    }
    Ok(plan)
}

/// The transmitter record `slotwise simulate` writes beside a capture, when it is there.
fn sibling_record(capture: &Path) -> Option<PathBuf> {
    ["swtx", "swtx.csv"]
        .iter()
        .map(|ext| capture.with_extension(ext))
        .find(|p| p.exists())
}

/// Run `slotwise replay`.
pub(super) fn run(a: ReplayArgs) -> Result<(), AnyErr> {
    let plan = plan(&a)?;
    let link = a.link.model(plan.link_base(), LinkMode::Direct)?;
    let (cfg, clock) = plan.setup.receiver(&a.clock, link.is_some())?;
    let trace = match &a.trace {
        Some(p) => {
            let from_ps = (a.trace_from_s * 1e12) as u64;
            let to_ps = a
                .trace_to_s
                .map(|t| (t * 1e12) as u64)
                .unwrap_or(from_ps + 1_000_000_000);
            Some(TraceRequest {
                out: Box::new(BufWriter::new(File::create(p)?)),
                from_ps,
                to_ps,
            })
        }
        None => None,
    };
    let summary = replay_capture(
        &a.capture,
        cfg,
        clock,
        plan,
        a.skip_damaged,
        trace,
        a.plots.as_deref(),
        link,
        a.link.key_out.as_deref(),
    )?;
    let mut out = stdout();
    write!(out, "{summary}")?;
    out.flush()?;
    if let Some(j) = &a.json {
        std::fs::write(j, serde_json::to_string_pretty(&summary)? + "\n")?;
        eprintln!("wrote {}", j.display());
    }
    Ok(())
}
