//! The profile blob: a receiver profile compiled to bytes (`slotwise profile compile`), so board
//! code — Rust or C — never builds gate tables or clock settings by hand.
//!
//! A blob is three sections back to back, each with its own magic, version and CRC-32/ISCSI:
//!
//! 1. the setup file ([`crate::setup`], magic `SWHL`): TDC, gate table, sifting;
//! 2. the board file ([`crate::board`], magic `SWHB`): recovered clock, hint, link, monitor,
//!    alarms;
//! 3. optionally, the raw-word layout (magic `SWHW`) of the TDC's FIFO records, needed only to
//!    push raw words rather than events:
//!
//! | offset | size | field |
//! |---|---|---|
//! | 0 | 4 | magic `SWHW` |
//! | 4 | 1 | version, 1 |
//! | 5 | 1 | record bytes (4 or 8) |
//! | 6 | 1 | byte order: 0 = little endian, 1 = big endian |
//! | 7 | 2 | time field: offset, width (bits) |
//! | 9 | 2 | channel field: offset, width |
//! | 11 | 1 | highest channel handed out |
//! | 12 | 1 | kind field present: 0 = no, 1 = yes |
//! | 13 | 2 | kind field: offset, width |
//! | 15 | 1 | kind value of an event |
//! | 16 | 1 | kind value of a rollover |
//! | 17 | 2 | rollover-count field: offset, width |
//! | 19 | 4 | CRC-32/ISCSI over every byte before it |
//!
//! Field meanings are those of [`slotwise::words`]; the layout is checked by
//! [`WordFormat::new`] when the blob is read.

use crate::board::{BoardError, BoardSettings, BOARD_LEN};
use crate::setup::{Reader, Setup, SetupError, Writer, GATE_LEN};
use slotwise::words::{BitField, Endian, KindField, WordFormat, WordLayout};

/// Magic of the raw-word layout section.
pub const WORDS_MAGIC: [u8; 4] = *b"SWHW";
/// Version of the raw-word layout section.
pub const WORDS_VERSION: u8 = 1;
/// Bytes of the raw-word layout section.
pub const WORDS_LEN: usize = 23;
/// Largest blob in bytes.
pub const MAX_BLOB_LEN: usize = crate::setup::MAX_SETUP_LEN + BOARD_LEN + WORDS_LEN;

/// What a profile blob holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ProfileBlob {
    /// TDC, gate table, sifting.
    pub setup: Setup,
    /// Recovered clock, hint, link, monitor, alarms.
    pub board: BoardSettings,
    /// Raw-word layout of the TDC's records, when raw words are pushed.
    pub words: Option<WordFormat>,
}

/// Length of the setup section that starts `bytes`, from its channel and gate counts.
fn setup_len(bytes: &[u8]) -> Result<usize, SetupError> {
    let mut r = Reader { bytes, at: 44 };
    let channels = usize::from(r.u8("channels")?);
    r.at = 45 + 8 * channels;
    let gates = usize::from(r.u8("gates")?);
    Ok(46 + 8 * channels + GATE_LEN * gates + 4)
}

impl ProfileBlob {
    /// Read and check a blob; errors name the section's field and its byte offset in the blob.
    pub fn decode(bytes: &[u8]) -> Result<Self, BoardError> {
        // A blob too short to give its setup length is read whole, so the setup's own check
        // names the first bad field (its magic, say).
        let n = setup_len(bytes).unwrap_or(bytes.len()).min(bytes.len());
        let (s, rest) = bytes.split_at(n);
        let setup = Setup::decode(s)?;
        let (b, w) = rest.split_at(BOARD_LEN.min(rest.len()));
        let board = BoardSettings::decode(b).map_err(|e| shift(e, n))?;
        let words = if w.is_empty() {
            None
        } else {
            Some(decode_words(w).map_err(|e| shift(e.into(), n + BOARD_LEN))?)
        };
        Ok(Self {
            setup,
            board,
            words,
        })
    }

