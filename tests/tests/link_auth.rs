//! The authenticated sifting link under attack, end to end: the core's endpoint and key pool,
//! the host transmitter's mirror pool, and an adversary on the line doing each `--link-attack`
//! mode. Checks, for every mode on the default bench link:
//! - no forgery is accepted, by either end;
//! - both sides' sifted keys cover the same slots with the same bits (error-free optics);
//! - the key accounting is exact (loaded = used + wiped + left on both ends; one tag per frame
//!   sent; one check passed per answered frame; refusals by reason add up);
//! - the attack alarm is raised.
//!
//! As a control, that the same bit-flipping adversary gets forged answers accepted when the
//! link is not authenticated.

use slotwise_sim::cli::{run_simulated_linked, ClockArgs};
use slotwise_sim::clocks::ClockMode;
use slotwise_sim::link::auth::LinkAttack;
use slotwise_sim::link::report::{AuthSide, LinkSummary};
use slotwise_sim::link::LinkModel;
use slotwise_sim::scenario::Scenario;

fn clock() -> ClockArgs {
    ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(500),
    }
}

fn scenario() -> Scenario {
    Scenario {
        duration_s: 0.05,
        misalignment: 0.0,
        dark_count_hz: 0.0,
        afterpulse_prob: 0.0,
        ..Scenario::default_bench()
    }
}

fn run(attack: Option<LinkAttack>, authenticated: bool) -> LinkSummary {
    run_with(LinkModel {
        attack,
        authenticated,
        ..LinkModel::perfect(&scenario())
    })
}

fn run_with(model: LinkModel) -> LinkSummary {
    let s = scenario();
    let (summary, _, _) = run_simulated_linked(&s, &clock(), None, Some(model), None).unwrap();
    summary.link.unwrap()
}

/// Loaded = consumed + wiped + left, and refusals by reason add up.
fn pool_exact(side: &AuthSide) {
    assert_eq!(
        side.key_bits_loaded,
        side.key_bits_consumed + side.key_bits_abandoned + side.key_bits_left,
        "{side:?}"
    );
    assert_eq!(side.refused_total, side.refused.values().sum::<u64>());
}

fn exact(side: &AuthSide) {
    pool_exact(side);
    assert_eq!(
        side.key_bits_consumed,
        64 * (side.frames_tagged + side.frames_verified),
        "{side:?}"
    );
    assert_eq!(side.refused_total, side.refused.values().sum::<u64>());
}

