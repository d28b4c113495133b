//! # slotwise-board-example — the board-independent half of the example firmware
//!
//! What the firmware for an STM32F411-class board (`src/main.rs`) runs on top of its registers,
//! kept free of any register so it builds and is tested on the host too:
//!
//! - [`profile`]: the receiver's settings in flash, a setup file followed by a board file;
//! - [`fifo`]: the record layout of the invented TDC FIFO bridge, and the step from the ingest
//!   stage's widened counter to the counter width the receiver is configured for;
//! - [`receiver`]: the whole receiver (clock, link endpoint, monitor, frame writer) wired in one
//!   place, fed one decoded block at a time.
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

pub mod fifo;
pub mod profile;
pub mod receiver;

#[cfg(test)]
mod tests;
