//! The capture header: what the TDC was (counter width, tick length, channels), how the blocks
//! are sized, and the scenario that produced the data. Layout in `docs/capture-format.md`.

use super::error::{ErrorKind, Fault};
use super::{
    crc32c, DEFAULT_BLOCK_EVENTS, FLAGS_KNOWN_REQUIRED, FLAGS_REQUIRED_MASK, FORMAT_MAJOR,
    FORMAT_VERSION, MAGIC, MAX_BLOCK_EVENTS, MAX_HEADER_EXTENSION, MAX_METADATA_BYTES,
};
use slotwise::gates::{level_channel, MAX_LEVEL};
use slotwise::{GateTable, UnwrapConfig};

/// Offset of the format version (u16).
pub(crate) const OFF_VERSION: usize = 8;
/// Offset of the counter width in bits (u8).
pub(crate) const OFF_COUNTER_BITS: usize = 10;
/// Offset of the channel count (u8).
pub(crate) const OFF_CHANNEL_COUNT: usize = 11;
/// Offset of the TDC resolution in ps (u32).
pub(crate) const OFF_RESOLUTION: usize = 12;
/// Offset of the flags (u32).
pub(crate) const OFF_FLAGS: usize = 16;
/// Offset of the largest event count of a block (u32).
pub(crate) const OFF_MAX_BLOCK_EVENTS: usize = 20;
/// Offset of the declared block count (u64).
pub(crate) const OFF_BLOCK_COUNT: usize = 24;
/// Offset of the total header length (u32).
pub(crate) const OFF_HEADER_LEN: usize = 32;
/// Offset of the metadata length (u32).
pub(crate) const OFF_METADATA_LEN: usize = 36;
/// Length of the fixed part; the metadata starts here.
pub(crate) const FIXED_LEN: usize = 40;
/// Shortest header: fixed part plus CRC.
pub(crate) const MIN_HEADER_LEN: usize = FIXED_LEN + 4;

/// Everything the header says about a capture.
#[derive(Clone, Debug, PartialEq, Eq, serde::Serialize)]
pub struct CaptureHeader {
    /// Format version, major in the high byte; set by the reader, the writer always writes
    /// [`FORMAT_VERSION`].
    pub version: u16,
    /// TDC counter width in bits (32..=64); counter values wrap at 2^counter_bits.
    pub counter_bits: u8,
    /// Number of TDC channels; every event's channel is below it (1..=255).
    pub channel_count: u8,
    /// Length of one counter tick in picoseconds (≥ 1).
    pub resolution_ps: u32,
    /// Flag bits: low 16 must be understood by a reader, high 16 are advisory.
    pub flags: u32,
    /// Largest number of events in one block (1..=[`MAX_BLOCK_EVENTS`]); also the writer's block
    /// size.
    pub max_block_events: u32,
    /// Declared number of data blocks; 0 means unknown (a stream that could not be patched).
    pub block_count: u64,
    /// Scenario description (TOML text) or empty.
    pub metadata: String,
}

impl CaptureHeader {
    /// Check the receiver described for a replay (its TDC and its gate table) against this
    /// capture of file `name`. A different counter width or tick would turn the times into
    /// nonsense, so it is refused with both values named; channels the receiver does not describe
    /// are only warned about (their detections are counted `rejected_channel`).
    pub fn check_receiver(
        &self,
        tdc: &UnwrapConfig,
        gates: &GateTable,
        name: &str,
    ) -> Result<(), String> {
        let refuse = |field: &str, capture: u64, receiver: u64| {
            format!(
                "{name}: field '{field}': the capture says {capture}, the receiver description \
                 says {receiver}; replay with the description of the hardware that recorded it"
            )
        };
        if self.counter_bits != tdc.counter_bits() {
            let (c, r) = (self.counter_bits, tdc.counter_bits());
            return Err(refuse("counter_bits", c.into(), r.into()));
        }
        if self.resolution_ps != tdc.resolution_ps() {
            let (c, r) = (self.resolution_ps, tdc.resolution_ps());
            return Err(refuse("resolution_ps", c.into(), r.into()));
        }
        // With photon-number levels the channel byte carries the level too.
        let channels = match gates.photon_levels() {
            true => level_channel(gates.channels().saturating_sub(1), MAX_LEVEL).saturating_add(1),
            false => gates.channels(),
        };
        if self.channel_count > channels {
            eprintln!(
                "warning: {name}: field 'channel_count': the capture has {} channels, the receiver \
                 describes {channels}; detections on the others are counted rejected_channel",
                self.channel_count
            );
        }
        Ok(())
    }

