//! Stage 4 — numbering: the transmitter's absolute slot number for a clock's slot.
//!
//! A [`SlotClock`] numbers slots its own way: a [`crate::FixedClock`] from its configured origin,
//! a [`crate::RecoveredClock`] from its time origin, restarting (a new epoch) after an unbridged
//! relock. A [`Numbering`] stage turns the clock's slot into the transmitter's number, or says
//! the slot is a public marker slot, or that the numbering is not yet established. Any clock
//! combines with any numbering:
//!
//! - [`Absolute`] — the clock's numbers are already the transmitter's (a distributed reference
//!   whose origin is the transmitter's slot 0); with a declared marker, marker slots are excluded.
//! - [`MarkerNumbering`] — frame alignment on the public marker ([`crate::frame`]): every gated
//!   detection's slot (and Z bit) goes to the [`StandardAligner`]; the answer is
//!   [`Numbered::Unaligned`] until the marker is confirmed and a coarse hint from the classical
//!   channel has fixed the offset modulo the marker period. A new clock epoch or a misalignment
//!   raised by the marker check restarts the alignment, so no detection is numbered with a stale
//!   offset.
//!
//! # Fast alignment from a bounded hint
//!
//! The full search finds the offset modulo P from the stream alone (about 24 000 detections) and
//! uses the hint only at the end. When the configuration states the hint's error bound ±H
//! ([`FrameConfig::with_hint_error_slots`]), the hint leaves only 2H + 1 candidate offsets, and
//! [`crate::frame::window`] tests them directly: each detection contradicts the candidates that
//! put it on a vacuum marker slot or on a pulse with the other Z bit, and the candidate with the
//! fewest contradictions is accepted once its likelihood ratio against the runner-up passes a
//! Ville/union-bound threshold (wrong offset ≤ 2^−`window_bits` = 2^−20 when the truth lies in
//! the window). That needs about 3 000 detections at ±1000 slots, whatever the rate, because the
//! evidence is the wrong candidates' contradictions, which arrive per detection, not per period.
//! This was chosen over speeding up the search (its residue and shift stages need the marker's
//! statistics to build up over ~P/D marker slots) and over a store of raw detections searched
//! over P (memory and work grow with P, not with H). Both run: the first to reach its bound
//! sets the offset, a window decision that contradicts a confirmed search result is refused
//! and counted, and the lock monitors check the offset after either. A bound wider than the
//! window's capacity `W` (±(W − 1)/2 slots) leaves only the full search. `docs/marker.md` §7
//! has the derivation, the assumption it rests on and the figures.
//!
//! # Examples
//!
//! A distributed reference clock whose slot 0 is the transmitter's, with the public marker
//! declared: marker slots are counted as such and never sifted.
//!
//! ```
//! use slotwise::fixed::types::{U0F32, U32F32};
//! use slotwise::{
//!     Absolute, Basis, Fate, FixedClock, Gate, GateTable, MarkerSpec, NullSink, OverflowPolicy,
//!     Receiver, ReceiverConfig, TdcEvent, Transmitter, UnwrapConfig,
//! };
//! # struct Silent;
//! # impl Transmitter for Silent {
//! #     fn announce(&mut self, _: slotwise::Announcement) {}
//! #     fn poll_answer(&mut self) -> Option<slotwise::Answer> { None }
//! # }
//! let z0 = Gate {
//!     channel: 0,
//!     start: U0F32::from_num(0.2),
//!     end: U0F32::from_num(0.4),
//!     basis: Basis::Z,
//!     bit: 0,
//! };
//! let gates = GateTable::new(&[0], &[z0]).unwrap();
//! let cfg = ReceiverConfig::new(UnwrapConfig::new(48, 1).unwrap(), gates, 1, 1_000,
//!     OverflowPolicy::DropNewest, 1).unwrap();
//! let clock = FixedClock::new(U32F32::from_num(1_000), 0).unwrap();
//! let marker = MarkerSpec::standard();
//! let mut rx: Receiver<FixedClock, 16, Absolute> =
//!     Receiver::with_numbering(cfg, clock, Absolute::with_marker(marker));
//!
//! // One detection in the first marker slot, one in the slot after it.
//! let m = (0..).find(|&s| marker.is_marker_slot(s)).unwrap();
//! let events = [m, m + 1].map(|s| TdcEvent { count: s * 1_000 + 300, channel: 0 });
//! rx.push_block(&events, &mut Silent, &mut NullSink);
//! assert_eq!(rx.accounting()[Fate::Marker], 1);
//! assert_eq!(rx.accounting()[Fate::InFlight], 1);
//! ```

