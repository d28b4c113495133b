//! Stage 4a — frame alignment: the transmitter's absolute slot numbers, from a public marker.
//!
//! After clock recovery the receiver knows the slot grid but numbers slots from its own start
//! ("local" slots). The transmitter embeds a public marker (the contract for the transmitter team
//! is `docs/marker.md`): every slot `k` with `k % D == 0` is a marker slot (D = 64); marker slot
//! number `J = k / D` carries vacuum when bit `J mod 127` of the PRBS7 m-sequence is 0, and a pulse
//! at the signal intensity in the public Z state `Z_b` with `b` = bit `J mod 511` of the PRBS9
//! m-sequence when it is 1. The two periods are coprime, so the marker repeats every
//! P = 64·127·511 = 4 153 408 slots; one coarse hint from the classical channel (uncertainty below
//! P/2) fixes the rest.
//!
//! [`FrameAligner`] finds `offset = absolute − local` in fixed memory, with bounded work per
//! detection and integer arithmetic only:
//!
//! 1. **Residue**: per-residue detection counts modulo D; the marker residue shows a dip (half its
//!    slots are vacuum). The lowest residue becomes the candidate; another replaces it only when
//!    it is lower by more than 2√c + 2 counts.
//! 2. **Search**: on the candidate residue, one counter per cyclic shift of each sequence counts
//!    the detections that shift contradicts (a detection where it predicts vacuum; a Z bit other
//!    than the one it predicts). The m-sequence's two-valued autocorrelation (Golomb 1967) makes
//!    every wrong shift contradict half of the true pulses. A shift φ with count V_φ is accepted
//!    when `gain·V₂ − loss·V_φ ≥ search_bits + log2 N + 2` bits, V₂ being the next lowest count and
//!    (gain, loss) = (log2 2(1−e), −log2 2e) for one of e = 1/16, 1/8, 1/4, 3/8 (the 2 extra bits
//!    pay for trying four). The score bounds from below log2 of a likelihood ratio that, sampled
//!    at the ends of the sequence's periods, is a non-negative supermartingale whenever φ is not
//!    better than its rival; by Ville's inequality (Ville 1939 [from memory]) a wrong φ is ever
//!    accepted with probability below 2^−search_bits, however long the search runs. Tests run
//!    only at period ends for that reason. `docs/marker.md` has the derivation and numbers.
//! 3. **Confirmation**: counters restart on fresh detections; each found shift must beat every
//!    rival again by `confirm_bits` (the same bound with one fixed rival, the true shift, so a
//!    wrong offset survives with probability at most 2^−confirm_bits). A rival winning by the
//!    search margin, or the residue losing its dip, sends the aligner back to the search.
//! 4. **Lock**: with the offset known modulo P, a CUSUM (Page 1954 [from memory]) over detections
//!    in vacuum marker slots and wrong marker Z bits raises [`AlignState::Misaligned`]. A
//!    [`SlotHint`] turns the offset modulo P into the absolute [`AlignState::Aligned`] offset.
//!
//! 5. **Hint window** ([`window`]): with a stated hint error bound ±H
//!    ([`FrameConfig::with_hint_error_slots`]), the 2H + 1 offsets it leaves are tested directly by
//!    their contradictions, in a few thousand detections instead of the search's ~24 000; the
//!    numbering stage runs it beside the search.
//!
//! Receivers exclude marker slots from sifting with [`MarkerSpec::is_marker_slot`].

mod aligner;
pub mod evidence;
pub mod mseq;
pub mod window;

pub use aligner::{FrameAligner, StandardAligner};
use core::fmt;
use evidence::{ceil_log2, gcd, mod_inverse, Weights, GRID_BITS, ONE_BIT_Q16};
use fixed::types::U0F16;
pub use mseq::{Lfsr, Prbs, SeqBits, PRBS11, PRBS15, PRBS20, PRBS23, PRBS31, PRBS7, PRBS9};
pub use window::{HintWindow, StandardWindow, WindowState, WindowStats};

