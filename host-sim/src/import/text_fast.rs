//! The text importer's fast path: plain data lines decided without allocating or converting.
//!
//! Nearly every line of a real export is ASCII with an unquoted, unpadded `digits[.digits]` time
//! and a `digits` channel. Such a line is split on the delimiter byte in place, its time is
//! converted in 64-bit arithmetic (the exact rational of [`super::decimal`], reduced, so the
//! rounding is the same) and its channel looked up in a 256-entry table. Anything else (a sign,
//! an exponent, quotes, padding, a missing column, a value that would not fit) is not decided
//! here: the line goes to the general path, which gives every result and error message.

use slotwise::TdcEvent;

use super::decimal::{Decimal, TimeUnit};
use super::text::{ChannelMap, Delimiter, DROP_RANGE, DROP_UNMAPPED};

/// Table entry of an input channel the map does not list.
const UNMAPPED: u8 = u8::MAX;
/// Most digits a fast-path time or channel may have; 10^18 fits an i64, 10^19 a u64.
const MAX_TIME_DIGITS: usize = 19;
const MAX_CHANNEL_DIGITS: usize = 18;

/// Powers of ten that fit a u64, by exponent.
const POW10: [u64; 20] = {
    let mut p = [1u64; 20];
    let mut i = 1;
    while i < 20 {
        p[i] = p[i - 1] * 10;
        i += 1;
    }
    p
};

/// How fields are separated, as bytes.
#[derive(Clone, Copy, Debug)]
enum Split {
    /// One ASCII byte.
    Byte(u8),
    /// Runs of the bytes Rust's `char::is_whitespace` accepts below 0x80.
    Whitespace,
}

/// What the fast path needs, worked out once the columns are known.
#[derive(Clone, Debug)]
pub(super) struct FastLines {
    split: Split,
    time_col: usize,
    channel_col: usize,
    /// One unit of the time column in ps (1 for ticks) over 10^scale, by scale, where exact.
    unit_per_scale: [Option<u64>; 20],
    /// One tick in ps (1 for a time column in ticks).
    tick_ps: u64,
    unit: TimeUnit,
    capture_tick_ps: u32,
    /// Capture channel of input channels 0..=255, [`UNMAPPED`] when the map has none.
    map_table: Option<Box<[u8; 256]>>,
    map: Option<ChannelMap>,
    max_channel: u8,
}

fn is_space(b: u8) -> bool {
    matches!(b, b'\t' | b'\n' | 0x0B | 0x0C | b'\r' | b' ')
}

impl FastLines {
    /// The fast path for these options, or `None` when no line could take it.
    pub(super) fn new(
        delimiter: Delimiter,
        comment: &str,
        (time_col, channel_col): (usize, usize),
        unit: TimeUnit,
        map: Option<&ChannelMap>,
        capture_tick_ps: u32,
        max_channel: u8,
    ) -> Option<Self> {
        let split = match delimiter {
            Delimiter::Char(c) if c.is_ascii() => Split::Byte(c as u8),
            Delimiter::Char(_) => return None,
            Delimiter::Whitespace => Split::Whitespace,
        };
        // A fast-path line starts with a digit, so it must not be able to be a comment.
        if comment.starts_with(|c: char| c.is_ascii_digit()) || capture_tick_ps == 0 {
            return None;
        }
        let (unit_ps, tick_ps) = match unit.ps() {
            Some(ps) => (u64::try_from(ps).ok()?, u64::from(capture_tick_ps)),
            None => (1, 1),
        };
        let mut unit_per_scale = [None; 20];
        for (f, p) in unit_per_scale.iter_mut().zip(POW10) {
            *f = (unit_ps % p == 0).then_some(unit_ps / p);
        }
        let map_table = map.map(|m| {
            let mut t = Box::new([UNMAPPED; 256]);
            for &(from, to) in &m.0 {
                if let Some(slot) = usize::try_from(from).ok().and_then(|i| t.get_mut(i)) {
                    *slot = to;
                }
            }
            t
        });
        Some(Self {
            split,
            time_col,
            channel_col,
            unit_per_scale,
            tick_ps,
            unit,
            capture_tick_ps,
            map_table,
            map: map.cloned(),
            max_channel,
        })
    }

