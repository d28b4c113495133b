//! Stage 3 — gates: which (basis, bit) a detection at a given channel and slot position means.
//!
//! One table describes every receiver: a gate is (channel, window inside the slot, basis, bit),
//! and each channel has a delay (detector and cable skew) subtracted before the clock is asked.
//! Time-bin receivers put two windows on the arrival-time detector (early = 0, late = 1) and three
//! on an interferometer output (side peaks carry Z, the middle carries the X phase); polarization
//! receivers put one full-slot window on each of the H, V, D, A detectors. The protocol (BB84,
//! efficient BB84, three-state) lives on the transmitter side; the receiver table is the same.
//!
//! The table is validated once by [`GateTable::new`]; lookups on the hot path cannot fail.
//!
//! Photon-number-resolving detectors report a level with each detection in the upper bits of the
//! channel byte (bits 5..=7 hold level − 1, bits 0..=4 the detector), switched on per table with
//! [`GateTable::with_photon_levels`]; the level then goes with the click to the sifting stage and
//! the rest of the pipeline sees the detector's channel.

use core::fmt;
use fixed::types::U0F32;

/// Maximum number of gates in a table.
pub const MAX_GATES: usize = 16;
/// Maximum number of TDC channels a table can describe (channels `0..MAX_CHANNELS`).
pub const MAX_CHANNELS: usize = 16;
/// Maximum number of intensity classes (signal, decoy, vacuum).
pub const MAX_INTENSITIES: usize = 3;
/// Bit position of the photon-number level in a channel byte (with photon levels on).
pub const LEVEL_SHIFT: u32 = 5;
/// Highest photon-number level a channel byte carries (three bits, 1..=8; 8 means "8 or more").
pub const MAX_LEVEL: u8 = 8;

/// Channel byte of detector `channel` (below 32) reporting photon-number `level` (clamped to
/// 1..=[`MAX_LEVEL`]).
pub const fn level_channel(channel: u8, level: u8) -> u8 {
    let l = if level == 0 {
        1
    } else if level > MAX_LEVEL {
        MAX_LEVEL
    } else {
        level
    };
    (channel & 0x1F) | ((l - 1) << LEVEL_SHIFT)
}

/// Measurement or preparation basis.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Basis {
    /// The key basis (time of arrival, or H/V).
    Z = 0,
    /// The test basis (interferometer phase, or D/A).
    X = 1,
}

impl Basis {
    /// Both bases, Z first.
    pub const ALL: [Basis; 2] = [Basis::Z, Basis::X];

    /// The basis's name in reports: `Z` or `X`.
    pub const fn name(self) -> &'static str {
        match self {
            Basis::Z => "Z",
            Basis::X => "X",
        }
    }

    /// Array index of this basis (Z = 0, X = 1).
    pub const fn index(self) -> usize {
        self as usize
    }

    /// The basis with index 0 (Z) or anything else (X).
    pub const fn from_index(i: usize) -> Self {
        if i == 0 {
            Basis::Z
        } else {
            Basis::X
        }
    }
}

/// One gate: a window on one channel, and the outcome it stands for.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Gate {
    /// TDC channel.
    pub channel: u8,
    /// Window start as a fraction of the slot (inclusive).
    pub start: U0F32,
    /// Window end as a fraction of the slot (exclusive); [`U0F32::MAX`] reaches the slot's end.
    pub end: U0F32,
    /// Basis this window measures.
    pub basis: Basis,
    /// Bit value (0 or 1) this window stands for.
    pub bit: u8,
}

impl Gate {
    /// Centre of the window: the expected arrival position, as a fraction of the slot.
    pub fn centre(&self) -> U0F32 {
        let s = u64::from(self.start.to_bits());
        let e = u64::from(self.end.to_bits());
        U0F32::from_bits(((s + e) / 2) as u32)
    }
}

