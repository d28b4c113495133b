//! The sifting exchange over the framed link, end to end: the firmware core's link endpoint, a
//! simulated link that loses, repeats, reorders and damages frames, and the host transmitter.
//! Checks:
//! - with 5 % loss, duplication and reordering (and 1 % corruption) both sides end with the same
//!   sifted key, bit for bit on an error-free link, and every announcement is accounted for;
//! - with the default (noisy) link the two keys agree everywhere except where the simulator's
//!   optics produced a different outcome than the one prepared (its true error positions).

use slotwise::sift::SiftedBit;
use slotwise::Basis;
use slotwise::Fate;
use slotwise_sim::cli::{run_simulated_linked, ClockArgs};
use slotwise_sim::clocks::ClockMode;
use slotwise_sim::link::keyfile;
use slotwise_sim::link::LinkModel;
use slotwise_sim::scenario::Scenario;
use slotwise_sim::sim::{optics, Kind, Simulator, TxChoices};
use std::collections::HashMap;

fn clock() -> ClockArgs {
    ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(500),
    }
}

/// A hostile link: each frame lost with probability `p`, duplicated, reordered and corrupted
/// with the given probabilities.
fn lossy(s: &Scenario, p: f64, corrupt: f64) -> LinkModel {
    LinkModel {
        loss: p,
        dup: p,
        reorder: p,
        corrupt,
        latency_slots: 3000,
        ..LinkModel::perfect(s)
    }
}

fn error_free() -> Scenario {
    Scenario {
        duration_s: 0.1,
        misalignment: 0.0,
        dark_count_hz: 0.0,
        afterpulse_prob: 0.0,
        ..Scenario::default_bench()
    }
}

#[test]
fn wire_lossy_link_keeps_both_keys_identical() {
    lossy_link_keeps_both_keys_identical(0.05, 0.01, "5");
}

/// The answer faults of the field-fault list: lost, duplicated, reordered and corrupted frames,
/// 10 % each, over the framed link (corrupted frames fail their CRC and count as refused).
#[test]
fn wire_link_with_10_percent_of_each_fault_keeps_both_keys_identical() {
    lossy_link_keeps_both_keys_identical(0.10, 0.10, "10");
}

