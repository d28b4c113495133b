//! The record layout of the board's TDC FIFO bridge (invented for this example), and the step
//! from the ingest stage's counter to the receiver's.
//!
//! | bits | field |
//! |---|---|
//! | 0..32 | time: the TDC's narrow counter, in ticks of the setup's resolution |
//! | 32..36 | channel: TDC input 0..=7 (values 8..=15 are counted as malformed) |
//! | 36..40 | unused, sent as 0 |
//! | 40..56 | rollover count: wraps of the 32-bit time field this record stands for |
//! | 56..64 | kind: 0xA5 an event, 0x5A a rollover |
//!
//! Eight bytes, little endian, so the FIFO's 64-bit words reach memory as the bridge wrote them.
//! Kind values far apart in Hamming distance (all eight bits differ) make it unlikely that line
//! noise turns one kind into the other; anything else is counted as malformed.
//!
//! The ingest stage widens the 32-bit time with the rollover records. The receiver's own
//! timestamp stage then expects a counter of the setup's width (32..=64 bits) and widens that
//! again, so [`to_receiver`] keeps the low bits: since the width is at least the time field's,
//! those bits are exactly what a TDC with a counter of that width would have reported.

use slotwise::words::{BitField, Endian, KindField, WordFormat, WordLayout};
use slotwise::TdcEvent;

/// Bytes per record.
pub const RECORD_BYTES: usize = 8;
/// Kind value of an event record.
pub const KIND_EVENT: u8 = 0xA5;
/// Kind value of a rollover record.
pub const KIND_ROLLOVER: u8 = 0x5A;

/// The bridge's record layout.
pub const LAYOUT: WordLayout = WordLayout {
    record_bytes: RECORD_BYTES as u8,
    endian: Endian::Little,
    time: BitField::new(0, 32),
    channel: BitField::new(32, 4),
    kind: Some(KindField {
        field: BitField::new(56, 8),
        event: KIND_EVENT,
        rollover: KIND_ROLLOVER,
        rollover_count: BitField::new(40, 16),
    }),
    max_channel: 7,
};

/// The layout, checked when the firmware is compiled.
#[allow(clippy::panic)] // Evaluated at compile time: a bad layout fails the build, never the board.
pub const FORMAT: WordFormat = match WordFormat::new(LAYOUT) {
    Ok(f) => f,
    Err(_) => panic!("the bridge's record layout is refused by slotwise::words"),
};

/// The ingest stage's event with its counter cut to the receiver's `counter_bits` (32..=64).
pub const fn to_receiver(ev: TdcEvent, counter_bits: u8) -> TdcEvent {
    let count = if counter_bits >= 64 {
        ev.count
    } else {
        ev.count & ((1u64 << counter_bits) - 1)
    };
    TdcEvent {
        count,
        channel: ev.channel,
    }
}

/// An event record of the bridge (for tests and a bridge simulator).
pub const fn event_record(time: u32, channel: u8) -> [u8; RECORD_BYTES] {
    (time as u64 | ((channel as u64 & 0xF) << 32) | ((KIND_EVENT as u64) << 56)).to_le_bytes()
}

/// A rollover record standing for `wraps` wraps of the time field.
pub const fn rollover_record(wraps: u16) -> [u8; RECORD_BYTES] {
    (((wraps as u64) << 40) | ((KIND_ROLLOVER as u64) << 56)).to_le_bytes()
}