    /// A header for a TDC with the given (validated) counter width and tick, and `channel_count`
    /// channels; default block size, no flags, no metadata, unknown block count.
    pub fn new(tdc: UnwrapConfig, channel_count: u8) -> Self {
        Self {
            version: FORMAT_VERSION,
            counter_bits: tdc.counter_bits(),
            channel_count,
            resolution_ps: tdc.resolution_ps(),
            flags: 0,
            max_block_events: DEFAULT_BLOCK_EVENTS,
            block_count: 0,
            metadata: String::new(),
        }
    }

    /// The same header with another block size in events.
    pub fn with_block_events(mut self, events: u32) -> Self {
        self.max_block_events = events;
        self
    }

    /// The same header with scenario metadata (TOML text).
    pub fn with_metadata(mut self, metadata: impl Into<String>) -> Self {
        self.metadata = metadata.into();
        self
    }

    /// The same header with the given flag bits set.
    pub fn with_flags(mut self, flags: u32) -> Self {
        self.flags |= flags;
        self
    }

    /// The TDC description for `slotwise::Unwrapper`, if counter width and tick are valid.
    pub fn unwrap_config(&self) -> Option<UnwrapConfig> {
        UnwrapConfig::new(self.counter_bits, self.resolution_ps).ok()
    }

    /// Mask of the valid counter bits (2^counter_bits − 1).
    pub fn counter_mask(&self) -> u64 {
        if self.counter_bits >= 64 {
            u64::MAX
        } else {
            (1u64 << self.counter_bits) - 1
        }
    }

    /// Check every field against the format's limits; the fault names the field's offset.
    pub(crate) fn validate(&self) -> Result<(), Fault> {
        let range = |off: usize, field, value: u64, min: u64, max: u64| {
            if value < min || value > max {
                Err(Fault::new(
                    off as u64,
                    field,
                    ErrorKind::OutOfRange { value, min, max },
                ))
            } else {
                Ok(())
            }
        };
        range(
            OFF_COUNTER_BITS,
            "counter_bits",
            self.counter_bits.into(),
            32,
            64,
        )?;
        range(
            OFF_CHANNEL_COUNT,
            "channel_count",
            self.channel_count.into(),
            1,
            255,
        )?;
        range(
            OFF_RESOLUTION,
            "resolution_ps",
            self.resolution_ps.into(),
            1,
            u32::MAX.into(),
        )?;
        let unknown = self.flags & FLAGS_REQUIRED_MASK & !FLAGS_KNOWN_REQUIRED;
        if unknown != 0 {
            return Err(Fault::new(
                OFF_FLAGS as u64,
                "flags",
                ErrorKind::UnknownFlags { bits: unknown },
            ));
        }
        range(
            OFF_MAX_BLOCK_EVENTS,
            "max_block_events",
            self.max_block_events.into(),
            1,
            MAX_BLOCK_EVENTS.into(),
        )?;
        range(
            FIXED_LEN,
            "metadata",
            self.metadata.len() as u64,
            0,
            MAX_METADATA_BYTES.into(),
        )
    }