fn lossy_link_keeps_both_keys_identical(p: f64, corrupt: f64, tag: &str) {
    let s = error_free();
    let dir = std::env::temp_dir().join(format!("slotwise-wire-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let key_path = dir.join("lossy.swkey");
    let (summary, res, bits) = run_simulated_linked(
        &s,
        &clock(),
        None,
        Some(lossy(&s, p, corrupt)),
        Some(&key_path),
    )
    .unwrap();
    let link = res.tx.framed().unwrap();
    let l = summary.link.as_ref().unwrap();
    // The link really was hostile in both directions.
    for ch in [&l.channel_up, &l.channel_down] {
        assert!(
            ch.lost > 50 && ch.duplicated > 50 && ch.reordered > 50,
            "{ch:?}"
        );
    }
    assert!(l.receiver.rejected_total > 0 && l.transmitter.rejected_total > 0);
    // Duplicated answers frames: on the authenticated link their pad word is already spent.
    assert!(
        l.receiver.rejected.get("replayed").copied().unwrap_or(0) > 0,
        "{:?}",
        l.receiver.rejected
    );
    let auth = l.auth.as_ref().unwrap();
    assert_eq!(auth.forgeries_accepted, 0);
    assert_eq!(c_refused_announcements(l), 0);
    assert!(l.receiver.expired_frames > 0);

    // Both keys: the same slots, and on an error-free link the same bits.
    let key = link.with_tx(|tx| tx.key().clone());
    assert!(bits.len() > 10_000, "{}", bits.len());
    assert_eq!(bits.len(), key.len(), "\n{summary}");
    for b in &bits {
        let t = key
            .get(&b.slot)
            .unwrap_or_else(|| panic!("slot {} not in tx key", b.slot));
        assert_eq!((t.bit, t.basis), (b.bit, b.basis), "slot {}", b.slot);
    }
    assert!(l.keys.same_slots && l.keys.bit_differences == 0);

    // Every announcement is accounted for: answered or expired, on the endpoint and in the
    // receiver's own counters; the transmitter learnt the fate of every frame it answered.
    let c = link.counters();
    assert_eq!(c.announcements, c.answers_in + c.expired_announcements);
    assert_eq!(c.refused_announcements, 0);
    let acc = res.rx.accounting();
    let m = res.rx.multi_click_events();
    assert_eq!(
        acc[Fate::Sifted] + acc[Fate::BasisMismatch] + m.sifted + m.basis_mismatch,
        c.answers_in
    );
    assert_eq!(
        acc[Fate::Unanswered] + m.unanswered,
        c.expired_announcements
    );
    assert_eq!(acc[Fate::InFlight], 0);
    assert_eq!(acc.total(), res.rx.detections_in());
    assert_eq!(*res.rx.answer_errors(), Default::default());
    let t = link.with_tx(|tx| (*tx.counters(), tx.unresolved_frames()));
    assert_eq!(t.0.fate_unknown, 0);
    assert_eq!(t.1, 0);
    assert_eq!(t.0.confirmed_frames, c.answered_frames);

    // The key file holds the receiver's bits, every CRC good.
    let r = keyfile::inspect(&key_path).unwrap();
    assert!(r.bad_frames.is_empty() && r.seq_gaps == 0, "{r}");
    assert_eq!(r.total_bits, bits.len() as u64);
    assert_eq!(r.summary, Some((bits.len() as u64, r.blocks.len() as u64)));
    std::fs::remove_dir_all(&dir).ok();
}

fn c_refused_announcements(l: &slotwise_sim::link::report::LinkSummary) -> u64 {
    l.receiver.refused_announcements
}

/// Where the optics sent the photons of each slot: outcomes of the signal clicks.
fn signal_outcomes(s: &Scenario) -> HashMap<u64, Vec<(Basis, u8)>> {
    let mut out: HashMap<u64, Vec<(Basis, u8)>> = HashMap::new();
    let mut sim = Simulator::new(s);
    while let Some(e) = sim.next_event() {
        if e.truth.kind != Kind::Signal {
            continue;
        }
        let (Some(slot), Some(pos)) = (e.truth.slot, e.truth.position) else {
            continue;
        };
        if let Some(o) = optics::outcome(s.encoding, e.event.channel, pos) {
            out.entry(slot).or_default().push(o);
        }
    }
    out
}

#[test]
fn wire_keys_differ_only_at_the_simulators_error_positions() {
    let s = Scenario {
        duration_s: 0.1,
        misalignment: 0.03,
        ..Scenario::default_bench()
    };
    let (summary, res, bits) =
        run_simulated_linked(&s, &clock(), None, Some(lossy(&s, 0.05, 0.01)), None).unwrap();
    let key = res.tx.framed().unwrap().with_tx(|tx| tx.key().clone());
    let tx = TxChoices::new(&s);
    let truth = signal_outcomes(&s);
    let (mut certain, mut true_errors, mut uncertain, mut uncertain_diff) =
        (0u64, 0u64, 0u64, 0u64);
    for b in &bits {
        let SiftedBit {
            slot, bit, basis, ..
        } = *b;
        let c = tx.choice(slot);
        assert_eq!(
            key.get(&slot).map(|k| k.bit),
            Some(c.bit),
            "tx key at {slot}"
        );
        let same_basis: Vec<u8> = truth
            .get(&slot)
            .map(|v| v.iter().filter(|o| o.0 == basis).map(|o| o.1).collect())
            .unwrap_or_default();
        if b.multi_click || same_basis.len() != 1 {
            // Squashed multi-clicks and clicks without a photon of this slot (dark counts,
            // afterpulses) carry no simulator outcome to compare with.
            uncertain += 1;
            uncertain_diff += u64::from(bit != c.bit);
            continue;
        }
        certain += 1;
        let optics_bit = same_basis[0];
        assert_eq!(
            bit, optics_bit,
            "receiver misread the optics' outcome at slot {slot}"
        );
        // The keys differ exactly where the optics flipped the prepared bit.
        assert_eq!(bit != c.bit, optics_bit != c.bit, "slot {slot}");
        true_errors += u64::from(optics_bit != c.bit);
    }
    let l = summary.link.as_ref().unwrap();
    assert_eq!(l.keys.bit_differences, true_errors + uncertain_diff);
    assert!(l.keys.same_slots);
    // 3 % misalignment: the error positions are there, and noise is a small share.
    assert!(true_errors > 100, "{true_errors} of {certain}\n{summary}");
    assert!(
        uncertain * 100 < bits.len() as u64,
        "{uncertain} of {}",
        bits.len()
    );
}