    /// The event of a data line (its line end removed), a reason to drop it, or `None` when the
    /// general path must decide.
    #[inline]
    pub(super) fn event(&self, line: &[u8]) -> Option<Result<TdcEvent, &'static str>> {
        let mut line = line;
        while let [rest @ .., b'\r'] = line {
            line = rest;
        }
        if !line.first()?.is_ascii_digit() {
            return None;
        }
        let (count, input) = match self.split {
            Split::Byte(d) if self.time_col != self.channel_col && !is_number_byte(d) => {
                self.walk(line, d)?
            }
            _ => {
                if !line.is_ascii() {
                    return None;
                }
                let (time, channel) = self.columns(line)?;
                (self.ticks(time)?, channel_number(channel)?)
            }
        };
        let channel = match (&self.map_table, &self.map) {
            (Some(table), Some(map)) => {
                let to = match usize::try_from(input).ok().and_then(|i| table.get(i)) {
                    Some(&to) => (to != UNMAPPED).then_some(to),
                    None => map.0.iter().find(|(f, _)| *f == input).map(|(_, t)| *t),
                };
                match to {
                    Some(c) => c,
                    None => return Some(Err(DROP_UNMAPPED)),
                }
            }
            _ => match u8::try_from(input) {
                Ok(c) if c <= self.max_channel => c,
                _ => return Some(Err(DROP_RANGE)),
            },
        };
        Some(Ok(TdcEvent { count, channel }))
    }

    /// Time and channel of a line split on the byte `d`, parsed as the fields are walked, so
    /// every byte is looked at once; `None` if a field is not plain or a column is missing.
    fn walk(&self, line: &[u8], d: u8) -> Option<(u64, i64)> {
        let last = self.time_col.max(self.channel_col);
        let (mut count, mut input) = (None, None);
        let mut at = 0;
        for i in 0..=last {
            let rest = line.get(at..)?;
            let end = if i == self.time_col {
                let (mantissa, scale, used) = decimal_prefix(rest)?;
                count = Some(self.convert(mantissa, scale)?);
                used
            } else if i == self.channel_col {
                let end = rest
                    .iter()
                    .position(|&b| !b.is_ascii_digit())
                    .unwrap_or(rest.len());
                input = Some(channel_number(rest.get(..end)?)?);
                end
            } else {
                let end = memchr::memchr(d, rest).unwrap_or(rest.len());
                if !rest.get(..end)?.is_ascii() {
                    return None;
                }
                end
            };
            match rest.get(end) {
                Some(&b) if b == d => at += end + 1,
                None if i == last => at += end,
                _ => return None,
            }
        }
        // The general path checks the whole line is UTF-8: so must the fast path.
        if !line.get(at..)?.is_ascii() {
            return None;
        }
        Some((count?, input?))
    }

    /// The time and channel fields, split in place; `None` if either column is missing.
    fn columns<'a>(&self, line: &'a [u8]) -> Option<(&'a [u8], &'a [u8])> {
        let last = self.time_col.max(self.channel_col);
        let (mut time, mut channel) = (None, None);
        let mut rest = line;
        for i in 0..=last {
            let (field, after) = match self.split {
                Split::Byte(d) => match rest.iter().position(|&b| b == d) {
                    Some(p) => (&rest[..p], Some(&rest[p + 1..])),
                    None => (rest, None),
                },
                Split::Whitespace => {
                    let end = rest.iter().position(|&b| is_space(b)).unwrap_or(rest.len());
                    let next = rest[end..].iter().position(|&b| !is_space(b));
                    (&rest[..end], next.map(|n| &rest[end + n..]))
                }
            };
            if i == self.time_col {
                time = Some(field);
            }
            if i == self.channel_col {
                channel = Some(field);
            }
            match after {
                Some(a) => rest = a,
                None if i < last => return None,
                None => {}
            }
        }
        Some((time?, channel?))
    }

    /// `digits[.digits]` in ticks, rounded as [`Decimal::to_ticks`] rounds; `None` for any other
    /// form, or when the general path's checks might refuse it.
    fn ticks(&self, field: &[u8]) -> Option<u64> {
        let (mantissa, scale, used) = decimal_prefix(field)?;
        if used != field.len() {
            return None;
        }
        self.convert(mantissa, scale)
    }

    /// `mantissa × 10^-scale` units in ticks, rounded to the nearest (halves up).
    fn convert(&self, mantissa: u64, scale: usize) -> Option<u64> {
        let Some(unit) = *self.unit_per_scale.get(scale)? else {
            let d = Decimal {
                mantissa: u128::from(mantissa),
                scale: scale as u32,
            };
            return d.to_ticks(self.unit, self.capture_tick_ps).ok();
        };
        // mantissa × unit / (10^scale × tick), with 10^scale divided out of the unit exactly.
        let num = mantissa.checked_mul(unit)?;
        let den = self.tick_ps;
        if den == 1 {
            return Some(num);
        }
        let (q, r) = (num / den, num % den);
        Some(if r >= den - r { q + 1 } else { q })
    }
}

