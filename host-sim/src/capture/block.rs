//! Data blocks and the end record: delta-encoded events behind a sync word, each record closed by
//! a CRC-32C. Layout in `docs/capture-format.md`.
//!
//! A step between neighbouring counter values is taken modulo 2^bits and read as a signed number
//! in [−2^(bits−1), 2^(bits−1)), the same rule the core's unwrapper uses (serial-number
//! arithmetic, common practice). It is stored zigzag-mapped (0, −1, 1, −2, … → 0, 1, 2, 3, …) as
//! an unsigned LEB128 varint (7 bits per byte, least significant group first, high bit set on
//! every byte but the last), both common practice for compact signed integers.

use super::error::{ErrorKind, Fault};
use super::header::{le_u32, le_u64};
use super::{crc32c, BLOCK_SYNC, END_SYNC};
use slotwise::TdcEvent;

/// Bytes before the payload: sync, index, event count, payload length, first counter value.
pub(crate) const BLOCK_HEAD_LEN: usize = 28;
/// Offset of the block index (u64) in a block.
pub(crate) const OFF_INDEX: usize = 4;
/// Offset of the event count (u32) in a block.
pub(crate) const OFF_EVENT_COUNT: usize = 12;
/// Offset of the payload length (u32) in a block.
pub(crate) const OFF_PAYLOAD_LEN: usize = 16;
/// Offset of the first event's counter value (u64) in a block.
pub(crate) const OFF_FIRST_COUNT: usize = 20;
/// Length of the end record: sync, block count, event total, CRC.
pub(crate) const END_LEN: usize = 24;
/// Offset of the block count (u64) in the end record.
pub(crate) const OFF_END_BLOCKS: usize = 4;
/// Offset of the event total (u64) in the end record.
pub(crate) const OFF_END_EVENTS: usize = 12;
/// Longest encoding of one event after the first: 10-byte varint and a channel byte.
pub(crate) const MAX_EVENT_BYTES: u64 = 11;

/// Signed step from `prev` to `cur` on a counter circle of `mask + 1` values, zigzag-mapped.
#[inline]
pub(crate) fn zigzag_step(prev: u64, cur: u64, mask: u64) -> u64 {
    let d = cur.wrapping_sub(prev) & mask;
    let half = (mask >> 1) + 1;
    let signed: i64 = if d >= half {
        // Backward step: d − 2^bits, computed without overflow for every width ≤ 64.
        (d.wrapping_sub(mask).wrapping_sub(1)) as i64
    } else {
        d as i64
    };
    ((signed << 1) ^ (signed >> 63)) as u64
}

/// Apply a zigzag-mapped step to `prev` on the counter circle.
pub(crate) fn apply_step(prev: u64, zigzag: u64, mask: u64) -> u64 {
    let signed = ((zigzag >> 1) as i64) ^ -((zigzag & 1) as i64);
    prev.wrapping_add(signed as u64) & mask
}

/// Room [`write_varint`] needs after its start, in bytes (it may write past the varint's end).
const VARINT_ROOM: usize = 16;

/// Append `v` as an unsigned LEB128 varint.
#[cfg(test)]
pub(crate) fn put_varint(out: &mut Vec<u8>, v: u64) {
    let mut b = [0u8; VARINT_ROOM];
    let n = write_varint(&mut b, v);
    out.extend_from_slice(b.get(..n).unwrap_or_default());
}

