//! Exact decimal times: `12.345678` ns becomes ticks in integer arithmetic, rounded once.
//!
//! A time tagger's text export writes times as decimal numbers in some unit; going through `f64`
//! would round a 64-bit picosecond count (f64 holds 53 bits). The number is kept as an integer
//! mantissa and a power of ten, and the only rounding is the final one to the nearest tick.

use std::fmt;

/// Unit of the times in a text export.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum TimeUnit {
    /// Picoseconds.
    Ps,
    /// Nanoseconds (1000 ps).
    Ns,
    /// Microseconds (10^6 ps).
    Us,
    /// Seconds (10^12 ps).
    S,
    /// Ticks of the capture's counter (`--tick-ps`).
    Ticks,
}

impl TimeUnit {
    /// One unit in picoseconds (SI prefixes); `None` for ticks.
    pub const fn ps(self) -> Option<u128> {
        match self {
            Self::Ps => Some(1),
            Self::Ns => Some(1_000),
            Self::Us => Some(1_000_000),
            Self::S => Some(1_000_000_000_000),
            Self::Ticks => None,
        }
    }
}

/// A non-negative decimal number `mantissa × 10^-scale`, exact.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Decimal {
    /// The digits as an integer.
    pub mantissa: u128,
    /// How many of them are after the decimal point.
    pub scale: u32,
}

/// Why a time is not a usable decimal number.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DecimalError {
    /// Not of the form `digits[.digits][e[+-]digits]`.
    Syntax,
    /// A minus sign: times are not negative.
    Negative,
    /// Too many significant digits (more than 38) or an exponent out of range.
    TooLong,
    /// The time in ticks does not fit 64 bits.
    OutOfRange,
}

impl fmt::Display for DecimalError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::Syntax => "not a decimal number (digits, an optional '.' fraction and exponent)",
            Self::Negative => "negative time",
            Self::TooLong => "too many digits or exponent out of range",
            Self::OutOfRange => "time in ticks does not fit 64 bits",
        })
    }
}

impl std::error::Error for DecimalError {}

/// Parse `digits[.digits][(e|E)[+|-]digits]` exactly; a leading `+` is allowed.
pub fn parse_decimal(s: &str) -> Result<Decimal, DecimalError> {
    let s = s.strip_prefix('+').unwrap_or(s);
    if s.starts_with('-') {
        return Err(DecimalError::Negative);
    }
    let (num, exp) = match s.find(['e', 'E']) {
        Some(i) => (&s[..i], Some(&s[i + 1..])),
        None => (s, None),
    };
    let (int, frac) = num.split_once('.').unwrap_or((num, ""));
    let digits = |t: &str| t.bytes().all(|b| b.is_ascii_digit());
    if int.len() + frac.len() == 0 || !digits(int) || !digits(frac) {
        return Err(DecimalError::Syntax);
    }
    // Trailing zeros of the fraction carry no value; dropping them keeps the scale small.
    let frac = frac.trim_end_matches('0');
    let mut mantissa: u128 = 0;
    for b in int.bytes().chain(frac.bytes()) {
        mantissa = mantissa
            .checked_mul(10)
            .and_then(|m| m.checked_add(u128::from(b - b'0')))
            .ok_or(DecimalError::TooLong)?;
    }
    let mut scale = i64::try_from(frac.len()).map_err(|_| DecimalError::TooLong)?;
    if let Some(e) = exp {
        let (neg, e) = match e.strip_prefix('-') {
            Some(rest) => (true, rest),
            None => (false, e.strip_prefix('+').unwrap_or(e)),
        };
        if e.is_empty() || !digits(e) {
            return Err(DecimalError::Syntax);
        }
        let e: i64 = e.parse().map_err(|_| DecimalError::TooLong)?;
        // An exponent near i64::MAX must be refused, not wrapped into a small scale.
        scale = if neg {
            scale.checked_add(e)
        } else {
            scale.checked_sub(e)
        }
        .ok_or(DecimalError::TooLong)?;
    }
    if scale < 0 {
        let up = 10u128
            .checked_pow(u32::try_from(-scale).map_err(|_| DecimalError::TooLong)?)
            .ok_or(DecimalError::TooLong)?;
        mantissa = mantissa.checked_mul(up).ok_or(DecimalError::TooLong)?;
        scale = 0;
    }
    let scale = u32::try_from(scale).map_err(|_| DecimalError::TooLong)?;
    if scale > 38 {
        return Err(DecimalError::TooLong);
    }
    Ok(Decimal { mantissa, scale })
}