/// Marker spacing D in slots: slots with `abs_slot % MARKER_SPACING == 0` are marker slots.
pub const MARKER_SPACING: u64 = 64;
/// Register length of the inner sequence (PRBS7: pulse or vacuum), period 127 marker slots.
pub const INNER_DEGREE: u8 = 7;
/// Register length of the outer sequence (PRBS9: Z0 or Z1 of the pulses), period 511.
pub const OUTER_DEGREE: u8 = 9;
/// Period of the standard marker in slots: 64 · 127 · 511.
pub const MARKER_PERIOD_SLOTS: u64 = 64 * 127 * 511;
/// Default `search_bits`: each search accepts a wrong shift with probability < 2^−10.
pub const DEFAULT_SEARCH_BITS: u8 = 10;
/// Default `confirm_bits`: a wrong offset passes confirmation with probability ≤ 2^−20.
pub const DEFAULT_CONFIRM_BITS: u8 = 20;
/// Default `monitor_bits`: CUSUM threshold (bits) of the misalignment check after lock.
pub const DEFAULT_MONITOR_BITS: u8 = 20;
/// Default share of marker-slot detections expected after lock to contradict the marker (dark
/// counts in vacuum slots, wrong Z bits), as a Q0.16 fraction: 1/8. Only the lock monitor uses it.
pub const DEFAULT_NOISE_SHARE: U0F16 = U0F16::from_bits(8_192);
/// Default `window_bits`: the hint-window test accepts a wrong offset with probability
/// ≤ 2^−20 when the true offset lies within the hint's stated bound.
pub const DEFAULT_WINDOW_BITS: u8 = 20;

/// Why a marker description or aligner configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum FrameError {
    /// Field `spacing` is not a power of two in 8..=4096.
    Spacing(u64),
    /// No sequence table for this register length (field `inner_degree` or `outer_degree`; 7 or 9).
    Degree(&'static str, u8),
    /// Inner and outer periods share a factor (the register lengths must be coprime).
    NotCoprime(u8, u8),
    /// A threshold field (`search_bits`, `confirm_bits`, `monitor_bits`, `window_bits`)
    /// outside 1..=40.
    Bits(&'static str, u8),
    /// `noise_share` outside 1/256 ..= 3/8 (Q0.16 bits given).
    NoiseShare(u16),
    /// The aligner's capacity (`D`, `N1` or `N2` const parameter) is below what the marker needs.
    Capacity(&'static str, usize),
}

impl fmt::Display for FrameError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Spacing(d) => write!(f, "spacing = {d}: must be a power of two in 8..=4096"),
            Self::Degree(field, n) => write!(f, "{field} = {n}: must be 7 or 9"),
            Self::NotCoprime(a, b) => {
                write!(f, "inner degree {a} and outer degree {b} must be coprime")
            }
            Self::Bits(field, b) => write!(f, "{field} = {b}: must lie in 1..=40"),
            Self::NoiseShare(q) => {
                write!(
                    f,
                    "noise_share = {q}/65536: must lie in 256..=24576 (1/256 to 3/8)"
                )
            }
            Self::Capacity(field, need) => {
                write!(
                    f,
                    "aligner capacity {field} is below the {need} the marker needs"
                )
            }
        }
    }
}

impl core::error::Error for FrameError {}

/// What the transmitter sends in one marker slot.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum MarkerState {
    /// No light at all.
    Vacuum,
    /// A pulse at the signal intensity in the Z-basis state with this bit (0 or 1).
    Pulse {
        /// Z-basis bit of the pulse.
        z_bit: u8,
    },
}

/// The public marker: spacing and sequences, as agreed with the transmitter.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct MarkerSpec {
    spacing_log2: u8,
    inner: SeqBits,
    outer: Option<SeqBits>,
    /// Inverse of the inner period modulo the outer one (Chinese remainder step).
    inner_inv_mod_outer: u64,
}

