//! # slotwise — the receiver side of a prepare-and-measure QKD link, in fixed memory
//!
//! A time-to-digital converter hands the receiver board a stream of detector timestamps. Before any
//! key exists, the board must place every detection on the transmitter's slot grid, decide which
//! basis and bit it means, sift against the transmitter's answers, and keep tallies for the QBER.
//! This crate does that with no heap, no floating point and no panics, so the same code runs on a
//! laptop, a Cortex-M microcontroller and a RISC-V soft core.
//!
//! Data flows through one module per stage, in this order ([`Receiver::push`] runs them so):
//!
//! 0. [`words`] — raw binary TDC records (4- or 8-byte words with time, channel and kind bit
//!    fields) become [`TdcEvent`]s: rollover records widen the narrow hardware counter, every
//!    record ends in one counter. It sits before the receiver (which takes [`TdcEvent`]s): a
//!    board reading a FIFO and the host importing raw words run it themselves; on a board,
//!    [`ingest`] wraps it for DMA blocks and counts overruns, FIFO-full flags, rollover gaps and
//!    malformed words (with the `embedded-hal` feature, `ingest::spi` reads the FIFO over SPI).
//! 1. [`timestamps`] — TDC counter values (any width from 32 to 64 bits, wrapping) become a
//!    monotonic picosecond time base; slightly reordered neighbours are handled.
//! 2. [`clock`] — the [`SlotClock`] seam: a delay-corrected time becomes the clock's own slot and
//!    a position in it (Q0.32), division-free. Two clocks: [`FixedClock`] (period and origin from
//!    configuration, a distributed reference) and [`RecoveredClock`] ([`recovered`]), which is
//!    built from
//!    - [`acquire`] — acquisition from a cold start: a staged epoch-folding search over the
//!      period prior with the Z²_n statistic in fixed point, a Bonferroni threshold (false lock
//!      below 1e-9 per attempt), a least-squares refinement and an independent confirmation;
//!    - [`track`] — a type-II PLL that follows phase and period through drift, detects loss of
//!      lock (blackout, phase jump, frequency step) and calibrates per-channel delays.
//! 3. [`gates`] — the gate table: per-channel delays and windows (channel, window, basis, bit) that
//!    express time-bin and polarization receivers alike; optionally a photon-number level in the
//!    upper bits of the channel byte (photon-number-resolving detectors).
//! 4. [`numbering`] — the transmitter's absolute slot number for the clock's slot: [`Absolute`]
//!    (the clock's numbers already are, marker slots excluded when a marker is declared) or
//!    [`MarkerNumbering`] (frame alignment on the public marker, [`frame`]: every 64th slot,
//!    vacuum or a Z pulse by two m-sequences, plus a coarse hint). Any clock combines with any
//!    numbering.
//!
//!    Steps 1–4 are the [`front`] end ([`FrontEnd`]); a detection that does not pass one ends in
//!    its [`Fate`].
//! 5. [`sift`] — the [`Sifter`]: gated detections of one slot are grouped, multi-click slots follow
//!    the squashing rule, detected slots are announced with the receiver's basis and wait in a
//!    bounded queue for the transmitter's answer, then end sifted, basis-mismatched, unanswered or
//!    overflowed; [`tally`] keeps counts per (tx basis, tx bit, intensity, rx basis, rx bit) and
//!    multi-photon slots per intensity class.
//! 6. [`accounting`] — the one list of fates ([`Fate`]) and a counter per fate: every detection
//!    is in exactly one counter at every moment.
//! 7. [`stats`] — live statistics in bounded memory: a sliding window of block tallies (QBER per
//!    basis and intensity, rates, dead time, off-gate noise, multi-clicks) and since start, with
//!    confidence bounds in fixed point ([`bounds`]: Hoeffding, Wilson, binary entropy) and
//!    [`alarms`] (QBER bound above the Shor-Preskill ceiling, lock lost, rate collapse,
//!    saturation); fed from the receiver's traces and sifted bits, off its hot path.
//! 8. [`frame_out`] — wire frames out: sifted bits and the final counters as CRC-32C-protected,
//!    COBS-stuffed records for the post-processing host, alarms and statistics snapshots.
//! 9. [`wire`] — the sifting conversation over a framed byte link (`embedded-io`): batched
//!    announcements out, answers in, every bad frame counted by reason; [`ReceiverLink`] is the
//!    [`Transmitter`] a board hands to the receiver. Every frame carries a Wegman-Carter tag
//!    (POLYVAL, one-time pad from a bounded key pool, [`wire::LinkAuth`]); the link fails
//!    closed when the key runs out.
//!
//! [`receiver`] strings them together: front end → sifter, behind [`Receiver::push_block`]; its
//! module doc shows a board building and feeding one.
//!
//! Every byte format — the frame (header, CRC-32C, COBS) and one file per record type (key block,
//! summary, announce, answers, alarm, statistics) with one byte reader and writer — is in
//! [`formats`], below the stages that use it; [`counts`] holds what the live statistics count,
//! read by both [`stats`] and [`alarms`].
//!
//! Memory is fixed at compile time: the pending queue's capacity is a const generic and the gate
//! table holds at most [`gates::MAX_GATES`] windows on [`gates::MAX_CHANNELS`] channels.
#![cfg_attr(not(test), no_std)]
#![cfg_attr(
    not(test),
    deny(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing,
        clippy::float_arithmetic,
        clippy::unreachable,
        clippy::todo,
        clippy::unimplemented
    )
)]
#![deny(missing_docs)]
#![forbid(unsafe_code)]

