//! Streaming capture reader: one block at a time in bounded memory, strict or skipping damage.

use std::io::{self, Read};

use super::block::{
    decode_payload, BlockHead, Limits, BLOCK_HEAD_LEN, END_LEN, OFF_END_BLOCKS, OFF_END_EVENTS,
    OFF_INDEX,
};
use super::error::{CaptureError, ErrorKind, Fault};
use super::header::{self, le_u32, le_u64, CaptureHeader, FIXED_LEN, OFF_BLOCK_COUNT};
use super::{crc32c, BLOCK_SYNC, END_SYNC};
use slotwise::TdcEvent;

/// Bytes asked from the underlying reader at a time.
const READ_CHUNK: usize = 64 * 1024;

/// Where a block came from and how many events it held.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct BlockInfo {
    /// Block index (0 for the first block).
    pub index: u64,
    /// Byte offset of the block's sync word from the start of the capture.
    pub byte_offset: u64,
    /// Number of events in the block.
    pub events: u32,
}

/// A damaged stretch that the skipping reader stepped over.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct SkippedBlock {
    /// Index of the first block lost (the one that should have started at `offset`).
    pub index: u64,
    /// Byte offset where the damage starts.
    pub offset: u64,
    /// Bytes skipped until the next record whose CRC verifies (or the end of the file).
    pub bytes: u64,
    /// Block indices lost, as told by the next good record; at least 1 when bytes were skipped
    /// and nothing later says how many.
    pub blocks: u64,
    /// The first fault found at `offset`.
    pub reason: CaptureError,
}

/// One step of the skipping reader: a good block or a damaged stretch.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum BlockOutcome {
    /// A block whose CRC and contents verified; its events are in the caller's vector.
    Block(BlockInfo),
    /// Damage that was stepped over; the caller's vector is empty.
    Skipped(SkippedBlock),
}

/// Bytes read from the source but not yet consumed (`buf[start..end]`), with their offset in
/// the capture. The buffer grows to the largest record asked for, at least [`READ_CHUNK`].
#[derive(Debug)]
struct Window<R> {
    r: R,
    buf: Vec<u8>,
    start: usize,
    end: usize,
    offset: u64,
    eof: bool,
}

impl<R: Read> Window<R> {
    fn new(r: R) -> Self {
        Self {
            r,
            buf: Vec::new(),
            start: 0,
            end: 0,
            offset: 0,
            eof: false,
        }
    }

    /// Make at least `n` unconsumed bytes available unless the source ends first; returns the
    /// number available. Reads only as often as needed, so a live pipe is not waited on for
    /// more than `n` bytes.
    fn fill(&mut self, n: usize) -> Result<usize, Fault> {
        if self.end - self.start >= n || self.eof {
            return Ok(self.end - self.start);
        }
        if self.start > 0 {
            self.buf.copy_within(self.start..self.end, 0);
            self.end -= self.start;
            self.start = 0;
        }
        let room = n.max(READ_CHUNK);
        if self.buf.len() < room {
            self.buf.resize(room, 0);
        }
        while self.end < n && !self.eof {
            let spare = self.buf.get_mut(self.end..).unwrap_or_default();
            match self.r.read(spare) {
                Ok(0) => self.eof = true,
                Ok(got) => self.end += got,
                Err(e) if e.kind() == io::ErrorKind::Interrupted => {}
                Err(e) => return Err(io_fault(self.offset + self.end as u64, &e)),
            }
        }
        Ok(self.end)
    }

    fn bytes(&self) -> &[u8] {
        self.buf.get(self.start..self.end).unwrap_or_default()
    }

    fn consume(&mut self, n: usize) {
        let n = n.min(self.end - self.start);
        self.start += n;
        self.offset += n as u64;
    }
}

fn io_fault(offset: u64, e: &io::Error) -> Fault {
    Fault::new(
        offset,
        "file",
        ErrorKind::Io {
            kind: e.kind(),
            message: e.to_string(),
        },
    )
}

/// The file ends at `offset`, inside `field`, `missing` bytes short of a complete record.
fn truncated(offset: u64, field: &'static str, missing: usize) -> Fault {
    Fault::new(
        offset,
        field,
        ErrorKind::Truncated {
            missing: missing as u64,
        },
    )
}

