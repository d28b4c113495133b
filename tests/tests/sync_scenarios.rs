//! End-to-end scenarios with the clock recovered from the detections alone: each simulates a link
//! (seeded), pushes every detection through the firmware core with no period handed to it beyond
//! the prior, and checks against the simulator's truth:
//! - the clock locks and the numbering aligns on the public marker;
//! - zero sifted bits are assigned to a slot other than the one their photon was sent in;
//! - the Z-basis QBER lies within 4 binomial standard deviations of the channel model's value
//!   (Lo, Ma, Chen, PRL 94, 230504, 2005; Ma, Qi, Zhao, Lo, PRA 72, 012326, 2005, with afterpulses
//!   counted as noise);
//! - every detection ends in exactly one counter.

use slotwise_sim::bench_sync::link::{self, LinkPoint};
use slotwise_sim::cli::{run_simulated, ClockArgs};
use slotwise_sim::clocks::ClockMode;
use slotwise_sim::scenario::Scenario;
use slotwise_sim::summary::Summary;

fn recovered(prior_ppm: u32) -> ClockArgs {
    ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(prior_ppm),
    }
}

fn check(name: &str, s: Scenario, prior_ppm: u32) -> Summary {
    s.validate(name).unwrap();
    let (summary, _) = run_simulated(&s, &recovered(prior_ppm), None).unwrap();
    let total: u64 = summary.accounting.values().sum();
    assert_eq!(total, summary.detections_in, "{name}: accounting");
    assert!(summary.lock.acquired, "{name}: never locked\n{summary}");
    let truth = summary.truth.as_ref().unwrap();
    assert_eq!(truth.misassigned_sifted, 0, "{name}\n{summary}");
    assert!(
        summary.sifted_bits > 1000,
        "{name}: too few sifted bits\n{summary}"
    );
    let z = &summary.qber.z;
    let q = truth.qber_z;
    let sd = (q * (1.0 - q) / z.tested as f64).sqrt();
    let got = z.value.unwrap();
    assert!(
        (got - q).abs() <= 4.0 * sd,
        "{name}: QBER Z {got:.5} vs model {q:.5} (4σ = {:.5})\n{summary}",
        4.0 * sd
    );
    summary
}

fn bench(duration_s: f64) -> Scenario {
    Scenario {
        duration_s,
        ..Scenario::default_bench()
    }
}

#[test]
fn default_bench_link() {
    check("default", bench(0.12), 500);
}

#[test]
fn offset_plus_and_minus_450_ppm() {
    for ppm in [450.0, -450.0] {
        let s = Scenario {
            clock_offset_ppm: ppm,
            ..bench(0.12)
        };
        check(&format!("offset {ppm} ppm"), s, 500);
    }
}

#[test]
fn drift_of_0_1_ppm_per_second() {
    let s = Scenario {
        clock_drift_ppm_per_s: 0.1,
        ..bench(0.4)
    };
    let sum = check("drift 0.1 ppm/s", s, 500);
    assert_eq!(sum.lock.losses, 0, "{sum}");
}

#[test]
fn one_ghz_link() {
    let s = Scenario::load(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../scenarios/efficient-bb84-1ghz-10km.toml"
    ))
    .unwrap();
    let s = Scenario {
        duration_s: 0.01,
        ..s
    };
    check("1 GHz", s, 200);
}

#[test]
fn counter_of_48_bits_wrapping_mid_run() {
    // 2^48 ps = 281.47 s: start the counter 60 ms before its wrap.
    let s = Scenario {
        tdc_start_ticks: (1u64 << 48) - 60_000_000_000,
        ..bench(0.12)
    };
    check("48-bit wrap", s, 500);
}

#[test]
fn detection_probability_of_1e_6_per_slot() {
    // 100 MHz, no fibre, 55 dB of added loss: about 1e-6 detections per slot (about 100 signal
    // detections per second) plus 60 dark counts per second, for 500 s. The transmitter clock
    // does not drift here: the acquisition folds with a constant period over its whole span
    // (about 30 s at this rate), and a ramp of 0.02 ppm/s would walk the phase by tens of slots
    // across it; the drift search (below) handles drifting clocks down to about this rate.
    let s = Scenario {
        fiber_km: 0.0,
        extra_loss_db: 55.0,
        dark_count_hz: 20.0,
        clock_drift_ppm_per_s: 0.0,
        duration_s: 500.0,
        ..Scenario::default_bench()
    };
    let sum = check("1e-6 per slot", s, 200);
    let per_slot = sum.detections_in as f64 / (500.0 * 1e8);
    assert!(per_slot < 2e-6, "{per_slot}");
}

#[test]
fn bounded_hint_aligns_from_few_detections() {
    // A hello timestamped in hardware, stated to ±10 µs (1 000 slots at 100 MHz) and off by
    // that whole bound: the hint window (docs/marker.md §7) aligns the default link after a few
    // thousand gated detections instead of the full search's ~25 000, and no sifted bit lands in
    // a wrong slot. Three seeds.
    for seed in 1..=3u64 {
        let s = Scenario {
            hint_error_us: Some(10.0),
            seed: Scenario::default_bench().seed ^ seed,
            ..bench(0.12)
        };
        let sum = check(&format!("hint ±10 µs, seed {seed}"), s, 500);
        assert_eq!(sum.lock.numbering, "aligned", "{sum}");
        assert_eq!(sum.lock.aligned_by.as_deref(), Some("hint-window"), "{sum}");
        let n = sum.lock.aligned_after_detections.unwrap();
        println!("seed {seed}: aligned after {n} gated detections");
        // Synthetic streams at p = 1e-3: median 3 072, max 4 768 of 200 runs (§7).
        assert!(n <= 6_000, "{n} detections\n{sum}");
    }
}

