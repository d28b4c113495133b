use super::*;
use crate::alarms::{AlarmKind, BoundKind};
use crate::gates::{Gate, GateTable};
use fixed::types::U0F32;

const BLOCK_PS: u64 = 1_000_000_000; // 1 ms

fn gates() -> GateTable {
    let half = U0F32::from_bits(1 << 31);
    GateTable::new(
        &[0, 0],
        &[
            Gate {
                channel: 0,
                start: U0F32::ZERO,
                end: U0F32::from_bits(1 << 30),
                basis: Basis::Z,
                bit: 0,
            },
            Gate {
                channel: 0,
                start: half,
                end: U0F32::from_bits(3 << 30),
                basis: Basis::Z,
                bit: 1,
            },
            Gate {
                channel: 1,
                start: U0F32::ZERO,
                end: half,
                basis: Basis::X,
                bit: 0,
            },
        ],
    )
    .unwrap()
}

fn monitor<const B: usize>() -> Monitor<B> {
    let cfg = StatsConfig::new(BLOCK_PS, 40_000, &gates()).unwrap();
    Monitor::new(cfg, AlarmConfig::DEFAULT)
}

fn trace(t_ps: u64, channel: u8, fate: Fate, slot: u64) -> Trace {
    Trace {
        t_ps: Some(t_ps),
        channel,
        slot: Some((slot, U0F32::ZERO)),
        gate: None,
        fate,
    }
}

fn bit(basis: Basis, bit: u8, tx_bit: Option<u8>) -> SiftedBit {
    SiftedBit {
        slot: 0,
        basis,
        bit,
        intensity: 0,
        multi_click: false,
        tx_bit,
    }
}

#[test]
fn config_duty_and_validation() {
    let cfg = StatsConfig::new(BLOCK_PS, 40_000, &gates()).unwrap();
    assert_eq!(cfg.duty_ppm(0), 500_000);
    assert_eq!(cfg.duty_ppm(1), 500_000);
    assert_eq!(cfg.duty_ppm(5), 0);
    assert_eq!(
        StatsConfig::new(0, 0, &gates()),
        Err(StatsConfigError::ZeroBlock)
    );
    assert_eq!(
        StatsConfig::new(10, 10, &gates()),
        Err(StatsConfigError::DeadTime(10))
    );
}

#[test]
fn rates_dead_time_off_gate_and_multi_clicks() {
    let mut m = monitor::<4>();
    // 1000 detections on channel 0 spread over one block, every 10th outside the gates, every
    // 50th slot with a second click; the clock locked throughout.
    let mut slot = 0;
    for i in 0..1000u64 {
        let t = i * (BLOCK_PS / 1000);
        let stage = if i % 10 == 0 {
            Fate::OutsideGates
        } else {
            Fate::InFlight
        };
        if stage == Fate::InFlight && i % 50 != 1 {
            slot += 1;
        }
        m.observe(&trace(t, 0, stage, slot), true);
    }
    m.advance(BLOCK_PS);
    let w = m.window();
    assert_eq!(m.window_blocks(), 1);
    assert_eq!(w.detections[0], 1000);
    // 1000 per ms = 1e6 Hz = 1e9 mHz.
    assert_eq!(w.rate_mhz(0), 1_000_000_000);
    // m·τ = 1e6/s × 40 ns = 4 %.
    assert_eq!(w.dead_fraction_ppm(0, 40_000), 40_000);
    // 100 off-gate in 0.999 ms locked; duty 1/2 → noise rate twice the off-gate rate.
    let off = w.off_gate_rate_mhz(0);
    assert_eq!(off, 100 * 1_000_000_000_000_000 / 999_000_000);
    assert_eq!(w.noise_rate_mhz(0, 500_000), 2 * off);
    assert_eq!(w.in_gate_noise_mhz(0, 500_000), off);
    // i = 51, 101, …, 951 repeat the previous gated slot (i = 1 follows an off-gate one).
    assert_eq!(w.multi_click_slots, 19);
    assert_eq!(w.multi_click_detections, 38);
    assert_eq!(
        w.gated_slots + w.multi_click_detections - w.multi_click_slots,
        900
    );
    let s = m.take_snapshot().unwrap();
    assert_eq!(
        (s.t_ps, s.window_blocks, s.detections[0]),
        (BLOCK_PS, 1, 1000)
    );
    assert_eq!(m.take_snapshot(), None);
}

#[test]
fn window_holds_at_most_blocks_and_gaps_close_empty_blocks() {
    let mut m = monitor::<3>();
    for k in 0..10u64 {
        m.observe(&trace(k * BLOCK_PS, 0, Fate::NoClock, 0), false);
        assert!(m.window_blocks() <= 3);
    }
    assert_eq!(m.window_blocks(), 3);
    assert_eq!(m.window().detections_in, 3);
    assert_eq!(m.since_start().detections_in, 10);
    // A gap of 100 blocks: the window empties, every block is counted.
    m.observe(&trace(109 * BLOCK_PS, 0, Fate::NoClock, 0), false);
    assert_eq!(m.blocks_closed(), 109);
    // 109 blocks closed and no snapshot taken: all but the last one replaced.
    assert_eq!(m.snapshots_replaced(), 108);
    assert_eq!(m.window().detections_in, 0);
    assert_eq!(m.since_start().detections_in, 11);
}