/// What a record at the current position turned out to be.
enum Record {
    Block(BlockHead, usize),
    End { blocks: u64, events: u64 },
}

/// Reads a capture block by block; memory stays within one block however long the capture.
#[derive(Debug)]
pub struct CaptureReader<R> {
    win: Window<R>,
    source: String,
    header: CaptureHeader,
    header_len: u64,
    limits: Limits,
    next_index: u64,
    events: u64,
    done: bool,
    end_verified: bool,
    /// Event total of the verified end record.
    end_events: Option<u64>,
    failed: Option<CaptureError>,
}

impl<R: Read> CaptureReader<R> {
    /// Read and check the header; `source_name` names the capture in every error.
    pub fn new(r: R, source_name: &str) -> Result<Self, CaptureError> {
        let mut win = Window::new(r);
        let (header, header_len) = read_header(&mut win).map_err(|f| f.with_source(source_name))?;
        let limits = Limits {
            mask: header.counter_mask(),
            bits: header.counter_bits,
            channel_count: header.channel_count,
        };
        Ok(Self {
            win,
            source: source_name.to_owned(),
            header,
            header_len: header_len as u64,
            limits,
            next_index: 0,
            events: 0,
            done: false,
            end_verified: false,
            end_events: None,
            failed: None,
        })
    }

    /// The capture's header.
    pub fn header(&self) -> &CaptureHeader {
        &self.header
    }

    /// Length of the header in bytes (offset of the first block).
    pub fn header_len(&self) -> u64 {
        self.header_len
    }

    /// Byte offset of the next unread record.
    pub fn offset(&self) -> u64 {
        self.win.offset
    }

    /// Whether an end record with a valid CRC closed the capture.
    pub fn end_verified(&self) -> bool {
        self.end_verified
    }

    /// Event total stated by the verified end record (`None` until one is read); with
    /// [`Self::events_read`] it gives exactly how many events damaged blocks held.
    pub fn declared_events(&self) -> Option<u64> {
        self.end_events
    }

    /// Events delivered so far.
    pub fn events_read(&self) -> u64 {
        self.events
    }

    /// Clear `out` and say whether a record may follow: the stored fault again after a failure,
    /// `false` after the end record.
    fn begin_record(&self, out: &mut Vec<TdcEvent>) -> Result<bool, CaptureError> {
        out.clear();
        match &self.failed {
            Some(e) => Err(e.clone()),
            None => Ok(!self.done),
        }
    }

    /// The next block's events into `out` (cleared first); `None` after a verified end record.
    /// Any fault ends the capture: later calls return the same error.
    pub fn next_block(
        &mut self,
        out: &mut Vec<TdcEvent>,
    ) -> Result<Option<BlockInfo>, CaptureError> {
        if !self.begin_record(out)? {
            return Ok(None);
        }
        let start = self.win.offset;
        let result = match self.record(out) {
            Ok(Record::Block(head, total)) if head.index == self.next_index => {
                self.win.consume(total);
                Ok(Some(self.accept(head, start)))
            }
            Ok(Record::Block(head, _)) => Err(Fault::new(
                start + OFF_INDEX as u64,
                "block_index",
                ErrorKind::IndexMismatch {
                    expected: self.next_index,
                    found: head.index,
                },
            )
            .in_block(self.next_index)),
            Ok(Record::End { blocks, events }) => self.finish_strict(start, blocks, events),
            Err(f) => Err(f),
        };
        result.map_err(|f| {
            out.clear();
            let e = f.with_source(&self.source);
            self.failed = Some(e.clone());
            e
        })
    }

