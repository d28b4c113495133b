//! Logging: defmt frames on semihosting stdout with the `defmt` feature, plain text otherwise
//! (never both, so a defmt decoder never sees stray text).

#[cfg(feature = "defmt")]
macro_rules! info {
    ($($arg:tt)*) => { defmt::info!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! info {
    ($($arg:tt)*) => { semihosting::println!($($arg)*) };
}
#[cfg(feature = "defmt")]
macro_rules! error {
    ($($arg:tt)*) => { defmt::error!($($arg)*) };
}
#[cfg(not(feature = "defmt"))]
macro_rules! error {
    ($($arg:tt)*) => { semihosting::eprintln!($($arg)*) };
}
pub(crate) use {error, info};