/// Why a gate table was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum GateError {
    /// No gates given.
    Empty,
    /// More than [`MAX_GATES`] gates.
    TooManyGates,
    /// More than [`MAX_CHANNELS`] channel delays, or a gate on a channel without a delay entry.
    ChannelOutOfRange(u8),
    /// A window whose start is not before its end (index of the gate).
    EmptyWindow(usize),
    /// A bit value other than 0 or 1 (index of the gate).
    BadBit(usize),
    /// Two windows on one channel overlap (indices of both gates).
    Overlap(usize, usize),
}

impl fmt::Display for GateError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Empty => write!(f, "gate table has no gates"),
            Self::TooManyGates => write!(f, "gate table has more than {MAX_GATES} gates"),
            Self::ChannelOutOfRange(c) => {
                write!(
                    f,
                    "channel {c} has no delay entry (at most {MAX_CHANNELS} channels)"
                )
            }
            Self::EmptyWindow(i) => write!(f, "gate {i}: window start is not before its end"),
            Self::BadBit(i) => write!(f, "gate {i}: bit must be 0 or 1"),
            Self::Overlap(a, b) => write!(f, "gates {a} and {b} overlap on the same channel"),
        }
    }
}

impl core::error::Error for GateError {}

/// Result of looking a detection up in the table.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Lookup {
    /// Inside the gate with this index (into [`GateTable::gates`]).
    Gate(u8),
    /// On a known channel but outside every window.
    Outside,
}

/// Phase buckets per channel in the lookup table: the top `BUCKET_BITS` bits of the phase.
const BUCKET_BITS: u32 = 6;
const BUCKETS: usize = 1 << BUCKET_BITS;
/// Bucket entry: the whole bucket lies outside every gate.
const BUCKET_OUTSIDE: u8 = 0xFE;
/// Bucket entry: a window edge lies inside the bucket; search the channel's windows.
const BUCKET_MIXED: u8 = 0xFF;

/// A validated gate table with per-channel delays.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct GateTable {
    gates: [Gate; MAX_GATES],
    len: u8,
    /// Per channel: first gate index and one past the last (gates are sorted by channel, start).
    ranges: [(u8, u8); MAX_CHANNELS],
    delays_ps: [i64; MAX_CHANNELS],
    channels: u8,
    /// Per channel and phase bucket (1/64 slot): the gate index when the whole bucket lies in
    /// one gate, [`BUCKET_OUTSIDE`], or [`BUCKET_MIXED`] where a window edge falls inside. Built
    /// from the windows once, so a lookup is one table read except next to a window edge.
    buckets: [[u8; BUCKETS]; MAX_CHANNELS],
    /// Bits of a channel byte that name the detector: 0xFF, or 0x1F with photon levels on.
    channel_mask: u8,
}

const NO_GATE: Gate = Gate {
    channel: 0,
    start: U0F32::ZERO,
    end: U0F32::ZERO,
    basis: Basis::Z,
    bit: 0,
};