/// Bytes that can be part of a fast-path number: a delimiter among them is left to the general
/// path.
fn is_number_byte(b: u8) -> bool {
    b.is_ascii_digit() || b == b'.'
}

/// The number `digits[.digits]` at the start of `field`, up to the first other byte: mantissa,
/// digits after the point, bytes used. `None` without a digit before the point or with more
/// than 19 digits.
fn decimal_prefix(field: &[u8]) -> Option<(u64, usize, usize)> {
    let (int, int_digits) = digits_prefix(field, 0, 0);
    if int_digits == 0 {
        return None;
    }
    let (mantissa, digits, point) = match field.get(int_digits) {
        Some(b'.') => {
            let (m, n) = digits_prefix(field.get(int_digits + 1..)?, int, int_digits);
            (m, n, 1)
        }
        _ => (int, int_digits, 0),
    };
    if digits > MAX_TIME_DIGITS {
        return None;
    }
    Some((mantissa, digits - int_digits, digits + point))
}

/// Continue `acc` (of `count` digits so far) with the digits at the start of `b`, eight at a
/// time while there are eight; the accumulator wraps past 19 digits, which callers refuse.
fn digits_prefix(b: &[u8], mut acc: u64, mut count: usize) -> (u64, usize) {
    let mut rest = b;
    while let Some(v) = rest.first_chunk::<8>().and_then(|c| eight_digits(*c)) {
        acc = acc.wrapping_mul(100_000_000).wrapping_add(v);
        count += 8;
        rest = rest.get(8..).unwrap_or_default();
    }
    for &c in rest {
        let d = c.wrapping_sub(b'0');
        if d > 9 {
            break;
        }
        acc = acc.wrapping_mul(10).wrapping_add(u64::from(d));
        count += 1;
    }
    (acc, count)
}

/// Eight ASCII digits (the first the most significant) as a number, or `None` if any byte is
/// not a digit: the SWAR method of Lemire's fast number parsing (two multiplications).
fn eight_digits(chunk: [u8; 8]) -> Option<u64> {
    let v = u64::from_le_bytes(chunk);
    let high = 0xF0F0_F0F0_F0F0_F0F0u64;
    // Every byte 0x30..=0x39: high nibble 3, and adding 6 does not carry into it.
    let ok = (v & high) | (((v.wrapping_add(0x0606_0606_0606_0606)) & high) >> 4);
    if ok != 0x3333_3333_3333_3333 {
        return None;
    }
    let v = v.wrapping_sub(0x3030_3030_3030_3030);
    let v = v.wrapping_mul(10).wrapping_add(v >> 8);
    let mask = 0x0000_00FF_0000_00FF;
    let mul1 = 100 + (1_000_000 << 32);
    let mul2 = 1 + (10_000 << 32);
    Some(
        ((v & mask)
            .wrapping_mul(mul1)
            .wrapping_add(((v >> 16) & mask).wrapping_mul(mul2)))
            >> 32,
    )
}

/// A channel of 1..=18 plain digits.
fn channel_number(field: &[u8]) -> Option<i64> {
    if field.is_empty() || field.len() > MAX_CHANNEL_DIGITS {
        return None;
    }
    let mut v = 0i64;
    for &b in field {
        let d = b.wrapping_sub(b'0');
        if d > 9 {
            return None;
        }
        v = v * 10 + i64::from(d);
    }
    Some(v)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn eight_digits_at_once_or_none() {
        assert_eq!(eight_digits(*b"12345678"), Some(12_345_678));
        assert_eq!(eight_digits(*b"00000009"), Some(9));
        assert_eq!(eight_digits(*b"99999999"), Some(99_999_999));
        // The bytes either side of '0'..='9' ('/' and ':'), a letter, a point, a high byte.
        for bad in [
            b"/0000000",
            b"0000000:",
            b"1234a678",
            b"1234.678",
            b"1234\xB5678",
        ] {
            assert_eq!(eight_digits(*bad), None, "{bad:?}");
        }
    }

    #[test]
    fn decimal_prefix_stops_at_the_first_other_byte() {
        assert_eq!(
            decimal_prefix(b"1234567890.125;3"),
            Some((1_234_567_890_125, 3, 14))
        );
        assert_eq!(decimal_prefix(b"7.;"), Some((7, 0, 2)));
        assert_eq!(decimal_prefix(b".5"), None);
        assert_eq!(decimal_prefix(b"12345678901234567890"), None); // 20 digits
        assert_eq!(
            decimal_prefix(b"1234567890123456789"),
            Some((1_234_567_890_123_456_789, 0, 19))
        );
    }
}
