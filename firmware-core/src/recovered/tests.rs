//! End-to-end tests of the recovered clock on synthetic links (debug builds, about a second each).

use super::*;
use crate::accounting::Fate;
use crate::acquire::synth::{Event, Scenario, Stream};
use crate::acquire::AcquireParams;
use crate::track::{bandwidth_for_mhz, TrackParams};
use fixed::types::U0F32;
use std::collections::BTreeMap;

type Clk = RecoveredClock<2048, 8, 2>;

const T0: f64 = 10_000.0;

/// Settings for a 100 MHz link with `rate` signal detections per second.
fn config(prior_ppm: u32, rate: u64) -> RecoveredConfig {
    let mut a = AcquireParams::new(U32F32::from_num(T0), prior_ppm);
    a.work_per_call = 4096;
    // Bandwidth rule: drift 100 ppb/s; σ² = 35² ps² jitter + 2w·(wT)²/3 window noise = 132² ps².
    let b = bandwidth_for_mhz(rate, 100, 132, 707).min(rate * 100) as u32;
    let t = TrackParams::new(b, rate, 1_000_000_000); // blackout after 1 ms
    RecoveredConfig::new(
        AcquireConfig::new(a).unwrap(),
        TrackConfig::new(t).unwrap(),
        20,
    )
    .unwrap()
}

#[derive(Debug, Default)]
struct Outcome {
    /// (time in s, state) at each change.
    states: Vec<(f64, LockState)>,
    /// Detections pushed before the first lock.
    to_first_lock: Option<usize>,
    /// Per epoch: counts of (located slot − true slot) for signal detections.
    offsets: BTreeMap<u32, BTreeMap<i128, u64>>,
    /// Signal detections located more than `w` from their expected position.
    off_position: u64,
    located: u64,
}

impl Outcome {
    /// For each epoch, the fraction of signal detections off its dominant slot offset.
    fn misnumbered(&self) -> f64 {
        let (mut bad, mut all) = (0, 0);
        for m in self.offsets.values() {
            let best = m.values().max().copied().unwrap_or(0);
            bad += m.values().sum::<u64>() - best;
            all += m.values().sum::<u64>();
        }
        bad as f64 / all.max(1) as f64
    }

    fn dominant(&self, epoch: u32) -> i128 {
        let m = &self.offsets[&epoch];
        *m.iter().max_by_key(|(_, &c)| c).unwrap().0
    }
}

fn drive(clk: &mut Clk, sc: Scenario, seconds: f64, align: bool) -> (Outcome, Stream) {
    let stream = Stream::new(sc.clone());
    let mut out = Outcome::default();
    let end = sc.start_ps + seconds * 1e12;
    let mut last = clk.state();
    for (i, d) in stream.clone().enumerate() {
        if d.t_ps as f64 > end {
            break;
        }
        let got = clk.observe(d.channel, d.t_ps);
        if clk.state() != last {
            last = clk.state();
            out.states
                .push(((d.t_ps as f64 - sc.start_ps) / 1e12, last));
            if last == LockState::Locked && out.to_first_lock.is_none() {
                out.to_first_lock = Some(i + 1);
            }
        }
        if let (Located::At(p), Some(k)) = (got, d.slot) {
            out.located += 1;
            let mut off = i128::from(p.slot) - i128::from(k);
            if align && !clk.slot_numbering_valid() && clk.epoch() == 1 {
                // What frame alignment would do on the first located detection.
                clk.align_numbering(-(off as i64));
                off = 0;
            }
            let epoch = out.offsets.entry(clk.epoch()).or_default();
            *epoch.entry(off).or_default() += 1;
            if (p.phase.to_num::<f64>() - 0.5).abs() > 1.0 / 16.0 {
                out.off_position += 1;
            }
        }
    }
    (out, stream)
}

fn frequency_error(clk: &Clk, stream: &Stream, t_ps: f64) -> f64 {
    clk.period_ps().unwrap().to_num::<f64>() / stream.period_at(t_ps) - 1.0
}

