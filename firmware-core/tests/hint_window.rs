//! The hint-window test on synthetic detection streams (the generator of `frame_alignment.rs`):
//! detections to align against the hint's error bound and the link's rate, and wrong hints.

use proptest::prelude::*;
use slotwise::fixed::types::U32F32;
use slotwise::frame::window::GIVE_UP_AFTER;
use slotwise::frame::{AlignState, FrameConfig, MarkerSpec, StandardWindow, WindowState};
use slotwise::{FixedClock, MarkerNumbering, Numbering};

mod common;
use common::{Link, Rng, Stream};

/// Feed a window opened `err` slots off the true offset until it decides; returns the decision
/// and the detections fed.
fn window_run(link: Link, bound: u64, err: i64, seed: u64) -> (WindowState, u64, u64) {
    window_run_with(FrameConfig::standard(), link, bound, err, seed)
}

fn window_run_with(
    cfg: FrameConfig,
    link: Link,
    bound: u64,
    err: i64,
    seed: u64,
) -> (WindowState, u64, u64) {
    let spec = MarkerSpec::standard();
    let mut rng = Rng(seed ^ 0x5EED);
    let offset = rng.next() >> 20;
    let cfg = cfg.with_hint_error_slots(Some(bound));
    let mut w = StandardWindow::new();
    w.open(&cfg, offset as i64 + err);
    let mut s = Stream::new(link, spec, offset, seed);
    let mut n = 0;
    while matches!(w.state(), WindowState::Open { .. }) {
        let (slot, bit) = s.next();
        w.observe(&cfg, slot, bit);
        n += 1;
    }
    (w.state(), n, offset)
}

fn quantile(v: &mut [u64], q: f64) -> u64 {
    v.sort_unstable();
    v[((v.len() - 1) as f64 * q).round() as usize]
}

/// Detections to align for hint bounds and rates (the table of `docs/marker.md` §7). The hint's
/// actual error is drawn uniformly within its bound.
#[test]
#[ignore = "prints the table of docs/marker.md §7; about a minute in release mode"]
fn detections_to_align_table() {
    println!("bound    p      dark   runs  mean   median  95%    max    wrong  closed");
    let rows: [(u64, f64, f64); 12] = [
        (100, 1e-2, 1e-7),
        (100, 1e-3, 1e-7),
        (100, 1e-4, 1e-7),
        (100, 1e-6, 0.0),
        (100, 1e-6, 1e-7),
        (100, 1e-6, 3e-7),
        (1_000, 1e-2, 1e-7),
        (1_000, 1e-3, 1e-7),
        (1_000, 1e-4, 1e-7),
        (1_000, 1e-6, 0.0),
        (1_000, 1e-6, 1e-7),
        (1_000, 1e-6, 3e-7),
    ];
    for (bound, p, dark) in rows {
        let link = Link {
            p_key: p - dark,
            p_dark: dark,
            ..Link::at(p)
        };
        let (mut ns, mut wrong, mut closed) = (Vec::new(), 0, 0);
        for seed in 1..=200u64 {
            let err = (Rng(seed).next() % (2 * bound + 1)) as i64 - bound as i64;
            let (st, n, offset) = window_run(link, bound, err, seed);
            match st {
                WindowState::Accepted { offset: o } if o == offset as i64 => ns.push(n),
                WindowState::Accepted { .. } => wrong += 1,
                _ => closed += 1,
            }
        }
        let mean = ns.iter().sum::<u64>() / ns.len().max(1) as u64;
        let (med, q95, max) = (
            quantile(&mut ns, 0.5),
            quantile(&mut ns, 0.95),
            quantile(&mut ns, 1.0),
        );
        println!(
            "{bound:<8} {p:<6} {dark:<6} {:<5} {mean:<6} {med:<7} {q95:<6} {max:<6} {wrong:<6} {closed}",
            ns.len()
        );
    }
    // Hints outside their bound of ±1000: off by 1001..=5000 slots, or by whole inner periods,
    // outer periods or spacings beyond the bound.
    let (mut wrong, mut right, mut closed) = (0, 0, 0);
    for seed in 1..=400u64 {
        let mut r = Rng(seed);
        let k = (r.next() % 5 + 1) as i64;
        let err = match seed % 4 {
            0 => 1_001 + (r.next() % 4_000) as i64,
            1 => 8_128 * k,
            2 => 32_704 * k,
            _ => (16 + k) * 64,
        } * if r.next() & 1 == 0 { 1 } else { -1 };
        match window_run(Link::at(1e-3), 1_000, err, seed) {
            (WindowState::Accepted { offset: o }, _, offset) if o == offset as i64 => right += 1,
            (WindowState::Accepted { .. }, _, _) => wrong += 1,
            _ => closed += 1,
        }
    }
    println!(
        "hints outside a bound of ±1000, 400 runs: wrong {wrong}, right {right}, given up {closed}"
    );
}