    /// Like [`Self::next_block`], but a damaged block is reported and stepped over: the reader
    /// scans for the next sync word whose record verifies. Only I/O errors and a header whose
    /// block count disagrees with the end record are returned as errors.
    pub fn next_block_skipping(
        &mut self,
        out: &mut Vec<TdcEvent>,
    ) -> Result<Option<BlockOutcome>, CaptureError> {
        if !self.begin_record(out)? {
            return Ok(None);
        }
        let start = self.win.offset;
        let fault = match self.record(out) {
            Ok(Record::Block(head, total)) if head.index == self.next_index => {
                self.win.consume(total);
                return Ok(Some(BlockOutcome::Block(self.accept(head, start))));
            }
            Ok(Record::Block(head, _)) if head.index > self.next_index => {
                // A clean gap: whole blocks are missing but nothing is damaged.
                out.clear();
                let skipped = self.gap(start, head.index, "block_index", OFF_INDEX);
                return Ok(Some(BlockOutcome::Skipped(skipped)));
            }
            Ok(Record::End { blocks, .. }) if blocks > self.next_index => {
                let skipped = self.gap(start, blocks, "end_block_count", OFF_END_BLOCKS);
                return Ok(Some(BlockOutcome::Skipped(skipped)));
            }
            Ok(Record::End { blocks, events }) if blocks == self.next_index => {
                self.end_events = Some(events);
                return self.finish_skipping(start, blocks).map(|()| None);
            }
            // An older block index or an end record counting fewer blocks than seen: the
            // record verified but does not belong here; treat it as damage.
            Ok(Record::Block(head, _)) => Fault::new(
                start + OFF_INDEX as u64,
                "block_index",
                ErrorKind::IndexMismatch {
                    expected: self.next_index,
                    found: head.index,
                },
            ),
            Ok(Record::End { blocks, .. }) => Fault::new(
                start + OFF_END_BLOCKS as u64,
                "end_block_count",
                ErrorKind::IndexMismatch {
                    expected: self.next_index,
                    found: blocks,
                },
            ),
            Err(f) if f.is_io() => {
                let e = f.with_source(&self.source);
                self.failed = Some(e.clone());
                return Err(e);
            }
            Err(f) => f,
        };
        out.clear();
        let reason = fault.in_block(self.next_index).with_source(&self.source);
        if matches!(reason.kind, ErrorKind::MissingEndRecord { .. }) {
            self.done = true;
            let lost = self.header.block_count.saturating_sub(self.next_index);
            return Ok(Some(BlockOutcome::Skipped(SkippedBlock {
                index: self.next_index,
                offset: start,
                bytes: 0,
                blocks: lost,
                reason,
            })));
        }
        self.win.consume(1);
        let next = self.resync(out)?;
        let bytes = self.win.offset - start;
        let lost = match next {
            Some(i) => i.saturating_sub(self.next_index),
            None => {
                self.done = true;
                self.header
                    .block_count
                    .saturating_sub(self.next_index)
                    .max(1)
            }
        };
        let skipped = SkippedBlock {
            index: self.next_index,
            offset: start,
            bytes,
            blocks: lost,
            reason,
        };
        if let Some(i) = next {
            self.next_index = self.next_index.max(i);
        }
        Ok(Some(BlockOutcome::Skipped(skipped)))
    }

    /// Count a verified block and describe it.
    fn accept(&mut self, head: BlockHead, start: u64) -> BlockInfo {
        self.next_index = self.next_index.saturating_add(1);
        self.events = self.events.saturating_add(u64::from(head.event_count));
        BlockInfo {
            index: head.index,
            byte_offset: start,
            events: head.event_count,
        }
    }

    /// Report blocks `next_index..found` as missing without damage, and move on to `found`.
    fn gap(&mut self, start: u64, found: u64, field: &'static str, off: usize) -> SkippedBlock {
        let reason = Fault::new(
            start + off as u64,
            field,
            ErrorKind::IndexMismatch {
                expected: self.next_index,
                found,
            },
        )
        .in_block(self.next_index)
        .with_source(&self.source);
        let skipped = SkippedBlock {
            index: self.next_index,
            offset: start,
            bytes: 0,
            blocks: found - self.next_index,
            reason,
        };
        self.next_index = found;
        skipped
    }