impl GateTable {
    /// Validate a table: `delays_ps[c]` is channel `c`'s delay in ps (subtracted from its times);
    /// `gates` lists the windows in any order.
    pub fn new(delays_ps: &[i64], gates: &[Gate]) -> Result<Self, GateError> {
        if gates.is_empty() {
            return Err(GateError::Empty);
        }
        if gates.len() > MAX_GATES {
            return Err(GateError::TooManyGates);
        }
        if delays_ps.len() > MAX_CHANNELS {
            return Err(GateError::ChannelOutOfRange(MAX_CHANNELS as u8));
        }
        let mut table = Self {
            gates: [NO_GATE; MAX_GATES],
            len: gates.len() as u8,
            ranges: [(0, 0); MAX_CHANNELS],
            delays_ps: [0; MAX_CHANNELS],
            channels: delays_ps.len() as u8,
            buckets: [[BUCKET_MIXED; BUCKETS]; MAX_CHANNELS],
            channel_mask: 0xFF,
        };
        for (slot, d) in table.delays_ps.iter_mut().zip(delays_ps) {
            *slot = *d;
        }
        for (i, g) in gates.iter().enumerate() {
            if usize::from(g.channel) >= delays_ps.len() {
                return Err(GateError::ChannelOutOfRange(g.channel));
            }
            if g.start >= g.end {
                return Err(GateError::EmptyWindow(i));
            }
            if g.bit > 1 {
                return Err(GateError::BadBit(i));
            }
        }
        // Sort a copy by (channel, start): insertion sort, at most MAX_GATES entries.
        let mut order = [0usize; MAX_GATES];
        for (i, o) in order.iter_mut().enumerate().take(gates.len()) {
            *o = i;
        }
        let key = |i: usize| gates.get(i).map(|g| (g.channel, g.start));
        let n = gates.len();
        for i in 1..n {
            let mut j = i;
            while j > 0 {
                let prev = order.get(j - 1).and_then(|&k| key(k));
                let this = order.get(j).and_then(|&k| key(k));
                if prev <= this {
                    break;
                }
                order.swap(j - 1, j);
                j -= 1;
            }
        }
        for (k, &i) in order.iter().enumerate().take(n) {
            if let (Some(dst), Some(src)) = (table.gates.get_mut(k), gates.get(i)) {
                *dst = *src;
            }
        }
        for k in 1..n {
            let (Some(a), Some(b)) = (table.gates.get(k - 1), table.gates.get(k)) else {
                continue;
            };
            if a.channel == b.channel && b.start < a.end {
                return Err(GateError::Overlap(
                    order.get(k - 1).copied().unwrap_or(0),
                    order.get(k).copied().unwrap_or(0),
                ));
            }
        }
        for (k, g) in table.gates.iter().enumerate().take(n) {
            if let Some(r) = table.ranges.get_mut(usize::from(g.channel)) {
                if r.0 == r.1 {
                    *r = (k as u8, k as u8 + 1);
                } else {
                    r.1 = k as u8 + 1;
                }
            }
        }
        table.fill_buckets();
        Ok(table)
    }

    /// Mark each bucket with its single outcome, or as mixed when a window edge lies inside it
    /// (a conservative test: mixed buckets are searched, so they are always right).
    fn fill_buckets(&mut self) {
        let width = 1u64 << (32 - BUCKET_BITS);
        for c in 0..MAX_CHANNELS {
            for b in 0..BUCKETS {
                let lo = b as u64 * width;
                let hi = lo + width - 1;
                let edge_inside = self.gates().iter().any(|g| {
                    let inside = |x: U0F32| (lo + 1..=hi).contains(&u64::from(x.to_bits()));
                    usize::from(g.channel) == c && (inside(g.start) || inside(g.end))
                });
                let entry = if edge_inside {
                    BUCKET_MIXED
                } else {
                    match self.scan(c as u8, U0F32::from_bits(lo as u32)) {
                        Lookup::Gate(i) => i,
                        Lookup::Outside => BUCKET_OUTSIDE,
                    }
                };
                if let Some(e) = self.buckets.get_mut(c).and_then(|r| r.get_mut(b)) {
                    *e = entry;
                }
            }
        }
    }

    /// The gates, sorted by channel then window start.
    pub fn gates(&self) -> &[Gate] {
        self.gates.get(..usize::from(self.len)).unwrap_or(&[])
    }

    /// One gate by index (as returned by [`Lookup::Gate`]).
    pub fn gate(&self, index: u8) -> Option<&Gate> {
        self.gates().get(usize::from(index))
    }

    /// The same table reading a photon-number level from the upper bits of every channel byte
    /// (see [`level_channel`]); detectors stay channels `0..channels()`.
    pub const fn with_photon_levels(mut self) -> Self {
        self.channel_mask = 0x1F;
        self
    }

    /// Whether channel bytes carry a photon-number level.
    pub const fn photon_levels(&self) -> bool {
        self.channel_mask != 0xFF
    }

    /// Split a channel byte into (detector channel, photon-number level 1..=8); the level is 1
    /// unless photon levels are on.
    pub const fn split_channel(&self, raw: u8) -> (u8, u8) {
        (
            raw & self.channel_mask,
            1 + ((raw & !self.channel_mask) >> LEVEL_SHIFT),
        )
    }

    /// Number of channels the table describes.
    pub const fn channels(&self) -> u8 {
        self.channels
    }