    /// The header's bytes, CRC included, as format version [`FORMAT_VERSION`] lays them out.
    pub(crate) fn encode(&self) -> Vec<u8> {
        let meta = self.metadata.as_bytes();
        let header_len = MIN_HEADER_LEN + meta.len();
        let mut b = Vec::with_capacity(header_len);
        b.extend_from_slice(&MAGIC);
        b.extend_from_slice(&FORMAT_VERSION.to_le_bytes());
        b.push(self.counter_bits);
        b.push(self.channel_count);
        b.extend_from_slice(&self.resolution_ps.to_le_bytes());
        b.extend_from_slice(&self.flags.to_le_bytes());
        b.extend_from_slice(&self.max_block_events.to_le_bytes());
        b.extend_from_slice(&self.block_count.to_le_bytes());
        b.extend_from_slice(&(header_len as u32).to_le_bytes());
        b.extend_from_slice(&(meta.len() as u32).to_le_bytes());
        b.extend_from_slice(meta);
        let crc = crc32c(&b);
        b.extend_from_slice(&crc.to_le_bytes());
        b
    }
}

/// Name of the header field that contains byte `offset` (for truncation reports).
pub(crate) fn field_at(offset: usize, header_len: usize) -> &'static str {
    match offset {
        0..=7 => "magic",
        8..=9 => "version",
        10 => "counter_bits",
        11 => "channel_count",
        12..=15 => "resolution_ps",
        16..=19 => "flags",
        20..=23 => "max_block_events",
        24..=31 => "block_count",
        32..=35 => "header_length",
        36..=39 => "metadata_length",
        o if o + 4 >= header_len.max(MIN_HEADER_LEN) => "header_crc",
        _ => "metadata",
    }
}

/// Little-endian integer fields from a slice the caller has length-checked.
pub(crate) fn le_u16(b: &[u8], at: usize) -> u16 {
    u16::from_le_bytes(arr(b, at))
}

/// See [`le_u16`].
pub(crate) fn le_u32(b: &[u8], at: usize) -> u32 {
    u32::from_le_bytes(arr(b, at))
}

/// See [`le_u16`].
pub(crate) fn le_u64(b: &[u8], at: usize) -> u64 {
    u64::from_le_bytes(arr(b, at))
}

/// `N` bytes at `at`, zeros where the slice is short (callers check lengths first).
pub(crate) fn arr<const N: usize>(b: &[u8], at: usize) -> [u8; N] {
    let mut out = [0u8; N];
    if let Some(src) = b.get(at..at.saturating_add(N)) {
        out.copy_from_slice(src);
    }
    out
}

/// Check magic and version on however many leading bytes are present (`at_eof`: no more come).
pub(crate) fn check_prefix(b: &[u8], at_eof: bool) -> Result<(), Fault> {
    if b.is_empty() && at_eof {
        return Err(Fault::new(0, "magic", ErrorKind::Empty));
    }
    let n = b.len().min(MAGIC.len());
    if b.get(..n) != MAGIC.get(..n) {
        return Err(Fault::new(
            0,
            "magic",
            ErrorKind::BadMagic {
                found: b.get(..n).unwrap_or_default().to_vec(),
            },
        ));
    }
    if b.len() >= OFF_VERSION + 2 {
        let version = le_u16(b, OFF_VERSION);
        if version >> 8 > u16::from(FORMAT_MAJOR) {
            return Err(Fault::new(
                OFF_VERSION as u64,
                "version",
                ErrorKind::UnsupportedVersion { found: version },
            ));
        }
    }
    Ok(())
}

/// Header length from the fixed part, checked against the metadata length and the limits.
pub(crate) fn header_len(fixed: &[u8]) -> Result<usize, Fault> {
    let meta_len = le_u32(fixed, OFF_METADATA_LEN);
    if meta_len > MAX_METADATA_BYTES {
        return Err(Fault::new(
            OFF_METADATA_LEN as u64,
            "metadata_length",
            ErrorKind::OutOfRange {
                value: meta_len.into(),
                min: 0,
                max: MAX_METADATA_BYTES.into(),
            },
        ));
    }
    let len = le_u32(fixed, OFF_HEADER_LEN) as usize;
    let min = MIN_HEADER_LEN + meta_len as usize;
    let max = min + MAX_HEADER_EXTENSION as usize;
    if len < min || len > max {
        return Err(Fault::new(
            OFF_HEADER_LEN as u64,
            "header_length",
            ErrorKind::OutOfRange {
                value: len as u64,
                min: min as u64,
                max: max as u64,
            },
        ));
    }
    Ok(len)
}