impl MarkerSpec {
    /// A marker with `spacing` slots between marker slots (a power of two, 8..=4096), an inner
    /// sequence of register length `inner_degree` and optionally an outer one (coprime length).
    pub const fn new(
        spacing: u64,
        inner_degree: u8,
        outer_degree: Option<u8>,
    ) -> Result<Self, FrameError> {
        if !spacing.is_power_of_two() || spacing < 8 || spacing > 4096 {
            return Err(FrameError::Spacing(spacing));
        }
        let Some(inner) = table(inner_degree) else {
            return Err(FrameError::Degree("inner_degree", inner_degree));
        };
        let (outer, inv) = match outer_degree {
            None => (None, 0),
            Some(deg) => {
                let Some(t) = table(deg) else {
                    return Err(FrameError::Degree("outer_degree", deg));
                };
                // gcd(2^a − 1, 2^b − 1) = 2^gcd(a, b) − 1.
                let n1 = inner.len() as u64;
                let n2 = t.len() as u64;
                match mod_inverse(n1 % n2, n2) {
                    Some(inv) if gcd(n1, n2) == 1 => (Some(t), inv),
                    _ => return Err(FrameError::NotCoprime(inner_degree, deg)),
                }
            }
        };
        Ok(Self {
            spacing_log2: spacing.trailing_zeros() as u8,
            inner,
            outer,
            inner_inv_mod_outer: inv,
        })
    }

    /// The standard marker: D = [`MARKER_SPACING`], PRBS7 inner, PRBS9 outer.
    pub const fn standard() -> Self {
        match Self::new(MARKER_SPACING, INNER_DEGREE, Some(OUTER_DEGREE)) {
            Ok(s) => s,
            // Not reachable: the standard parameters are valid (checked by a unit test).
            Err(_) => Self {
                spacing_log2: 6,
                inner: SeqBits::EMPTY,
                outer: None,
                inner_inv_mod_outer: 0,
            },
        }
    }

    /// Slots between marker slots (D).
    pub const fn spacing(&self) -> u64 {
        1 << self.spacing_log2
    }

    /// Inner period N1 in marker slots.
    pub const fn inner_period(&self) -> u64 {
        self.inner.len() as u64
    }

    /// Outer period N2 in marker slots (1 without an outer sequence).
    pub const fn outer_period(&self) -> u64 {
        match &self.outer {
            Some(t) => t.len() as u64,
            None => 1,
        }
    }

    /// Whether the marker has an outer sequence (Z bits of the pulses).
    pub const fn has_outer(&self) -> bool {
        self.outer.is_some()
    }

    /// Marker period in slots: D · N1 · N2; the marker fixes absolute numbers modulo this.
    pub const fn period_slots(&self) -> u64 {
        self.spacing() * self.inner_period() * self.outer_period()
    }

    /// Whether absolute slot `abs_slot` is a marker slot (never sifted, carries no key).
    pub const fn is_marker_slot(&self, abs_slot: u64) -> bool {
        abs_slot & (self.spacing() - 1) == 0
    }

    /// What the transmitter sends in absolute slot `abs_slot`, or `None` for a key slot.
    pub fn state(&self, abs_slot: u64) -> Option<MarkerState> {
        if !self.is_marker_slot(abs_slot) {
            return None;
        }
        let j = abs_slot >> self.spacing_log2;
        if self.inner.bit((j % self.inner_period()) as usize) == 0 {
            return Some(MarkerState::Vacuum);
        }
        let z_bit = match &self.outer {
            Some(t) => t.bit((j % self.outer_period()) as usize),
            None => 0,
        };
        Some(MarkerState::Pulse { z_bit })
    }

    /// The marker index shift `q` (mod N1·N2) with inner shift `q mod N1` and outer `q mod N2`.
    const fn combine(&self, inner: u64, outer: u64) -> u64 {
        let n1 = self.inner_period();
        let n2 = self.outer_period();
        if n2 == 1 {
            return inner % n1;
        }
        let t = ((outer + n2 - inner % n2) % n2) * self.inner_inv_mod_outer % n2;
        inner + n1 * t
    }
}

const fn table(degree: u8) -> Option<SeqBits> {
    match Prbs::for_degree(degree) {
        Some(p) => SeqBits::new(p),
        None => None,
    }
}

