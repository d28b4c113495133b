//! The HIL setup file: everything the receiver needs before the first event, in a few hundred
//! bytes with a CRC, so the firmware can read it through any byte transport.
//!
//! Layout (all integers little-endian; offsets for C channels and G gates):
//!
//! | offset | size | field |
//! |---|---|---|
//! | 0 | 4 | magic `SWHL` |
//! | 4 | 1 | version, 1 |
//! | 5 | 1 | TDC counter width in bits (32..=64) |
//! | 6 | 4 | TDC resolution in ps (u32) |
//! | 10 | 8 | slot period in ps, Q32.32 raw bits (u64) |
//! | 18 | 8 | origin: time of slot 0's start in ps (u64) |
//! | 26 | 1 | number of intensity classes (1..=3) |
//! | 27 | 8 | answer timeout in slots (u64) |
//! | 35 | 1 | overflow policy: 0 = drop newest, 1 = drop oldest |
//! | 36 | 8 | squashing-rule seed (u64) |
//! | 44 | 1 | C: channels with a delay entry (0..=16) |
//! | 45 | 8·C | per-channel delay in ps (i64) |
//! | 45+8C | 1 | G: gates (1..=16) |
//! | 46+8C | 11·G | gate: channel u8, start u32 and end u32 (Q0.32 raw bits), basis u8 (0 = Z, 1 = X), bit u8 |
//! | 46+8C+11G | 4 | CRC-32/ISCSI over every byte before it |

use core::fmt;
use slotwise::clock::ClockError;
use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::formats::crc32c;
use slotwise::gates::{GateError, MAX_CHANNELS, MAX_GATES};
use slotwise::timestamps::UnwrapConfigError;
use slotwise::{
    Basis, ConfigError, FixedClock, Gate, GateTable, OverflowPolicy, ReceiverConfig, UnwrapConfig,
};

/// File magic.
pub const MAGIC: [u8; 4] = *b"SWHL";
/// Setup format version.
pub const SETUP_VERSION: u8 = 1;
/// Bytes per gate entry.
pub const GATE_LEN: usize = 11;
/// Largest setup file in bytes (16 channels, 16 gates).
pub const MAX_SETUP_LEN: usize = 46 + 8 * MAX_CHANNELS + GATE_LEN * MAX_GATES + 4;

/// Why a setup file could not be read or written.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SetupError {
    /// The file ends before this field.
    Truncated {
        /// Byte offset where the field starts.
        offset: usize,
        /// Field name.
        field: &'static str,
    },
    /// A field holds a value outside its range.
    BadField {
        /// Byte offset of the field.
        offset: usize,
        /// Field name.
        field: &'static str,
    },
    /// The CRC does not match.
    BadCrc {
        /// Byte offset of the CRC field.
        offset: usize,
    },
    /// Bytes after the CRC.
    TrailingBytes {
        /// Byte offset of the first extra byte.
        offset: usize,
    },
    /// The output buffer is too small.
    BufferTooSmall,
    /// The TDC description was refused by the core.
    Tdc(UnwrapConfigError),
    /// The gate table was refused by the core.
    Gates(GateError),
    /// The clock was refused by the core.
    Clock(ClockError),
    /// The receiver configuration was refused by the core.
    Config(ConfigError),
}

impl fmt::Display for SetupError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Truncated { offset, field } => {
                write!(f, "setup ends at byte {offset} before field {field}")
            }
            Self::BadField { offset, field } => {
                write!(f, "setup field {field} at byte {offset} out of range")
            }
            Self::BadCrc { offset } => write!(f, "setup crc at byte {offset} does not match"),
            Self::TrailingBytes { offset } => write!(f, "setup has extra bytes from {offset}"),
            Self::BufferTooSmall => write!(f, "setup buffer too small"),
            Self::Tdc(e) => write!(f, "setup TDC fields: {e}"),
            Self::Gates(e) => write!(f, "setup gate table: {e}"),
            Self::Clock(e) => write!(f, "setup period field: {e}"),
            Self::Config(e) => write!(f, "setup receiver fields: {e}"),
        }
    }
}

impl core::error::Error for SetupError {}

