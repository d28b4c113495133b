#![allow(unused_macros)]
//! The one logging shim of the core: `trace!`/`debug!`/`warning!` go to `defmt` when the `defmt`
//! feature is on, and compile to nothing otherwise. The core never prints.

#[cfg(feature = "defmt")]
macro_rules! debug {
    ($($arg:tt)*) => { defmt::debug!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! debug {
    ($($arg:tt)*) => {{}};
}
#[cfg(feature = "defmt")]
macro_rules! trace {
    ($($arg:tt)*) => { defmt::trace!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! trace {
    ($($arg:tt)*) => {{}};
}
#[cfg(feature = "defmt")]
macro_rules! warning {
    ($($arg:tt)*) => { defmt::warn!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! warning {
    ($($arg:tt)*) => {{}};
}
#[allow(unused_imports)]
pub(crate) use {debug, trace, warning};
