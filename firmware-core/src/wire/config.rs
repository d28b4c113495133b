//! Settings and counters of the receiver's end of the link ([`super::ReceiverLink`]).

use super::RejectCounts;
use core::fmt;

/// Why a link configuration was refused.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LinkConfigError {
    /// Answer timeout of zero slots.
    ZeroTimeout,
    /// A batch limit of zero announcements.
    ZeroBatch,
}

impl fmt::Display for LinkConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::ZeroTimeout => write!(f, "answer_timeout_slots must be at least 1"),
            Self::ZeroBatch => write!(f, "max_batch must be at least 1"),
        }
    }
}

impl core::error::Error for LinkConfigError {}

/// Validated settings of a [`ReceiverLink`](super::ReceiverLink).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LinkConfig {
    answer_timeout_slots: u64,
    flush_age_slots: u64,
    max_batch: usize,
}

impl LinkConfig {
    /// `answer_timeout_slots`: a frame expires when the newest announced slot is more than this
    /// after its last slot; `flush_age_slots`: a batch leaves before a slot this far after its
    /// first joins it.
    pub const fn new(
        answer_timeout_slots: u64,
        flush_age_slots: u64,
    ) -> Result<Self, LinkConfigError> {
        if answer_timeout_slots == 0 {
            return Err(LinkConfigError::ZeroTimeout);
        }
        Ok(Self {
            answer_timeout_slots,
            flush_age_slots,
            max_batch: usize::MAX,
        })
    }

    /// The same settings with at most `max_batch` announcements per frame (the endpoint's
    /// `BATCH` still caps it): fewer, larger frames spend fewer authentication tags.
    pub const fn with_max_batch(self, max_batch: usize) -> Result<Self, LinkConfigError> {
        if max_batch == 0 {
            return Err(LinkConfigError::ZeroBatch);
        }
        Ok(Self { max_batch, ..self })
    }

    /// Most announcements per frame (before the endpoint's `BATCH` cap).
    pub const fn max_batch(&self) -> usize {
        self.max_batch
    }

    /// Slots after which an unanswered frame expires.
    pub const fn answer_timeout_slots(&self) -> u64 {
        self.answer_timeout_slots
    }

    /// Largest slot span of one batch.
    pub const fn flush_age_slots(&self) -> u64 {
        self.flush_age_slots
    }
}

/// What the receiver's end of the link did; announcements sent = answered + expired + waiting.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LinkCounters {
    /// Frames written (announce frames and final reports).
    pub frames_out: u64,
    /// Bytes written, delimiters included.
    pub bytes_out: u64,
    /// Frames the writer refused (they count as sent and lost).
    pub write_errors: u64,
    /// Announcements put into sent frames.
    pub announcements: u64,
    /// Announcements not sent (slot ≥ 2^63, out of order, after close, or no room).
    pub refused_announcements: u64,
    /// Bytes read.
    pub bytes_in: u64,
    /// Calls to the reader that failed.
    pub read_errors: u64,
    /// Answers frames with a good CRC and payload (before sequence and content checks).
    pub frames_in: u64,
    /// Refused frames and contents, by reason.
    pub rejected: RejectCounts,
    /// Sequence numbers skipped over (frames missing at the time; late arrivals fill some).
    pub seq_gaps: u64,
    /// Frames arriving behind the highest sequence number (reordered).
    pub late_frames: u64,
    /// Frames older than the sequence window (checked on content only).
    pub too_old_frames: u64,
    /// Announce frames answered (their answers handed to the receiver).
    pub answered_frames: u64,
    /// Answers handed to the receiver.
    pub answers_in: u64,
    /// Announce frames expired unanswered.
    pub expired_frames: u64,
    /// Announcements in expired frames.
    pub expired_announcements: u64,
    /// Expired frames that were pushed out early for room (included in `expired_frames`).
    pub evicted_frames: u64,
}

impl LinkCounters {
    /// Sequence numbers never seen: gaps not filled by late frames.
    pub const fn missing_frames(&self) -> u64 {
        self.seq_gaps.saturating_sub(self.late_frames)
    }
}
