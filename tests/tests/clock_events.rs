//! The run's clock events, as the clock plot marks them: on the default link the clock locks,
//! then the numbering aligns; a fibre cut that outlasts the loop's blackout loses the lock and
//! the link locks again. Checked against the simulator's own fault window.

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
        "{}\n[[faults.blackout]]\nfrom_s = 0.06\nduration_s = 0.02\n",
        slotwise_sim::scenario::DEFAULT_BENCH_TOML
    );
    let mut s = Scenario::from_toml_str(&text, "cut.toml").unwrap();
    s.duration_s = 0.12;
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
    // The cut (20 ms from 60 ms after the start of the run) is where the lock went.
    let lost = res.clock_events.iter().find(|e| e.kind == K::LockLost);
    let lost = lost.unwrap_or_else(|| panic!("the cut lost no lock: {kinds:?}"));
    assert!((0.055..0.09).contains(&lost.t_s), "{lost:?}");
}
