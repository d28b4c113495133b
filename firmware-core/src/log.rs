#![allow(unused_macros)]
//! The one logging shim of the core: `trace!`/`debug!` go to `defmt` when the `defmt` feature is
//! on, and compile to nothing otherwise. The core never prints.

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
#[allow(unused_imports)]
pub(crate) use {debug, trace};
