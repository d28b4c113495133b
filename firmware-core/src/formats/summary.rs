//! Summary record (type 2): every counter of the receiver at one moment, as little-endian u64
//! words.
//!
//! Word order: detections in, sifted bits, the accounting (through [`Accounting::to_words`] and
//! [`Accounting::from_words`], so the record follows that struct without naming its fields), the
//! multi-click events, the answer errors, the single-click and multi-click tallies (row-major),
//! key blocks and frame errors; then the format word ([`FORMAT`]) and the board's ingest
//! counters ([`IngestCounts::to_words`]). `docs/frames.md` lists every word's offset. The receiver
//! fills one with `Summary::of` (in `receiver`, which sits above this module).
//!
//! # Versions
//!
//! Format 1 is the first [`V1_WORDS`] words alone and carries no format word. Format 2 appends
//! words, never moves one: a reader of format 1 refuses a format-2 record by its length rather
//! than misread it, and [`Summary::parse`] reads both (a format-1 record has zero ingest
//! counters). A later format appends after these words and raises the format word; a reader
//! refuses a format word it does not know, naming the field.

use super::bytes::{Reader, Writer};
use super::framing::{FrameError, MAX_PAYLOAD};
use crate::accounting::{Accounting, AnswerErrors, MultiClickEvents};
use crate::gates::MAX_INTENSITIES;
use crate::ingest::IngestCounts;
use crate::tally::Tally;

/// Words of one tally: counts per (tx basis, tx bit, intensity, rx basis, rx bit), then the
/// untested counts per (intensity, basis).
const TALLY_WORDS: usize = 2 * 2 * MAX_INTENSITIES * 2 * 2 + MAX_INTENSITIES * 2;
/// Number of u64 words in a format-1 summary payload (no format word, no ingest counters).
pub const V1_WORDS: usize = 2 + Accounting::WORDS + 5 + 2 + 2 * TALLY_WORDS + 2;
/// Bytes of a format-1 summary payload.
pub const V1_LEN: usize = 8 * V1_WORDS;
/// Format this code writes, in the word after the format-1 words.
pub const FORMAT: u64 = 2;
/// Number of u64 words in a summary payload as written: format 1, the format word, the ingest
/// counters.
pub const WORDS: usize = V1_WORDS + 1 + IngestCounts::WORDS;
/// Bytes of a summary payload as written.
pub const LEN: usize = 8 * WORDS;

/// Names of the ingest words in a format-2 payload, for errors, in wire order.
const INGEST_FIELDS: [&str; IngestCounts::WORDS] = [
    "ingest.overrun_words",
    "ingest.fifo_full_flags",
    "ingest.rollover_gaps",
    "ingest.malformed_words",
    "ingest.blocks",
];

const _: () = assert!(LEN == MAX_PAYLOAD);

/// Every counter of a receiver at one moment: the payload of a
/// [`RecordType::Summary`](super::RecordType::Summary) frame.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Summary {
    /// Detections taken in.
    pub detections_in: u64,
    /// Sifted bits produced.
    pub sifted_bits: u64,
    /// Where every detection went.
    pub accounting: Accounting,
    /// Multi-click slot events by outcome.
    pub multi: MultiClickEvents,
    /// Problems with the transmitter's answers.
    pub answer_errors: AnswerErrors,
    /// Tally of single-click slots.
    pub tally: Tally,
    /// Tally of squashed multi-click slots.
    pub multi_tally: Tally,
    /// Key-block frames emitted before this summary.
    pub key_blocks: u64,
    /// Frames that could not be built (0 unless a buffer is misconfigured).
    pub frame_errors: u64,
    /// The board's raw-word ingest counters (all zero when the receiver was fed events
    /// directly, or the record is format 1).
    pub ingest: IngestCounts,
}

fn tally_words(t: &Tally, out: &mut impl FnMut(u64)) {
    t.counts
        .iter()
        .flatten()
        .flatten()
        .flatten()
        .flatten()
        .for_each(|&c| out(c));
    t.untested.iter().flatten().for_each(|&c| out(c));
}

