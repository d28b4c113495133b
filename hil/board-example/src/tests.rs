//! Host tests of the board-independent half: the committed profile, the bridge's record layout
//! through the core's ingest stage, and the receiver wiring.

use crate::fifo::{event_record, rollover_record, to_receiver, FORMAT, RECORD_BYTES};
use crate::profile::{decode, setup_len, ProfileError, PROFILE};
use crate::receiver::{self, Pipeline};
use core::convert::Infallible;
use slotwise::ingest::Ingest;
use slotwise::{FrameSink, TdcEvent};
use slotwise_hil::board::BOARD_LEN;
use slotwise_hil::BoardFrameOut;

#[test]
fn committed_profile_decodes_and_splits_where_the_layout_says() {
    // The setup layout table (hil/common/src/setup.rs): 46 + 8·C + 11·G + 4 bytes, C at byte 44,
    // G right after the delays; the committed setup has C = 3, G = 8.
    assert_eq!(PROFILE.get(44), Some(&3));
    assert_eq!(PROFILE.get(45 + 8 * 3), Some(&8));
    assert_eq!(setup_len(PROFILE), Some(46 + 8 * 3 + 11 * 8 + 4));
    assert_eq!(PROFILE.len(), 162 + BOARD_LEN);
    let p = decode(PROFILE).expect("the committed profile decodes");
    // The committed setup is the bench scenario's: a 48-bit TDC counter at 1 ps (bytes 5..10 of
    // the layout).
    assert_eq!(p.setup.tdc.counter_bits(), 48);
}

#[test]
fn damaged_profiles_are_refused() {
    assert_eq!(decode(&PROFILE[..40]), Err(ProfileError::Truncated));
    assert_eq!(
        decode(&PROFILE[..PROFILE.len() - 1]),
        Err(ProfileError::BoardLength(BOARD_LEN - 1))
    );
    let mut flipped = PROFILE.to_vec();
    flipped[20] ^= 0x10;
    assert!(matches!(decode(&flipped), Err(ProfileError::Setup(_))));
    let mut flipped = PROFILE.to_vec();
    let last = flipped.len() - 10;
    flipped[last] ^= 0x01;
    assert!(matches!(decode(&flipped), Err(ProfileError::Board(_))));
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

/// A link line with nothing to read.
struct Silent;
impl embedded_io::ErrorType for Silent {
    type Error = Infallible;
}
impl embedded_io::Read for Silent {
    fn read(&mut self, _: &mut [u8]) -> Result<usize, Infallible> {
        Ok(0)
    }
}
impl embedded_io::ReadReady for Silent {
    fn read_ready(&mut self) -> Result<bool, Infallible> {
        Ok(false)
    }
}

/// A line that keeps what is written.
#[derive(Default)]
struct Kept(Vec<u8>);
impl embedded_io::ErrorType for Kept {
    type Error = Infallible;
}
impl embedded_io::Write for Kept {
    fn write(&mut self, buf: &[u8]) -> Result<usize, Infallible> {
        self.0.extend_from_slice(buf);
        Ok(buf.len())
    }
    fn flush(&mut self) -> Result<(), Infallible> {
        Ok(())
    }
}

#[derive(Default)]
struct Frames(usize);
impl FrameSink for Frames {
    fn frame(&mut self, _: &[u8]) {
        self.0 += 1;
    }
}

#[test]
fn pipeline_takes_blocks_from_a_cold_start() {
    let p = decode(PROFILE).expect("profile");
    let mut rx = Box::new(receiver::receiver(&p).expect("receiver"));
    let mut link = Box::new(receiver::link(&p, Silent, Kept::default()));
    let mut monitor = Box::new(receiver::monitor(&p).expect("monitor"));
    let mut out = Box::new(BoardFrameOut::new(Frames::default()));
    let mut pipe = Pipeline::new(&p, &mut rx, &mut link, &mut monitor, &mut out);
    // 10 ns apart at 1 ps per tick: one detection per slot of the 100 MHz scenario.
    let block: Vec<TdcEvent> = (0..128u64)
        .map(|i| TdcEvent {
            count: 1_000_000 + i * 10_000,
            channel: (i % 2) as u8,
        })
        .collect();
    pipe.push_block(&block);
    pipe.push_block(&block[..0]);
    assert_eq!(pipe.counts().detections, 128);
    // 128 detections cannot lock a cold recovered clock: nothing is announced yet.
    assert_eq!(pipe.link_counters().announcements, 0);
}
