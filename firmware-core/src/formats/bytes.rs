//! One little-endian byte reader and writer, used by every record codec.
//!
//! Both are cursors over a caller's buffer. Nothing is ever silent: a read past the end is
//! [`FrameError::Truncated`] (or [`FrameError::TruncatedField`] for a named read), bytes left over after the last field are
//! [`FrameError::LengthMismatch`] (from [`Reader::finish`]), and a write past the end is
//! [`FrameError::BufferTooSmall`]. Variable-length integers are unsigned LEB128 as the DWARF
//! standard defines it (DWARF 5, §7.6): seven bits per byte, least significant group first, bit 7
//! set on every byte but the last.

use super::framing::FrameError;

/// Longest LEB128 encoding of a u64, bytes.
pub const MAX_VARINT: usize = 10;

/// Bytes of `v` as LEB128.
pub const fn varint_len(mut v: u64) -> usize {
    let mut n = 1;
    while v >= 0x80 {
        v >>= 7;
        n += 1;
    }
    n
}

/// A cursor reading little-endian fields from a payload.
#[derive(Clone, Debug)]
pub struct Reader<'a> {
    buf: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    /// A reader at the first byte of `buf`.
    pub const fn new(buf: &'a [u8]) -> Self {
        Self { buf, at: 0 }
    }

    /// Bytes read so far (the offset of the next field).
    pub const fn position(&self) -> usize {
        self.at
    }

    /// Bytes not yet read.
    pub const fn remaining(&self) -> usize {
        self.buf.len().saturating_sub(self.at)
    }

    /// The next `n` bytes; [`FrameError::Truncated`] at the buffer's end if fewer are left.
    pub fn bytes(&mut self, n: usize) -> Result<&'a [u8], FrameError> {
        let short = FrameError::Truncated {
            offset: self.buf.len(),
        };
        let end = self.at.checked_add(n).ok_or(short)?;
        let s = self.buf.get(self.at..end).ok_or(short)?;
        self.at = end;
        Ok(s)
    }

    /// The next `N` bytes as an array.
    pub fn array<const N: usize>(&mut self) -> Result<[u8; N], FrameError> {
        let mut a = [0u8; N];
        a.copy_from_slice(self.bytes(N)?);
        Ok(a)
    }

    /// One byte.
    pub fn u8(&mut self) -> Result<u8, FrameError> {
        self.array().map(u8::from_le_bytes)
    }

    /// A little-endian u16.
    pub fn u16(&mut self) -> Result<u16, FrameError> {
        self.array().map(u16::from_le_bytes)
    }

    /// A little-endian u32.
    pub fn u32(&mut self) -> Result<u32, FrameError> {
        self.array().map(u32::from_le_bytes)
    }

    /// A little-endian u64.
    pub fn u64(&mut self) -> Result<u64, FrameError> {
        self.array().map(u64::from_le_bytes)
    }

    /// A little-endian u64 named `field`: a short payload is [`FrameError::TruncatedField`] at
    /// the field's first byte, for records whose fields are known only from an earlier word.
    pub fn u64_named(&mut self, field: &'static str) -> Result<u64, FrameError> {
        let offset = self.at;
        self.u64()
            .map_err(|_| FrameError::TruncatedField { offset, field })
    }

    /// One LEB128 value; longer than [`MAX_VARINT`] bytes or above u64 is a
    /// [`FrameError::BadField`] named `field` at the value's first byte.
    pub fn varint(&mut self, field: &'static str) -> Result<u64, FrameError> {
        let start = self.at;
        let bad = FrameError::BadField {
            offset: start,
            field,
        };
        let mut v = 0u64;
        for k in 0..MAX_VARINT {
            let b = self.u8()?;
            let bits = u64::from(b & 0x7F);
            if k == MAX_VARINT - 1 && bits > 1 {
                return Err(bad);
            }
            v |= bits << (7 * k);
            if b & 0x80 == 0 {
                return Ok(v);
            }
        }
        Err(bad)
    }

    /// End of the record: every byte must have been read, else [`FrameError::LengthMismatch`]
    /// declaring the bytes the fields took.
    pub fn finish(self) -> Result<(), FrameError> {
        if self.at < self.buf.len() {
            return Err(FrameError::LengthMismatch {
                declared: u16::try_from(self.at).unwrap_or(u16::MAX),
                actual: self.buf.len(),
            });
        }
        Ok(())
    }
}

/// A cursor writing little-endian fields into a caller's buffer.
#[derive(Debug)]
pub struct Writer<'a> {
    buf: &'a mut [u8],
    at: usize,
}

impl<'a> Writer<'a> {
    /// A writer at the first byte of `buf`.
    pub fn new(buf: &'a mut [u8]) -> Self {
        Self { buf, at: 0 }
    }

    /// Bytes written so far.
    pub const fn position(&self) -> usize {
        self.at
    }

