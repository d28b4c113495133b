//! Stage 9 — the sifting conversation with the transmitter over a framed byte link.
//!
//! Sifting needs the transmitter's answers, and the classical link that carries them (a UART, SPI,
//! a pipe) loses, repeats, reorders and damages bytes. This stage speaks the link through the
//! `embedded-io` [`Read`](embedded_io::Read) / [`Write`](embedded_io::Write) traits with the frame
//! of [`crate::formats`] (COBS, CRC-32/ISCSI, sequence number): the receiver batches its
//! announcements into [`RecordType::Announce`](crate::formats::RecordType::Announce) frames, the
//! transmitter answers each with one [`RecordType::Answers`](crate::formats::RecordType::Answers)
//! frame, and every bad byte ends in a typed [`Reject`] counter, never a panic.
//!
//! Both sides must end with the same sifted slots although frames are lost. The receiver decides
//! the fate of each announce frame — answered, or expired after `answer_timeout_slots` — and
//! reports it back in every later announce frame (a resolved-below cursor and a 64-frame bitmap,
//! the selective-acknowledgement idea of TCP, RFC 2018); the transmitter keeps a bit only when the
//! report says its answers were used. `docs/wire-protocol.md` is the contract for the
//! transmitter team, field by field.
//!
//! - The two payloads are [`crate::formats::announce`] and [`crate::formats::answers`].
//! - [`decoder`]: a streaming frame decoder that resynchronises at each 0x00.
//! - [`seqwin`]: sequence-number bookkeeping (gaps, duplicates, late frames).
//! - [`endpoint`]: [`ReceiverLink`], the receiver's side, a [`Transmitter`](crate::Transmitter);
//!   its settings and counters are in [`config`].
//! - [`auth`] and [`keypool`]: Wegman-Carter authentication of every frame both ways
//!   ([`LinkAuth`]), with a bounded pool of one-time-pad words that fails closed; [`round`]:
//!   or one tag per round of frames over the agreed sifting outcome ([`RoundLedger`]).

pub mod auth;
pub mod config;
pub mod decoder;
pub mod endpoint;
pub mod keypool;
pub mod round;
pub mod seqwin;

pub use crate::formats::announce::{AnnounceView, Report};
pub use crate::formats::answers::{AnswerEntry, AnswersView};
pub use auth::{
    check_frame, widen_seq, AuthConfig, AuthConfigError, AuthCounters, LinkAuth, RefillFrameError,
};
pub use config::{LinkConfig, LinkConfigError, LinkCounters};
pub use decoder::FrameDecoder;
pub use endpoint::ReceiverLink;
pub use keypool::{KeyPool, PadState, PoolCounters, RefillError};
pub use round::{RoundConfigError, RoundCounters, RoundFailure, RoundLedger};
pub use seqwin::{SeqClass, SeqWindow};

use crate::formats::FrameError;
use core::fmt;

/// Why an incoming frame, or its contents, was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Reject {
    /// Byte stuffing broken (a block runs past the frame's end).
    Cobs,
    /// Fewer bytes than the header and CRC need, or a record ends before its fields.
    Truncated,
    /// CRC-32/ISCSI does not match.
    BadCrc,
    /// Version byte other than [`crate::formats::VERSION`].
    UnknownVersion,
    /// Type code not known.
    UnknownType,
    /// Declared payload length above [`crate::formats::MAX_PAYLOAD`].
    Oversized,
    /// Declared payload length differs from the bytes present.
    LengthMismatch,
    /// More stuffed bytes than the largest frame without a delimiter.
    Overlong,
    /// A payload field out of range (varint, reserved bits, counts).
    BadField,
    /// A valid frame of a type this side does not take (e.g. a key block on the link).
    UnexpectedType,
    /// Sequence number seen before (within the last 64 frames).
    DuplicateFrame,
    /// Answers for an announce frame never sent.
    NeverAnnounced,
    /// Answers for an announce frame already answered.
    DuplicateAnswers,
    /// Answers for an announce frame already expired (too late).
    LateAnswers,
    /// Answers whose slot count or first slot differ from the announce frame's.
    SlotMismatch,
    /// Authentication tag does not match (forged or altered frame, or a wrong key).
    BadTag,
    /// The frame's pad word is already spent or abandoned (a replay, or a frame held back past
    /// its announce frame's fate).
    Replayed,
    /// No pad word for the frame (beyond the key loaded), or the link has stopped.
    NoKey,
    /// A frame without a tag on an authenticated link, or with one on an unauthenticated link.
    Untagged,
}

