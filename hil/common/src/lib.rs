//! # slotwise-hil — the board-side driver shared by the HIL firmware and its host replay
//!
//! The firmware under QEMU and the host replay run this crate's [`run`] loop around the same
//! `slotwise` core, so any difference in their frames comes from the core on the two CPUs:
//!
//! - [`setup`]: the setup file (TDC, clock, gate table, sifting settings) with a CRC;
//! - [`transport`]: event and answer records, and the [`Transport`] a board implements over its
//!   SPI / UART / USB streams (any `embedded-io` streams will do);
//! - [`run`]: the loop itself, the replaying transmitter of the firmware and the recording
//!   transmitter of the host (the configured clock, answers as records);
//! - [`station`]: the whole receiver push-style for a board's own main loop (and the C
//!   interface), configured by a [`blob`]; [`ring`] holds its bytes in and out;
//! - [`full`]: the whole receiver as a board runs it — recovered clock with marker numbering,
//!   the link endpoint over [`link`]'s shim, the monitor with its alarms — configured by the
//!   [`board`] file; [`probe`] says which part of the board's work runs.
#![cfg_attr(not(test), no_std)]
#![cfg_attr(
    not(test),
    deny(
        clippy::unwrap_used,
        clippy::expect_used,
        clippy::panic,
        clippy::indexing_slicing,
        clippy::float_arithmetic
    )
)]
#![deny(missing_docs)]

pub mod blob;
pub mod board;
pub mod full;
pub mod link;
pub mod probe;
pub mod ring;
pub mod run;
pub mod setup;
pub mod station;
pub mod transport;

pub use board::{BoardError, BoardSettings};
pub use full::{
    build_clock, build_numbering, build_receiver, ram_total_bytes, BoardClock, FullClock, FullLink,
    FullMonitor, FullNumbering, FullReceiver, FullRun, FullTotals, LinkEnd, ProbedClock,
    ProbedLink, ProbedNumbering, FULL_PENDING, MONITOR_BLOCKS,
};
pub use link::{AnnounceOut, AnswersIn, LinkShared, ANSWER_LAG_FRAMES};
pub use probe::{Part, Probe};
pub use run::{
    run, BoardFrameOut, BoardReceiver, Meter, NoMeter, RecordingTx, ReplayStats, ReplayTx,
    RunTotals, BLOCK, KEY_BITS, PENDING,
};
pub use setup::{Setup, SetupError};
pub use station::{AuthCounts, Phase, Station, StationCounts, StationError};
pub use transport::{
    AnswerRecord, AnswerSource, EventSource, IoAnswers, IoEvents, IoFrames, IoTransport,
    StreamError, Transport,
};

#[cfg(test)]
mod tests;