/// Write `v` as an unsigned LEB128 varint at the start of `dst` (at least [`VARINT_ROOM`]
/// bytes; the bytes after the varint are scratch) and return its length.
///
/// Below 2^56 (eight 7-bit groups, every counter step of a real capture) the groups are spread
/// into one 64-bit word and stored at once, without a branch per byte.
#[inline]
fn write_varint(dst: &mut [u8], v: u64) -> usize {
    if v < 1 << 56 {
        let bits = 64 - (v | 1).leading_zeros();
        let n = bits.div_ceil(7);
        let mut spread = 0u64;
        for g in 0..8 {
            spread |= (v << g) & (0x7F << (8 * g));
        }
        let more = 0x8080_8080_8080_8080u64 & ((1u64 << (8 * (n - 1))) - 1);
        if let Some(d) = dst.get_mut(..8) {
            d.copy_from_slice(&(spread | more).to_le_bytes());
        }
        return n as usize;
    }
    let mut v = v;
    let mut n = 0;
    while v >= 0x80 {
        if let Some(d) = dst.get_mut(n) {
            *d = (v as u8) | 0x80;
        }
        v >>= 7;
        n += 1;
    }
    if let Some(d) = dst.get_mut(n) {
        *d = v as u8;
    }
    n + 1
}

/// Read an unsigned LEB128 varint from the front of `b`: value and bytes used.
pub(crate) fn get_varint(b: &[u8]) -> Result<(u64, usize), ErrorKind> {
    let mut v: u64 = 0;
    for i in 0..10 {
        let Some(&byte) = b.get(i) else {
            return Err(ErrorKind::VarintOverrun);
        };
        let group = u64::from(byte & 0x7F);
        if i == 9 && group > 1 {
            return Err(ErrorKind::VarintTooLong);
        }
        v |= group << (7 * i);
        if byte & 0x80 == 0 {
            return Ok((v, i + 1));
        }
    }
    Err(ErrorKind::VarintTooLong)
}

/// Collects the events of one block and encodes them on the fly.
#[derive(Debug)]
pub(crate) struct BlockEncoder {
    mask: u64,
    /// `payload[..len]` is the block's payload; the rest is room for the next event.
    payload: Vec<u8>,
    len: usize,
    events: u32,
    first: u64,
    prev: u64,
}

impl BlockEncoder {
    /// An empty block for counters masked by `mask`, room for `capacity` events.
    pub(crate) fn new(mask: u64, capacity: u32) -> Self {
        Self {
            mask,
            payload: vec![
                0;
                (capacity as usize)
                    .saturating_mul(4)
                    .max(MAX_EVENT_BYTES as usize)
            ],
            len: 0,
            events: 0,
            first: 0,
            prev: 0,
        }
    }

    /// Events collected so far.
    pub(crate) fn events(&self) -> u32 {
        self.events
    }

    /// Add one event (count already checked against the mask).
    #[inline]
    pub(crate) fn push(&mut self, ev: TdcEvent) {
        let room = self.len + VARINT_ROOM + 1;
        if self.payload.len() < room {
            self.payload.resize(room.max(self.payload.len() * 2), 0);
        }
        if self.events == 0 {
            self.first = ev.count;
        } else {
            let step = zigzag_step(self.prev, ev.count, self.mask);
            let dst = self.payload.get_mut(self.len..).unwrap_or_default();
            self.len += write_varint(dst, step);
        }
        if let Some(b) = self.payload.get_mut(self.len) {
            *b = ev.channel;
        }
        self.len += 1;
        self.prev = ev.count;
        self.events += 1;
    }

    /// Append the finished block with index `index` to `out` and start an empty one.
    pub(crate) fn finish_into(&mut self, index: u64, out: &mut Vec<u8>) {
        let start = out.len();
        out.extend_from_slice(&BLOCK_SYNC);
        out.extend_from_slice(&index.to_le_bytes());
        out.extend_from_slice(&self.events.to_le_bytes());
        out.extend_from_slice(&(self.len as u32).to_le_bytes());
        out.extend_from_slice(&self.first.to_le_bytes());
        out.extend_from_slice(self.payload.get(..self.len).unwrap_or_default());
        let crc = crc32c(out.get(start..).unwrap_or_default());
        out.extend_from_slice(&crc.to_le_bytes());
        self.len = 0;
        self.events = 0;
    }
}