/// The price of the bound: detections to align at p = 1e-3 for two error exponents and two
/// noise shares (the contradiction weight is log2(1/(2·noise_share)) bits).
#[test]
#[ignore = "prints the trade-off table of docs/marker.md §7"]
fn bound_and_noise_share_trade_off() {
    use slotwise::fixed::types::U0F16;
    use slotwise::frame::{DEFAULT_CONFIRM_BITS, DEFAULT_MONITOR_BITS, DEFAULT_SEARCH_BITS};
    println!("bits  share    bound  median  95%   wrong");
    for (bits, share) in [(20u8, 8_192u16), (10, 8_192), (20, 2_048), (10, 2_048)] {
        for bound in [100u64, 1_000] {
            let cfg = FrameConfig::new(
                MarkerSpec::standard(),
                DEFAULT_SEARCH_BITS,
                DEFAULT_CONFIRM_BITS,
                DEFAULT_MONITOR_BITS,
                U0F16::from_bits(share),
            )
            .unwrap()
            .with_window_bits(bits)
            .unwrap();
            let (mut ns, mut wrong) = (Vec::new(), 0);
            for seed in 1..=100u64 {
                let err = (Rng(seed).next() % (2 * bound + 1)) as i64 - bound as i64;
                let (st, n, offset) = window_run_with(cfg, Link::at(1e-3), bound, err, seed);
                match st {
                    WindowState::Accepted { offset: o } if o == offset as i64 => ns.push(n),
                    WindowState::Accepted { .. } => wrong += 1,
                    _ => {}
                }
            }
            println!(
                "{bits:<5} {share:<8} {bound:<6} {:<7} {:<5} {wrong}",
                quantile(&mut ns, 0.5),
                quantile(&mut ns, 0.95)
            );
        }
    }
}

#[test]
fn default_link_aligns_from_few_detections() {
    // p = 1e-3 per slot, a hint bound of ±1000 slots (±10 µs at 100 MHz); the actual error is
    // anywhere within the bound. Every run must find the true offset. Measured (docs/marker.md
    // §7, 200 runs): median 3 072, 95 % 3 904, max 4 768 detections; the full search needs
    // about 24 000 (§6).
    let mut ns = Vec::new();
    for seed in 1..=40u64 {
        let err = (Rng(seed).next() % 2_001) as i64 - 1_000;
        let (st, n, offset) = window_run(Link::at(1e-3), 1_000, err, seed);
        assert_eq!(
            st,
            WindowState::Accepted {
                offset: offset as i64
            },
            "seed {seed}"
        );
        ns.push(n);
    }
    let med = quantile(&mut ns, 0.5);
    let max = quantile(&mut ns, 1.0);
    println!("median {med}, max {max}");
    assert!(med <= 3_500 && max <= 6_000, "median {med}, max {max}");
}

