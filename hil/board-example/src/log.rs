//! Logging: defmt frames over RTT with the `defmt` feature, nothing at all without it. Without
//! the feature the arguments are type-checked inside `if false`, so a build without logs pays
//! no cycles for them and a variable used only in a log is not reported unused.

#[cfg(feature = "defmt")]
macro_rules! info {
    ($($arg:tt)*) => { defmt::info!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! info {
    ($fmt:literal $(, $arg:expr)* $(,)?) => {{
        if false {
            let _ = ($(&$arg,)*);
        }
    }};
}
#[cfg(feature = "defmt")]
macro_rules! warning {
    ($($arg:tt)*) => { defmt::warn!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! warning {
    ($fmt:literal $(, $arg:expr)* $(,)?) => {{
        if false {
            let _ = ($(&$arg,)*);
        }
    }};
}
#[cfg(feature = "defmt")]
macro_rules! error {
    ($($arg:tt)*) => { defmt::error!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! error {
    ($fmt:literal $(, $arg:expr)* $(,)?) => {{
        if false {
            let _ = ($(&$arg,)*);
        }
    }};
}
pub(crate) use {error, info, warning};