/// What the receiver needs before the first event.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Setup {
    /// TDC counter width and tick length.
    pub tdc: UnwrapConfig,
    /// Gate table with per-channel delays.
    pub gates: GateTable,
    /// Slot period in ps (Q32.32).
    pub period_ps: U32F32,
    /// Time at which slot 0 starts, in ps on the unwrapped time base.
    pub origin_ps: u64,
    /// Number of intensity classes.
    pub intensities: u8,
    /// Slots after which an unanswered announcement expires.
    pub answer_timeout_slots: u64,
    /// Full-queue policy.
    pub overflow: OverflowPolicy,
    /// Seed of the squashing rule's random bits.
    pub squash_seed: u64,
}

/// Bytes into a buffer; an overrun clears `ok` instead of panicking.
pub(crate) struct Writer<'a> {
    pub(crate) out: &'a mut [u8],
    pub(crate) at: usize,
    pub(crate) ok: bool,
}

impl Writer<'_> {
    /// Append the CRC-32/ISCSI of every byte written; the total length, or the buffer was short.
    pub(crate) fn seal(mut self) -> Result<usize, SetupError> {
        let crc = crc32c(self.out.get(..self.at).unwrap_or(&[]));
        self.put(&crc.to_le_bytes());
        if self.ok {
            Ok(self.at)
        } else {
            Err(SetupError::BufferTooSmall)
        }
    }

    pub(crate) fn put(&mut self, bytes: &[u8]) {
        match self.out.get_mut(self.at..self.at + bytes.len()) {
            Some(d) => d.copy_from_slice(bytes),
            None => self.ok = false,
        }
        self.at += bytes.len();
    }
}

/// Little-endian fields out of a byte slice; errors name the field and its offset.
pub(crate) struct Reader<'a> {
    pub(crate) bytes: &'a [u8],
    pub(crate) at: usize,
}