#[test]
fn every_attack_is_refused_and_both_keys_stay_identical() {
    let clean = run(None, true);
    let a = clean.auth.as_ref().unwrap();
    assert_eq!((a.forgeries_accepted, a.receiver.refused_total), (0, 0));
    assert_eq!(a.receiver.attack_alarms + a.transmitter.attack_alarms, 0);
    for attack in [
        LinkAttack::Flip,
        LinkAttack::Inject,
        LinkAttack::Replay,
        LinkAttack::Delay,
        LinkAttack::Impersonate,
    ] {
        let l = run(Some(attack), true);
        let a = l.auth.as_ref().unwrap();
        let st = a.attack.unwrap().stats;
        let what = format!("{attack:?}: {a:#?}\n{:?}", l.receiver);
        assert_eq!(a.forgeries_accepted, 0, "{what}");
        assert_eq!(l.forgeries_accepted, 0, "{what}");
        assert!(l.keys.same_slots && l.keys.bit_differences == 0, "{what}");
        assert!(l.keys.receiver_bits > 1000, "{what}");
        exact(&a.receiver);
        exact(&a.transmitter);
        assert_eq!(a.receiver.starved_frames + a.transmitter.starved_frames, 0);
        // One tag per frame sent; one passed check per frame answered or reported.
        assert_eq!(a.receiver.frames_tagged, l.receiver.frames_sent, "{what}");
        assert_eq!(
            a.transmitter.frames_tagged, l.transmitter.frames_sent,
            "{what}"
        );
        assert_eq!(
            a.receiver.frames_verified, l.receiver.answered_frames,
            "{what}"
        );
        assert_eq!(
            a.transmitter.frames_verified, l.transmitter.frames_received,
            "{what}"
        );
        assert!(
            a.receiver.attack_alarms + a.transmitter.attack_alarms > 0,
            "{what}"
        );
        let rx = |r: &str| a.receiver.refused.get(r).copied().unwrap_or(0);
        let tx = |r: &str| a.transmitter.refused.get(r).copied().unwrap_or(0);
        match attack {
            // Every altered or made-up frame is refused by its tag, and by nothing else.
            LinkAttack::Flip | LinkAttack::Inject | LinkAttack::Impersonate => {
                assert!(st.forged > 10, "{what}");
                // The last frame may still be on the line when the receiver closes.
                assert!(st.forged - rx("bad_tag") <= 1, "{what}");
                assert_eq!(a.receiver.refused_total, rx("bad_tag"), "{what}");
            }
            // Each copy finds its pad word already spent.
            LinkAttack::Replay => {
                assert!(st.replayed > 10, "{what}");
                assert!(
                    st.replayed - (rx("replayed") + tx("replayed")) <= 1,
                    "{what}"
                );
                assert_eq!(rx("bad_tag") + tx("bad_tag"), 0, "{what}");
            }
            // Answers held past their frame's fate find their pad word wiped.
            LinkAttack::Delay => {
                assert!(st.delayed > 10, "{what}");
                assert!(rx("replayed") > 0, "{what}");
                assert!(rx("replayed") + tx("replayed") <= st.delayed, "{what}");
                assert_eq!(rx("bad_tag") + tx("bad_tag"), 0, "{what}");
            }
        }
    }
}

#[test]
fn without_authentication_a_bit_flipper_gets_forged_answers_accepted() {
    let l = run(Some(LinkAttack::Flip), false);
    assert!(l.auth.is_none());
    assert!(l.forgeries_accepted > 10, "{}", l.forgeries_accepted);
}

/// When the key runs out the link stops sending: no untagged frame, every later announcement
/// refused and counted, the close still reported with the key kept for it, both keys identical.
#[test]
fn out_of_key_the_link_stops_and_both_keys_stay_identical() {
    let l = run_with(LinkModel {
        auth_key_words: 1000,
        ..LinkModel::perfect(&scenario())
    });
    let a = l.auth.as_ref().unwrap();
    assert!(
        a.receiver.stopped && a.receiver.starved_frames == 1,
        "{a:#?}"
    );
    assert!(a.receiver.low_key_alarms > 0);
    assert_eq!(a.receiver.frames_tagged, l.receiver.frames_sent);
    assert_eq!(a.receiver.key_bits_loaded, 1000 * 64);
    exact(&a.receiver);
    assert!(l.receiver.refused_announcements > 1000, "{:?}", l.receiver);
    assert!(
        l.keys.same_slots && l.keys.bit_differences == 0,
        "{:?}",
        l.keys
    );
    assert!(l.keys.receiver_bits > 1000);
}

/// The same attacks on the demo's noisy link (about 1 % of frames lost, duplicated and
/// reordered, 0.1 % corrupted, 2,000 slots of latency): still no forgery accepted, the same
/// slots on both sides, exact key accounting, and the alarm raised.
#[test]
fn every_attack_is_refused_on_the_noisy_demo_link() {
    for attack in [
        LinkAttack::Flip,
        LinkAttack::Inject,
        LinkAttack::Replay,
        LinkAttack::Delay,
        LinkAttack::Impersonate,
    ] {
        let l = run_with(LinkModel {
            loss: 0.01,
            dup: 0.01,
            reorder: 0.01,
            corrupt: 0.001,
            latency_slots: 2000,
            attack: Some(attack),
            ..LinkModel::perfect(&scenario())
        });
        let a = l.auth.as_ref().unwrap();
        let what = format!("{attack:?}: {a:#?}");
        assert_eq!(a.forgeries_accepted, 0, "{what}");
        assert!(l.keys.same_slots && l.keys.bit_differences == 0, "{what}");
        assert!(l.keys.receiver_bits > 1000, "{what}");
        exact(&a.receiver);
        exact(&a.transmitter);
        assert!(
            a.receiver.attack_alarms + a.transmitter.attack_alarms > 0,
            "{what}"
        );
    }
}

