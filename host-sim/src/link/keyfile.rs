//! The sifted-key file: the core's key-block frame stream ([`FrameOut`]) as the board would send
//! it to the post-processing host, key blocks of 256 bits then one summary frame
//! (`docs/frames.md`, file rules in `docs/wire-protocol.md`). `slotwise inspect` reads it back.

use serde::Serialize;
use slotwise::formats::round::{RoundVerdict, VERDICT_LEN};
use slotwise::formats::{self, KeyBlock, RecordType, Summary, MAX_RAW};
use slotwise::{Basis, KeySink, SiftedBit};
use slotwise::{FrameOut, FrameSink};
use std::cell::RefCell;
use std::fmt;
use std::path::Path;
use std::rc::Rc;

/// Bits per key block in the file.
pub const FILE_BLOCK_BITS: usize = 256;

/// Collects finished frames in memory.
#[derive(Default)]
pub struct VecSink(pub Vec<u8>);

impl FrameSink for VecSink {
    fn frame(&mut self, bytes: &[u8]) {
        self.0.extend_from_slice(bytes);
    }
}

/// What the tap saw: the frame writer and every sifted (slot, bit) in emission order.
pub struct KeyRecord {
    /// The core's frame writer.
    pub out: FrameOut<VecSink, FILE_BLOCK_BITS>,
    /// Sifted bits in the order the receiver produced them.
    pub bits: Vec<SiftedBit>,
}

/// A [`KeySink`] to hand to the session; the caller keeps a clone to read the record back.
#[derive(Clone)]
pub struct KeyTap(pub Rc<RefCell<KeyRecord>>);

impl KeyTap {
    /// An empty record.
    pub fn new() -> Self {
        Self(Rc::new(RefCell::new(KeyRecord {
            out: FrameOut::new(VecSink::default()),
            bits: Vec::new(),
        })))
    }

    /// Close the stream with `summary` and write it to `path`; returns key blocks written.
    pub fn write(&self, path: &Path, summary: &Summary) -> Result<u64, String> {
        let mut r = self.0.borrow_mut();
        r.out.finish(summary);
        let blocks = r.out.key_blocks();
        std::fs::write(path, &r.out.sink().0).map_err(|e| format!("{}: {e}", path.display()))?;
        Ok(blocks)
    }
}

impl KeyTap {
    /// Round mode: write only the bits `keep` accepts (the rounds that verified), as fresh key
    /// blocks, then the board's round-verdict records (type 9), then a summary whose sifted-bit
    /// and block counts describe the blocks written; returns the key blocks written.
    pub fn write_kept<'a>(
        &self,
        path: &Path,
        summary: &Summary,
        keep: impl Fn(u64) -> bool,
        verdicts: impl Iterator<Item = &'a RoundVerdict>,
    ) -> Result<u64, String> {
        let r = self.0.borrow();
        let mut out: FrameOut<VecSink, FILE_BLOCK_BITS> = FrameOut::new(VecSink::default());
        let mut kept = 0u64;
        for b in r.bits.iter().filter(|b| keep(b.slot)) {
            out.sifted(*b);
            kept += 1;
        }
        out.flush();
        let mut p = [0u8; VERDICT_LEN];
        for v in verdicts {
            if v.emit(&mut p).is_ok() {
                out.record(RecordType::RoundVerdict, &p);
            }
        }
        let s = Summary {
            sifted_bits: kept,
            ..*summary
        };
        out.finish(&s);
        let blocks = out.key_blocks();
        std::fs::write(path, &out.sink().0).map_err(|e| format!("{}: {e}", path.display()))?;
        Ok(blocks)
    }
}

impl Default for KeyTap {
    fn default() -> Self {
        Self::new()
    }
}

impl KeySink for KeyTap {
    fn sifted(&mut self, bit: SiftedBit) {
        let mut r = self.0.borrow_mut();
        r.out.sifted(bit);
        r.bits.push(bit);
    }
}

/// One frame of a key file as `inspect` reports it.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct BlockReport {
    /// Byte offset of the frame in the file.
    pub offset: u64,
    /// Frame sequence number.
    pub seq: u16,
    /// Lowest and highest slot of the block's bits.
    pub slots: (u64, u64),
    /// Bits in the block.
    pub bits: u16,
    /// Bits in the Z basis.
    pub z: u16,
    /// Bits revealed for testing.
    pub revealed: u16,
    /// Bits from squashed multi-click slots.
    pub multi_click: u16,
}

/// A frame that could not be read.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct BadFrame {
    /// Byte offset of the frame in the file.
    pub offset: u64,
    /// What was wrong, naming the field.
    pub reason: String,
}