pub mod accounting;
pub mod acquire;
pub mod alarms;
pub mod bounds;
pub mod clock;
pub mod counts;
pub mod formats;
pub mod frame;
pub mod frame_out;
pub mod front;
pub mod gates;
pub mod ingest;
mod log;
pub mod numbering;
pub mod receiver;
pub mod recovered;
pub mod sift;
pub mod stats;
pub mod tally;
pub mod timestamps;
pub mod track;
pub mod wire;
pub mod words;

pub use accounting::{Accounting, AnswerErrors, Fate, MultiClickEvents};
pub use acquire::fold::ArrivalPattern;
pub use acquire::{AcquireConfig, AcquireParams, AcquiredLock, Acquirer};
pub use alarms::{AlarmConfig, AlarmEvent, AlarmKind, BoundKind};
pub use clock::{FixedClock, Located, Numbered, SlotClock, SlotGrid, SlotPos};
pub use fixed;
pub use formats::{FrameError, RecordType, Summary};
pub use frame::{AlignState, FrameAligner, FrameConfig, MarkerSpec, MarkerState, SlotHint};
pub use frame_out::{FrameOut, FrameSink};
pub use front::{FrontEnd, Timed};
pub use gates::{Basis, Gate, GateTable, Lookup};
pub use ingest::{Ingest, IngestCounts, IngestFault};
pub use numbering::{Absolute, MarkerNumbering, Numbering};
pub use receiver::{ConfigError, Receiver, ReceiverConfig, Trace};
pub use recovered::{RecoveredClock, RecoveredConfig};
pub use sift::{
    Announcement, Answer, KeySink, NullSink, Outcome, OverflowPolicy, SiftConfig, SiftConfigError,
    SiftedBit, Sifter, Transmitter,
};
pub use stats::{Counts, Monitor, Snapshot, StatsConfig, Tap};
pub use tally::{MultiPhoton, Tally};
pub use timestamps::{Detection, TdcEvent, UnwrapConfig, Unwrapper};
pub use track::{LockState, TrackConfig, TrackParams, Tracker};
pub use wire::{LinkConfig, LinkCounters, ReceiverLink};
pub use words::{
    BitField, Decoded, Endian, KindField, RecordFate, WordCounts, WordDecoder, WordError,
    WordFormat, WordFormatError, WordLayout,
};
