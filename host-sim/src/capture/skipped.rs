//! What `slotwise replay --skip-damaged` stepped over: each damaged stretch, the blocks it
//! lost, and the detections those blocks held.

use super::reader::SkippedBlock;
use serde::Serialize;

/// One damaged stretch as reported in the summary.
#[derive(Clone, Debug, Serialize, PartialEq, Eq)]
pub struct SkippedStretch {
    /// Index of the first block lost.
    pub first_block: u64,
    /// Blocks lost.
    pub blocks: u64,
    /// Byte offset where the damage starts.
    pub offset: u64,
    /// Bytes stepped over.
    pub bytes: u64,
    /// The first fault found there (file, byte, block, field, what).
    pub reason: String,
}

/// Everything the skipping reader stepped over in one capture.
#[derive(Clone, Debug, Default, Serialize, PartialEq, Eq)]
pub struct SkipReport {
    /// Damaged stretches in file order.
    pub stretches: Vec<SkippedStretch>,
    /// Blocks lost in all.
    pub blocks: u64,
    /// Detections the lost blocks held: the verified end record's total minus the detections
    /// read (`null` when no end record verified).
    pub detections_lost: Option<u64>,
    /// Upper bound from the block size when the end record is missing: blocks lost times the
    /// header's events per block.
    pub detections_at_most: u64,
}

impl SkipReport {
    /// Add one stretch.
    pub fn push(&mut self, sk: &SkippedBlock, block_events: u32) {
        self.blocks += sk.blocks;
        self.detections_at_most += sk.blocks * u64::from(block_events);
        self.stretches.push(SkippedStretch {
            first_block: sk.index,
            blocks: sk.blocks,
            offset: sk.offset,
            bytes: sk.bytes,
            reason: sk.reason.to_string(),
        });
    }

    /// Close the report once the reader is done: `declared` is the end record's event total,
    /// `read` the detections delivered.
    pub fn finish(&mut self, declared: Option<u64>, read: u64) {
        self.detections_lost = declared.map(|d| d.saturating_sub(read));
        if let Some(lost) = self.detections_lost {
            self.detections_at_most = lost;
        }
    }
}

impl std::fmt::Display for SkipReport {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let lost = match self.detections_lost {
            Some(n) => format!("{n} detections (end record)"),
            None => format!(
                "at most {} detections (no end record)",
                self.detections_at_most
            ),
        };
        writeln!(
            f,
            "skipped        {} damaged stretches, {} blocks, {lost}",
            self.stretches.len(),
            self.blocks
        )?;
        for s in &self.stretches {
            writeln!(
                f,
                "  blocks {}..{} at byte {} ({} bytes): {}",
                s.first_block,
                s.first_block + s.blocks,
                s.offset,
                s.bytes,
                s.reason
            )?;
        }
        Ok(())
    }
}