/// The end record's bytes.
pub(crate) fn encode_end(blocks: u64, events: u64) -> [u8; END_LEN] {
    let mut b = [0u8; END_LEN];
    let mut body = Vec::with_capacity(END_LEN);
    body.extend_from_slice(&END_SYNC);
    body.extend_from_slice(&blocks.to_le_bytes());
    body.extend_from_slice(&events.to_le_bytes());
    let crc = crc32c(&body);
    body.extend_from_slice(&crc.to_le_bytes());
    b.copy_from_slice(&body);
    b
}

/// The fixed fields of a block as read from its first [`BLOCK_HEAD_LEN`] bytes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct BlockHead {
    pub index: u64,
    pub event_count: u32,
    pub payload_len: u32,
    pub first_count: u64,
}

impl BlockHead {
    /// Read the fields from `b` (at least [`BLOCK_HEAD_LEN`] bytes).
    pub(crate) fn parse(b: &[u8]) -> Self {
        Self {
            index: le_u64(b, OFF_INDEX),
            event_count: le_u32(b, OFF_EVENT_COUNT),
            payload_len: le_u32(b, OFF_PAYLOAD_LEN),
            first_count: le_u64(b, OFF_FIRST_COUNT),
        }
    }

    /// Check index, event count and payload length before the payload is read, so a damaged
    /// length cannot make the reader buffer more than one legal block. `start` is the block's
    /// offset.
    pub(crate) fn check_lengths(&self, start: u64, max_block_events: u32) -> Result<(), Fault> {
        // The last index is reserved so that the count of blocks read always fits 64 bits.
        if self.index == u64::MAX {
            return Err(Fault::new(
                start + OFF_INDEX as u64,
                "block_index",
                ErrorKind::OutOfRange {
                    value: self.index,
                    min: 0,
                    max: u64::MAX - 1,
                },
            ));
        }
        let n = u64::from(self.event_count);
        if n == 0 || n > u64::from(max_block_events) {
            return Err(Fault::new(
                start + OFF_EVENT_COUNT as u64,
                "event_count",
                ErrorKind::OutOfRange {
                    value: n,
                    min: 1,
                    max: max_block_events.into(),
                },
            ));
        }
        // First event: one channel byte; every further one: a varint of 1..=10 bytes and one.
        let min = 2 * n - 1;
        let max = 1 + MAX_EVENT_BYTES * (n - 1);
        let len = u64::from(self.payload_len);
        if len < min || len > max {
            return Err(Fault::new(
                start + OFF_PAYLOAD_LEN as u64,
                "payload_length",
                ErrorKind::OutOfRange {
                    value: len,
                    min,
                    max,
                },
            ));
        }
        Ok(())
    }

    /// Total bytes of the block: head, payload, CRC.
    pub(crate) fn total_len(&self) -> usize {
        BLOCK_HEAD_LEN + self.payload_len as usize + 4
    }
}

/// How the payload's events are to be checked while decoding.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Limits {
    pub mask: u64,
    pub bits: u8,
    pub channel_count: u8,
}