/// Validated aligner settings: the marker, the error budget of the tests and the monitor's model.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FrameConfig {
    spec: MarkerSpec,
    search_bits: u8,
    confirm_bits: u8,
    monitor_bits: u8,
    noise_share_q16: u16,
    weights: Weights,
    /// Stated error bound of the slot hint (± slots); `None`: unknown, no window test.
    hint_error_slots: Option<u64>,
    window_bits: u8,
    /// Window-test evidence per contradiction, Q16 bits (from the noise share).
    window_weight_q16: i64,
}

impl FrameConfig {
    /// Check the settings: search and confirmation error exponents (bits, 1..=40), the lock
    /// monitor's CUSUM threshold (bits) and its expected share of contradicting detections.
    pub const fn new(
        spec: MarkerSpec,
        search_bits: u8,
        confirm_bits: u8,
        monitor_bits: u8,
        noise_share: U0F16,
    ) -> Result<Self, FrameError> {
        if search_bits == 0 || search_bits > 40 {
            return Err(FrameError::Bits("search_bits", search_bits));
        }
        if confirm_bits == 0 || confirm_bits > 40 {
            return Err(FrameError::Bits("confirm_bits", confirm_bits));
        }
        if monitor_bits == 0 || monitor_bits > 40 {
            return Err(FrameError::Bits("monitor_bits", monitor_bits));
        }
        let share = noise_share.to_bits();
        if share < 256 || share > 24_576 {
            return Err(FrameError::NoiseShare(share));
        }
        Ok(Self {
            spec,
            search_bits,
            confirm_bits,
            monitor_bits,
            noise_share_q16: share,
            weights: Weights::for_share(share as u32),
            hint_error_slots: None,
            window_bits: DEFAULT_WINDOW_BITS,
            window_weight_q16: window::window_weight_q16(share as u32),
        })
    }

    /// The standard marker with the default error budget.
    pub const fn standard() -> Self {
        Self {
            spec: MarkerSpec::standard(),
            search_bits: DEFAULT_SEARCH_BITS,
            confirm_bits: DEFAULT_CONFIRM_BITS,
            monitor_bits: DEFAULT_MONITOR_BITS,
            noise_share_q16: DEFAULT_NOISE_SHARE.to_bits(),
            weights: Weights::for_share(DEFAULT_NOISE_SHARE.to_bits() as u32),
            hint_error_slots: None,
            window_bits: DEFAULT_WINDOW_BITS,
            window_weight_q16: window::window_weight_q16(DEFAULT_NOISE_SHARE.to_bits() as u32),
        }
    }

    /// The same settings with the slot hint's stated error bound (± slots; `None`: unknown).
    /// A bound lets the hint-window test ([`window`]) align from few detections.
    pub const fn with_hint_error_slots(mut self, error_slots: Option<u64>) -> Self {
        self.hint_error_slots = error_slots;
        self
    }

    /// The same settings with the hint-window test's error exponent (bits, 1..=40).
    pub const fn with_window_bits(mut self, bits: u8) -> Result<Self, FrameError> {
        if bits == 0 || bits > 40 {
            return Err(FrameError::Bits("window_bits", bits));
        }
        self.window_bits = bits;
        Ok(self)
    }

    /// The slot hint's stated error bound, ± slots.
    pub const fn hint_error_slots(&self) -> Option<u64> {
        self.hint_error_slots
    }

    /// Confirmation's bound: a wrong offset survives it with probability ≤ 2^−confirm_bits.
    pub const fn confirm_bits(&self) -> u8 {
        self.confirm_bits
    }

    /// The hint-window test's bound: it accepts a wrong offset with probability
    /// ≤ 2^−window_bits.
    pub const fn window_bits(&self) -> u8 {
        self.window_bits
    }

    /// Evidence per contradiction in the window test, Q16 bits: log2(1/(2·noise_share)).
    pub const fn window_weight_q16(&self) -> i64 {
        self.window_weight_q16
    }

    /// Window-test acceptance threshold for `width` candidate offsets, Q16 bits.
    pub const fn window_threshold_q16(&self, width: u64) -> i64 {
        window::window_threshold_q16(self.window_bits, width)
    }

    /// The marker.
    pub const fn spec(&self) -> &MarkerSpec {
        &self.spec
    }

    /// Whether absolute slot `abs_slot` is a marker slot.
    pub const fn is_marker_slot(&self, abs_slot: u64) -> bool {
        self.spec.is_marker_slot(abs_slot)
    }

