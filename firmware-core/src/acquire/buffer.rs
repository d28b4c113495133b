//! The acquisition buffer: detections stored as time steps, five bytes each, read in order.
//!
//! The search and the fits only ever walk the stored detections from the first onwards, so a
//! detection need not be stored as its 64-bit time: the step from the previous one is enough,
//! and it is small. The step (wrapping, signed, so reordered detections cost nothing extra) is
//! zigzag-encoded (small magnitudes of either sign give small codes, as in Protocol Buffers'
//! `sint64`, common practice) into a 32-bit word and the top three bits of a code byte whose
//! low five bits hold the channel. That covers steps up to ±2^34 ps (17 ms); a longer step
//! puts its upper 29 bits into an escape entry just before it. Decoding is exact for every
//! 64-bit step, so the search sees the same times as with a `u64` per detection.
//!
//! An escape takes one entry of the capacity: a buffer of `N` entries holds `N` detections
//! minus one per gap longer than 17 ms. [`DetectionBuffer::push`] hands the detection back when
//! it does not fit.

/// Channel code for detections without a channel (and channels ≥ `UNION`): the union pattern.
const UNION: u8 = crate::gates::MAX_CHANNELS as u8;
/// Channel code of an escape entry (the upper bits of the next entry's step).
const ESCAPE: u8 = 0x1F;
const CHANNEL_MASK: u8 = 0x1F;
/// Bits of a zigzagged step held by one entry: the word and the code byte's top three bits.
const ENTRY_BITS: u32 = 35;
const _: () = assert!(UNION < ESCAPE && 2 * ENTRY_BITS >= u64::BITS);

/// A place in the buffer while reading it in order: entry index, detections read, and the
/// time (ps) of the last detection read.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(crate) struct Cursor {
    entry: usize,
    /// Detections read so far.
    pub read: usize,
    t_ps: u64,
}

/// Up to `N` entries of detection time steps and channels (5 bytes per entry).
#[derive(Clone, Debug)]
pub(crate) struct DetectionBuffer<const N: usize> {
    words: [u32; N],
    codes: [u8; N],
    entries: usize,
    len: usize,
    /// Time (ps) of the latest stored detection: the next step is taken from it.
    prev_t_ps: u64,
}

impl<const N: usize> DetectionBuffer<N> {
    /// An empty buffer.
    pub(crate) const fn new() -> Self {
        const {
            assert!(
                core::mem::size_of::<Self>() <= 5 * N + 32,
                "5 bytes per entry"
            )
        };
        Self {
            words: [0; N],
            codes: [0; N],
            entries: 0,
            len: 0,
            prev_t_ps: 0,
        }
    }

    /// Forget every detection.
    pub(crate) fn clear(&mut self) {
        self.entries = 0;
        self.len = 0;
    }

    /// Detections stored.
    pub(crate) const fn len(&self) -> usize {
        self.len
    }

    /// Store a detection at `t_ps` (any order); `false` when its entries do not fit.
    pub(crate) fn push(&mut self, t_ps: u64, channel: Option<u8>) -> bool {
        let prev = if self.len == 0 { t_ps } else { self.prev_t_ps };
        let d = t_ps.wrapping_sub(prev) as i64;
        let z = ((d << 1) ^ (d >> 63)) as u64;
        let code = channel.map_or(UNION, |c| c.min(UNION));
        let hi = z >> ENTRY_BITS;
        let need = if hi == 0 { 1 } else { 2 };
        if self.entries + need > N {
            return false;
        }
        if hi != 0 {
            self.put(hi, ESCAPE);
        }
        self.put(z & ((1 << ENTRY_BITS) - 1), code);
        self.len += 1;
        self.prev_t_ps = t_ps;
        true
    }

    fn put(&mut self, bits: u64, channel: u8) {
        let (Some(w), Some(c)) = (
            self.words.get_mut(self.entries),
            self.codes.get_mut(self.entries),
        ) else {
            return;
        };
        *w = bits as u32;
        *c = ((bits >> 32) as u8) << 5 | channel;
        self.entries += 1;
    }

    /// A cursor before the first detection, whose time is `first_t_ps`.
    pub(crate) const fn cursor(first_t_ps: u64) -> Cursor {
        Cursor {
            entry: 0,
            read: 0,
            t_ps: first_t_ps,
        }
    }

    /// The detection after `cur` as (time in ps, channel), advancing `cur`.
    pub(crate) fn next(&self, cur: &mut Cursor) -> Option<(u64, Option<u8>)> {
        let mut hi = 0u64;
        while cur.entry < self.entries {
            let (w, c) = (*self.words.get(cur.entry)?, *self.codes.get(cur.entry)?);
            cur.entry += 1;
            let bits = u64::from(c >> 5) << 32 | u64::from(w);
            if c & CHANNEL_MASK == ESCAPE {
                hi = bits;
                continue;
            }
            let z = hi << ENTRY_BITS | bits;
            let d = (z >> 1) as i64 ^ -((z & 1) as i64);
            // The first entry's step is zero by construction, so the cursor's start is its time.
            cur.t_ps = cur.t_ps.wrapping_add(d as u64);
            cur.read += 1;
            let ch = c & CHANNEL_MASK;
            return Some((cur.t_ps, (ch != UNION).then_some(ch)));
        }
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn steps_of_every_size_read_back_exactly() {
        let times = [
            5u64,
            5,
            4,                         // reordered by 1 ps
            (1 << 34) + 3,             // a step of 2^34 − 1 ps: the longest without escape
            (1 << 34) + 3 + (1 << 34), // a step of 2^34 ps: the shortest with one
            3,                         // a step of −2^35 ps
            u64::MAX,
            0,
            1 << 63,
            (1 << 63) - 12_345,
            77,
        ];
        let channels = [Some(0), None, Some(15), Some(16), Some(200), Some(3)];
        let mut b = DetectionBuffer::<16>::new();
        for (i, &t) in times.iter().enumerate() {
            assert!(b.push(t, channels[i % channels.len()]));
        }
        assert_eq!(b.len(), times.len());
        let mut cur = DetectionBuffer::<16>::cursor(times[0]);
        for (i, &t) in times.iter().enumerate() {
            let want = channels[i % channels.len()].filter(|&c| c < UNION);
            assert_eq!(b.next(&mut cur), Some((t, want)), "detection {i}");
        }
        assert_eq!(b.next(&mut cur), None);
        assert_eq!(cur.read, times.len());
    }

    #[test]
    fn a_full_buffer_hands_the_detection_back() {
        let mut b = DetectionBuffer::<3>::new();
        assert!(b.push(0, None));
        assert!(b.push(1 << 40, None), "escape plus entry: 3 entries");
        assert!(!b.push(1 << 40, None));
        b.clear();
        assert!(b.push(9, Some(1)) && b.push(10, Some(2)) && b.push(11, Some(3)));
        assert!(!b.push(12, Some(4)));
        assert_eq!(b.len(), 3);
    }
}
