//! Null pointers, damaged profiles and calls out of phase, refused with their status codes.

use super::*;
use core::ptr::{null, null_mut};

#[test]
fn null_pointers_and_damaged_profiles_are_refused_with_a_status_and_a_message() {
    let mut msg = [0 as c_char; 96];
    // SAFETY: null pointers are what is tested; `msg` holds 96 bytes.
    unsafe {
        assert_eq!(sw_profile_check(null(), 4, null_mut(), 0), SW_ERR_NULL);
        let junk = [0u8; 40];
        let rc = sw_profile_check(junk.as_ptr(), junk.len(), msg.as_mut_ptr(), msg.len());
        assert_eq!(rc, SW_ERR_PROFILE);
        let mut out = null_mut();
        let rc = sw_station_init(null_mut(), junk.as_ptr(), junk.len(), &mut out);
        assert_eq!(rc, SW_ERR_NULL);
        assert_eq!(sw_station_push_events(null_mut(), null(), 0), SW_ERR_NULL);
        assert_eq!(sw_station_drain_frames(null_mut(), null_mut(), 9), 0);
        assert_eq!(sw_station_alarms(null_mut()), 0);
    }
    let text: std::vec::Vec<u8> = msg
        .iter()
        .take_while(|&&c| c != 0)
        .map(|&c| c as u8)
        .collect();
    let text = std::string::String::from_utf8(text).unwrap();
    assert!(text.contains("magic") && text.contains("byte 0"), "{text}");
}

/// A real compiled profile blob: the board example's (the invented bench scenario's receiver
/// with its FIFO bridge's word layout; `slotwise profile compile`).
fn blob() -> std::vec::Vec<u8> {
    include_bytes!("../../hil/board-example/profile/receiver.swblob").to_vec()
}

#[test]
fn authentication_calls_refuse_null_pointers_bad_keys_and_the_wrong_phase() {
    let storage = std::boxed::Box::leak(std::boxed::Box::new(SwStorage {
        words: [0; SW_STATION_STORAGE_WORDS],
    }));
    let b = blob();
    let key: [u8; 16] = core::array::from_fn(|i| i as u8 + 1);
    let pad: std::vec::Vec<u8> = (0..8 * 16).map(|i| (i * 7 + 3) as u8).collect();
    let ev = [SwEvent {
        count: 5,
        channel: 0,
    }];
    let mut st = null_mut();
    // SAFETY: `storage` is a fresh, leaked storage; every pointer is valid for its length or
    // null on purpose.
    unsafe {
        assert_eq!(
            sw_station_init(storage, b.as_ptr(), b.len(), &mut st),
            SW_OK
        );
        assert_eq!(
            sw_station_authenticate(null_mut(), key.as_ptr(), pad.as_ptr(), pad.len(), 4),
            SW_ERR_NULL
        );
        assert_eq!(
            sw_station_authenticate(st, null(), pad.as_ptr(), pad.len(), 4),
            SW_ERR_NULL
        );
        assert_eq!(
            sw_station_authenticate(st, key.as_ptr(), null(), pad.len(), 4),
            SW_ERR_NULL
        );
        assert_eq!(
            sw_station_push_refill(null_mut(), pad.as_ptr(), 4),
            SW_ERR_NULL
        );
        assert_eq!(sw_station_push_refill(st, null(), 4), SW_ERR_NULL);
        // Unauthenticated, a refill is refused.
        assert_eq!(sw_station_push_refill(st, pad.as_ptr(), 9), SW_ERR_REFILL);
        let zero = [0u8; 16];
        assert_eq!(
            sw_station_authenticate(st, zero.as_ptr(), pad.as_ptr(), pad.len(), 4),
            SW_ERR_AUTH_KEY
        );
        assert_eq!(
            sw_station_authenticate(st, key.as_ptr(), pad.as_ptr(), pad.len(), 0),
            SW_ERR_AUTH_ROUNDS
        );
        // After the first detection it is too late: both ends must tag from the start.
        assert_eq!(sw_station_push_events(st, ev.as_ptr(), 1), SW_OK);
        assert_eq!(
            sw_station_authenticate(st, key.as_ptr(), pad.as_ptr(), pad.len(), 4),
            SW_ERR_PHASE
        );
        let mut c = SwCounters::default();
        assert_eq!(sw_station_counters(st, &mut c), SW_OK);
        assert_eq!((c.authenticated, c.auth_key_bits_left), (0, 0));
        assert_eq!(sw_station_finish(st), SW_OK);

        // A fresh station takes the key once; the second call is out of phase; finishing
        // takes two calls.
        assert_eq!(
            sw_station_init(storage, b.as_ptr(), b.len(), &mut st),
            SW_OK
        );
        assert_eq!(
            sw_station_authenticate(st, key.as_ptr(), pad.as_ptr(), pad.len(), 4),
            SW_OK
        );
        assert_eq!(
            sw_station_authenticate(st, key.as_ptr(), pad.as_ptr(), pad.len(), 4),
            SW_ERR_PHASE
        );
        assert_eq!(sw_station_counters(st, &mut c), SW_OK);
        assert_eq!((c.authenticated, c.auth_key_bits_left), (1, 14 * 64));
        assert_eq!(c.auth_low_key_alarm, 1);
        assert_ne!(sw_station_alarms(st) & SW_ALARM_AUTH_LOW_KEY, 0);
        assert_eq!(sw_station_push_events(st, ev.as_ptr(), 1), SW_OK);
        assert_eq!(sw_station_end_input(st), SW_OK);
        assert_eq!(sw_station_finish(st), SW_AGAIN);
        assert_eq!(sw_station_finish(st), SW_OK);
        assert_eq!(sw_station_finish(st), SW_ERR_PHASE);
    }
}

#[test]
fn a_long_message_is_cut_and_still_terminated() {
    let mut out = [0xffu8; 8];
    let mut w = Truncating {
        out: &mut out,
        at: 0,
    };
    write!(w, "a message longer than the buffer").unwrap();
    assert_eq!(w.at, 7);
    assert_eq!(&out[..7], b"a messa");
}