    /// The lock monitor's CUSUM weights (Q16 bits per event).
    pub const fn weights(&self) -> Weights {
        self.weights
    }

    /// Search acceptance threshold for a sequence of period `n`, in Q16 bits.
    pub const fn search_threshold_q16(&self, n: u64) -> i64 {
        (self.search_bits as i64 + ceil_log2(n) as i64 + GRID_BITS) * ONE_BIT_Q16
    }

    /// Confirmation threshold in Q16 bits.
    pub const fn confirm_threshold_q16(&self) -> i64 {
        (self.confirm_bits as i64 + GRID_BITS) * ONE_BIT_Q16
    }

    /// Misalignment CUSUM threshold in Q16 bits.
    pub const fn monitor_threshold_q16(&self) -> i64 {
        self.monitor_bits as i64 * ONE_BIT_Q16
    }

    /// The monitor's expected share of contradicting detections, Q0.16.
    pub const fn noise_share(&self) -> U0F16 {
        U0F16::from_bits(self.noise_share_q16)
    }
}

/// A coarse relation between the two numberings, from the classical channel: the transmitter's
/// absolute slot `tx_slot` was (within ± P/2 slots) the receiver's local slot `local_slot`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SlotHint {
    /// Transmitter's absolute slot number.
    pub tx_slot: u64,
    /// Receiver's local slot number at (nominally) the same moment.
    pub local_slot: u64,
}

/// Where the aligner stands.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AlignState {
    /// Looking for the marker: candidate residue (local slot mod D) and shifts found so far.
    Searching {
        /// Local residue with the detection dip, if any yet.
        candidate_residue: Option<u16>,
        /// Inner shift (mod N1) accepted by the search.
        inner_shift: Option<u16>,
        /// Outer shift (mod N2) accepted by the search.
        outer_shift: Option<u16>,
    },
    /// Checking a found offset on fresh detections; `absolute ≡ local + offset_mod_period`.
    Confirming {
        /// Candidate offset modulo the marker period, in slots.
        offset_mod_period: u64,
    },
    /// Confirmed modulo the marker period; waiting for a [`SlotHint`].
    AwaitingHint {
        /// Offset modulo the marker period, in slots.
        offset_mod_period: u64,
    },
    /// Aligned: `absolute = local + offset` (slots). Sifting may run.
    Aligned {
        /// Absolute minus local slot number.
        offset: i64,
    },
    /// Marker contradicted after lock (slip or lost marker); call [`FrameAligner::restart`].
    Misaligned {
        /// The offset modulo the marker period that stopped holding.
        offset_mod_period: u64,
    },
}

/// Counters of the aligner's work and of the marker detections seen after lock.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FrameStats {
    /// Detections passed to [`FrameAligner::observe`].
    pub observed: u64,
    /// Times the candidate residue changed.
    pub candidate_switches: u64,
    /// Searches abandoned because a counter filled up.
    pub search_restarts: u64,
    /// Confirmations that failed (back to search).
    pub confirm_failures: u64,
    /// Misalignments raised after lock.
    pub misalignments: u64,
    /// Hints that implied a different offset from the one in use (ignored).
    pub hint_conflicts: u64,
    /// Z bits other than 0 or 1 (treated as no bit).
    pub invalid_bits: u64,
    /// Value of `observed` when the offset modulo P was confirmed.
    pub locked_after: Option<u64>,
    /// After lock: detections in pulsed marker slots.
    pub marker_pulse: u64,
    /// After lock: detections in vacuum marker slots (dark counts, afterpulses).
    pub marker_vacuum: u64,
    /// After lock: Z bits seen in pulsed marker slots.
    pub marker_bits: u64,
    /// After lock: those Z bits that differed from the marker's.
    pub marker_bit_errors: u64,
}

