//! The run's clock events, as the clock plot marks them: on the default link the clock locks,
//! then the numbering aligns; a short fibre cut is held over (`docs/holdover.md`), a long one
//! loses the lock and the link locks again. Checked against the simulator's own fault windows.

use slotwise_sim::cli::{run_simulated, ClockArgs};
use slotwise_sim::clocks::ClockMode;
use slotwise_sim::replay::ClockEventKind as K;
use slotwise_sim::scenario::Scenario;

fn recovered() -> ClockArgs {
    ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(500),
    }
}

#[test]
fn lock_then_alignment_then_a_cut_and_a_relock() {
    let text = format!(
        "{}\n[[faults.blackout]]\nfrom_s = 0.06\nduration_s = 0.02\n\
         [[faults.blackout]]\nfrom_s = 0.12\nduration_s = 0.5\n",
        slotwise_sim::scenario::DEFAULT_BENCH_TOML
    );
    let mut s = Scenario::from_toml_str(&text, "cut.toml").unwrap();
    s.duration_s = 0.7;
    let (summary, res) = run_simulated(&s, &recovered(), None).unwrap();
    let kinds: Vec<K> = res.clock_events.iter().map(|e| e.kind).collect();
    assert_eq!(kinds.first(), Some(&K::Locked), "{kinds:?}");
    assert!(kinds.contains(&K::Aligned), "{kinds:?}");
    assert!(
        res.clock_events.windows(2).all(|w| w[0].t_s <= w[1].t_s),
        "{:?}",
        res.clock_events
    );
    // Each loss is followed by a lock, as the summary counts them.
    let losses = kinds.iter().filter(|k| **k == K::LockLost).count() as u32;
    let locks = kinds.iter().filter(|k| **k == K::Locked).count() as u32;
    assert_eq!(losses, summary.lock.losses, "{kinds:?}");
    assert_eq!(locks, 1 + summary.lock.relocks, "{kinds:?}");
    // The short cut (20 ms from 60 ms after the start) was held over and bridged: its
    // prediction's bound, from the whole drift allowance (0.1 ppm/s), is a few thousandths of a
    // slot. The long one (0.5 s from 120 ms; bound over a slot) is where the lock went.
    let at = |k: K| res.clock_events.iter().filter(move |e| e.kind == k);
    let held: Vec<f64> = at(K::HoldoverStarted).map(|e| e.t_s).collect();
    assert!((0.055..0.09).contains(&held[0]), "{kinds:?}");
    let bridged = at(K::HoldoverBridged).next().expect("a bridged holdover");
    assert!((0.08..0.1).contains(&bridged.t_s), "{bridged:?}");
    assert!(bridged.bound_slots.unwrap() < 0.05, "{bridged:?}");
    let lost = at(K::LockLost).next();
    let lost = lost.unwrap_or_else(|| panic!("the long cut lost no lock: {kinds:?}"));
    assert!((0.115..0.65).contains(&lost.t_s), "{lost:?}");
    assert_eq!(summary.lock.holdovers_bridged, 1, "{summary}");
}