#[test]
fn window_wider_than_capacity_is_refused() {
    let cfg =
        FrameConfig::standard().with_hint_error_slots(Some(StandardWindow::max_error_slots() + 1));
    let mut w = StandardWindow::new();
    w.open(&cfg, 1 << 30);
    assert_eq!(w.state(), WindowState::Closed);
    assert_eq!(w.stats().too_wide, 1);
    let mut w = StandardWindow::new();
    w.open(&FrameConfig::standard(), 1 << 30);
    assert_eq!(w.state(), WindowState::Closed, "no stated bound, no window");
}

#[test]
fn noise_only_is_never_accepted() {
    // No marker at all: every candidate is alike, the window must give up.
    for seed in 1..=6u64 {
        let link = Link {
            marker: false,
            ..Link::at(1e-3)
        };
        let (st, n, _) = window_run(link, 1_000, 0, seed);
        assert_eq!(st, WindowState::Closed, "seed {seed}");
        assert_eq!(n, u64::from(GIVE_UP_AFTER));
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(24))]
    // A hint outside its stated bound: the window holds no true offset. It must never accept
    // one; the errors include whole inner periods (8128 slots) and multiples of the spacing,
    // whose candidates the marker contradicts least.
    #[test]
    fn hint_outside_its_bound_is_never_accepted(
        seed in any::<u64>(),
        kind in 0u8..4,
        k in 1i64..6,
        sign in prop::bool::ANY,
    ) {
        let bound = 1_000u64;
        let b = bound as i64;
        let err = match kind {
            0 => b + 1 + k * 97,
            1 => 8_128 * k,
            2 => 32_704 * k,
            _ => (b / 64 + k) * 64,
        };
        let err = if sign { err } else { -err };
        let (st, _, offset) = window_run(Link::at(1e-3), bound, err, seed);
        prop_assert!(
            !matches!(st, WindowState::Accepted { offset: o } if o != offset as i64),
            "err {err}: {st:?}"
        );
    }
}

/// A marker numbering on a 1 ns fixed clock with a hint `err` slots off the truth, its bound
/// stated as ±1000 slots; detections until aligned. Returns the numbering and the true offset.
fn numbering_run(err: i64, seed: u64) -> (MarkerNumbering, u64) {
    let fixed = FixedClock::new(U32F32::from_num(1_000), 0).unwrap();
    let cfg = FrameConfig::standard().with_hint_error_slots(Some(1_000));
    let mut num = MarkerNumbering::new(cfg).unwrap();
    let offset = Rng(seed).next() >> 24;
    // At 1 µs the receiver's local slot is 1000; the transmitter's counter then, off by `err`.
    num.hint(&fixed, 1_000_000, (offset + 1_000).wrapping_add_signed(err));
    let mut s = Stream::new(Link::at(1e-3), MarkerSpec::standard(), offset, seed);
    for _ in 0..400_000 {
        let (slot, bit) = s.next();
        num.number(&fixed, slot, bit);
        if num.aligned() {
            break;
        }
    }
    (num, offset)
}

#[test]
fn numbering_takes_the_window_within_the_bound() {
    let (num, offset) = numbering_run(-1_000, 11);
    let (n, by_window) = num.aligned_after().unwrap();
    assert!(by_window && n <= 6_000, "{n} {by_window}");
    assert_eq!(
        num.aligner().state(),
        AlignState::Aligned {
            offset: offset as i64
        }
    );
}

#[test]
fn hint_outside_its_bound_falls_back_to_the_search() {
    // Off by 3000 slots against a stated ±1000: the window gives up (counted) and the full
    // search aligns on the true offset, resolving the period with the same hint (§3: any error
    // below P/2 does). Four seeds; never a wrong offset.
    for seed in 1..=4u64 {
        let (num, offset) = numbering_run(3_000 * if seed % 2 == 0 { 1 } else { -1 }, seed);
        let (_, by_window) = num.aligned_after().unwrap();
        assert!(!by_window, "seed {seed}");
        assert_eq!(num.window().stats().gave_up, 1, "seed {seed}");
        assert_eq!(
            num.aligner().state(),
            AlignState::Aligned {
                offset: offset as i64
            },
            "seed {seed}"
        );
    }
}
