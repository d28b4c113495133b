//! Stage 3b — the recovered clock with absolute numbering: clock recovery ([`RecoveredClock`])
//! followed by frame alignment on the public marker ([`crate::frame`]).
//!
//! The recovered clock numbers slots from its own time origin; [`MarkedClock`] passes every
//! gated detection's local slot (and Z bit) to the [`StandardAligner`] and answers
//! [`Numbered::Unaligned`] until the marker is confirmed and a coarse hint from the classical
//! channel has fixed the offset modulo the marker period. From then on it answers absolute slot
//! numbers, and [`Numbered::Marker`] for marker slots, which are never sifted. A new numbering
//! epoch of the clock (an unbridged relock) or a misalignment raised by the marker check restarts
//! the alignment, so no detection is numbered with a stale offset.

use crate::clock::{Clock, Located, Numbered, SlotPos};
use crate::frame::{AlignState, FrameConfig, FrameError, MarkerSpec, SlotHint, StandardAligner};
use crate::recovered::RecoveredClock;

/// A recovered clock whose slot numbers are aligned to the transmitter's by the public marker.
#[derive(Clone, Debug)]
pub struct MarkedClock<const N: usize, const K: usize, const H: usize> {
    clock: RecoveredClock<N, K, H>,
    aligner: StandardAligner,
    spec: MarkerSpec,
    epoch: u32,
    /// The latest hint: (receiver time in ps, transmitter slot).
    hint: Option<(u64, u64)>,
    /// Realignments after the first (epoch changes or misalignments).
    realignments: u32,
}

impl<const N: usize, const K: usize, const H: usize> MarkedClock<N, K, H> {
    /// Combine a recovered clock with an aligner for the marker described by `frame`.
    pub fn new(clock: RecoveredClock<N, K, H>, frame: FrameConfig) -> Result<Self, FrameError> {
        Ok(Self {
            clock,
            aligner: StandardAligner::new(frame)?,
            spec: *frame.spec(),
            epoch: 0,
            hint: None,
            realignments: 0,
        })
    }

    /// The recovered clock.
    pub const fn recovered(&self) -> &RecoveredClock<N, K, H> {
        &self.clock
    }

    /// The recovered clock alone, without the alignment.
    pub fn into_recovered(self) -> RecoveredClock<N, K, H> {
        self.clock
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

    /// The receiver's local slot at time `t_ps` (the recovered clock numbers slots ≈ t / T).
    fn local_slot_at(&self, t_ps: u64) -> Option<u64> {
        let period = self.clock.period_ps()?.to_bits();
        if period == 0 {
            return None;
        }
        u64::try_from((u128::from(t_ps) << 32) / u128::from(period)).ok()
    }

    fn apply_hint(&mut self) {
        if let (Some((t_ps, tx_slot)), AlignState::AwaitingHint { .. }) =
            (self.hint, self.aligner.state())
        {
            if let Some(local_slot) = self.local_slot_at(t_ps) {
                self.aligner.set_hint(SlotHint {
                    tx_slot,
                    local_slot,
                });
            }
        }
    }
}

impl<const N: usize, const K: usize, const H: usize> Clock for MarkedClock<N, K, H> {
    fn locate(&mut self, t_ps: u64) -> Located {
        self.clock.locate(t_ps)
    }

    fn locate_on(&mut self, channel: u8, t_ps: u64) -> Located {
        self.clock.locate_on(channel, t_ps)
    }

    fn number(&mut self, pos: SlotPos, z_bit: Option<u8>) -> Numbered {
        let epoch = self.clock.numbering_epoch();
        if epoch != self.epoch {
            if self.epoch != 0 {
                self.realignments += 1;
            }
            self.epoch = epoch;
            self.aligner.restart();
        }
        self.aligner.observe(pos.slot, z_bit);
        match self.aligner.state() {
            AlignState::AwaitingHint { .. } => self.apply_hint(),
            AlignState::Misaligned { .. } => {
                self.realignments += 1;
                self.aligner.restart();
            }
            _ => {}
        }
        match self.aligner.to_absolute(pos.slot) {
            Some(abs) if self.spec.is_marker_slot(abs) => Numbered::Marker,
            Some(abs) => Numbered::Slot(abs),
            None => Numbered::Unaligned,
        }
    }

    fn hint(&mut self, t_ps: u64, tx_slot: u64) {
        self.hint = Some((t_ps, tx_slot));
        self.apply_hint();
    }
}