    /// Step forward to the next sync word that starts a verifying record; its block index (or
    /// the end record's block count), or `None` at the end of the file.
    fn resync(&mut self, scratch: &mut Vec<TdcEvent>) -> Result<Option<u64>, CaptureError> {
        loop {
            let avail = self.fill_or_fail(4)?;
            let found = self
                .win
                .bytes()
                .windows(4)
                .position(|w| w == BLOCK_SYNC || w == END_SYNC);
            match found {
                Some(p) => {
                    self.win.consume(p);
                    match self.record(scratch) {
                        Ok(Record::Block(head, _)) if head.index >= self.next_index => {
                            scratch.clear();
                            return Ok(Some(head.index));
                        }
                        Ok(Record::End { blocks, .. }) if blocks >= self.next_index => {
                            return Ok(Some(blocks));
                        }
                        Err(f) if f.is_io() => {
                            let e = f.with_source(&self.source);
                            self.failed = Some(e.clone());
                            return Err(e);
                        }
                        _ => {
                            scratch.clear();
                            self.win.consume(1);
                        }
                    }
                }
                None if self.win.eof => {
                    self.win.consume(avail);
                    return Ok(None);
                }
                None => self.win.consume(avail.saturating_sub(3)),
            }
        }
    }

    fn fill_or_fail(&mut self, n: usize) -> Result<usize, CaptureError> {
        self.win.fill(n).map_err(|f| {
            let e = f.with_source(&self.source);
            self.failed = Some(e.clone());
            e
        })
    }

    /// Parse and verify the record at the current position without consuming it. A block's
    /// events land in `out`.
    fn record(&mut self, out: &mut Vec<TdcEvent>) -> Result<Record, Fault> {
        let start = self.win.offset;
        let avail = self.win.fill(BLOCK_HEAD_LEN)?;
        if avail == 0 {
            return Err(Fault::new(
                start,
                "end_record",
                ErrorKind::MissingEndRecord {
                    blocks: self.next_index,
                },
            ));
        }
        let b = self.win.bytes();
        let sync: [u8; 4] = header::arr(b, 0);
        if avail < 4 {
            let field = if b == BLOCK_SYNC.get(..avail).unwrap_or_default() {
                "block_sync"
            } else if b == END_SYNC.get(..avail).unwrap_or_default() {
                "end_record"
            } else {
                return Err(
                    Fault::new(start, "block_sync", ErrorKind::BadSync { found: sync })
                        .in_block(self.next_index),
                );
            };
            let fault = truncated(start + avail as u64, field, 4 - avail);
            return Err(if field == "block_sync" {
                fault.in_block(self.next_index)
            } else {
                fault
            });
        }
        if sync == END_SYNC {
            return self.end_record(start, avail);
        }
        let block = self.next_index;
        if sync != BLOCK_SYNC {
            return Err(
                Fault::new(start, "block_sync", ErrorKind::BadSync { found: sync }).in_block(block),
            );
        }
        if avail < BLOCK_HEAD_LEN {
            let field = block_field_at(avail);
            return Err(
                truncated(start + avail as u64, field, BLOCK_HEAD_LEN - avail).in_block(block),
            );
        }
        let head = BlockHead::parse(b);
        head.check_lengths(start, self.header.max_block_events)
            .map_err(|f| f.in_block(block))?;
        let total = head.total_len();
        let avail = self.win.fill(total)?;
        let payload_end = BLOCK_HEAD_LEN + head.payload_len as usize;
        if avail < total {
            let field = if avail < payload_end {
                "payload"
            } else {
                "block_crc"
            };
            return Err(truncated(start + avail as u64, field, total - avail).in_block(block));
        }
        let b = self.win.bytes();
        let stored = le_u32(b, payload_end);
        let computed = crc32c(b.get(..payload_end).unwrap_or_default());
        if stored != computed {
            return Err(Fault::new(
                start + payload_end as u64,
                "block_crc",
                ErrorKind::CrcMismatch {
                    stored,
                    computed,
                    covered_from: start,
                },
            )
            .in_block(block));
        }
        let payload = b.get(BLOCK_HEAD_LEN..payload_end).unwrap_or_default();
        decode_payload(
            payload,
            &head,
            self.limits,
            start + BLOCK_HEAD_LEN as u64,
            out,
        )
        .map_err(|f| f.in_block(block))?;
        Ok(Record::Block(head, total))
    }