#[test]
fn cold_lock_then_follow_drift_at_1e2_and_1e4() {
    for (p, off, prior, secs) in [(1e-2, 450.0, 500, 0.12), (1e-4, -180.0, 200, 4.0)] {
        let rate = (p / T0 * 1e12) as u64;
        let mut clk = Clk::new(
            config(prior, rate),
            ArrivalPattern::single(U0F32::from_num(0.5)),
        )
        .unwrap();
        let mut sc = Scenario::simple(T0, off, p, 0.5, 31);
        sc.drift_ppm_per_s = 0.1;
        sc.reorder_ps = 2000.0;
        let (o, stream) = drive(&mut clk, sc.clone(), secs, false);
        let y = frequency_error(&clk, &stream, sc.start_ps + secs * 1e12);
        // Loop theory (see the track tests): σ_y² = σ²·ω_n³/(4ζR)/f², σ = 132 ps = 0.0132 slot.
        let b = f64::from(clk.tracker().config().params().bandwidth_mhz) / 1000.0;
        let wn = 2.0 * b / (0.707 + 1.0 / (4.0 * 0.707));
        let sigma_y = (0.0132f64.powi(2) * wn.powi(3) / (4.0 * 0.707 * rate as f64)).sqrt() / 1e8;
        // Under the ramp the integrator lags by 2ζ·D/ω_n (the proportional path carries the
        // rest), so the period estimate is long by that fraction [derived, see track].
        let bias = 2.0 * 0.707 * 0.1e-6 / wn;
        eprintln!(
            "p={p:e}: locked after {:?} detections, states {:?}, misnumbered {:.1e}, \
             y error {y:.2e} = bias + {:.1} σ_y (B_n {b} Hz)",
            o.to_first_lock,
            o.states,
            o.misnumbered(),
            (y - bias) / sigma_y
        );
        assert_eq!(o.states, vec![(o.states[0].0, LockState::Locked)]);
        assert!(o.to_first_lock.unwrap() < 1600);
        assert_eq!(o.misnumbered(), 0.0);
        assert_eq!(o.off_position, 0);
        assert!((y - bias).abs() < 4.0 * sigma_y, "{y} vs σ_y {sigma_y}");
        assert_eq!(clk.counters().locks, 1);
        assert!(!clk.slot_numbering_valid());
    }
}

#[test]
fn blackouts_are_held_over_within_their_bound() {
    let mut clk = Clk::new(
        config(500, 100_000),
        ArrivalPattern::single(U0F32::from_num(0.5)),
    )
    .unwrap();
    let mut sc = Scenario::simple(T0, 37.0, 1e-3, 0.5, 32);
    sc.drift_ppm_per_s = 0.1;
    // 5 ms dark: the bound (whole drift allowance, 0.1 ppm/s, the estimate not yet in use) is
    // 1e-3 slot, and the arrivals come back where predicted. 150 ms dark: ½·ν̇·Δt² = 0.11 slot
    // of drift, within a bound of 0.11 slot plus twice the window: held over too. 400 ms dark:
    // the bound has passed 3/8 slot when the first detection after it comes, so the holdover
    // gives up at once; the lock is found again and the numbers restart within the bound.
    sc.events = vec![
        Event::Blackout {
            from_ps: sc.start_ps + 0.1e12,
            to_ps: sc.start_ps + 0.105e12,
        },
        Event::Blackout {
            from_ps: sc.start_ps + 0.2e12,
            to_ps: sc.start_ps + 0.35e12,
        },
        Event::Blackout {
            from_ps: sc.start_ps + 0.45e12,
            to_ps: sc.start_ps + 0.85e12,
        },
    ];
    let (o, _) = drive(&mut clk, sc, 1.0, true);
    let c = *clk.counters();
    eprintln!("blackouts: states {:?}, counters {c:?}", o.states);
    let kinds: Vec<LockState> = o.states.iter().map(|s| s.1).collect();
    use LockState::*;
    assert_eq!(
        kinds,
        vec![
            Locked,
            Holdover,
            Locked,
            Holdover,
            Locked,
            Lost,
            Reacquiring,
            Locked
        ]
    );
    assert_eq!((c.holdovers, c.holdovers_bridged, c.jumps), (3, 2, 0));
    assert_eq!((c.losses, c.relocks, c.bridged, c.epoch), (1, 1, 0, 2));
    assert!(clk.renumbered_within().is_some_and(|k| k <= 4));
    assert_eq!(o.misnumbered(), 0.0, "{:?}", o.offsets);
    // Epoch 1 spans the cold lock and both holdovers, still aligned to the truth.
    assert_eq!(o.dominant(1), 0);
}

