//! Unit tests of the simulator engine (the generator, sampler and clock have their own).

use super::*;
use crate::scenario::Scenario;
use slotwise::{Located, SlotClock, UnwrapConfig, Unwrapper};

fn short(mut s: Scenario, duration_s: f64) -> Scenario {
    s.duration_s = duration_s;
    s
}

#[test]
fn same_seed_same_stream_any_chunking() {
    let s = short(Scenario::default_bench(), 0.002);
    let all: Vec<SimEvent> = Simulator::new(&s).collect();
    assert!(all.len() > 1000, "{}", all.len());
    let mut sim = Simulator::new(&s);
    let mut chunked = Vec::new();
    let mut block = Vec::new();
    for max in [1usize, 7, 100, 3, 1000].iter().cycle() {
        if sim.next_block(&mut block, *max) == 0 {
            break;
        }
        chunked.extend_from_slice(&block);
    }
    assert_eq!(all, chunked);
    let mut other = s.clone();
    other.seed += 1;
    let b: Vec<SimEvent> = Simulator::new(&other).take(50).collect();
    assert_ne!(&all[..50], &b[..]);
}

#[test]
fn events_are_time_ordered_and_counts_follow_the_truth() {
    let s = short(Scenario::default_bench(), 0.002);
    let mut prev = f64::NEG_INFINITY;
    for e in Simulator::new(&s) {
        assert!(e.truth.true_t_ps >= prev);
        prev = e.truth.true_t_ps;
        assert_eq!(
            e.event.count,
            e.truth.true_t_ps.floor() as u64,
            "1 ps ticks from 0"
        );
        assert!(e.event.channel < 3);
    }
}

#[test]
fn dead_time_is_respected_and_every_click_is_counted() {
    let s = short(Scenario::default_bench(), 0.003);
    let mut sim = Simulator::new(&s);
    let mut last = [f64::NEG_INFINITY; 3];
    let mut n = [0u64; 3];
    for e in sim.by_ref() {
        let d = usize::from(e.event.channel);
        assert!(
            e.truth.true_t_ps - last[d] >= 40_000.0,
            "dead time on ch{d}"
        );
        last[d] = e.truth.true_t_ps;
        n[e.truth.kind as usize] += 1;
        assert_eq!(e.truth.slot.is_some(), e.truth.kind == Kind::Signal);
    }
    let st = *sim.stats();
    assert_eq!(st.emitted, n);
    for k in 0..3 {
        assert_eq!(
            st.generated[k],
            st.emitted[k] + st.dead_time_lost[k],
            "kind {k}"
        );
    }
    assert!(st.dead_time_lost[0] > 0);
}

#[test]
fn detected_pulse_rate_matches_poisson_thinning() {
    // Geometric skipping plus thinning must reproduce P(detected) = 1 − e^(−μη) per slot:
    // expected count N·Σ_i w_i (1 − e^(−μ_i η)), binomial 4σ.
    let mut s = short(Scenario::default_bench(), 0.01);
    s.dead_time_ns = 0.0;
    let mut sim = Simulator::new(&s);
    sim.by_ref().for_each(drop);
    let st = *sim.stats();
    let eta = s.eta();
    let p: f64 = s
        .intensities
        .iter()
        .zip(&s.intensity_probs)
        .map(|(mu, w)| w * -(-mu * eta).exp_m1())
        .sum();
    let n = st.slots as f64;
    let sd = (n * p * (1.0 - p)).sqrt();
    let got = st.detected_pulses as f64;
    assert!((got - n * p).abs() < 4.0 * sd, "{got} vs {}", n * p);
    // The geometric skip draws candidates at rate p_max = 1 − e^(−μ_max η).
    let pmax = -(-0.5 * eta).exp_m1();
    let sdc = (n * pmax * (1.0 - pmax)).sqrt();
    assert!((st.candidate_slots as f64 - n * pmax).abs() < 4.0 * sdc);
}

#[test]
fn dark_counts_and_afterpulses_at_their_rates() {
    let mut s = short(Scenario::default_bench(), 0.01);
    s.dead_time_ns = 0.0;
    s.dark_count_hz = 1e6;
    s.afterpulse_prob = 0.05;
    let mut sim = Simulator::new(&s);
    let mut first_dark = f64::INFINITY;
    for e in sim.by_ref() {
        if e.truth.kind == Kind::Dark {
            first_dark = first_dark.min(e.truth.true_t_ps);
        }
    }
    let st = *sim.stats();
    // Poisson: 3 detectors × 1 MHz × (run length) dark counts, sd = √mean.
    let mean = 3.0 * 1e6 * sim.end_ps() * 1e-12;
    let dark = st.emitted[1] as f64;
    assert!((dark - mean).abs() < 4.0 * mean.sqrt(), "{dark} vs {mean}");
    assert!(first_dark < s.start_offset(), "dark counts start at time 0");
    // Afterpulses: binomial(registered clicks, p_ap), minus those past the end.
    let parents = (st.emitted.iter().sum::<u64>()) as f64;
    let ap = (st.emitted[2] + st.afterpulses_after_end) as f64;
    let sd = (parents * 0.05 * 0.95).sqrt();
    assert!((ap - 0.05 * parents).abs() < 4.0 * sd, "{ap} of {parents}");
}