    /// Write the blob into `out`; returns its length.
    pub fn encode(&self, out: &mut [u8]) -> Result<usize, BoardError> {
        let n = self.setup.encode(out)?;
        let m = self
            .board
            .encode(out.get_mut(n..).ok_or(SetupError::BufferTooSmall)?)?;
        let Some(f) = self.words else {
            return Ok(n + m);
        };
        let rest = out.get_mut(n + m..).ok_or(SetupError::BufferTooSmall)?;
        Ok(n + m + encode_words(f.layout(), rest)?)
    }
}

/// An error's offsets moved by `by` bytes (a section's offsets are relative to its start).
fn shift(e: BoardError, by: usize) -> BoardError {
    let moved = |s: SetupError| match s {
        SetupError::Truncated { offset, field } => SetupError::Truncated {
            offset: offset + by,
            field,
        },
        SetupError::BadField { offset, field } => SetupError::BadField {
            offset: offset + by,
            field,
        },
        SetupError::BadCrc { offset } => SetupError::BadCrc {
            offset: offset + by,
        },
        SetupError::TrailingBytes { offset } => SetupError::TrailingBytes {
            offset: offset + by,
        },
        other => other,
    };
    match e {
        BoardError::Layout(s) => BoardError::Layout(moved(s)),
        other => other,
    }
}

fn encode_words(l: &WordLayout, out: &mut [u8]) -> Result<usize, SetupError> {
    let mut w = Writer {
        out,
        at: 0,
        ok: true,
    };
    let k = l.kind.unwrap_or(KindField {
        field: BitField::new(0, 0),
        event: 0,
        rollover: 0,
        rollover_count: BitField::new(0, 0),
    });
    w.put(&WORDS_MAGIC);
    w.put(&[
        WORDS_VERSION,
        l.record_bytes,
        u8::from(l.endian == Endian::Big),
    ]);
    w.put(&[
        l.time.offset,
        l.time.width,
        l.channel.offset,
        l.channel.width,
    ]);
    w.put(&[l.max_channel, u8::from(l.kind.is_some())]);
    w.put(&[k.field.offset, k.field.width, k.event, k.rollover]);
    w.put(&[k.rollover_count.offset, k.rollover_count.width]);
    w.seal()
}

fn decode_words(bytes: &[u8]) -> Result<WordFormat, SetupError> {
    let mut r = Reader { bytes, at: 0 };
    r.header(WORDS_MAGIC, WORDS_VERSION, ["words.magic", "words.version"])?;
    let record_bytes = r.u8("words.record_bytes")?;
    let endian = match r.u8("words.endian")? {
        0 => Endian::Little,
        1 => Endian::Big,
        _ => return Err(r.bad(1, "words.endian")),
    };
    let mut field = |name| -> Result<BitField, SetupError> {
        let [o, w] = r.arr::<2>(name)?;
        Ok(BitField::new(o, w))
    };
    let time = field("words.time")?;
    let channel = field("words.channel")?;
    let max_channel = r.u8("words.max_channel")?;
    let present = r.u8("words.kind_present")?;
    let [ko, kw] = r.arr::<2>("words.kind")?;
    let event = r.u8("words.kind_event")?;
    let rollover = r.u8("words.kind_rollover")?;
    let [co, cw] = r.arr::<2>("words.rollover_count")?;
    let kind = match present {
        0 => None,
        1 => Some(KindField {
            field: BitField::new(ko, kw),
            event,
            rollover,
            rollover_count: BitField::new(co, cw),
        }),
        _ => {
            return Err(SetupError::BadField {
                offset: 12,
                field: "words.kind_present",
            })
        }
    };
    r.crc_end("words.crc")?;
    WordFormat::new(WordLayout {
        record_bytes,
        endian,
        time,
        channel,
        kind,
        max_channel,
    })
    .map_err(|_| SetupError::BadField {
        offset: 5,
        field: "words.layout",
    })
}