#[test]
fn phase_jump_is_taken_without_losing_the_lock() {
    let mut clk = Clk::new(
        config(500, 100_000),
        ArrivalPattern::single(U0F32::from_num(0.5)),
    )
    .unwrap();
    let mut sc = Scenario::simple(T0, -120.0, 1e-3, 0.5, 33);
    sc.events = vec![Event::PhaseJump {
        at_ps: sc.start_ps + 0.1e12,
        slots: 0.37,
    }];
    let (o, _) = drive(&mut clk, sc, 0.3, true);
    eprintln!(
        "phase jump: states {:?}, counters {:?}",
        o.states,
        clk.counters()
    );
    use LockState::*;
    let kinds: Vec<LockState> = o.states.iter().map(|s| s.1).collect();
    assert_eq!(kinds, vec![Locked, Holdover, Locked]);
    // Noticed within a few averaging lengths (256 detections ≈ 1.3 ms here), taken within a
    // few hundred detections more.
    assert!(o.states[1].0 - 0.1 < 0.005, "{:?}", o.states);
    assert!(o.states[2].0 - o.states[1].0 < 0.005, "{:?}", o.states);
    let c = clk.counters();
    assert_eq!((c.jumps, c.losses, c.epoch), (1, 0, 1));
    // The jump is taken the short way round: the slot numbers are those of the truth still.
    assert_eq!(o.misnumbered(), 0.0);
    assert_eq!(o.dominant(1), 0);
}

#[test]
fn frequency_step_is_followed_or_relocked() {
    let mut clk = Clk::new(
        config(500, 100_000),
        ArrivalPattern::single(U0F32::from_num(0.5)),
    )
    .unwrap();
    let mut sc = Scenario::simple(T0, 10.0, 1e-3, 0.5, 34);
    sc.events = vec![Event::FreqStep {
        at_ps: sc.start_ps + 0.1e12,
        ppm: 2.0,
    }];
    let (o, stream) = drive(&mut clk, sc.clone(), 0.4, true);
    let y = frequency_error(&clk, &stream, sc.start_ps + 0.4e12);
    eprintln!(
        "+2 ppm step: states {:?}, counters {:?}, y error {y:.2e}",
        o.states,
        clk.counters()
    );
    assert_eq!(clk.state(), LockState::Locked);
    assert!(y.abs() < 5e-8, "{y}");
    assert_eq!(o.misnumbered(), 0.0);
}

#[test]
fn large_frequency_step_widens_the_reacquisition() {
    // +30 ppm lies outside the ±20 ppm reacquisition prior: the narrow searches fail, then the
    // cold prior finds it.
    let mut clk = Clk::new(
        config(500, 100_000),
        ArrivalPattern::single(U0F32::from_num(0.5)),
    )
    .unwrap();
    let mut sc = Scenario::simple(T0, 10.0, 1e-3, 0.5, 37);
    sc.events = vec![Event::FreqStep {
        at_ps: sc.start_ps + 0.05e12,
        ppm: 30.0,
    }];
    let (o, stream) = drive(&mut clk, sc.clone(), 0.15, false);
    let s = clk.acquire_stats();
    eprintln!("+30 ppm step: states {:?}, acquisition {s:?}", o.states);
    assert_eq!(clk.state(), LockState::Locked);
    assert!(s.search_failed >= NARROW_ATTEMPTS);
    assert!(frequency_error(&clk, &stream, sc.start_ps + 0.15e12).abs() < 5e-8);
}

#[test]
fn delay_calibration_finds_channel_skews() {
    let mut clk = Clk::new(
        config(500, 100_000),
        ArrivalPattern::single(U0F32::from_num(0.5)),
    )
    .unwrap();
    let mut sc = Scenario::simple(T0, 0.0, 1e-3, 0.5, 35);
    sc.channels = vec![
        (0, vec![0.5], 1.0),
        (1, vec![0.5], 1.0),
        (2, vec![0.5], 0.5),
    ];
    // Channel 1 late by 300 ps (inside the ±625 ps window), channel 2 early by 1500 ps (outside).
    sc.channel_skew_ps = vec![0.0, 300.0, -1500.0];
    let _ = drive(&mut clk, sc, 0.2, true);
    let c = clk.delay_corrections_ps();
    eprintln!("delay corrections {:?}", &c[..3]);
    let (c0, c1, c2) = (c[0].unwrap(), c[1].unwrap(), c[2].unwrap());
    // Relative corrections: the loop itself sits between channels 0 and 1. Channel 2 comes from
    // the histogram (bin 312 ps), the others from the in-window mean.
    assert!((c1 - c0 - 300).abs() < 15, "{c0} {c1}");
    assert!((c2 - c0 + 1500).abs() < 120, "{c0} {c2}");
    assert_eq!(c[3], None);
}

