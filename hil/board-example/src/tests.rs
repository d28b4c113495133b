//! Host tests of the board-independent half: the committed profile blob, the bridge's record
//! layout through the core's ingest stage, and the station fed the bridge's records.

use crate::fifo::{event_record, rollover_record, to_receiver, FORMAT, RECORD_BYTES};
use crate::profile::PROFILE;
use slotwise::ingest::Ingest;
use slotwise::TdcEvent;
use slotwise_hil::blob::ProfileBlob;
use slotwise_hil::Station;

#[test]
fn committed_profile_carries_the_bridge_layout() {
    let p = ProfileBlob::decode(PROFILE).expect("the committed profile decodes");
    // The bench scenario's receiver: a 48-bit TDC counter at 1 ps, and the bridge's word layout.
    assert_eq!(p.setup.tdc.counter_bits(), 48);
    assert_eq!(p.words, Some(FORMAT));
    // No hint compiled in: the transmitter's hello gives it at run time.
    assert_eq!((p.board.hint_t_ps, p.board.hint_tx_slot), (0, 0));
}

#[test]
fn bridge_records_decode_through_the_core_ingest() {
    // The layout table in fifo.rs: an event, a rollover of one wrap, an event, a record of an
    // unknown kind, an event on channel 9 (above the maximum of 7).
    let mut bytes = Vec::new();
    bytes.extend_from_slice(&event_record(0xFFFF_FFF0, 2));
    bytes.extend_from_slice(&rollover_record(1));
    bytes.extend_from_slice(&event_record(0x10, 5));
    bytes.extend_from_slice(&[0u8; RECORD_BYTES]);
    bytes.extend_from_slice(&event_record(0x20, 9));
    let mut ingest = Ingest::new(FORMAT);
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 8];
    let done = ingest.push(&bytes, &mut out);
    assert_eq!(done.events, 2);
    assert_eq!(
        out[0],
        TdcEvent {
            count: 0xFFFF_FFF0,
            channel: 2
        }
    );
    assert_eq!(
        out[1],
        TdcEvent {
            count: (1 << 32) | 0x10,
            channel: 5
        }
    );
    let c = ingest.counts();
    assert_eq!((c.malformed_words, c.rollover_gaps), (2, 0));
}

#[test]
fn receiver_counter_keeps_the_configured_width() {
    let ev = TdcEvent {
        count: (0xABCD << 48) | 0x1234_5678_9ABC,
        channel: 1,
    };
    assert_eq!(to_receiver(ev, 48).count, 0x1234_5678_9ABC);
    assert_eq!(to_receiver(ev, 64).count, ev.count);
    assert_eq!(to_receiver(ev, 32).count, 0x5678_9ABC);
}

#[test]
fn the_station_takes_the_bridges_records_from_a_cold_start() {
    let mut st = Box::new(Station::new(PROFILE).expect("station"));
    // 10 ns apart at 1 ps per tick: one detection per slot of the 100 MHz scenario, across a
    // wrap of the 32-bit time field, cut into odd pieces as DMA halves may cut them.
    let mut bytes = Vec::new();
    let start: u64 = 0xFFF0_0000;
    for i in 0..256u64 {
        let t = start + i * 10_000;
        if t >> 32 != (t - 10_000) >> 32 {
            bytes.extend_from_slice(&rollover_record(1));
        }
        bytes.extend_from_slice(&event_record(t as u32, (i % 2) as u8));
    }
    for piece in bytes.chunks(100) {
        st.push_words(piece).expect("words");
    }
    let c = st.counts();
    assert_eq!(c.totals.detections, 256);
    assert_eq!((c.ingest.malformed_words, c.ingest.rollover_gaps), (0, 0));
    // 256 detections cannot lock a cold recovered clock: nothing is announced yet, and every
    // detection is accounted for.
    assert_eq!(st.link().counters().announcements, 0);
    let s = st.summary();
    assert_eq!(s.accounting.total(), 256);
}