fn parse_tally(r: &mut Reader<'_>) -> Result<Tally, FrameError> {
    let mut t = Tally::new();
    for c in t.counts.iter_mut().flatten().flatten().flatten().flatten() {
        *c = r.u64()?;
    }
    for c in t.untested.iter_mut().flatten() {
        *c = r.u64()?;
    }
    Ok(t)
}

impl Summary {
    fn for_each_word(&self, mut out: impl FnMut(u64)) {
        out(self.detections_in);
        out(self.sifted_bits);
        self.accounting.to_words().iter().for_each(|&v| out(v));
        let m = &self.multi;
        [
            m.sifted,
            m.basis_mismatch,
            m.queue_overflow,
            m.unanswered,
            m.cross_basis,
        ]
        .iter()
        .for_each(|&v| out(v));
        out(self.answer_errors.unmatched);
        out(self.answer_errors.malformed);
        tally_words(&self.tally, &mut out);
        tally_words(&self.multi_tally, &mut out);
        out(self.key_blocks);
        out(self.frame_errors);
        out(FORMAT);
        self.ingest.to_words().iter().for_each(|&v| out(v));
    }

    /// The same summary with the board's ingest counters.
    pub const fn with_ingest(self, counts: IngestCounts) -> Self {
        Self {
            ingest: counts,
            ..self
        }
    }

    /// Write the payload ([`LEN`] bytes) into `out`; returns its length.
    pub fn emit(&self, out: &mut [u8]) -> Result<usize, FrameError> {
        let dst = out
            .get_mut(..LEN)
            .ok_or(FrameError::BufferTooSmall { needed: LEN })?;
        let mut w = Writer::new(dst);
        let mut done = Ok(());
        self.for_each_word(|v| {
            if done.is_ok() {
                done = w.u64(v);
            }
        });
        done?;
        Ok(w.finish())
    }

    /// Read a summary payload: format 1 (exactly [`V1_LEN`] bytes, ingest counters zero) or
    /// format 2 (exactly [`LEN`] bytes). Past the format-1 words, a short payload is a
    /// [`FrameError::TruncatedField`] and an unknown format word a [`FrameError::BadField`], both
    /// naming the field.
    pub fn parse(p: &[u8]) -> Result<Self, FrameError> {
        let mut r = Reader::new(p);
        let detections_in = r.u64()?;
        let sifted_bits = r.u64()?;
        let mut a = [0u64; Accounting::WORDS];
        for v in a.iter_mut() {
            *v = r.u64()?;
        }
        let multi = MultiClickEvents {
            sifted: r.u64()?,
            basis_mismatch: r.u64()?,
            queue_overflow: r.u64()?,
            unanswered: r.u64()?,
            cross_basis: r.u64()?,
        };
        let answer_errors = AnswerErrors {
            unmatched: r.u64()?,
            malformed: r.u64()?,
        };
        let tally = parse_tally(&mut r)?;
        let multi_tally = parse_tally(&mut r)?;
        let s = Self {
            detections_in,
            sifted_bits,
            accounting: Accounting::from_words(&a),
            multi,
            answer_errors,
            tally,
            multi_tally,
            key_blocks: r.u64()?,
            frame_errors: r.u64()?,
            ingest: IngestCounts::ZERO,
        };
        if r.remaining() == 0 {
            return Ok(s);
        }
        let at = r.position();
        let format = r.u64_named("format")?;
        if format != FORMAT {
            return Err(FrameError::BadField {
                offset: at,
                field: "format",
            });
        }
        let mut w = [0u64; IngestCounts::WORDS];
        for (v, field) in w.iter_mut().zip(INGEST_FIELDS) {
            *v = r.u64_named(field)?;
        }
        r.finish()?;
        Ok(s.with_ingest(IngestCounts::from_words(&w)))
    }
}

#[cfg(test)]
mod tests;
