//! Streaming capture writer: events in, one block buffered at a time, end record at finish.

use std::io::{self, Seek, SeekFrom, Write};

use super::block::{encode_end, BlockEncoder};
use super::header::{CaptureHeader, OFF_BLOCK_COUNT};
use super::{crc32c, FORMAT_VERSION};
use slotwise::TdcEvent;

/// Writes a capture to any byte sink; memory stays within one block.
///
/// Dropping the writer without [`Self::finish`] or [`Self::finish_seek`] leaves the file
/// without its end record, which every reader reports as a truncated capture.
#[derive(Debug)]
pub struct CaptureWriter<W: Write> {
    w: W,
    header: CaptureHeader,
    header_bytes: Vec<u8>,
    mask: u64,
    block: BlockEncoder,
    out: Vec<u8>,
    blocks: u64,
    events: u64,
    bytes: u64,
}

fn invalid(msg: String) -> io::Error {
    io::Error::new(io::ErrorKind::InvalidInput, msg)
}

impl<W: Write> CaptureWriter<W> {
    /// Check `header` and write it; blocks hold `header.max_block_events` events. The header's
    /// `block_count` is written as given (0 = unknown) and checked at [`Self::finish`].
    pub fn new(mut w: W, header: CaptureHeader) -> io::Result<Self> {
        let header = CaptureHeader {
            version: FORMAT_VERSION,
            ..header
        };
        header
            .validate()
            .map_err(|f| invalid(format!("capture header field '{}': {}", f.field, f.kind)))?;
        let header_bytes = header.encode();
        w.write_all(&header_bytes)?;
        let mask = header.counter_mask();
        let block = BlockEncoder::new(mask, header.max_block_events);
        Ok(Self {
            w,
            bytes: header_bytes.len() as u64,
            header_bytes,
            mask,
            block,
            out: Vec::new(),
            header,
            blocks: 0,
            events: 0,
        })
    }

    /// The header as written.
    pub fn header(&self) -> &CaptureHeader {
        &self.header
    }

    /// Events accepted so far.
    pub fn events(&self) -> u64 {
        self.events
    }

    /// Complete blocks written so far.
    pub fn blocks(&self) -> u64 {
        self.blocks
    }

    /// Add one event. Refused (nothing written) if its count is wider than the counter or its
    /// channel is not below the channel count.
    pub fn push(&mut self, ev: TdcEvent) -> io::Result<()> {
        if ev.count & !self.mask != 0 {
            return Err(invalid(format!(
                "event {}: count 0x{:X} is wider than the {}-bit counter",
                self.events, ev.count, self.header.counter_bits
            )));
        }
        if ev.channel >= self.header.channel_count {
            return Err(invalid(format!(
                "event {}: channel {} is not below the channel count {}",
                self.events, ev.channel, self.header.channel_count
            )));
        }
        self.block.push(ev);
        self.events += 1;
        if self.block.events() >= self.header.max_block_events {
            self.flush_block()?;
        }
        Ok(())
    }

    /// Add every event of `events` in order; stops at the first refused one.
    pub fn push_all(&mut self, events: &[TdcEvent]) -> io::Result<()> {
        events.iter().try_for_each(|&ev| self.push(ev))
    }

    fn flush_block(&mut self) -> io::Result<()> {
        if self.block.events() == 0 {
            return Ok(());
        }
        self.out.clear();
        self.block.finish_into(self.blocks, &mut self.out);
        self.w.write_all(&self.out)?;
        self.bytes += self.out.len() as u64;
        self.blocks += 1;
        Ok(())
    }

    fn write_tail(&mut self) -> io::Result<()> {
        self.flush_block()?;
        let end = encode_end(self.blocks, self.events);
        self.w.write_all(&end)?;
        self.bytes += end.len() as u64;
        self.w.flush()
    }

    /// Write the last block and the end record and hand back the sink. A nonzero declared
    /// block count that differs from the blocks written is an error (after writing).
    pub fn finish(mut self) -> io::Result<W> {
        self.write_tail()?;
        let declared = self.header.block_count;
        if declared != 0 && declared != self.blocks {
            return Err(io::Error::new(
                io::ErrorKind::InvalidData,
                format!(
                    "capture header declared {declared} blocks, {} were written",
                    self.blocks
                ),
            ));
        }
        Ok(self.w)
    }
}

impl<W: Write + Seek> CaptureWriter<W> {
    /// Like [`Self::finish`], then patch the header's block count (and its CRC) to the blocks
    /// written; the sink is left positioned at the end of the capture.
    pub fn finish_seek(mut self) -> io::Result<W> {
        self.write_tail()?;
        let end = self.w.stream_position()?;
        let start = end.checked_sub(self.bytes).ok_or_else(|| {
            io::Error::new(
                io::ErrorKind::InvalidData,
                "sink position is before the capture's start",
            )
        })?;
        let count_at = OFF_BLOCK_COUNT;
        let crc_at = self.header_bytes.len() - 4;
        if let Some(field) = self.header_bytes.get_mut(count_at..count_at + 8) {
            field.copy_from_slice(&self.blocks.to_le_bytes());
        }
        let crc = crc32c(self.header_bytes.get(..crc_at).unwrap_or_default());
        self.w.seek(SeekFrom::Start(start + count_at as u64))?;
        self.w.write_all(&self.blocks.to_le_bytes())?;
        self.w.seek(SeekFrom::Start(start + crc_at as u64))?;
        self.w.write_all(&crc.to_le_bytes())?;
        self.w.seek(SeekFrom::Start(end))?;
        self.w.flush()?;
        Ok(self.w)
    }
}