    /// Parse and verify the end record at `start` (not consumed).
    fn end_record(&mut self, start: u64, avail: usize) -> Result<Record, Fault> {
        let avail = if avail < END_LEN {
            self.win.fill(END_LEN)?
        } else {
            avail
        };
        if avail < END_LEN {
            let field = match avail {
                0..=3 => "end_record",
                4..=11 => "end_block_count",
                12..=19 => "end_event_total",
                _ => "end_crc",
            };
            return Err(truncated(start + avail as u64, field, END_LEN - avail));
        }
        let b = self.win.bytes();
        let stored = le_u32(b, END_LEN - 4);
        let computed = crc32c(b.get(..END_LEN - 4).unwrap_or_default());
        if stored != computed {
            return Err(Fault::new(
                start + (END_LEN - 4) as u64,
                "end_crc",
                ErrorKind::CrcMismatch {
                    stored,
                    computed,
                    covered_from: start,
                },
            ));
        }
        Ok(Record::End {
            blocks: le_u64(b, OFF_END_BLOCKS),
            events: le_u64(b, OFF_END_EVENTS),
        })
    }

    /// Strict checks at the end record: its counts, the header's count, nothing after it.
    fn finish_strict(
        &mut self,
        start: u64,
        blocks: u64,
        events: u64,
    ) -> Result<Option<BlockInfo>, Fault> {
        let mismatch = |off: usize, field, what, declared, found| {
            Fault::new(
                start + off as u64,
                field,
                ErrorKind::CountMismatch {
                    what,
                    declared,
                    found,
                    end_offset: start,
                },
            )
        };
        if blocks != self.next_index {
            return Err(mismatch(
                OFF_END_BLOCKS,
                "end_block_count",
                "blocks",
                blocks,
                self.next_index,
            ));
        }
        if events != self.events {
            return Err(mismatch(
                OFF_END_EVENTS,
                "end_event_total",
                "events",
                events,
                self.events,
            ));
        }
        self.end_checks(start, blocks)?;
        Ok(None)
    }

    /// [`Self::end_checks`] for the skipping reader, which records its own failure.
    fn finish_skipping(&mut self, start: u64, blocks: u64) -> Result<(), CaptureError> {
        self.end_checks(start, blocks).map_err(|f| {
            let e = f.with_source(&self.source);
            self.failed = Some(e.clone());
            e
        })
    }

    /// Checks at a verified end record that hold in both modes: the header's declared block
    /// count and no data after the record. Consumes the record and ends the capture.
    fn end_checks(&mut self, start: u64, blocks: u64) -> Result<(), Fault> {
        self.win.consume(END_LEN);
        self.done = true;
        self.end_verified = true;
        let declared = self.header.block_count;
        if declared != 0 && declared != blocks {
            return Err(Fault::new(
                OFF_BLOCK_COUNT as u64,
                "block_count",
                ErrorKind::CountMismatch {
                    what: "blocks",
                    declared,
                    found: blocks,
                    end_offset: start,
                },
            ));
        }
        if self.win.fill(1)? > 0 {
            return Err(Fault::new(
                self.win.offset,
                "trailing_data",
                ErrorKind::TrailingData,
            ));
        }
        Ok(())
    }
}

/// Name of the block field that contains byte `offset` of a block.
fn block_field_at(offset: usize) -> &'static str {
    match offset {
        0..=3 => "block_sync",
        4..=11 => "block_index",
        12..=15 => "event_count",
        16..=19 => "payload_length",
        _ => "first_count",
    }
}

/// Read the header in stages so that each truncation or fault names its field.
fn read_header<R: Read>(win: &mut Window<R>) -> Result<(CaptureHeader, usize), Fault> {
    let avail = win.fill(FIXED_LEN)?;
    let b = win.bytes();
    header::check_prefix(b, win.eof)?;
    if avail < FIXED_LEN {
        let field = header::field_at(avail, 0);
        return Err(truncated(
            avail as u64,
            field,
            header::MIN_HEADER_LEN - avail,
        ));
    }
    let len = header::header_len(b)?;
    let avail = win.fill(len)?;
    if avail < len {
        let field = header::field_at(avail, len);
        return Err(truncated(avail as u64, field, len - avail));
    }
    let header = header::decode(win.bytes().get(..len).unwrap_or_default())?;
    win.consume(len);
    Ok((header, len))
}
