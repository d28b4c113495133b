//! Driver for the fault scenarios: simulate a scenario with its faults, push every detection
//! through the core (recovered clock, as on a board) with the simulator's truth beside it, and
//! watch the clock's lock state and the gated detections after every single detection.

use slotwise::Transmitter;
use slotwise_sim::cli::{model_qber, receiver_setup, ClockArgs};
use slotwise_sim::clocks::{self, ClockMode};
use slotwise_sim::replay::{Bucket, ClockEvent, Session, TruthTag};
use slotwise_sim::scenario::Scenario;
use slotwise_sim::sim::{self, SimStats, SimTransmitter, Simulator};
use slotwise_sim::summary::{summarize, Summary};

/// One change of the clock's lock state.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LockEvent {
    /// Detections taken in when it was seen.
    pub detection: u64,
    /// True time of that detection, s since slot 0.
    pub t_s: f64,
    /// Locked after the change.
    pub locked: bool,
}

/// How the receiver came back from a fault.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Recovery {
    /// No lock event after the fault began.
    NotLost,
    /// Lock lost and regained; counted from the later of the fault's end and the first loss.
    Relocked {
        /// Detections until the last relock.
        to_relock: u64,
        /// Detections until the first gated detection after that relock (numbering realigned).
        to_gated: u64,
    },
    /// Not locked, or never gated, at the end of the run.
    Never,
}

/// What a fault run produced.
#[derive(Debug)]
pub struct FaultRun {
    /// The run's summary (accounting, lock counters, truth).
    pub summary: Summary,
    /// The simulator's own counters.
    pub sim: SimStats,
    /// Every lock state change after the first lock.
    pub lock_events: Vec<LockEvent>,
    /// Detections taken in before the fault window opened.
    pub at_fault_start: u64,
    /// Detections taken in when the fault window closed.
    pub at_fault_end: u64,
    /// How the receiver came back.
    pub recovery: Recovery,
    /// Largest pending-queue length seen.
    pub max_pending: usize,
    /// Capacity of the pending queue.
    pub pending_capacity: usize,
    /// Size of the receiver's whole state, bytes.
    pub receiver_bytes: usize,
    /// QBER, rate, residual and period per time bucket.
    pub buckets: Vec<Bucket>,
    /// The session's clock events (locks, holdovers, alignments), with a holdover's offset and
    /// bound where it ended.
    pub clock_events: Vec<ClockEvent>,
}

/// Gated detections so far: those past clock, numbering and gates (in flight or resolved by the
/// sifter).
fn gated(a: &slotwise::Accounting) -> u64 {
    use slotwise::Fate;
    [
        Fate::MultiClick,
        Fate::Sifted,
        Fate::BasisMismatch,
        Fate::QueueOverflow,
        Fate::Unanswered,
        Fate::InFlight,
    ]
    .into_iter()
    .map(|f| a[f])
    .sum()
}

/// Run `s` with the recovered clock (prior ±`prior_ppm`); the fault window is
/// `[from_s, to_s)` of true time since slot 0. `wrap` puts the transmitter's answers through
/// a faulty link (or passes them on); `end` reads the transmitter after the run.
pub fn run_with<T: Transmitter>(
    s: &Scenario,
    prior_ppm: u32,
    window_s: (f64, f64),
    tx: T,
    end: impl FnOnce(&T),
) -> FaultRun {
    run_buckets(
        s,
        prior_ppm,
        window_s,
        tx,
        end,
        (s.duration_s / 50.0).max(1e-6),
    )
}