/// What [`inspect`] found in a key file.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct KeyFileReport {
    /// File name as given.
    pub source: String,
    /// File size, bytes.
    pub bytes: u64,
    /// Every key block whose CRC and contents verified.
    pub blocks: Vec<BlockReport>,
    /// Sum of the blocks' bits.
    pub total_bits: u64,
    /// Frames refused (bad CRC, broken stuffing, bad fields).
    pub bad_frames: Vec<BadFrame>,
    /// Gaps in the frame sequence numbers.
    pub seq_gaps: u64,
    /// The closing summary's sifted-bit count and key-block count, when present and verified.
    pub summary: Option<(u64, u64)>,
    /// Round verdicts (record type 9, round mode): rounds kept and discarded.
    pub rounds_kept: u64,
    /// Rounds discarded (their key blocks are not in the file).
    pub rounds_discarded: u64,
    /// A board's record stream also carries alarm records (type 5): each as time, kind, raised.
    pub alarms: Vec<(u64, String, bool)>,
    /// ...and live-statistics records (type 6), counted.
    pub stats_records: u64,
}

/// Read a key file frame by frame and check every CRC.
pub fn inspect(path: &Path) -> Result<KeyFileReport, String> {
    let name = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|e| format!("{name}: {e}"))?;
    let mut report = KeyFileReport {
        source: name.clone(),
        bytes: bytes.len() as u64,
        blocks: Vec::new(),
        total_bits: 0,
        bad_frames: Vec::new(),
        seq_gaps: 0,
        summary: None,
        rounds_kept: 0,
        rounds_discarded: 0,
        alarms: Vec::new(),
        stats_records: 0,
    };
    let mut scratch = vec![0u8; MAX_RAW];
    let mut start = 0usize;
    let mut next_seq: Option<u16> = None;
    for (i, &b) in bytes.iter().enumerate() {
        if b != 0 {
            continue;
        }
        let piece = &bytes[start..i];
        let offset = start as u64;
        start = i + 1;
        if piece.is_empty() {
            continue;
        }
        let bad = |reason: String| BadFrame { offset, reason };
        let f = match formats::decode_frame(piece, &mut scratch) {
            Ok(f) => f,
            Err(e) => {
                report
                    .bad_frames
                    .push(bad(format!("{name}: byte {offset}: {e}")));
                continue;
            }
        };
        if let Some(want) = next_seq {
            report.seq_gaps += u64::from(f.seq.wrapping_sub(want));
        }
        next_seq = Some(f.seq.wrapping_add(1));
        match f.record {
            RecordType::KeyBlock => match KeyBlock::parse(f.payload) {
                Ok(kb) => {
                    let bits: Vec<_> = (0..usize::from(kb.n_bits))
                        .filter_map(|k| kb.get(k))
                        .collect();
                    let count = |p: &dyn Fn(&formats::KeyBit) -> bool| {
                        bits.iter().filter(|b| p(b)).count() as u16
                    };
                    report.total_bits += u64::from(kb.n_bits);
                    report.blocks.push(BlockReport {
                        offset,
                        seq: f.seq,
                        slots: (kb.first_slot, kb.last_slot),
                        bits: kb.n_bits,
                        z: count(&|b| b.basis == Basis::Z),
                        revealed: count(&|b| b.revealed),
                        multi_click: count(&|b| b.multi_click),
                    });
                }
                Err(e) => report
                    .bad_frames
                    .push(bad(format!("{name}: key block at byte {offset}: {e}"))),
            },
            RecordType::Summary => match Summary::parse(f.payload) {
                Ok(s) => report.summary = Some((s.sifted_bits, s.key_blocks)),
                Err(e) => report
                    .bad_frames
                    .push(bad(format!("{name}: summary at byte {offset}: {e}"))),
            },
            RecordType::RoundVerdict => match RoundVerdict::parse(f.payload) {
                Ok(v) if v.kept => report.rounds_kept += 1,
                Ok(_) => report.rounds_discarded += 1,
                Err(e) => report
                    .bad_frames
                    .push(bad(format!("{name}: round verdict at byte {offset}: {e}"))),
            },
            RecordType::Alarm => match slotwise::formats::alarm::AlarmEvent::parse(f.payload) {
                Ok(a) => report
                    .alarms
                    .push((a.t_ps, format!("{:?}", a.kind), a.raised)),
                Err(e) => report
                    .bad_frames
                    .push(bad(format!("{name}: alarm record at byte {offset}: {e}"))),
            },
            RecordType::Stats => match slotwise::stats::Snapshot::parse(f.payload) {
                Ok(_) => report.stats_records += 1,
                Err(e) => report.bad_frames.push(bad(format!(
                    "{name}: statistics record at byte {offset}: {e}"
                ))),
            },
            other => report.bad_frames.push(bad(format!(
                "{name}: byte {offset}: type field {} ({other:?}) does not belong in a key file",
                other as u8
            ))),
        }
    }
    if start < bytes.len() {
        report.bad_frames.push(BadFrame {
            offset: start as u64,
            reason: format!(
                "{name}: byte {start}: {} bytes after the last delimiter (truncated frame)",
                bytes.len() - start
            ),
        });
    }
    Ok(report)
}

/// Whether a file looks like a key file (its name ends in `.swkey`).
pub fn is_key_file(path: &Path) -> bool {
    path.extension().is_some_and(|e| e == "swkey")
}

