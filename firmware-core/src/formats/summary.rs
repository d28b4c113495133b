//! Summary record (type 2): every counter of the receiver at one moment, as little-endian u64
//! words.
//!
//! Word order: detections in, sifted bits, the accounting (through [`Accounting::to_words`] and
//! [`Accounting::from_words`], so the record follows that struct without naming its fields), the
//! multi-click events, the answer errors, the single-click and multi-click tallies (row-major),
//! key blocks and frame errors. `docs/frames.md` lists every word's offset. The receiver fills
//! one with `Summary::of` (in `receiver`, which sits above this module).

use super::bytes::{Reader, Writer};
use super::framing::{FrameError, MAX_PAYLOAD};
use crate::accounting::{Accounting, AnswerErrors, MultiClickEvents};
use crate::gates::MAX_INTENSITIES;
use crate::tally::Tally;

/// Words of one tally: counts per (tx basis, tx bit, intensity, rx basis, rx bit), then the
/// untested counts per (intensity, basis).
const TALLY_WORDS: usize = 2 * 2 * MAX_INTENSITIES * 2 * 2 + MAX_INTENSITIES * 2;
/// Number of u64 words in a summary payload.
pub const WORDS: usize = 2 + Accounting::WORDS + 5 + 2 + 2 * TALLY_WORDS + 2;
/// Bytes of a summary payload.
pub const LEN: usize = 8 * WORDS;

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

    /// Read a summary payload (exactly [`LEN`] bytes).
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
        };
        r.finish()?;
        Ok(s)
    }
}

#[cfg(test)]
mod tests;