/// The demo's noisy link (1 % of frames lost, duplicated and reordered, 0.1 % corrupted,
/// 2,000 slots of latency), authenticated with one tag per round of `frames` announce frames.
fn noisy_rounds(frames: u32, attack: Option<LinkAttack>) -> LinkModel {
    LinkModel {
        loss: 0.01,
        dup: 0.01,
        reorder: 0.01,
        corrupt: 0.001,
        latency_slots: 2000,
        auth_round_frames: Some(frames),
        attack,
        ..LinkModel::perfect(&scenario())
    }
}

/// Exact key accounting of round mode: the outcome key (two pad words) once per end, one
/// pad word per round tag sent and one per round tag checked.
fn exact_rounds(l: &LinkSummary) {
    let a = l.auth.as_ref().unwrap();
    let rs = a.rounds.as_ref().unwrap();
    let (rx, tx) = (&a.receiver, &a.transmitter);
    pool_exact(rx);
    pool_exact(tx);
    let failed: u64 = rs.failed.values().sum();
    assert_eq!(rs.closed, rs.verified + failed, "{rs:?}");
    assert_eq!(rs.verified_rounds.len() as u64, rs.verified, "{rs:?}");
    assert_eq!(rs.failed_rounds.len() as u64, failed, "{rs:?}");
    assert_eq!(rx.frames_tagged, rs.closed, "{rs:?}");
    let rx_checks = rs.verified + rs.failed.get("bad_tag").copied().unwrap_or(0);
    assert_eq!(
        rx.key_bits_consumed,
        128 + 64 * (rx.frames_tagged + rx_checks),
        "{rx:?}"
    );
    let t = &rs.transmitter;
    assert_eq!(tx.frames_tagged, t.closed, "{t:?}");
    assert_eq!(
        tx.key_bits_consumed,
        128 + 64 * (tx.frames_tagged + t.verified + t.failed),
        "{t:?}"
    );
    // Every round the receiver decided, the transmitter decided the same way.
    assert_eq!(
        (t.verified, t.failed, t.undecided),
        (rs.verified, failed, 0)
    );
}

/// On the noisy demo link, round mode verifies every round: loss, duplication, reordering
/// and corruption change no outcome. Both kept keys are identical, and the key spent is
/// far below the per-frame tags'.
#[test]
fn round_mode_verifies_every_round_on_the_noisy_link() {
    let l = run_with(noisy_rounds(16, None));
    let a = l.auth.as_ref().unwrap();
    let rs = a.rounds.as_ref().unwrap();
    let what = format!("{a:#?}\n{:?}", l.receiver);
    assert_eq!(a.mode, "round");
    assert!(rs.closed > 30, "{what}");
    assert_eq!(rs.verified, rs.closed, "{what}");
    assert!(rs.failed_rounds.is_empty(), "{what}");
    assert_eq!(rs.sifted_bits_discarded, 0, "{what}");
    assert!(l.keys.same_slots && l.keys.bit_differences == 0, "{what}");
    assert!(l.keys.receiver_bits > 1000, "{what}");
    assert_eq!(a.receiver.attack_alarms + a.transmitter.attack_alarms, 0);
    exact_rounds(&l);
    // Some frames were really lost, duplicated and reordered.
    assert!(
        l.channel_up.lost + l.channel_down.lost > 5,
        "{:?}",
        l.channel_up
    );
    assert!(l.receiver.expired_frames > 0, "{what}");
}

