//! Byte formats: every record that leaves or enters the board as bytes, and nothing else.
//!
//! One module frames them all ([`framing`]: version, [`RecordType`], sequence number, length,
//! CRC-32C and COBS, [`cobs`]), and each record type has its own file with the same three entry
//! points — `parse` (bytes to a value or a checked view), `emit` (value to bytes, returning the
//! length written) and `len`/`LEN` (its encoded length):
//!
//! | type | module | direction |
//! |---|---|---|
//! | 1 | [`key_block`] | board → post-processing host |
//! | 2 | [`summary`] | board → post-processing host |
//! | 3 | [`announce`] | receiver → transmitter (sifting link) |
//! | 4 | [`answers`] | transmitter → receiver (sifting link) |
//! | 5 | [`alarm`] | board → post-processing host |
//! | 6 | [`statistics`] | board → post-processing host |
//! | 7 | [`refill`] | post-processing host → board (authentication key) |
//! | 8 | [`round`] | both ways on the sifting link (one authentication tag per round) |
//! | 9 | [`round`] | board → post-processing host (a round's verdict: keep or discard its key) |
//!
//! [`tag`] computes the Wegman-Carter tag a frame of the sifting link carries after its payload.
//!
//! Every codec reads and writes through the one cursor pair of [`bytes`], whose errors are never
//! silent: a short buffer, a short payload or bytes left over are each a typed [`FrameError`].
//! `docs/frames.md` and `docs/wire-protocol.md` give every layout field by field.
//!
//! # Layering
//!
//! Imports point one way, and no module imports one that imports it back:
//!
//! ```text
//! value types   accounting, gates (Basis), tally, sift (Announcement),  import no format
//!               ingest (IngestCounts, IngestFault)
//!     ^
//! formats       framing, cobs, bytes, one file per record               bytes only
//!     ^
//! stages        frame_out (FrameOut), wire (ReceiverLink), counts, alarms
//!     ^
//! receiver      Receiver; Summary::of reads it into a summary record
//!     ^
//! monitor       stats (Monitor reads the receiver's traces)
//! ```
//!
//! Inside this module, [`cobs`] stands alone, [`framing`] uses it, [`bytes`] uses the error type
//! of [`framing`], and the record files use both ([`answers`] also reads the batch limit of
//! [`announce`]).

pub mod alarm;
pub mod announce;
pub mod answers;
pub mod bytes;
pub mod cobs;
pub mod framing;
pub mod key_block;
pub mod refill;
pub mod round;
pub mod statistics;
pub mod summary;
pub mod tag;

pub use alarm::{AlarmEvent, AlarmKind};
pub use announce::{AnnounceIter, AnnounceView, Report};
pub use answers::{AnswerEntry, AnswersView};
pub use bytes::{Reader, Writer};
pub use framing::{
    crc32c, decode_frame, encode_frame, encode_frame_tagged, seal_in_place, seal_in_place_tagged,
    Frame, FrameError, RecordType, CRC_LEN, HEADER_LEN, LINK_MAX_PAYLOAD, MAX_FRAME, MAX_PAYLOAD,
    MAX_RAW, TAG_LEN, VERSION, VERSION_TAGGED,
};
pub use key_block::{KeyBit, KeyBlock};
pub use statistics::Snapshot;
pub use summary::Summary;
