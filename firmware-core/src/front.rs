//! The front end: one detection from TDC event to an absolutely numbered, gated slot.
//!
//! Four steps, each a method the receiver calls in this order (and the pipeline benchmark calls
//! one by one to measure each): [`FrontEnd::time`] (counter unwrapping and the channel's delay),
//! [`FrontEnd::slot`] (the [`SlotClock`]), [`FrontEnd::gate`] (the gate table) and
//! [`FrontEnd::number`] (the [`Numbering`] stage). Each step either hands on what the next needs
//! or ends the detection with its [`Fate`].

use crate::accounting::Fate;
use crate::clock::{Located, Numbered, SlotClock, SlotPos};
use crate::gates::{Basis, Gate, GateTable};
use crate::numbering::Numbering;
use crate::timestamps::{TdcEvent, UnwrapConfig, Unwrapper};

/// A detection on the time base, its channel's delay removed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Timed {
    /// Detector channel (the channel byte without its photon-number level).
    pub channel: u8,
    /// Photon-number level from the channel byte (1 for threshold detectors).
    pub level: u8,
    /// Delay-corrected time in ps.
    pub t_ps: u64,
}

/// The per-detection stages of a receiver: time base, slot clock `C`, gates, numbering `N`.
#[derive(Clone, Debug)]
pub struct FrontEnd<C: SlotClock, N: Numbering> {
    unwrapper: Unwrapper,
    clock: C,
    gates: GateTable,
    numbering: N,
}

impl<C: SlotClock, N: Numbering> FrontEnd<C, N> {
    /// Front end in its initial state.
    pub const fn new(tdc: UnwrapConfig, gates: GateTable, clock: C, numbering: N) -> Self {
        Self {
            unwrapper: Unwrapper::new(tdc),
            clock,
            gates,
            numbering,
        }
    }

    /// The time base (counter unwrapping state).
    pub const fn unwrapper(&self) -> &Unwrapper {
        &self.unwrapper
    }

    /// The slot clock.
    pub const fn clock(&self) -> &C {
        &self.clock
    }

    /// The numbering stage.
    pub const fn numbering(&self) -> &N {
        &self.numbering
    }

    /// The gate table.
    pub const fn gates(&self) -> &GateTable {
        &self.gates
    }

    /// Pass a coarse hint from the classical channel to the numbering stage.
    pub fn hint(&mut self, t_ps: u64, tx_slot: u64) {
        self.numbering.hint(&self.clock, t_ps, tx_slot);
    }

    /// The detector channel and photon-number level of a raw channel byte (the gate table's
    /// split, [`GateTable::split_channel`]).
    #[inline(always)]
    pub fn split_channel(&self, raw: u8) -> (u8, u8) {
        self.gates.split_channel(raw)
    }

    /// Step 1: unwrap the counter and remove the delay of `channel` (with its photon-number
    /// `level`, both from [`Self::split_channel`]). `t_raw` receives the unwrapped time when the
    /// time base accepted it (for traces).
    #[inline(always)]
    pub fn time(
        &mut self,
        ev: TdcEvent,
        (channel, level): (u8, u8),
        t_raw: &mut Option<u64>,
    ) -> Result<Timed, Fate> {
        let det = self.unwrapper.unwrap(ev).map_err(|_| Fate::RejectedTime)?;
        *t_raw = Some(det.t_ps);
        let delay = self.gates.delay_ps(channel).ok_or(Fate::RejectedChannel)?;
        let t_ps = det
            .t_ps
            .checked_add_signed(delay.wrapping_neg())
            .ok_or(Fate::RejectedTime)?;
        Ok(Timed {
            channel,
            level,
            t_ps,
        })
    }

    /// Step 2: the clock places (and learns from) the detection.
    #[inline(always)]
    pub fn slot(&mut self, d: &Timed) -> Result<SlotPos, Fate> {
        match self.clock.observe(d.channel, d.t_ps) {
            Located::At(p) => Ok(p),
            Located::BeforeOrigin | Located::NotLocked => Err(Fate::NoClock),
        }
    }

    /// Step 3: the gate the position falls in, with its index.
    #[inline(always)]
    pub fn gate(&self, d: &Timed, pos: &SlotPos) -> Result<(u8, Gate), Fate> {
        match self.gates.find(d.channel, pos.phase) {
            Some((i, &g)) => Ok((i, g)),
            None => Err(Fate::OutsideGates),
        }
    }

    /// Step 4: the transmitter's absolute slot number of a gated detection.
    #[inline(always)]
    pub fn number(&mut self, pos: &SlotPos, gate: &Gate) -> Result<u64, Fate> {
        let z_bit = (gate.basis == Basis::Z).then_some(gate.bit);
        match self.numbering.number(&self.clock, pos.slot, z_bit) {
            Numbered::Slot(s) => Ok(s),
            Numbered::Marker => Err(Fate::Marker),
            Numbered::Unaligned => Err(Fate::Unaligned),
        }
    }
}