#[test]
fn plugs_into_the_receiver() {
    use crate::gates::{Basis, Gate, GateTable};
    use crate::sift::{Announcement, Answer, NullSink, OverflowPolicy, Transmitter};
    use crate::timestamps::{TdcEvent, UnwrapConfig};
    use crate::{Receiver, ReceiverConfig};
    struct Silent;
    impl Transmitter for Silent {
        fn announce(&mut self, _a: Announcement) {}
        fn poll_answer(&mut self) -> Option<Answer> {
            None
        }
    }
    let g = |start: f64, end: f64, bit| Gate {
        channel: 0,
        start: U0F32::from_num(start),
        end: U0F32::from_num(end),
        basis: Basis::Z,
        bit,
    };
    let table = GateTable::new(&[0], &[g(0.05, 0.2, 0), g(0.55, 0.7, 1)]).unwrap();
    let pattern = ArrivalPattern::from_gates(&table);
    let clock = Clk::new(config(200, 100_000), pattern).unwrap();
    let cfg = ReceiverConfig::new(
        UnwrapConfig::new(48, 1).unwrap(),
        table,
        1,
        1 << 20,
        OverflowPolicy::DropOldest,
        1,
    )
    .unwrap();
    let mut rx = Receiver::<_, 64>::new(cfg, clock);
    let mut sc = Scenario::simple(T0, 150.0, 1e-3, 0.5, 36);
    sc.channels = vec![(0, vec![0.125, 0.625], 1.0)];
    let events: Vec<TdcEvent> = Stream::new(sc)
        .take(20_000)
        .map(|d| TdcEvent {
            count: d.t_ps & ((1 << 48) - 1),
            channel: d.channel,
        })
        .collect();
    rx.push_block(&events, &mut Silent, &mut NullSink);
    let a = rx.accounting();
    eprintln!("receiver accounting {a:?}");
    assert_eq!(rx.clock().state(), LockState::Locked);
    assert!(a[Fate::NoClock] >= 1536 && a[Fate::NoClock] < 2500);
    // Noise is half the detections and the gates cover 30 % of the slot.
    let gated = rx.detections_in() - a[Fate::NoClock] - a[Fate::OutsideGates];
    assert!(gated > a[Fate::OutsideGates], "{a:?}");
}

/// The size report: bytes of the recovered clock and of each part, for the host's and the HIL's
/// capacities. Run with `-- --nocapture size_report` to read it.
#[test]
fn size_report() {
    use core::mem::{size_of, size_of_val};
    let clk = Clk::new(
        config(200, 1_000_000),
        ArrivalPattern::single(U0F32::from_num(0.5)),
    )
    .unwrap();
    let total = size_of::<Clk>();
    let fields = [
        ("cfg", size_of_val(&clk.cfg)),
        ("pattern", size_of_val(&clk.pattern)),
        ("acq", size_of_val(&clk.acq)),
        ("trk", size_of_val(&clk.trk)),
        ("state", size_of_val(&clk.state)),
        ("counters", size_of_val(&clk.counters)),
        ("numbering_valid", size_of_val(&clk.numbering_valid)),
        ("last_lock", size_of_val(&clk.last_lock)),
        ("reacquire_from", size_of_val(&clk.reacquire_from)),
    ];
    eprintln!("RecoveredClock<2048, 8, 2>: {total} B");
    for (name, bytes) in fields {
        eprintln!("  {name:<16} {bytes:>6} B");
    }
    let acq = clk.acq.field_sizes();
    eprintln!("  acq: Acquirer<2048, 8, 2>: {} B", size_of_val(&clk.acq));
    for (name, bytes) in &acq {
        eprintln!("    {name:<14} {bytes:>6} B");
    }
    let trk = clk.tracker();
    let trk_known = size_of_val(trk.config()) + 2 * size_of_val(trk.model());
    eprintln!("  trk: Tracker: {} B", size_of_val(trk));
    eprintln!("    {:<14} {:>6} B", "cfg", size_of_val(trk.config()));
    eprintln!(
        "    {:<14} {:>6} B",
        "model+last_good",
        2 * size_of_val(trk.model())
    );
    eprintln!(
        "    {:<14} {:>6} B",
        "cal and rest",
        size_of_val(trk) - trk_known
    );
    let listed: usize = fields.iter().map(|f| f.1).sum();
    assert!(listed <= total, "fields {listed} B > total {total} B");
    let acq_listed: usize = acq.iter().map(|f| f.1).sum();
    assert!(acq_listed <= size_of_val(&clk.acq));
}