/// [`run_with`] with time-series buckets of `bucket_s` seconds.
pub fn run_buckets<T: Transmitter>(
    s: &Scenario,
    prior_ppm: u32,
    window_s: (f64, f64),
    tx: T,
    end: impl FnOnce(&T),
    bucket_s: f64,
) -> FaultRun {
    s.validate(&s.name).unwrap_or_else(|e| panic!("{e}"));
    let clock = ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(prior_ppm),
    };
    let (cfg, host_clock) = receiver_setup(s, &clock).unwrap();
    let truth = sim::clock_truth(s).unwrap();
    let mut session = Session::new(cfg, host_clock, tx, bucket_s, true, None).unwrap();
    let (hint_t, hint_slot) = clocks::simulated_hint(s).unwrap();
    session.hint(hint_t, hint_slot);
    let mut simulator = Simulator::new(s);
    let t0 = simulator.clock().start_ps();
    let (from_ps, to_ps) = (t0 + window_s.0 * 1e12, t0 + window_s.1 * 1e12);
    let mut at_start = None;
    let mut at_end = None;
    let mut events = Vec::new();
    let mut locked = false;
    let mut ever_locked = false;
    let mut first_gated_since_event: Option<u64> = None;
    let mut last_gated = 0;
    let mut max_pending = 0;
    let mut n = 0u64;
    while let Some(e) = simulator.next_event() {
        if at_start.is_none() && e.truth.true_t_ps >= from_ps {
            at_start = Some(n);
        }
        if at_end.is_none() && e.truth.true_t_ps >= to_ps {
            at_end = Some(n);
            first_gated_since_event = None;
        }
        session.push(e.event, Some(TruthTag { slot: e.truth.slot }));
        n += 1;
        let rx = session.receiver();
        max_pending = max_pending.max(rx.pending_len());
        let now = rx.clock().locked();
        if now != locked {
            if ever_locked {
                events.push(LockEvent {
                    detection: n,
                    t_s: (e.truth.true_t_ps - t0) * 1e-12,
                    locked: now,
                });
                if at_start.is_some() {
                    first_gated_since_event = None;
                }
            }
            ever_locked |= now;
            locked = now;
        }
        let g = gated(rx.accounting());
        if g > last_gated {
            last_gated = g;
            if at_end.is_some() && first_gated_since_event.is_none() {
                first_gated_since_event = Some(n);
            }
        }
    }
    let res = session.finish().unwrap();
    end(&res.tx);
    let summary = summarize(
        &s.name,
        &res,
        res.rx.clock().period_ps().unwrap_or(f64::NAN),
        Some(truth.period_ps),
        Some(model_qber(s)),
        0.0,
    );
    let at_end = at_end.unwrap_or(n);
    let at_start = at_start.unwrap_or(n);
    let since: Vec<&LockEvent> = events.iter().filter(|e| e.detection > at_start).collect();
    let recovery = match (since.first(), since.last(), first_gated_since_event) {
        (None, _, _) => Recovery::NotLost,
        (Some(first), Some(last), Some(g)) if last.locked => {
            let base = at_end.max(first.detection);
            Recovery::Relocked {
                to_relock: last.detection.saturating_sub(base),
                to_gated: g.saturating_sub(base),
            }
        }
        _ => Recovery::Never,
    };
    FaultRun {
        summary,
        sim: *simulator.stats(),
        lock_events: events,
        at_fault_start: at_start,
        at_fault_end: at_end,
        recovery,
        max_pending,
        pending_capacity: slotwise_sim::replay::HOST_PENDING,
        receiver_bytes: std::mem::size_of_val(&*res.rx),
        buckets: res.buckets,
        clock_events: res.clock_events,
    }
}

/// [`run_with`] with the simulator's own transmitter answering every announcement at once.
pub fn run(s: &Scenario, prior_ppm: u32, window_s: (f64, f64)) -> FaultRun {
    run_with(s, prior_ppm, window_s, SimTransmitter::new(s), |_| {})
}

/// The checks every fault scenario shares: every detection in exactly one counter, and no sifted
/// bit in a slot other than the one its photon was sent in.
pub fn check_common(name: &str, r: &FaultRun) {
    let sum = &r.summary;
    let total: u64 = sum.accounting.values().sum();
    assert_eq!(total, sum.detections_in, "{name}: accounting\n{sum}");
    assert_eq!(sum.accounting.get("in_flight"), Some(&0), "{name}\n{sum}");
    let truth = sum.truth.as_ref().unwrap();
    assert_eq!(truth.misassigned_sifted, 0, "{name}: misassigned\n{sum}");
    assert!(sum.lock.acquired, "{name}: never locked\n{sum}");
    assert!(r.max_pending <= r.pending_capacity, "{name}: pending");
    println!(
        "{name}: detections {}, sifted {}, lock events {:?}, recovery {:?}, \
         losses {}, relocks {}, bridged {}, realignments {}, accounting {:?}",
        sum.detections_in,
        sum.sifted_bits,
        r.lock_events,
        r.recovery,
        sum.lock.losses,
        sum.lock.relocks,
        sum.lock.bridged,
        sum.lock.realignments,
        sum.accounting
    );
}