impl FrameStats {
    /// All counters at zero.
    pub const fn new() -> Self {
        Self {
            observed: 0,
            candidate_switches: 0,
            search_restarts: 0,
            confirm_failures: 0,
            misalignments: 0,
            hint_conflicts: 0,
            invalid_bits: 0,
            locked_after: None,
            marker_pulse: 0,
            marker_vacuum: 0,
            marker_bits: 0,
            marker_bit_errors: 0,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn standard_marker_is_valid() {
        let s = MarkerSpec::new(MARKER_SPACING, INNER_DEGREE, Some(OUTER_DEGREE)).unwrap();
        assert_eq!(MarkerSpec::standard(), s);
        assert_eq!(s.period_slots(), MARKER_PERIOD_SLOTS);
        assert_eq!(
            (s.spacing(), s.inner_period(), s.outer_period()),
            (64, 127, 511)
        );
        let c = FrameConfig::new(
            s,
            DEFAULT_SEARCH_BITS,
            DEFAULT_CONFIRM_BITS,
            DEFAULT_MONITOR_BITS,
            DEFAULT_NOISE_SHARE,
        )
        .unwrap();
        assert_eq!(FrameConfig::standard(), c);
    }

    #[test]
    fn bad_parameters_are_named() {
        assert_eq!(MarkerSpec::new(48, 7, None), Err(FrameError::Spacing(48)));
        assert_eq!(MarkerSpec::new(4, 7, None), Err(FrameError::Spacing(4)));
        assert_eq!(
            MarkerSpec::new(64, 8, None),
            Err(FrameError::Degree("inner_degree", 8))
        );
        assert_eq!(
            MarkerSpec::new(64, 7, Some(11)),
            Err(FrameError::Degree("outer_degree", 11))
        );
        assert_eq!(
            MarkerSpec::new(64, 7, Some(7)),
            Err(FrameError::NotCoprime(7, 7))
        );
        let s = MarkerSpec::standard();
        let share = DEFAULT_NOISE_SHARE;
        assert_eq!(
            FrameConfig::new(s, 0, 20, 20, share),
            Err(FrameError::Bits("search_bits", 0))
        );
        assert_eq!(
            FrameConfig::new(s, 10, 41, 20, share),
            Err(FrameError::Bits("confirm_bits", 41))
        );
        assert_eq!(
            FrameConfig::new(s, 10, 20, 20, U0F16::from_bits(30_000)),
            Err(FrameError::NoiseShare(30_000))
        );
        let e = StandardAligner::new(FrameConfig::standard()).map(|_| ());
        assert_eq!(e, Ok(()));
        let small = FrameAligner::<64, 127, 255>::new(FrameConfig::standard()).map(|_| ());
        assert_eq!(small, Err(FrameError::Capacity("N2", 511)));
        let msg = format!("{}", FrameError::Capacity("N2", 511));
        assert!(msg.contains("N2") && msg.contains("511"), "{msg}");
    }

    #[test]
    fn chinese_remainder_round_trip() {
        let s = MarkerSpec::standard();
        for q in (0..127 * 511u64)
            .step_by(97)
            .chain([0, 1, 126, 127, 510, 511, 64_896])
        {
            assert_eq!(s.combine(q % 127, q % 511), q);
        }
        let inner_only = MarkerSpec::new(64, 9, None).unwrap();
        assert_eq!(inner_only.combine(600, 0), 600 % 511);
    }

    #[test]
    fn marker_states_follow_the_sequences() {
        let s = MarkerSpec::standard();
        let inner = SeqBits::new(PRBS7).unwrap();
        let outer = SeqBits::new(PRBS9).unwrap();
        for j in [0u64, 1, 2, 126, 127, 510, 511, 64_896, 64_897, 1 << 40] {
            let expect = if inner.bit((j % 127) as usize) == 0 {
                MarkerState::Vacuum
            } else {
                MarkerState::Pulse {
                    z_bit: outer.bit((j % 511) as usize),
                }
            };
            assert_eq!(s.state(j * 64), Some(expect), "marker slot {j}");
            assert_eq!(s.state(j * 64 + 1), None);
            assert!(s.is_marker_slot(j * 64) && !s.is_marker_slot(j * 64 + 63));
        }
        // Bit 0 of both sequences is 1 ^ 1 = 0 from the all-ones seed: slot 0 is vacuum.
        assert_eq!(s.state(0), Some(MarkerState::Vacuum));
    }
}