    /// Delay of a channel in ps, or `None` for a channel the table does not know.
    pub fn delay_ps(&self, channel: u8) -> Option<i64> {
        if channel >= self.channels {
            return None;
        }
        self.delays_ps.get(usize::from(channel)).copied()
    }

    /// Replace one channel's delay (used by delay calibration); ignored for unknown channels.
    pub fn set_delay_ps(&mut self, channel: u8, delay_ps: i64) {
        if channel < self.channels {
            if let Some(d) = self.delays_ps.get_mut(usize::from(channel)) {
                *d = delay_ps;
            }
        }
    }

    /// Look a position up on a known channel (unknown channels give [`Lookup::Outside`]).
    #[inline]
    pub fn lookup(&self, channel: u8, phase: U0F32) -> Lookup {
        match self.find(channel, phase) {
            Some((i, _)) => Lookup::Gate(i),
            None => Lookup::Outside,
        }
    }

    /// The gate (index and window) a position on a channel falls in, or `None` outside every
    /// gate and on unknown channels: [`Self::lookup`] and [`Self::gate`] in one step.
    #[inline]
    pub fn find(&self, channel: u8, phase: U0F32) -> Option<(u8, &Gate)> {
        let bucket = (phase.to_bits() >> (32 - BUCKET_BITS)) as usize;
        let i = match self
            .buckets
            .get(usize::from(channel))
            .and_then(|r| r.get(bucket))
        {
            Some(&BUCKET_OUTSIDE) => return None,
            Some(&BUCKET_MIXED) | None => match self.scan(channel, phase) {
                Lookup::Gate(i) => i,
                Lookup::Outside => return None,
            },
            Some(&i) => i,
        };
        self.gates.get(usize::from(i)).map(|g| (i, g))
    }

    /// The channel's windows searched in order (the definition the bucket table is built from).
    fn scan(&self, channel: u8, phase: U0F32) -> Lookup {
        let Some(&(lo, hi)) = self.ranges.get(usize::from(channel)) else {
            return Lookup::Outside;
        };
        let gates = self
            .gates
            .get(usize::from(lo)..usize::from(hi))
            .unwrap_or(&[]);
        for (k, g) in gates.iter().enumerate() {
            if phase < g.start {
                break;
            }
            if phase < g.end || (g.end == U0F32::MAX && phase == U0F32::MAX) {
                return Lookup::Gate(lo + k as u8);
            }
        }
        Lookup::Outside
    }
}

