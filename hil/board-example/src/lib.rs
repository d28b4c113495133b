//! # slotwise-board-example — the board-independent half of the example firmware
//!
//! What the firmware for an STM32F411-class board (`src/main.rs`) runs on top of its registers,
//! kept free of any register so it builds and is tested on the host too:
//!
//! - [`profile`]: the receiver's settings in flash, a profile blob with the bridge's word layout;
//! - [`fifo`]: the record layout of the invented TDC FIFO bridge, and the step from the ingest
//!   stage's widened counter to the counter width the receiver is configured for.
//!
//! The receiver itself is [`slotwise_hil::Station`], the same object the C interface wraps.
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

#[cfg(test)]
mod tests;