#[test]
fn unbounded_hint_falls_back_to_the_search() {
    // Today's default hello (±300 µs = 30 000 slots) is wider than the window's capacity: the
    // full search aligns, as before.
    let sum = check("default hint", bench(0.12), 500);
    assert_eq!(sum.lock.aligned_by.as_deref(), Some("search"), "{sum}");
    println!(
        "aligned after {:?} gated detections",
        sum.lock.aligned_after_detections
    );
}

#[test]
#[ignore = "false-alignment sweep of docs/marker.md §7; about a minute in release mode"]
fn bounded_hint_seed_sweep() {
    let mut ns = Vec::new();
    for seed in 1..=40u64 {
        let s = Scenario {
            hint_error_us: Some(10.0),
            seed: Scenario::default_bench().seed ^ (seed << 8),
            ..bench(0.08)
        };
        let sum = check(&format!("sweep seed {seed}"), s, 500);
        assert_eq!(sum.lock.aligned_by.as_deref(), Some("hint-window"), "{sum}");
        ns.push(sum.lock.aligned_after_detections.unwrap());
    }
    ns.sort_unstable();
    println!(
        "40 seeds, 0 misassigned: aligned after min {} median {} max {}",
        ns[0], ns[20], ns[39]
    );
}

/// The efficient-BB84 1 GHz link at `p_slot` detections per slot (`noise` of them dark counts),
/// transmitter offset −280 ppm drifting at `drift_ppm_per_s`, for `secs`.
fn ghz_link(p_slot: f64, noise: f64, drift_ppm_per_s: f64, secs: f64) -> Scenario {
    let base = Scenario::load(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../scenarios/efficient-bb84-1ghz-10km.toml"
    ))
    .unwrap();
    let pt = LinkPoint {
        p_slot,
        noise_fraction: noise,
        drift_ppm_per_s,
    };
    let mut s = link::scenario_from(base, &pt, 5001, -280.0, 1e5).unwrap();
    s.duration_s = secs;
    s
}

#[test]
fn one_ghz_at_1e_5_per_slot_drifting_2_ppm_per_second() {
    // 13,000 detections/s: the 77 ms search span sees ½·ν̇·T² = 6 turns of drift
    // (ν̇ = 2 kHz/s), so only the chirp search (allowance from the profile's drift) locks.
    let sum = check(
        "1 GHz, 1e-5 per slot, 2 ppm/s",
        ghz_link(1e-5, 0.25, 2.0, 12.0),
        500,
    );
    assert_eq!(sum.lock.losses, 0, "{sum}");
}

#[test]
fn one_ghz_at_3e_6_per_slot_drifting_0_1_ppm_per_second() {
    // 4,000 detections/s: the 0.26 s search span sees ½·ν̇·T² = 3.3 turns of drift
    // (ν̇ = 100 Hz/s); prior ±500 ppm.
    let sum = check(
        "1 GHz, 3e-6 per slot, 0.1 ppm/s",
        ghz_link(3e-6, 0.25, 0.1, 30.0),
        500,
    );
    assert_eq!(sum.lock.losses, 0, "{sum}");
}

#[test]
#[ignore = "about a minute in a debug build: cargo test --release -p slotwise-tests --test sync_scenarios -- --ignored"]
fn one_ghz_at_1e_6_per_slot_drifting_0_02_ppm_per_second() {
    // 1,300 detections/s: the 0.77 s search span sees ½·ν̇·T² = 6 turns of drift (ν̇ = 20 Hz/s):
    // about 13 chirp points.
    let sum = check(
        "1 GHz, 1e-6 per slot, 0.02 ppm/s",
        ghz_link(1e-6, 0.25, 0.02, 120.0),
        500,
    );
    assert_eq!(sum.lock.losses, 0, "{sum}");
}

#[test]
fn one_ghz_at_6e_6_per_slot_drifting_0_1_ppm_per_second_tracks_for_a_minute() {
    // 7,800 detections/s for 60 s, 25 % noise: the loop, steered by the measured drift
    // (docs/holdover.md), holds the lock throughout with no holdover.
    let sum = check(
        "1 GHz, 6e-6 per slot, 0.1 ppm/s",
        ghz_link(6e-6, 0.25, 0.1, 60.0),
        500,
    );
    assert_eq!(sum.lock.losses, 0, "{sum}");
    assert_eq!(sum.lock.holdovers, 0, "{sum}");
    assert_eq!(sum.lock.channels_set_aside, 0, "{sum}");
}

#[test]
#[ignore = "about a minute in a debug build: cargo test --release -p slotwise-tests --test sync_scenarios -- --ignored"]
fn one_ghz_at_1e_6_per_slot_drifting_0_1_ppm_per_second() {
    // 1,300 detections/s: once locked (about 20 s), the drift-steered loop keeps its numbers;
    // measured: one holdover that ended in a loss and a relock, and no sifted bit in a wrong
    // slot (without steering: 4 losses and 5 bits one slot off, docs/holdover.md).
    let sum = check(
        "1 GHz, 1e-6 per slot, 0.1 ppm/s",
        ghz_link(1e-6, 0.25, 0.1, 120.0),
        500,
    );
    assert!(sum.lock.losses <= 1, "{sum}");
}
