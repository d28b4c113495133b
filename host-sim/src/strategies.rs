//! Proptest strategies for realistic detection streams, so a board team can property-test its
//! own streaming code with what a link really delivers (feature `proptest-strategies`).
//!
//! - [`scenario`]: short variants of the default bench link (BRIEF §6) — seed, clock offset
//!   within ±450 ppm, drift, dark counts, afterpulsing, counter width and a counter wrap placed
//!   inside the run, and optionally merger faults (reordering by up to 2 ns, duplicates) and a
//!   stray channel number.
//! - [`detection_stream`]: a scenario together with its simulated TDC events (raw counters, as
//!   the TDC reports them, in merge order).
//! - [`hostile_events`]: cheap synthetic streams for decoders and state machines: wrapping
//!   counters, backward steps, exact duplicates, counter values wider than the TDC, channel
//!   numbers outside any table.
//! - [`chunking`]: block sizes to cut a stream into, for "output independent of chunking".
//!
//! ```toml
//! [dev-dependencies]
//! slotwise-sim = { version = "0.1", features = ["proptest-strategies"] }
//! ```
//!
//! ```no_run
//! use proptest::prelude::*;
//! use slotwise_sim::strategies::{chunking, detection_stream};
//!
//! proptest! {
//!     #![proptest_config(ProptestConfig::with_cases(8))]
//!     #[test]
//!     fn my_board_code_counts_every_event(
//!         (scenario, events) in detection_stream(20_000),
//!         cuts in chunking(64),
//!     ) {
//!         let _ = (scenario, events, cuts); // feed your own pipeline here
//!     }
//! }
//! ```
//!
//! `tests/tests/strategies_example.rs` drives the firmware core with them the way a board team
//! would drive its own code.

use crate::scenario::Scenario;
use crate::sim::faults::{Faults, Merge, StrayChannel};
use crate::sim::Simulator;
use proptest::prelude::*;
use slotwise::TdcEvent;

/// Short variants of the default bench link, `duration_s` in [2 ms, 40 ms].
pub fn scenario() -> impl Strategy<Value = Scenario> {
    (
        any::<u64>(),
        -450.0f64..450.0,
        -0.1f64..0.1,
        prop_oneof![Just(100.0), 1e3f64..5e4],
        prop_oneof![Just(0.005), 0.0f64..0.05],
        prop_oneof![Just(48u8), Just(32u8), Just(64u8)],
        0.0f64..1.0,
        0.002f64..0.04,
        any::<bool>(),
        any::<bool>(),
    )
        .prop_map(
            |(seed, ppm, drift, dark, ap, bits, wrap_at, duration, merge, stray)| {
                let mut s = Scenario::default_bench();
                s.name = "bench-100mhz-30km-variant".into();
                s.seed = seed >> 1;
                s.clock_offset_ppm = ppm;
                s.clock_drift_ppm_per_s = drift;
                s.dark_count_hz = dark;
                s.afterpulse_prob = ap;
                s.tdc_bits = bits;
                s.duration_s = duration;
                // Place a counter wrap inside the run (1 ps ticks).
                if bits < 64 {
                    let span = 1u64 << bits;
                    let run_ticks = (duration * 1e12) as u64;
                    let back = (wrap_at * run_ticks as f64) as u64 % span;
                    s.tdc_start_ticks = (span - back.max(1)) & (span - 1);
                }
                s.faults = Faults {
                    merge: merge.then_some(Merge {
                        reorder_ps: 2000.0,
                        duplicate_prob: 0.002,
                    }),
                    stray_channel: if stray {
                        vec![StrayChannel {
                            channel: 5,
                            rate_hz: 2e3,
                        }]
                    } else {
                        Vec::new()
                    },
                    ..Faults::default()
                };
                s
            },
        )
        .prop_filter("valid scenario", |s| s.validate("strategy").is_ok())
}

/// The first `max` simulated TDC events of `s`.
pub fn detections(s: &Scenario, max: usize) -> Vec<TdcEvent> {
    Simulator::new(s).take(max).map(|e| e.event).collect()
}

/// A [`scenario`] with its simulated events (at most `max` of them).
pub fn detection_stream(max: usize) -> impl Strategy<Value = (Scenario, Vec<TdcEvent>)> {
    scenario().prop_map(move |s| {
        let events = detections(&s, max);
        (s, events)
    })
}

/// Hostile synthetic streams of up to `max_len` events on a `bits`-wide counter: steps forward
/// (wrapping), small backward steps, exact duplicates, a few values wider than the counter and
/// channel numbers up to 255.
pub fn hostile_events(bits: u8, max_len: usize) -> impl Strategy<Value = Vec<TdcEvent>> {
    let mask = if bits >= 64 {
        u64::MAX
    } else {
        (1u64 << bits) - 1
    };
    (
        any::<u64>(),
        prop::collection::vec((0u64..100_000, 0u8..8, 0u8..16), 0..max_len),
    )
        .prop_map(move |(start, steps)| {
            let mut count = start & mask;
            let mut out: Vec<TdcEvent> = Vec::with_capacity(steps.len());
            for (step, channel, what) in steps {
                let ev = match what {
                    0 => out.last().copied().unwrap_or(TdcEvent { count, channel }),
                    1 => TdcEvent {
                        count: count.wrapping_sub(step % 2000) & mask,
                        channel,
                    },
                    2 if mask != u64::MAX => TdcEvent {
                        count: count | (mask + 1),
                        channel,
                    },
                    3 => TdcEvent {
                        count,
                        channel: 200 | channel,
                    },
                    _ => {
                        count = count.wrapping_add(step) & mask;
                        TdcEvent { count, channel }
                    }
                };
                out.push(ev);
            }
            out
        })
}

/// Block sizes (1..=`max_block`) to cut a stream into; the last block takes the rest.
pub fn chunking(max_block: usize) -> impl Strategy<Value = Vec<usize>> {
    prop::collection::vec(1..=max_block.max(1), 0..32)
}

#[cfg(test)]
mod tests {
    use super::*;

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(16))]
        #[test]
        fn scenarios_are_valid_and_streams_are_nonempty((s, ev) in detection_stream(2000)) {
            prop_assert!(s.validate("t").is_ok());
            prop_assert!(!ev.is_empty());
        }

        #[test]
        fn hostile_streams_keep_to_their_shape(ev in hostile_events(32, 200)) {
            prop_assert!(ev.len() < 200);
        }
    }
}