/// Decode the payload `p` of a block whose payload starts at byte `at` into `out`.
pub(crate) fn decode_payload(
    p: &[u8],
    head: &BlockHead,
    lim: Limits,
    at: u64,
    out: &mut Vec<TdcEvent>,
) -> Result<(), Fault> {
    out.clear();
    if head.first_count & !lim.mask != 0 {
        return Err(Fault::new(
            at - (BLOCK_HEAD_LEN - OFF_FIRST_COUNT) as u64,
            "first_count",
            ErrorKind::TooWide {
                value: head.first_count,
                bits: lim.bits,
            },
        ));
    }
    let mut pos = 0usize;
    let mut count = head.first_count;
    for i in 0..head.event_count {
        if i > 0 {
            let rest = p.get(pos..).unwrap_or_default();
            let (z, used) =
                get_varint(rest).map_err(|k| Fault::new(at + pos as u64, "varint", k))?;
            if z & !lim.mask != 0 {
                return Err(Fault::new(
                    at + pos as u64,
                    "delta",
                    ErrorKind::TooWide {
                        value: z,
                        bits: lim.bits,
                    },
                ));
            }
            count = apply_step(count, z, lim.mask);
            pos += used;
        }
        let Some(&channel) = p.get(pos) else {
            return Err(Fault::new(
                at + pos as u64,
                "channel",
                ErrorKind::PayloadOverrun,
            ));
        };
        if channel >= lim.channel_count {
            return Err(Fault::new(
                at + pos as u64,
                "channel",
                ErrorKind::ChannelOutOfRange {
                    channel,
                    channel_count: lim.channel_count,
                },
            ));
        }
        pos += 1;
        out.push(TdcEvent { count, channel });
    }
    if pos != p.len() {
        return Err(Fault::new(
            at + pos as u64,
            "payload_length",
            ErrorKind::TrailingPayload {
                unused: (p.len() - pos) as u64,
            },
        ));
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zigzag_maps_small_steps_both_ways() {
        let m32 = u64::from(u32::MAX);
        assert_eq!(zigzag_step(10, 10, m32), 0);
        assert_eq!(zigzag_step(10, 9, m32), 1);
        assert_eq!(zigzag_step(10, 11, m32), 2);
        assert_eq!(zigzag_step(10, 8, m32), 3);
        // Across the wrap: 0xFFFF_FFF0 -> 0x10 is +0x20 forward.
        assert_eq!(zigzag_step(0xFFFF_FFF0, 0x10, m32), 0x40);
        assert_eq!(apply_step(0xFFFF_FFF0, 0x40, m32), 0x10);
        // Half range exactly is the most negative step.
        let z = zigzag_step(0, 1 << 31, m32);
        assert_eq!(z, m32);
        assert_eq!(apply_step(0, z, m32), 1 << 31);
    }

    #[test]
    fn sixty_four_bit_extremes_round_trip() {
        for (a, b) in [
            (0, u64::MAX),
            (u64::MAX, 0),
            (0, 1 << 63),
            (5, (1 << 63) + 4),
        ] {
            let z = zigzag_step(a, b, u64::MAX);
            assert_eq!(apply_step(a, z, u64::MAX), b);
        }
    }

    #[test]
    fn varint_round_trip_and_limits() {
        for v in [0, 1, 127, 128, 300, u64::from(u32::MAX), u64::MAX] {
            let mut b = Vec::new();
            put_varint(&mut b, v);
            assert_eq!(get_varint(&b), Ok((v, b.len())));
        }
        // 300 = 0b10_0101100 -> AC 02, the usual LEB128 worked example (common practice).
        let mut b = Vec::new();
        put_varint(&mut b, 300);
        assert_eq!(b, [0xAC, 0x02]);
        // The word-at-a-time encoder against the plain byte loop, at every length's edges.
        let plain = |mut v: u64| {
            let mut out = Vec::new();
            while v >= 0x80 {
                out.push((v as u8) | 0x80);
                v >>= 7;
            }
            out.push(v as u8);
            out
        };
        for bits in 0..64 {
            for v in [
                (1u64 << bits) - 1,
                1 << bits,
                (1 << bits) + 1,
                0x5555_5555_5555_5555 >> (63 - bits),
            ] {
                let mut b = Vec::new();
                put_varint(&mut b, v);
                assert_eq!(b, plain(v), "{v:#x}");
            }
        }
        assert_eq!(get_varint(&[0x80, 0x80]), Err(ErrorKind::VarintOverrun));
        let mut too_big = [0xFFu8; 10];
        too_big[9] = 0x02;
        assert_eq!(get_varint(&too_big), Err(ErrorKind::VarintTooLong));
        assert_eq!(get_varint(&[0x80; 11]), Err(ErrorKind::VarintTooLong));
    }
}