use crate::clock::{Numbered, SlotClock};
use crate::frame::{
    AlignState, FrameConfig, FrameError, HintWindow, MarkerSpec, SlotHint, StandardAligner,
    WindowState,
};

/// A numbering stage: the transmitter's absolute slot number for a clock's located, gated slot.
pub trait Numbering {
    /// Number the clock's slot `slot` of a gated detection; `z_bit` is its bit when the gate is
    /// in the Z basis. `clock` gives the epoch and converts hint times to its slots.
    fn number<C: SlotClock + ?Sized>(
        &mut self,
        clock: &C,
        slot: u64,
        z_bit: Option<u8>,
    ) -> Numbered;

    /// A coarse hint from the classical channel: at receiver time `t_ps` the transmitter's slot
    /// counter read about `tx_slot`. Numberings that need none ignore it.
    fn hint<C: SlotClock + ?Sized>(&mut self, clock: &C, t_ps: u64, tx_slot: u64) {
        let _ = (clock, t_ps, tx_slot);
    }
}

/// The clock's slot numbers are the transmitter's; marker slots, when a marker is declared, are
/// never sifted.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Absolute {
    marker: Option<MarkerSpec>,
}

impl Absolute {
    /// Numbers as the clock gives them, no marker.
    pub const fn new() -> Self {
        Self { marker: None }
    }

    /// Numbers as the clock gives them; slots of `marker` answer [`Numbered::Marker`].
    pub const fn with_marker(marker: MarkerSpec) -> Self {
        Self {
            marker: Some(marker),
        }
    }

    /// The declared marker, if any.
    pub const fn marker(&self) -> Option<&MarkerSpec> {
        self.marker.as_ref()
    }
}

impl Numbering for Absolute {
    #[inline]
    fn number<C: SlotClock + ?Sized>(&mut self, _: &C, slot: u64, _: Option<u8>) -> Numbered {
        match &self.marker {
            Some(m) if m.is_marker_slot(slot) => Numbered::Marker,
            _ => Numbered::Slot(slot),
        }
    }
}

/// Absolute numbers from the public marker: frame alignment plus a coarse hint; the hint window
/// holds `W` candidate offsets (2 bytes each; hint bounds up to ±(W − 1)/2 slots).
#[derive(Clone, Debug)]
pub struct MarkerNumbering<const W: usize = 2048> {
    aligner: StandardAligner,
    /// The hint-window test, run beside the full search while the hint's bound allows it.
    window: HintWindow<W>,
    epoch: u32,
    /// The latest hint: (receiver time in ps, transmitter slot).
    hint: Option<(u64, u64)>,
    /// Realignments after the first (epoch changes or misalignments).
    realignments: u32,
    /// Window decisions that disagreed with an offset the full search had confirmed (refused).
    window_conflicts: u32,
    /// Whether the offset in use came from the hint window.
    by_window: bool,
}

impl<const W: usize> MarkerNumbering<W> {
    /// An aligner for the marker described by `frame`.
    pub fn new(frame: FrameConfig) -> Result<Self, FrameError> {
        Ok(Self {
            aligner: StandardAligner::new(frame)?,
            window: HintWindow::new(),
            epoch: 0,
            hint: None,
            realignments: 0,
            window_conflicts: 0,
            by_window: false,
        })
    }

    /// The hint-window test (fast alignment from a bounded hint).
    pub const fn window(&self) -> &HintWindow<W> {
        &self.window
    }

    /// Gated detections taken in until the offset in use was established, and whether the hint
    /// window (rather than the full search) established it; `None` while not aligned.
    pub fn aligned_after(&self) -> Option<(u64, bool)> {
        if !self.aligned() {
            return None;
        }
        self.aligner
            .stats()
            .locked_after
            .map(|n| (n, self.by_window))
    }

    /// Window decisions refused because the full search had confirmed another offset.
    pub const fn window_conflicts(&self) -> u32 {
        self.window_conflicts
    }

    /// The frame aligner.
    pub const fn aligner(&self) -> &StandardAligner {
        &self.aligner
    }

    /// Times the alignment was restarted after a new clock epoch or a misalignment.
    pub const fn realignments(&self) -> u32 {
        self.realignments
    }

    /// Whether detections get absolute slot numbers now.
    pub fn aligned(&self) -> bool {
        matches!(self.aligner.state(), AlignState::Aligned { .. })
    }

    /// Open the hint window once the clock can place the hint, unless the search already locked.
    #[inline(never)]
    fn open_window<C: SlotClock + ?Sized>(&mut self, clock: &C) {
        if self.window.state() != WindowState::Idle || self.aligned() {
            return;
        }
        let Some((t_ps, tx_slot)) = self.hint else {
            return;
        };
        let Some(local_slot) = clock.slot_at(t_ps) else {
            return;
        };
        let centre = i128::from(tx_slot) - i128::from(local_slot);
        match i64::try_from(centre) {
            Ok(c) => self.window.open(self.aligner.config(), c),
            Err(_) => self.window.close(),
        }
    }

