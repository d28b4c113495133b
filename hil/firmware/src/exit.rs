//! Exit codes of the firmware (QEMU passes them on).

/// The run completed; compare the frames.
pub const OK: i32 = 0;
/// `setup.bin` missing or refused.
pub const SETUP: i32 = 2;
/// An input or output file could not be opened, or an input stream broke.
pub const IO: i32 = 3;
/// The report could not be written.
pub const REPORT: i32 = 4;
/// A panic (never expected: the core has no panicking paths).
pub const PANIC: i32 = 70;
/// A CPU fault or unexpected exception.
pub const FAULT: i32 = 71;