impl Reject {
    /// Every reason, in the order of [`RejectCounts::fields`].
    pub const ALL: [Reject; 19] = [
        Self::Cobs,
        Self::Truncated,
        Self::BadCrc,
        Self::UnknownVersion,
        Self::UnknownType,
        Self::Oversized,
        Self::LengthMismatch,
        Self::Overlong,
        Self::BadField,
        Self::UnexpectedType,
        Self::DuplicateFrame,
        Self::NeverAnnounced,
        Self::DuplicateAnswers,
        Self::LateAnswers,
        Self::SlotMismatch,
        Self::BadTag,
        Self::Replayed,
        Self::NoKey,
        Self::Untagged,
    ];

    /// The reasons of the authentication check (a refusal for one of them counts towards the
    /// attack alarm).
    pub const AUTH: [Reject; 4] = [Self::BadTag, Self::Replayed, Self::NoKey, Self::Untagged];

    /// Short snake-case name for reports.
    pub const fn name(self) -> &'static str {
        match self {
            Self::Cobs => "cobs",
            Self::Truncated => "truncated",
            Self::BadCrc => "bad_crc",
            Self::UnknownVersion => "unknown_version",
            Self::UnknownType => "unknown_type",
            Self::Oversized => "oversized",
            Self::LengthMismatch => "length_mismatch",
            Self::Overlong => "overlong",
            Self::BadField => "bad_field",
            Self::UnexpectedType => "unexpected_type",
            Self::DuplicateFrame => "duplicate_frame",
            Self::NeverAnnounced => "never_announced",
            Self::DuplicateAnswers => "duplicate_answers",
            Self::LateAnswers => "late_answers",
            Self::SlotMismatch => "slot_mismatch",
            Self::BadTag => "bad_tag",
            Self::Replayed => "replayed",
            Self::NoKey => "no_key",
            Self::Untagged => "untagged",
        }
    }
}

impl From<FrameError> for Reject {
    fn from(e: FrameError) -> Self {
        match e {
            FrameError::Cobs { .. } => Self::Cobs,
            FrameError::Truncated { .. }
            | FrameError::TruncatedField { .. }
            | FrameError::BufferTooSmall { .. } => Self::Truncated,
            FrameError::BadCrc { .. } => Self::BadCrc,
            FrameError::UnknownVersion(_) => Self::UnknownVersion,
            FrameError::UnknownType(_) => Self::UnknownType,
            FrameError::Oversized(_) | FrameError::PayloadTooLong { .. } => Self::Oversized,
            FrameError::LengthMismatch { .. } => Self::LengthMismatch,
            FrameError::Overlong { .. } => Self::Overlong,
            FrameError::BadField { .. } => Self::BadField,
        }
    }
}

impl fmt::Display for Reject {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl core::error::Error for Reject {}

/// Refused frames by reason (index = position in [`Reject::ALL`]).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RejectCounts(pub [u64; Reject::ALL.len()]);

impl RejectCounts {
    /// All zero.
    pub const fn new() -> Self {
        Self([0; Reject::ALL.len()])
    }

    /// Count one refusal.
    pub fn add(&mut self, r: Reject) {
        if let Some(c) = self.0.get_mut(r as usize) {
            *c += 1;
        }
    }

    /// Refusals for one reason.
    pub fn get(&self, r: Reject) -> u64 {
        self.0.get(r as usize).copied().unwrap_or(0)
    }

    /// Sum over every reason.
    pub fn total(&self) -> u64 {
        self.0.iter().sum()
    }

    /// (name, count) pairs in a fixed order, for reports.
    pub fn fields(&self) -> [(&'static str, u64); Reject::ALL.len()] {
        let mut out = [("", 0u64); Reject::ALL.len()];
        for (o, r) in out.iter_mut().zip(Reject::ALL) {
            *o = (r.name(), self.get(r));
        }
        out
    }
}

#[cfg(test)]
mod tests;