    /// Take the window's offset unless it contradicts an offset the full search confirmed.
    #[inline(never)]
    fn accept_window(&mut self, offset: i64) {
        let p = self.aligner.config().spec().period_slots() as i64;
        match self.aligner.state() {
            AlignState::Aligned { .. } => {}
            AlignState::AwaitingHint { offset_mod_period }
                if offset.rem_euclid(p) as u64 != offset_mod_period =>
            {
                self.window_conflicts += 1;
            }
            _ => {
                self.aligner.assume_offset(offset);
                self.by_window = true;
            }
        }
    }

    /// The clock renumbered: align again. When the clock bounds the change (±k slots) and the
    /// old offset was established, the window opens around the old offset with that bound, so
    /// the numbers come back after the window test's few thousand detections instead of the
    /// full search's tens of thousands.
    #[inline(never)]
    fn new_epoch<C: SlotClock + ?Sized>(&mut self, clock: &C, epoch: u32) {
        if self.epoch != 0 {
            self.realignments += 1;
        }
        let old = match self.aligner.state() {
            AlignState::Aligned { offset } => Some(offset),
            _ => None,
        };
        self.epoch = epoch;
        self.aligner.restart();
        self.window.reset();
        self.by_window = false;
        if let (Some(offset), Some(k)) = (old, clock.renumbered_within()) {
            self.window.open_bounded(offset, k);
        }
    }

    fn apply_hint<C: SlotClock + ?Sized>(&mut self, clock: &C) {
        if let (Some((t_ps, tx_slot)), AlignState::AwaitingHint { .. }) =
            (self.hint, self.aligner.state())
        {
            if let Some(local_slot) = clock.slot_at(t_ps) {
                self.aligner.set_hint(SlotHint {
                    tx_slot,
                    local_slot,
                });
            }
        }
    }
}

impl<const W: usize> Numbering for MarkerNumbering<W> {
    fn number<C: SlotClock + ?Sized>(
        &mut self,
        clock: &C,
        slot: u64,
        z_bit: Option<u8>,
    ) -> Numbered {
        let epoch = clock.epoch();
        if epoch != self.epoch {
            self.new_epoch(clock, epoch);
        }
        self.aligner.observe(slot, z_bit);
        match self.aligner.state() {
            AlignState::AwaitingHint { .. } => self.apply_hint(clock),
            AlignState::Misaligned { .. } => {
                self.realignments += 1;
                self.aligner.restart();
                self.by_window = false;
            }
            _ => {}
        }
        // Once aligned, the window has nothing to do: one cheap close per detection, no call.
        if self.aligned() {
            self.window.close();
        } else {
            self.open_window(clock);
            if let Some(offset) = self.window.observe(self.aligner.config(), slot, z_bit) {
                self.accept_window(offset);
            }
        }
        match self.aligner.to_absolute(slot) {
            Some(abs) if self.aligner.config().is_marker_slot(abs) => Numbered::Marker,
            Some(abs) => Numbered::Slot(abs),
            None => Numbered::Unaligned,
        }
    }

    fn hint<C: SlotClock + ?Sized>(&mut self, clock: &C, t_ps: u64, tx_slot: u64) {
        self.hint = Some((t_ps, tx_slot));
        self.apply_hint(clock);
        self.open_window(clock);
    }
}

// The numbering's state: the full search (≤ 2 KiB), the hint window (4 KiB of counters) and a
// few words; bounded on every target this builds for.
const _: () = assert!(core::mem::size_of::<MarkerNumbering>() <= 6_208);
const _: () = assert!(core::mem::size_of::<MarkerNumbering<512>>() <= 3_136);

#[cfg(test)]
mod tests {
    use super::*;
    use crate::frame::window::StandardWindow;

    /// Bytes of the numbering and its parts. Run with `-- --nocapture numbering_size_report`.
    #[test]
    fn numbering_size_report() {
        use core::mem::size_of;
        let total = size_of::<MarkerNumbering>();
        let parts = [
            ("aligner", size_of::<StandardAligner>()),
            ("window", size_of::<StandardWindow>()),
        ];
        eprintln!("MarkerNumbering: {total} B");
        for (name, bytes) in parts {
            eprintln!("  {name:<10} {bytes:>6} B");
        }
        let known: usize = parts.iter().map(|p| p.1).sum();
        assert!(known <= total && total - known <= 64, "{total} vs {known}");
    }
}