impl<'a> Reader<'a> {
    pub(crate) fn take(&mut self, n: usize, field: &'static str) -> Result<&'a [u8], SetupError> {
        let b = self
            .bytes
            .get(self.at..self.at + n)
            .ok_or(SetupError::Truncated {
                offset: self.at,
                field,
            })?;
        self.at += n;
        Ok(b)
    }
    pub(crate) fn u8(&mut self, field: &'static str) -> Result<u8, SetupError> {
        Ok(self.take(1, field)?.first().copied().unwrap_or(0))
    }
    pub(crate) fn arr<const N: usize>(
        &mut self,
        field: &'static str,
    ) -> Result<[u8; N], SetupError> {
        let mut a = [0u8; N];
        a.copy_from_slice(self.take(N, field)?);
        Ok(a)
    }
    pub(crate) fn u32(&mut self, field: &'static str) -> Result<u32, SetupError> {
        Ok(u32::from_le_bytes(self.arr(field)?))
    }
    pub(crate) fn u64(&mut self, field: &'static str) -> Result<u64, SetupError> {
        Ok(u64::from_le_bytes(self.arr(field)?))
    }
    /// The section's magic and version, each refused by name.
    pub(crate) fn header(
        &mut self,
        magic: [u8; 4],
        version: u8,
        [magic_field, version_field]: [&'static str; 2],
    ) -> Result<(), SetupError> {
        if self.arr::<4>(magic_field)? != magic {
            return Err(self.bad(4, magic_field));
        }
        if self.u8(version_field)? != version {
            return Err(self.bad(1, version_field));
        }
        Ok(())
    }

    /// The CRC-32/ISCSI over every byte before it, then the end of the bytes.
    pub(crate) fn crc_end(&mut self, field: &'static str) -> Result<(), SetupError> {
        let crc_at = self.at;
        let stored = self.u32(field)?;
        if stored != crc32c(self.bytes.get(..crc_at).unwrap_or(&[])) {
            return Err(SetupError::BadCrc { offset: crc_at });
        }
        if self.at != self.bytes.len() {
            return Err(SetupError::TrailingBytes { offset: self.at });
        }
        Ok(())
    }

    pub(crate) fn bad(&self, len: usize, field: &'static str) -> SetupError {
        SetupError::BadField {
            offset: self.at - len,
            field,
        }
    }
}

impl Setup {
    /// The core's receiver configuration.
    pub fn receiver_config(&self) -> Result<ReceiverConfig, SetupError> {
        ReceiverConfig::new(
            self.tdc,
            self.gates,
            self.intensities,
            self.answer_timeout_slots,
            self.overflow,
            self.squash_seed,
        )
        .map_err(SetupError::Config)
    }

    /// The clock handed in by configuration.
    pub fn clock(&self) -> Result<FixedClock, SetupError> {
        FixedClock::new(self.period_ps, self.origin_ps).map_err(SetupError::Clock)
    }

    /// Write the setup file into `out`; returns its length in bytes.
    pub fn encode(&self, out: &mut [u8]) -> Result<usize, SetupError> {
        let mut w = Writer {
            out,
            at: 0,
            ok: true,
        };
        w.put(&MAGIC);
        w.put(&[SETUP_VERSION, self.tdc.counter_bits()]);
        w.put(&self.tdc.resolution_ps().to_le_bytes());
        w.put(&self.period_ps.to_bits().to_le_bytes());
        w.put(&self.origin_ps.to_le_bytes());
        w.put(&[self.intensities]);
        w.put(&self.answer_timeout_slots.to_le_bytes());
        w.put(&[match self.overflow {
            OverflowPolicy::DropNewest => 0,
            OverflowPolicy::DropOldest => 1,
        }]);
        w.put(&self.squash_seed.to_le_bytes());
        let channels = self.gates.channels();
        w.put(&[channels]);
        for c in 0..channels {
            w.put(&self.gates.delay_ps(c).unwrap_or(0).to_le_bytes());
        }
        let gates = self.gates.gates();
        w.put(&[gates.len() as u8]);
        for g in gates {
            w.put(&[g.channel]);
            w.put(&g.start.to_bits().to_le_bytes());
            w.put(&g.end.to_bits().to_le_bytes());
            w.put(&[g.basis as u8, g.bit]);
        }
        w.seal()
    }

    /// Read and validate a setup file.
    pub fn decode(bytes: &[u8]) -> Result<Self, SetupError> {
        let mut r = Reader { bytes, at: 0 };
        r.header(MAGIC, SETUP_VERSION, ["magic", "version"])?;
        let counter_bits = r.u8("counter_bits")?;
        let resolution_ps = r.u32("resolution_ps")?;
        let tdc = UnwrapConfig::new(counter_bits, resolution_ps).map_err(SetupError::Tdc)?;
        let period_ps = U32F32::from_bits(r.u64("period_ps_q32_32")?);
        let origin_ps = r.u64("origin_ps")?;
        let intensities = r.u8("intensities")?;
        let answer_timeout_slots = r.u64("answer_timeout_slots")?;
        let overflow = match r.u8("overflow_policy")? {
            0 => OverflowPolicy::DropNewest,
            1 => OverflowPolicy::DropOldest,
            _ => return Err(r.bad(1, "overflow_policy")),
        };
        let squash_seed = r.u64("squash_seed")?;
        let channels = usize::from(r.u8("channels")?);
        if channels > MAX_CHANNELS {
            return Err(r.bad(1, "channels"));
        }
        let mut delays = [0i64; MAX_CHANNELS];
        for d in delays.iter_mut().take(channels) {
            *d = i64::from_le_bytes(r.arr("delay_ps")?);
        }
        let n_gates = usize::from(r.u8("gates")?);
        if n_gates == 0 || n_gates > MAX_GATES {
            return Err(r.bad(1, "gates"));
        }
        let mut gates = [Gate {
            channel: 0,
            start: U0F32::ZERO,
            end: U0F32::ZERO,
            basis: Basis::Z,
            bit: 0,
        }; MAX_GATES];
        for g in gates.iter_mut().take(n_gates) {
            g.channel = r.u8("gate.channel")?;
            g.start = U0F32::from_bits(r.u32("gate.start_q0_32")?);
            g.end = U0F32::from_bits(r.u32("gate.end_q0_32")?);
            g.basis = match r.u8("gate.basis")? {
                0 => Basis::Z,
                1 => Basis::X,
                _ => return Err(r.bad(1, "gate.basis")),
            };
            g.bit = r.u8("gate.bit")?;
        }
        r.crc_end("crc")?;
        let table = GateTable::new(
            delays.get(..channels).unwrap_or(&[]),
            gates.get(..n_gates).unwrap_or(&[]),
        )
        .map_err(SetupError::Gates)?;
        let setup = Self {
            tdc,
            gates: table,
            period_ps,
            origin_ps,
            intensities,
            answer_timeout_slots,
            overflow,
            squash_seed,
        };
        setup.receiver_config()?;
        setup.clock()?;
        Ok(setup)
    }
}