#[test]
fn clock_truth_places_slots_on_the_core_time_base_across_a_wrap() {
    // 32-bit counter at 4 ps that wraps before the first event and again mid-run: the core's
    // unwrapper and fixed clock, given the truth, must put every photon click into its own slot.
    let mut s = Scenario::load(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../scenarios/polarization-bb84-50mhz.toml"
    ))
    .unwrap();
    s.duration_s = 0.02;
    s.clock_drift_ppm_per_s = 0.0;
    s.start_offset_ps = Some(50_000_000);
    s.tdc_start_ticks = (1u64 << 32) - 10_000; // wraps 40 ns into the capture
    let truth = clock_truth(&s).unwrap();
    assert_eq!(truth.wraps_before_first, 1);
    let mut u = Unwrapper::new(UnwrapConfig::new(s.tdc_bits, s.tdc_resolution_ps).unwrap());
    let clock = truth.fixed_clock();
    let delays = s.delays_ps();
    let mut checked = 0;
    let mut wraps = 0;
    let mut prev = None;
    for e in Simulator::new(&s) {
        if prev.is_some_and(|p| e.event.count < p) {
            wraps += 1;
        }
        prev = Some(e.event.count);
        let det = u.unwrap(e.event).unwrap();
        let t = det
            .t_ps
            .checked_add_signed(-delays[usize::from(e.event.channel)])
            .unwrap();
        if let (Some(k), Located::At(p)) = (e.truth.slot, clock.locate(t)) {
            assert_eq!(p.slot, k);
            let frac = p.phase.to_num::<f64>();
            let w = gate_half_width_ps(&s) / s.period_ps();
            assert!((frac - optics::POLARIZATION_POSITION).abs() < w, "{frac}");
            checked += 1;
        }
    }
    assert!(wraps >= 1, "counter wrapped during the run");
    assert!(checked > 10_000, "{checked}");

    // A wrap between slot 0 and the first event cannot be expressed.
    s.start_offset_ps = Some(40_000_000);
    s.dark_count_hz = 0.0;
    s.tdc_start_ticks = (1u64 << 32) - 9_000_000; // wraps at 36 µs, slot 0 at 40 µs
    assert!(clock_truth(&s).is_ok(), "slot 0 after the wrap is fine");
    s.tdc_start_ticks = (1u64 << 32) - 10_000_500; // wraps at 40.002 µs, after slot 0 starts
    assert_eq!(
        clock_truth(&s).unwrap_err(),
        ClockTruthError::SlotZeroBeforeTimeBase
    );
}

#[test]
fn photons_of_one_pulse_on_one_detector_and_position_make_one_click() {
    // μ = 10 with η = 1: many photons per pulse, but per detector at most one click per position.
    let mut s = short(Scenario::default_bench(), 1e-5);
    s.intensities = vec![10.0, 10.0];
    s.fiber_km = 0.0;
    s.extra_loss_db = 0.0;
    s.detector_efficiency = 1.0;
    s.dead_time_ns = 0.0;
    s.dark_count_hz = 0.0;
    s.afterpulse_prob = 0.0;
    let mut seen = std::collections::HashSet::new();
    let mut sim = Simulator::new(&s);
    let clock = sim.clock().clone();
    for e in sim.by_ref() {
        let slot = e.truth.slot.unwrap();
        let frac = (e.truth.true_t_ps - clock.slot_start_ps(slot)) / s.period_ps();
        let pos = ((frac - 0.2) / 0.25).round() as i64;
        assert!(seen.insert((slot, e.event.channel, pos)), "double click");
    }
    assert!(sim.stats().photons > 2 * sim.stats().emitted[0]);
}

#[test]
fn merge_fault_reorders_within_its_bound_and_duplicates_exactly() {
    let mut s = short(Scenario::default_bench(), 0.02);
    s.faults.merge = Some(super::faults::Merge {
        reorder_ps: 2000.0,
        duplicate_prob: 0.05,
    });
    let plain: Vec<SimEvent> = Simulator::new(&short(Scenario::default_bench(), 0.02)).collect();
    let mut sim = Simulator::new(&s);
    let got: Vec<SimEvent> = sim.by_ref().collect();
    let st = *sim.stats();
    assert_eq!(got.len() as u64, plain.len() as u64 + st.duplicates);
    assert!(st.reordered > 0 && st.duplicates > 0);
    let mut newest = f64::NEG_INFINITY;
    for e in &got {
        assert!(
            e.truth.true_t_ps > newest - 2000.0,
            "reordered by more than 2 ns"
        );
        newest = newest.max(e.truth.true_t_ps);
    }
    // Same events, only their order and the copies differ.
    let mut a: Vec<(u64, u8)> = got
        .iter()
        .map(|e| (e.event.count, e.event.channel))
        .collect();
    a.dedup();
    let mut a2 = a.clone();
    a2.sort_unstable();
    let mut b: Vec<(u64, u8)> = plain
        .iter()
        .map(|e| (e.event.count, e.event.channel))
        .collect();
    b.sort_unstable();
    assert_eq!(a2, b);
}

#[test]
fn blackout_removes_the_light_of_its_slots_only() {
    let mut s = short(Scenario::default_bench(), 0.004);
    s.faults.blackout = vec![super::faults::Blackout {
        from_s: 0.001,
        duration_s: 0.002,
    }];
    let (a, b) = (100_000u64, 300_000u64);
    let (mut inside, mut before, mut after) = (0, 0, 0);
    for e in Simulator::new(&s) {
        match e.truth.slot {
            Some(k) if (a..b).contains(&k) => inside += 1,
            Some(k) if k < a => before += 1,
            Some(_) => after += 1,
            None => {}
        }
    }
    assert_eq!(inside, 0);
    // 1.3e-2 detections per slot: about 1,300 before and 1,300 after the cut.
    assert!(before > 1000 && after > 1000, "{before} {after}");
}
