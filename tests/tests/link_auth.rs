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

fn exact(side: &AuthSide) {
    assert_eq!(
        side.key_bits_loaded,
        side.key_bits_consumed + side.key_bits_abandoned + side.key_bits_left,
        "{side:?}"
    );
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