impl KeyFileReport {
    /// What is wrong with the file, if anything: bad frames, no summary, or a summary that
    /// disagrees with the blocks (the report is printed in full before this is returned).
    pub fn problem(&self) -> Option<String> {
        if !self.bad_frames.is_empty() {
            return Some(format!(
                "{}: {} bad frames",
                self.source,
                self.bad_frames.len()
            ));
        }
        match self.summary {
            None => Some(format!("{}: no summary frame", self.source)),
            Some((bits, blocks))
                if bits != self.total_bits || blocks != self.blocks.len() as u64 =>
            {
                Some(format!(
                    "{}: the summary frame differs from the key blocks",
                    self.source
                ))
            }
            Some(_) => None,
        }
    }
}

impl fmt::Display for KeyFileReport {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(f, "key file       {} ({} bytes)", self.source, self.bytes)?;
        writeln!(
            f,
            "key blocks     {} with a good CRC, {} bits; {} bad frames; {} sequence gaps",
            self.blocks.len(),
            self.total_bits,
            self.bad_frames.len(),
            self.seq_gaps
        )?;
        match self.summary {
            Some((bits, blocks)) => {
                let agree = bits == self.total_bits && blocks == self.blocks.len() as u64;
                writeln!(
                    f,
                    "summary frame  {bits} sifted bits in {blocks} blocks ({})",
                    if agree {
                        "matches the blocks"
                    } else {
                        "DIFFERS from the blocks"
                    }
                )?
            }
            None => writeln!(f, "summary frame  missing")?,
        }
        if self.rounds_kept + self.rounds_discarded > 0 {
            writeln!(
                f,
                "round verdicts {} rounds verified (their key blocks above), {} failed (discarded)",
                self.rounds_kept, self.rounds_discarded
            )?;
        }
        if self.stats_records + self.alarms.len() as u64 > 0 {
            writeln!(
                f,
                "board records  {} live-statistics records, {} alarm records",
                self.stats_records,
                self.alarms.len()
            )?;
            for (t_ps, kind, raised) in &self.alarms {
                let what = if *raised { "raised" } else { "cleared" };
                writeln!(f, "  alarm {kind} {what} at {:.6} s", *t_ps as f64 * 1e-12)?;
            }
        }
        writeln!(
            f,
            "  seq  offset        first slot         last slot  bits     Z  revealed  multi  crc"
        )?;
        let n = self.blocks.len();
        for (i, b) in self.blocks.iter().enumerate() {
            if n > 40 && i == 20 {
                writeln!(
                    f,
                    "  ... {} more blocks (all of them with --json) ...",
                    n - 40
                )?;
            }
            if n > 40 && (20..n - 20).contains(&i) {
                continue;
            }
            writeln!(
                f,
                "  {:>3} {:>7} {:>17} {:>17} {:>5} {:>5} {:>9} {:>6}  ok",
                b.seq, b.offset, b.slots.0, b.slots.1, b.bits, b.z, b.revealed, b.multi_click
            )?;
        }
        for b in &self.bad_frames {
            writeln!(f, "  bad frame: {}", b.reason)?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn bit(slot: u64, b: u8) -> SiftedBit {
        SiftedBit {
            slot,
            basis: if slot.is_multiple_of(7) {
                Basis::X
            } else {
                Basis::Z
            },
            bit: b,
            intensity: (slot % 2) as u8,
            multi_click: false,
            tx_bit: slot.is_multiple_of(3).then_some(b),
        }
    }

    #[test]
    fn key_file_reads_back_and_damage_is_reported_with_its_offset() {
        let dir = std::env::temp_dir().join(format!("slotwise-keyfile-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("k.swkey");
        let mut tap = KeyTap::new();
        for k in 0..600u64 {
            tap.sifted(bit(100 + 2 * k, (k % 2) as u8));
        }
        let summary = Summary {
            sifted_bits: 600,
            ..Summary::default()
        };
        assert_eq!(tap.write(&path, &summary).unwrap(), 3);
        let r = inspect(&path).unwrap();
        assert_eq!(r.blocks.len(), 3);
        assert_eq!(r.total_bits, 600);
        assert_eq!(r.blocks[0].slots, (100, 100 + 2 * 255));
        assert_eq!(r.blocks[2].bits, 600 - 512);
        assert_eq!(r.summary, Some((600, 3)));
        assert!(r.bad_frames.is_empty());
        // Damage one byte of the second block: that block alone is refused, at its offset.
        let mut bytes = std::fs::read(&path).unwrap();
        let off = r.blocks[1].offset as usize;
        bytes[off + 40] ^= 0x10;
        std::fs::write(&path, &bytes).unwrap();
        let r2 = inspect(&path).unwrap();
        assert_eq!(r2.blocks.len(), 2);
        assert_eq!(r2.bad_frames.len(), 1);
        assert_eq!(r2.bad_frames[0].offset, off as u64);
        assert!(
            r2.bad_frames[0].reason.contains("crc"),
            "{}",
            r2.bad_frames[0].reason
        );
        assert_eq!(r2.seq_gaps, 1);
        std::fs::remove_dir_all(&dir).ok();
    }
}