/// Under every attack mode in round mode: every round in which the receiver took a forged
/// answer fails on both ends, no forged answer is kept, both kept keys are identical, the
/// accounting is exact and the attack alarm rises. Replay and delay change no outcome
/// (copies are dropped, held answers expire): their rounds verify, and the alarm rises on the
/// duplicates and late answers.
#[test]
fn round_mode_fails_exactly_the_attacked_rounds() {
    for attack in [
        LinkAttack::Flip,
        LinkAttack::Inject,
        LinkAttack::Replay,
        LinkAttack::Delay,
        LinkAttack::Impersonate,
    ] {
        let l = run_with(noisy_rounds(16, Some(attack)));
        let a = l.auth.as_ref().unwrap();
        let rs = a.rounds.as_ref().unwrap();
        let what = format!("{attack:?}: {a:#?}");
        assert_eq!(rs.forged_answers_kept, 0, "{what}");
        assert_eq!(a.forgeries_accepted, 0, "{what}");
        assert!(l.keys.same_slots && l.keys.bit_differences == 0, "{what}");
        assert!(
            a.receiver.attack_alarms + a.transmitter.attack_alarms > 0,
            "{what}"
        );
        exact_rounds(&l);
        match attack {
            LinkAttack::Flip | LinkAttack::Inject | LinkAttack::Impersonate => {
                assert!(rs.forged_answers_taken > 10, "{what}");
                // Every attacked round failed; a round fails only if attacked (flip also
                // alters the transmitter's round-tag frames, which fails their round too).
                for r in &rs.attacked_rounds {
                    assert!(rs.failed_rounds.contains(r), "round {r}: {what}");
                }
                assert!(!rs.attacked_rounds.is_empty(), "{what}");
                if attack != LinkAttack::Flip {
                    assert_eq!(rs.failed_rounds, rs.attacked_rounds, "{what}");
                }
                assert_eq!(rs.failed.get("bad_tag"), Some(&rs.closed), "{what}");
            }
            LinkAttack::Replay | LinkAttack::Delay => {
                assert_eq!(rs.forged_answers_taken, 0, "{what}");
                assert!(rs.attacked_rounds.is_empty(), "{what}");
                assert_eq!(rs.verified, rs.closed, "{what}");
                assert!(l.keys.receiver_bits > 1000, "{what}");
            }
        }
    }
}

/// The key file in round mode holds only verified rounds' key and one verdict record per round:
/// under an injecting adversary with short rounds none verifies and the file holds no key; on the
/// clean noisy link every round verifies and the file's bits are the kept key.
#[test]
fn round_mode_key_file_keeps_only_verified_rounds() {
    use slotwise_sim::link::keyfile::inspect;
    let dir = std::path::Path::new(env!("CARGO_TARGET_TMPDIR"));
    for attack in [None, Some(LinkAttack::Inject)] {
        let path = dir.join(format!("rounds-{attack:?}.swkey"));
        let s = scenario();
        let (summary, _, _) = run_simulated_linked(
            &s,
            &clock(),
            None,
            Some(noisy_rounds(16, attack)),
            Some(&path),
        )
        .unwrap();
        let l = summary.link.unwrap();
        let rs = l.auth.as_ref().unwrap().rounds.clone().unwrap();
        let r = inspect(&path).unwrap();
        assert!(r.bad_frames.is_empty(), "{:?}", r.bad_frames);
        assert_eq!(r.total_bits, l.keys.receiver_bits, "{attack:?}");
        assert_eq!(r.summary.map(|s| s.0), Some(r.total_bits));
        assert_eq!(r.rounds_kept, rs.verified, "{attack:?}");
        assert_eq!(
            r.rounds_discarded,
            rs.failed_rounds.len() as u64,
            "{attack:?}"
        );
        match attack {
            None => assert!(r.total_bits > 1000 && r.rounds_discarded == 0),
            Some(_) => assert!(r.total_bits == 0 && r.rounds_discarded > 30),
        }
    }
}
