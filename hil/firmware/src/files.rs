//! Semihosting files as `embedded-io` streams, with the counter paused while the host works.
//!
//! A semihosting call traps into QEMU, which does the file work on the host; on a board the same
//! bytes would arrive by DMA. The counts spent in these calls are added to [`excluded`] so the
//! meter can subtract them.

use core::cell::Cell;
use core::ffi::CStr;
use critical_section::Mutex;
use embedded_io::{ErrorKind, ErrorType, Read, Write};
use semihosting::io::{Read as _, Write as _};

static EXCLUDED: Mutex<Cell<u64>> = Mutex::new(Cell::new(0));

/// Counter units spent in semihosting I/O so far.
pub fn excluded() -> u64 {
    critical_section::with(|cs| EXCLUDED.borrow(cs).get())
}

fn paused<T>(f: impl FnOnce() -> T) -> T {
    let t0 = crate::arch::now();
    let r = f();
    let dt = crate::arch::now().saturating_sub(t0);
    critical_section::with(|cs| {
        let c = EXCLUDED.borrow(cs);
        c.set(c.get() + dt);
    });
    r
}

/// The whole of the host file `name` in a buffer of `N` bytes: (buffer, bytes read). A missing
/// or unreadable file is the setup's failure ([`crate::exit::SETUP`]).
#[allow(dead_code)] // the binaries that read their inputs in one piece use it
pub fn read_file<const N: usize>(name: &CStr) -> Result<([u8; N], usize), i32> {
    let mut b = [0u8; N];
    let n = ShFile::open(name)
        .and_then(|mut f| f.read_all(&mut b))
        .map_err(|_| crate::exit::SETUP)?;
    Ok((b, n))
}

/// A host file reached through semihosting.
pub struct ShFile(semihosting::fs::File);

/// Semihosting reports failures without a usable kind.
pub type ShError = ErrorKind;

impl ShFile {
    /// Open an existing file for reading.
    pub fn open(path: &CStr) -> Result<Self, ShError> {
        paused(|| semihosting::fs::File::open(path))
            .map(Self)
            .map_err(|_| ErrorKind::NotFound)
    }

    /// Create (or truncate) a file for writing.
    pub fn create(path: &CStr) -> Result<Self, ShError> {
        paused(|| semihosting::fs::File::create(path))
            .map(Self)
            .map_err(|_| ErrorKind::Other)
    }

    /// Read until `buf` is full or the file ends; returns bytes read.
    pub fn read_all(&mut self, buf: &mut [u8]) -> Result<usize, ShError> {
        let mut n = 0;
        while let Some(rest) = buf.get_mut(n..) {
            if rest.is_empty() {
                break;
            }
            let k = Read::read(self, rest)?;
            if k == 0 {
                break;
            }
            n += k;
        }
        Ok(n)
    }

    /// Write every byte of `bytes`.
    pub fn write_all_bytes(&mut self, bytes: &[u8]) -> Result<(), ShError> {
        Write::write_all(self, bytes)
    }
}

impl ErrorType for ShFile {
    type Error = ErrorKind;
}

impl Read for ShFile {
    fn read(&mut self, buf: &mut [u8]) -> Result<usize, ErrorKind> {
        paused(|| self.0.read(buf)).map_err(|_| ErrorKind::Other)
    }
}

impl Write for ShFile {
    fn write(&mut self, buf: &[u8]) -> Result<usize, ErrorKind> {
        paused(|| self.0.write(buf)).map_err(|_| ErrorKind::Other)
    }

    fn flush(&mut self) -> Result<(), ErrorKind> {
        Ok(())
    }
}