impl Decimal {
    /// This many `unit`s in ticks of `tick_ps`, rounded to the nearest tick (halves up).
    pub fn to_ticks(self, unit: TimeUnit, tick_ps: u32) -> Result<u64, DecimalError> {
        let pow = 10u128
            .checked_pow(self.scale)
            .ok_or(DecimalError::TooLong)?;
        let (num, den) = match unit.ps() {
            Some(ps) => (
                self.mantissa.checked_mul(ps),
                pow.checked_mul(u128::from(tick_ps)),
            ),
            None => (Some(self.mantissa), Some(pow)),
        };
        let (num, den) = num.zip(den).ok_or(DecimalError::TooLong)?;
        if den == 0 {
            return Err(DecimalError::OutOfRange);
        }
        let (q, r) = (num / den, num % den);
        let q = if r >= den - r { q + 1 } else { q };
        u64::try_from(q).map_err(|_| DecimalError::OutOfRange)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ticks(s: &str, unit: TimeUnit, tick_ps: u32) -> Result<u64, DecimalError> {
        parse_decimal(s)?.to_ticks(unit, tick_ps)
    }

    // Unit factors are the SI prefixes (common practice): 1 ns = 1000 ps, 1 us = 10^6 ps,
    // 1 s = 10^12 ps. Expected values worked by hand.
    #[test]
    fn exact_conversion_and_rounding() {
        assert_eq!(ticks("12.345678", TimeUnit::Ns, 1), Ok(12_346)); // 12345.678 ps
        assert_eq!(ticks("12.345678", TimeUnit::Ns, 4), Ok(3_086)); // 3086.4195 ticks
        assert_eq!(ticks("0.0025", TimeUnit::Ns, 1), Ok(3)); // 2.5 ps: half rounds up
        assert_eq!(ticks("0.0015", TimeUnit::Ns, 1), Ok(2)); // 1.5 ps
        assert_eq!(ticks("0.0014999", TimeUnit::Ns, 1), Ok(1));
        assert_eq!(ticks("1.5e3", TimeUnit::Ns, 1), Ok(1_500_000));
        assert_eq!(ticks("2500E-3", TimeUnit::Ps, 1), Ok(3));
        assert_eq!(
            ticks("1.000000000000", TimeUnit::S, 1),
            Ok(1_000_000_000_000)
        );
        assert_eq!(ticks("7.5", TimeUnit::Ticks, 99), Ok(8));
        assert_eq!(ticks("+42", TimeUnit::Us, 1000), Ok(42_000));
        // 2^64 - 1 ps is the largest time that fits; one more does not.
        assert_eq!(ticks("18446744073709551615", TimeUnit::Ps, 1), Ok(u64::MAX));
        assert_eq!(
            ticks("18446744073709551616", TimeUnit::Ps, 1),
            Err(DecimalError::OutOfRange)
        );
    }

    #[test]
    fn refuses_what_is_not_a_plain_decimal() {
        for bad in ["", ".", "1.2.3", "1,5", "0x10", "1e", "e5", "12ns", " 1"] {
            assert_eq!(parse_decimal(bad), Err(DecimalError::Syntax), "{bad:?}");
        }
        assert_eq!(parse_decimal("-1"), Err(DecimalError::Negative));
        assert_eq!(parse_decimal("1e400"), Err(DecimalError::TooLong));
        // Exponents at the edge of i64: refused, never an overflow.
        for huge in [
            "0.1e-9223372036854775807",
            "1e-9223372036854775807",
            "1e9223372036854775807",
        ] {
            assert_eq!(parse_decimal(huge), Err(DecimalError::TooLong), "{huge:?}");
        }
    }
}