#[cfg(feature = "defmt")]
impl defmt::Format for Gate {
    fn format(&self, f: defmt::Formatter<'_>) {
        defmt::write!(
            f,
            "Gate {{ channel: {=u8}, start_q0_32: {=u32}, end_q0_32: {=u32}, basis: {}, bit: {=u8} }}",
            self.channel,
            self.start.to_bits(),
            self.end.to_bits(),
            self.basis,
            self.bit
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn f(x: f64) -> U0F32 {
        U0F32::from_num(x)
    }

    fn time_bin() -> GateTable {
        // Arrival-time detector: early and late bins; interferometer outputs: E, M, L positions.
        let g = |channel, a, b, basis, bit| Gate {
            channel,
            start: f(a),
            end: f(b),
            basis,
            bit,
        };
        GateTable::new(
            &[0, 120, -40],
            &[
                g(0, 0.55, 0.70, Basis::Z, 1),
                g(0, 0.05, 0.20, Basis::Z, 0),
                g(1, 0.30, 0.45, Basis::X, 0),
                g(1, 0.05, 0.20, Basis::Z, 0),
                g(1, 0.55, 0.70, Basis::Z, 1),
                g(2, 0.30, 0.45, Basis::X, 1),
            ],
        )
        .unwrap()
    }

    #[test]
    fn lookup_finds_sorted_windows() {
        let t = time_bin();
        let gate_of = |c, x| match t.lookup(c, f(x)) {
            Lookup::Gate(i) => Some(*t.gate(i).unwrap()),
            Lookup::Outside => None,
        };
        assert_eq!(
            gate_of(0, 0.1).map(|g| (g.basis, g.bit)),
            Some((Basis::Z, 0))
        );
        assert_eq!(
            gate_of(0, 0.6).map(|g| (g.basis, g.bit)),
            Some((Basis::Z, 1))
        );
        assert_eq!(gate_of(0, 0.4), None);
        assert_eq!(
            gate_of(1, 0.4).map(|g| (g.basis, g.bit)),
            Some((Basis::X, 0))
        );
        assert_eq!(
            gate_of(2, 0.4).map(|g| (g.basis, g.bit)),
            Some((Basis::X, 1))
        );
        assert_eq!(gate_of(2, 0.1), None);
        assert_eq!(gate_of(9, 0.1), None);
        assert_eq!(t.delay_ps(1), Some(120));
        assert_eq!(t.delay_ps(3), None);
    }

    proptest::proptest! {
        // The bucket table is a cache of the window search: both agree at every position.
        #[test]
        fn bucket_lookup_equals_window_search(c in 0u8..18, x in proptest::prelude::any::<u32>()) {
            let t = time_bin();
            let p = U0F32::from_bits(x);
            proptest::prop_assert_eq!(t.lookup(c, p), t.scan(c, p));
        }
    }

    #[test]
    fn lookup_at_every_window_edge_equals_window_search() {
        let t = time_bin();
        for g in t.gates() {
            for x in [g.start, g.end] {
                let b = x.to_bits();
                for p in [b.wrapping_sub(1), b, b.wrapping_add(1)] {
                    let p = U0F32::from_bits(p);
                    assert_eq!(t.lookup(g.channel, p), t.scan(g.channel, p), "{p}");
                }
            }
        }
    }

    #[test]
    fn polarization_full_slot_windows() {
        let full = |channel, basis, bit| Gate {
            channel,
            start: U0F32::ZERO,
            end: U0F32::MAX,
            basis,
            bit,
        };
        let t = GateTable::new(
            &[0; 4],
            &[
                full(0, Basis::Z, 0),
                full(1, Basis::Z, 1),
                full(2, Basis::X, 0),
                full(3, Basis::X, 1),
            ],
        )
        .unwrap();
        assert_eq!(t.lookup(3, U0F32::MAX), Lookup::Gate(3));
        assert_eq!(t.lookup(0, U0F32::ZERO), Lookup::Gate(0));
    }

    #[test]
    fn refuses_bad_tables() {
        let g = Gate {
            channel: 0,
            start: f(0.1),
            end: f(0.3),
            basis: Basis::Z,
            bit: 0,
        };
        assert_eq!(GateTable::new(&[0], &[]), Err(GateError::Empty));
        assert_eq!(
            GateTable::new(&[0], &[Gate { channel: 1, ..g }]),
            Err(GateError::ChannelOutOfRange(1))
        );
        assert_eq!(
            GateTable::new(&[0], &[Gate { end: f(0.1), ..g }]),
            Err(GateError::EmptyWindow(0))
        );
        assert_eq!(
            GateTable::new(&[0], &[Gate { bit: 2, ..g }]),
            Err(GateError::BadBit(0))
        );
        assert_eq!(
            GateTable::new(
                &[0],
                &[
                    g,
                    Gate {
                        start: f(0.2),
                        end: f(0.4),
                        ..g
                    }
                ]
            ),
            Err(GateError::Overlap(0, 1))
        );
    }

    #[test]
    fn photon_levels_split_from_the_channel_byte() {
        let g = Gate {
            channel: 1,
            start: U0F32::ZERO,
            end: U0F32::MAX,
            basis: Basis::Z,
            bit: 0,
        };
        let t = GateTable::new(&[0, 0], &[g]).unwrap();
        assert!(!t.photon_levels());
        assert_eq!(t.split_channel(0x41), (0x41, 1));
        let t = t.with_photon_levels();
        assert_eq!(t.split_channel(level_channel(1, 3)), (1, 3));
        assert_eq!(t.split_channel(level_channel(1, 0)), (1, 1));
        assert_eq!(t.split_channel(level_channel(1, 200)), (1, MAX_LEVEL));
        assert_eq!(level_channel(3, 8), 0xE3);
    }
}