/// Decode a complete header of `b.len()` bytes (as given by [`header_len`]): CRC first, then
/// the fields' meaning. Bytes between the metadata and the CRC (a newer minor version's
/// extension) are covered by the CRC and otherwise ignored.
pub(crate) fn decode(b: &[u8]) -> Result<CaptureHeader, Fault> {
    let crc_at = b.len().saturating_sub(4);
    let stored = le_u32(b, crc_at);
    let computed = crc32c(b.get(..crc_at).unwrap_or_default());
    if stored != computed {
        return Err(Fault::new(
            crc_at as u64,
            "header_crc",
            ErrorKind::CrcMismatch {
                stored,
                computed,
                covered_from: 0,
            },
        ));
    }
    let meta_len = le_u32(b, OFF_METADATA_LEN) as usize;
    let meta = b
        .get(FIXED_LEN..FIXED_LEN + meta_len)
        .unwrap_or_default()
        .to_vec();
    let metadata = String::from_utf8(meta).map_err(|e| {
        Fault::new(
            FIXED_LEN as u64,
            "metadata",
            ErrorKind::NotUtf8 {
                valid_up_to: e.utf8_error().valid_up_to() as u64,
            },
        )
    })?;
    let header = CaptureHeader {
        version: le_u16(b, OFF_VERSION),
        counter_bits: b.get(OFF_COUNTER_BITS).copied().unwrap_or_default(),
        channel_count: b.get(OFF_CHANNEL_COUNT).copied().unwrap_or_default(),
        resolution_ps: le_u32(b, OFF_RESOLUTION),
        flags: le_u32(b, OFF_FLAGS),
        max_block_events: le_u32(b, OFF_MAX_BLOCK_EVENTS),
        block_count: le_u64(b, OFF_BLOCK_COUNT),
        metadata,
    };
    header.validate()?;
    Ok(header)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn header() -> CaptureHeader {
        CaptureHeader::new(UnwrapConfig::new(48, 1).unwrap(), 2).with_metadata("name = \"x\"")
    }

    #[test]
    fn encode_decode_round_trip() {
        let h = header();
        let b = h.encode();
        assert_eq!(b.len(), MIN_HEADER_LEN + h.metadata.len());
        assert_eq!(header_len(&b).unwrap(), b.len());
        assert_eq!(decode(&b).unwrap(), h);
    }

    #[test]
    fn minor_extension_is_skipped() {
        // A future 1.1 writer may put bytes between metadata and CRC.
        let h = header();
        let mut b = h.encode();
        b.truncate(b.len() - 4);
        b.extend_from_slice(&[7, 7, 7]);
        let len = b.len() + 4;
        b[OFF_HEADER_LEN..OFF_HEADER_LEN + 4].copy_from_slice(&(len as u32).to_le_bytes());
        b[OFF_VERSION] = 1;
        let crc = crc32c(&b);
        b.extend_from_slice(&crc.to_le_bytes());
        assert_eq!(header_len(&b).unwrap(), len);
        let got = decode(&b).unwrap();
        assert_eq!(got.version, 0x0101);
        assert_eq!(got.metadata, h.metadata);
    }

    #[test]
    fn field_names_by_offset() {
        assert_eq!(field_at(0, 44), "magic");
        assert_eq!(field_at(9, 44), "version");
        assert_eq!(field_at(30, 44), "block_count");
        assert_eq!(field_at(40, 44), "header_crc");
        assert_eq!(field_at(40, 50), "metadata");
        assert_eq!(field_at(46, 50), "header_crc");
    }
}