#[test]
fn qber_alarm_raises_and_clears() {
    let mut m = monitor::<2>();
    let mut t = 0;
    m.advance(t);
    // Block 1: 2000 tested Z bits, 20 % errors; Wilson upper bound far above 11 %.
    for i in 0..2000u32 {
        m.sifted(&bit(Basis::Z, 0, Some(u8::from(i % 5 == 0))));
    }
    t += BLOCK_PS;
    m.advance(t);
    let ev = m.pop_event().unwrap();
    assert_eq!(ev.kind, AlarmKind::QberHigh(Basis::Z));
    assert!(ev.raised && ev.value_ppm > 200_000 && ev.threshold_ppm == 110_028);
    assert_eq!(m.alarms().active(), AlarmKind::QberHigh(Basis::Z).bit());
    // Two clean blocks push the bad one out of the window: cleared.
    for _ in 0..2 {
        for _ in 0..2000 {
            m.sifted(&bit(Basis::Z, 0, Some(0)));
        }
        t += BLOCK_PS;
        m.advance(t);
    }
    let ev = m.pop_event().unwrap();
    assert_eq!((ev.kind, ev.raised), (AlarmKind::QberHigh(Basis::Z), false));
    assert_eq!(m.pop_event(), None);
    // Untested and X bits do not count towards the Z QBER.
    m.sifted(&bit(Basis::Z, 1, None));
    assert_eq!(m.since_start().errors(Basis::Z, None), (400, 6000));
}

#[test]
fn rate_collapse_and_lock_lost() {
    let mut m = monitor::<4>();
    let per_block = 100;
    let mut t = 0;
    for _ in 0..3 {
        for _ in 0..per_block {
            m.observe(&trace(t, 0, Fate::InFlight, t), true);
            t += BLOCK_PS / per_block;
        }
    }
    assert_eq!(m.pop_event(), None);
    // Blackout of 2.5 blocks; the first detection after it finds the clock lost.
    t += 5 * BLOCK_PS / 2;
    m.observe(&trace(t, 0, Fate::NoClock, 0), false);
    let kinds: Vec<_> = core::iter::from_fn(|| m.pop_event())
        .map(|e| (e.kind, e.raised))
        .collect();
    assert_eq!(
        kinds,
        [(AlarmKind::RateCollapse, true), (AlarmKind::LockLost, true)]
    );
    assert_eq!(m.alarms().raised_counts(), [0, 1, 1, 0, 0]);
    m.observe(&trace(t + 1, 0, Fate::InFlight, 1), true);
    assert_eq!(
        m.pop_event().map(|e| (e.kind, e.raised, e.t_ps)),
        Some((AlarmKind::LockLost, false, t + 1))
    );
}

#[test]
fn saturation_alarm() {
    let alarms = AlarmConfig::new(
        110_028,
        BoundKind::Wilson { z_q16: 1 << 16 },
        1000,
        0,
        250_000,
        30_000,
    )
    .unwrap();
    let cfg = StatsConfig::new(BLOCK_PS, 40_000, &gates()).unwrap();
    let mut m = Monitor::<2>::new(cfg, alarms);
    for i in 0..1000u64 {
        m.observe(&trace(i * BLOCK_PS / 1000, 1, Fate::InFlight, i), true);
    }
    m.advance(BLOCK_PS);
    let ev = m.pop_event().unwrap();
    assert_eq!(ev.kind, AlarmKind::Saturation { channel: 1 });
    assert_eq!((ev.value_ppm, ev.threshold_ppm), (40_000, 30_000));
}

#[test]
fn snapshot_round_trips() {
    let mut m = monitor::<2>();
    for i in 0..10u64 {
        m.observe(&trace(i, 1, Fate::OutsideGates, i), true);
        m.sifted(&bit(Basis::X, 1, Some(0)));
    }
    m.advance(BLOCK_PS);
    let s = m.take_snapshot().unwrap();
    assert_eq!(s.tested[1][0], (10, 10));
    assert_eq!(s.off_gate[1], 10);
    assert_eq!(s.upper_ppm[0], u32::MAX);
    let mut buf = [0u8; crate::formats::statistics::LEN];
    assert_eq!(s.emit(&mut buf), Ok(buf.len()));
    assert_eq!(Snapshot::parse(&buf), Ok(s));
    assert!(Snapshot::parse(&buf[1..]).is_err());
}

#[test]
fn ram_of_the_default_window() {
    // A compile-time fact, not a measurement: printed for the report.
    let size = core::mem::size_of::<Monitor<{ crate::stats::DEFAULT_BLOCKS }>>();
    println!(
        "Monitor<{}>: {size} bytes (one block: {} bytes)",
        crate::stats::DEFAULT_BLOCKS,
        core::mem::size_of::<Counts>()
    );
    // The window dominates: BLOCKS + 2 copies of Counts (ring, open block, totals) plus alarm
    // state and the pending snapshot; a budget of 9 KiB keeps growth visible.
    let counts = core::mem::size_of::<Counts>();
    assert!(size >= (crate::stats::DEFAULT_BLOCKS + 2) * counts);
    assert!(size <= 9 * 1024, "{size} bytes");
}
