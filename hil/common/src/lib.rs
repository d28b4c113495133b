//! # slotwise-hil — the board-side driver shared by the HIL firmware and its host replay
//!
//! The firmware under QEMU and the host replay run this crate's [`run`] loop around the same
//! `slotwise` core, so any difference in their frames comes from the core on the two CPUs:
//!
//! - [`setup`]: the setup file (TDC, clock, gate table, sifting settings) with a CRC;
//! - [`transport`]: event and answer records, and the [`Transport`] a board implements over its
//!   SPI / UART / USB streams (any `embedded-io` streams will do);
//! - [`run`]: the loop itself, the replaying transmitter of the firmware and the recording
//!   transmitter of the host.
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

pub mod run;
pub mod setup;
pub mod transport;

pub use run::{
    run, BoardFrameOut, BoardReceiver, Meter, NoMeter, RecordingTx, ReplayStats, ReplayTx,
    RunTotals, BLOCK, KEY_BITS, PENDING,
};
pub use setup::{Setup, SetupError};
pub use transport::{
    AnswerRecord, AnswerSource, EventSource, IoAnswers, IoEvents, IoFrames, IoTransport,
    StreamError, Transport,
};

#[cfg(test)]
mod tests;
