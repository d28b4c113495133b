//! The slotwise capture format: raw TDC events as a file, written and read as a stream.
//!
//! A capture is a header (magic, version, TDC description, scenario metadata, CRC) followed by
//! blocks of delta-encoded events and an end record. Every header, block and end record carries
//! a CRC-32C (CRC-32/ISCSI of the CRC catalogue), so damage is found and located; the skipping
//! reader steps over a damaged block and finds the next one by its sync word. The byte layout is
//! specified in `docs/capture-format.md`, detailed enough to write a reader from it alone.
//!
//! Counters are stored raw, exactly as the TDC reported them (wrapping at the declared width,
//! neighbours possibly out of order); unwrapping is the core's job (`slotwise::Unwrapper`).
#![warn(missing_docs)]

mod block;
mod error;
mod header;
mod inspect;
mod reader;
mod skipped;
mod writer;

use std::fs::File;
use std::path::Path;

pub use error::{CaptureError, ErrorKind};
pub use header::CaptureHeader;
/// Little-endian field readers, shared with the transmitter record's reader.
pub(crate) use header::{le_u16, le_u32, le_u64};
pub use inspect::{inspect, Damage, EventsPerBlock, InspectReport, Verdict, MAX_LISTED_DAMAGE};
pub use reader::{BlockInfo, BlockOutcome, CaptureReader, SkippedBlock};
pub use skipped::{SkipReport, SkippedStretch};
pub use writer::CaptureWriter;

use slotwise::TdcEvent;

/// First eight bytes of every capture.
pub const MAGIC: [u8; 8] = *b"SLOTWCAP";
/// Major number of the format version this code writes and reads.
pub const FORMAT_MAJOR: u8 = 1;
/// Minor number of the format version this code writes.
pub const FORMAT_MINOR: u8 = 0;
/// Format version as stored: major in the high byte, minor in the low byte.
pub const FORMAT_VERSION: u16 = (FORMAT_MAJOR as u16) << 8 | FORMAT_MINOR as u16;
/// Sync word that starts every data block.
pub const BLOCK_SYNC: [u8; 4] = *b"SWBK";
/// Sync word that starts the end record.
pub const END_SYNC: [u8; 4] = *b"SWEN";
/// Events per block unless the header says otherwise.
pub const DEFAULT_BLOCK_EVENTS: u32 = 4096;
/// Largest block size in events a header may declare (2^20).
pub const MAX_BLOCK_EVENTS: u32 = 1 << 20;
/// Largest metadata blob in bytes (1 MiB).
pub const MAX_METADATA_BYTES: u32 = 1 << 20;
/// Largest header extension a newer minor version may add, in bytes (64 KiB).
pub const MAX_HEADER_EXTENSION: u32 = 1 << 16;
/// Flag bits 0–15: a reader must refuse a capture with a set bit it does not know.
pub const FLAGS_REQUIRED_MASK: u32 = 0x0000_FFFF;
/// Required flag bits this version knows (none so far).
pub const FLAGS_KNOWN_REQUIRED: u32 = 0;
/// Advisory flag: the events come from the link simulator, not from hardware.
pub const FLAG_SIMULATED: u32 = 1 << 16;
/// Advisory flag: the events were imported from CSV.
pub const FLAG_IMPORTED: u32 = 1 << 17;

/// The CRC used by header, blocks and end record: CRC-32/ISCSI (CRC-32C) of the CRC catalogue.
/// Computed 16 bytes per step from sixteen tables (slicing-by-16): the same values as the
/// byte-at-a-time form, several times faster on the block payloads every write and read covers.
pub static CAPTURE_CRC: crc::Crc<u32, crc::Table<16>> =
    crc::Crc::<u32, crc::Table<16>>::new(&crc::CRC_32_ISCSI);

/// CRC-32C of `bytes`, as stored in the capture's CRC fields.
pub fn crc32c(bytes: &[u8]) -> u32 {
    CAPTURE_CRC.checksum(bytes)
}

/// Read a whole capture file strictly: its header and every event.
pub fn read_all(path: impl AsRef<Path>) -> Result<(CaptureHeader, Vec<TdcEvent>), CaptureError> {
    let path = path.as_ref();
    let name = path.display().to_string();
    let file = File::open(path).map_err(|e| CaptureError::io(&name, 0, &e))?;
    let mut reader = CaptureReader::new(file, &name)?;
    let mut events = Vec::new();
    let mut block = Vec::new();
    while reader.next_block(&mut block)?.is_some() {
        events.extend_from_slice(&block);
    }
    Ok((reader.header().clone(), events))
}

/// Write `events` as a capture file with `header`; the block count is filled in.
pub fn write_all(
    path: impl AsRef<Path>,
    header: CaptureHeader,
    events: &[TdcEvent],
) -> std::io::Result<()> {
    let file = File::create(path)?;
    let mut writer = CaptureWriter::new(std::io::BufWriter::new(file), header)?;
    writer.push_all(events)?;
    let buffered = writer.finish_seek()?;
    buffered
        .into_inner()
        .map_err(|e| e.into_error())?
        .sync_all()
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::io::Cursor;

    // Check values for ASCII "123456789" from Cook's Catalogue of parametrised CRC algorithms
    // (reveng.sourceforge.io/crc-catalogue): CRC-32/ISCSI 0xE3069283, CRC-32/ISO-HDLC 0xCBF43926.
    #[test]
    fn crc_catalogue_check_values() {
        assert_eq!(crc32c(b"123456789"), 0xE306_9283);
        let hdlc = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);
        assert_eq!(hdlc.checksum(b"123456789"), 0xCBF4_3926);
    }

    #[test]
    fn in_memory_round_trip_with_wraps_and_reordering() {
        let tdc = slotwise::UnwrapConfig::new(32, 4).unwrap();
        let header = CaptureHeader::new(tdc, 3).with_block_events(5);
        let mut events = Vec::new();
        let mut t: u64 = 0xFFFF_FF00;
        for i in 0..23u64 {
            t = t.wrapping_add(97 + i * 13);
            events.push(TdcEvent {
                count: t & 0xFFFF_FFFF,
                channel: (i % 3) as u8,
            });
        }
        events.swap(7, 8);
        let mut w = CaptureWriter::new(Cursor::new(Vec::new()), header.clone()).unwrap();
        w.push_all(&events).unwrap();
        let bytes = w.finish_seek().unwrap().into_inner();
        let mut r = CaptureReader::new(&bytes[..], "mem").unwrap();
        assert_eq!(r.header().block_count, 5);
        let mut got = Vec::new();
        let mut block = Vec::new();
        while let Some(info) = r.next_block(&mut block).unwrap() {
            assert_eq!(info.events as usize, block.len());
            got.extend_from_slice(&block);
        }
        assert_eq!(got, events);
    }

    #[test]
    fn writer_refuses_wide_counts_and_unknown_channels() {
        let tdc = slotwise::UnwrapConfig::new(32, 1).unwrap();
        let mut w = CaptureWriter::new(Vec::new(), CaptureHeader::new(tdc, 2)).unwrap();
        let wide = TdcEvent {
            count: 1 << 32,
            channel: 0,
        };
        assert!(w.push(wide).is_err());
        let far = TdcEvent {
            count: 1,
            channel: 2,
        };
        assert!(w.push(far).is_err());
        assert_eq!(w.events(), 0);
    }
}