    /// The next `n` bytes of the buffer, to fill in place (a bitmap); [`FrameError::BufferTooSmall`]
    /// if fewer are left.
    pub fn space(&mut self, n: usize) -> Result<&mut [u8], FrameError> {
        let end = self.at.saturating_add(n);
        let s = self
            .buf
            .get_mut(self.at..end)
            .ok_or(FrameError::BufferTooSmall { needed: end })?;
        self.at = end;
        Ok(s)
    }

    /// Copy `bytes` in.
    pub fn bytes(&mut self, bytes: &[u8]) -> Result<(), FrameError> {
        self.space(bytes.len())?.copy_from_slice(bytes);
        Ok(())
    }

    /// One byte.
    pub fn u8(&mut self, v: u8) -> Result<(), FrameError> {
        self.bytes(&[v])
    }

    /// A little-endian u16.
    pub fn u16(&mut self, v: u16) -> Result<(), FrameError> {
        self.bytes(&v.to_le_bytes())
    }

    /// A little-endian u32.
    pub fn u32(&mut self, v: u32) -> Result<(), FrameError> {
        self.bytes(&v.to_le_bytes())
    }

    /// A little-endian u64.
    pub fn u64(&mut self, v: u64) -> Result<(), FrameError> {
        self.bytes(&v.to_le_bytes())
    }

    /// `v` as LEB128; returns the bytes written. Nothing is written if they do not all fit.
    pub fn varint(&mut self, mut v: u64) -> Result<usize, FrameError> {
        let n = varint_len(v);
        for b in self.space(n)? {
            let low = (v & 0x7F) as u8;
            v >>= 7;
            *b = if v == 0 { low } else { low | 0x80 };
        }
        Ok(n)
    }

    /// End of the record: the bytes written.
    pub const fn finish(self) -> usize {
        self.at
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_read_is_truncated_at_the_end() {
        let mut r = Reader::new(&[1, 2, 3]);
        assert_eq!(r.u16(), Ok(0x0201));
        assert_eq!(r.u16(), Err(FrameError::Truncated { offset: 3 }));
        // A failed read takes nothing: the byte left is still there.
        assert_eq!(r.remaining(), 1);
        assert_eq!(r.u8(), Ok(3));
        assert_eq!(r.u8(), Err(FrameError::Truncated { offset: 3 }));
        assert_eq!(
            Reader::new(&[0; 4]).bytes(usize::MAX),
            Err(FrameError::Truncated { offset: 4 })
        );
    }

    #[test]
    fn trailing_bytes_are_a_length_mismatch() {
        let mut r = Reader::new(&[1, 0, 0, 0, 9]);
        assert_eq!(r.u32(), Ok(1));
        assert_eq!(
            r.finish(),
            Err(FrameError::LengthMismatch {
                declared: 4,
                actual: 5
            })
        );
        let mut r = Reader::new(&[1, 0, 0, 0]);
        assert_eq!(r.u32(), Ok(1));
        assert_eq!(r.finish(), Ok(()));
    }

    #[test]
    fn short_write_is_an_error_and_writes_nothing() {
        let mut buf = [0u8; 5];
        let mut w = Writer::new(&mut buf);
        assert_eq!(w.u32(0x0403_0201), Ok(()));
        assert_eq!(w.u16(7), Err(FrameError::BufferTooSmall { needed: 6 }));
        assert_eq!(w.varint(300), Err(FrameError::BufferTooSmall { needed: 6 }));
        assert_eq!(w.u8(5), Ok(()));
        assert_eq!(w.finish(), 5);
        assert_eq!(buf, [1, 2, 3, 4, 5]);
    }

    // LEB128 examples of the DWARF 5 standard, Table 7.6 (quoted from memory).
    #[test]
    fn leb128_examples() {
        let cases: [(u64, &[u8]); 7] = [
            (2, &[0x02]),
            (127, &[0x7F]),
            (128, &[0x80, 0x01]),
            (129, &[0x81, 0x01]),
            (130, &[0x82, 0x01]),
            (12857, &[0xB9, 0x64]),
            (
                u64::MAX,
                &[0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0x01],
            ),
        ];
        for (v, bytes) in cases {
            let mut b = [0u8; MAX_VARINT];
            let mut w = Writer::new(&mut b);
            let n = w.varint(v).unwrap();
            assert_eq!(&b[..n], bytes, "{v}");
            assert_eq!(varint_len(v), n);
            let mut r = Reader::new(bytes);
            assert_eq!(r.varint("v"), Ok(v));
            assert_eq!(r.finish(), Ok(()));
        }
        // 2^64 does not fit: the tenth byte may only carry one bit.
        let over = [0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0xFF, 0x02];
        assert_eq!(
            Reader::new(&over).varint("v"),
            Err(FrameError::BadField {
                offset: 0,
                field: "v"
            })
        );
        assert_eq!(
            Reader::new(&[0x80, 0x80]).varint("v"),
            Err(FrameError::Truncated { offset: 2 })
        );
    }
}
