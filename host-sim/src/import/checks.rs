//! The importers' properties as checks, shared by the cargo-fuzz targets (`import_text`,
//! `import_binary`) and their proptest forms (`host-sim/tests/import_props.rs`), so both hold
//! the same promise: nothing panics; a finished import accounts for every line or record in
//! exactly one summary row and wrote exactly the events it counts as imported; a stopped import
//! names the line (or partial record and byte offset) and field, and everything before it
//! imports on its own. The import description comes from a few leading bytes, so any input
//! explores descriptions too.

use super::{BinaryImport, CaptureTdc, ChannelMap, Column, Delimiter, ImportError, TextImport};
use super::{ImportSummary, TimeUnit};
use crate::capture::CaptureReader;
use slotwise::words::{BitField, Endian, KindField, WordError, WordLayout};
use slotwise::TdcEvent;
use std::io::Cursor;

/// Name of the input in the checked errors.
const TEXT_SOURCE: &str = "check.txt";
/// Name of the binary input in the checked errors.
const BINARY_SOURCE: &str = "check.bin";

/// Fail with `msg` unless `cond`.
fn ensure(cond: bool, msg: impl FnOnce() -> String) -> Result<(), String> {
    if cond {
        Ok(())
    } else {
        Err(msg())
    }
}

/// A text import description from 8 bytes: delimiter, header, columns by number or name, unit,
/// tick, channel map, comment prefix and counter width.
pub fn text_description(head: &[u8; 8]) -> TextImport {
    let delimiter = match head[0] % 6 {
        0 => Delimiter::Char(','),
        1 => Delimiter::Char(';'),
        2 => Delimiter::Char('\t'),
        3 => Delimiter::Char(' '),
        4 => Delimiter::Char('|'),
        _ => Delimiter::Whitespace,
    };
    let header = head[0] & 0x40 != 0;
    let by_name = header && head[0] & 0x80 != 0;
    let column = |b: u8, name: &str| match by_name {
        true => Column::Name(name.to_owned()),
        false => Column::Number(1 + usize::from(b % 4)),
    };
    let unit = [
        TimeUnit::Ps,
        TimeUnit::Ns,
        TimeUnit::Us,
        TimeUnit::S,
        TimeUnit::Ticks,
    ][usize::from(head[3] % 5)];
    let channel_map = (head[5] & 1 != 0).then(|| {
        let from = i64::from(head[5] >> 4);
        ChannelMap(vec![(from, 0), (from + 3, head[5] >> 1 & 7), (-1, 1)])
    });
    let max_channel = match &channel_map {
        Some(m) => TextImport::max_channel(None, Some(m)).unwrap_or(0),
        None => head[5] >> 1 & 7,
    };
    TextImport {
        delimiter,
        header,
        time: column(head[1], "t"),
        channel: column(head[2], "ch"),
        unit,
        channel_map,
        comment: ["", "#", "//", "%"][usize::from(head[6] % 4)].to_owned(),
        tdc: CaptureTdc {
            counter_bits: 32 + head[7] % 33,
            tick_ps: 1 + u32::from(head[4] % 16),
            max_channel,
        },
    }
}

/// A binary record layout from 11 bytes (any layout, accepted or not), with the counter width
/// and tick the same bytes choose.
pub fn binary_description(head: &[u8; 11]) -> (WordLayout, Option<u8>, u32) {
    let layout = WordLayout {
        record_bytes: if head[0] & 1 == 0 { 4 } else { 8 },
        endian: if head[0] & 2 == 0 {
            Endian::Little
        } else {
            Endian::Big
        },
        time: BitField::new(head[1] % 64, head[2] % 64),
        channel: BitField::new(head[3] % 64, head[4] % 9),
        kind: (head[0] & 4 != 0).then(|| KindField {
            field: BitField::new(head[5] % 64, 1 + head[6] % 8),
            event: head[7] & 3,
            rollover: (head[7] >> 2) & 3,
            rollover_count: BitField::new(head[8] % 64, head[9] % 33),
        }),
        max_channel: head[9],
    };
    let counter_bits = (head[0] & 8 != 0).then_some(32 + head[10] % 33);
    (layout, counter_bits, 1 + u32::from(head[10] >> 4))
}

/// Lines as the text importer reads them: each ends at `\n`, a last one may lack it.
pub fn line_count(text: &[u8]) -> u64 {
    let ends = text.iter().filter(|b| **b == b'\n').count() as u64;
    ends + u64::from(text.last().is_some_and(|b| *b != b'\n'))
}

/// The first `n` lines of `text`, with their line ends.
pub fn first_lines(text: &[u8], n: u64) -> &[u8] {
    if n == 0 {
        return &[];
    }
    let end = text
        .iter()
        .enumerate()
        .filter(|(_, b)| **b == b'\n')
        .nth(n.saturating_sub(1) as usize)
        .map_or(text.len(), |(i, _)| i + 1);
    text.get(..end).unwrap_or(text)
}

/// Every event of an in-memory capture, as stored.
pub fn read_back(bytes: &[u8]) -> Result<Vec<TdcEvent>, String> {
    let mut r = CaptureReader::new(bytes, "check.swcap").map_err(|e| e.to_string())?;
    let (mut all, mut block) = (Vec::new(), Vec::new());
    while r
        .next_block(&mut block)
        .map_err(|e| e.to_string())?
        .is_some()
    {
        all.extend_from_slice(&block);
    }
    Ok(all)
}

/// A finished import's summary against the capture it wrote.
fn check_finished(sum: &ImportSummary, total: u64, bytes: &[u8], max: u8) -> Result<(), String> {
    ensure(sum.total == total, || {
        format!("{} of {total} counted", sum.total)
    })?;
    ensure(sum.settled() == sum.total, || {
        format!("rows do not add up:\n{sum}")
    })?;
    let events = read_back(bytes)?;
    ensure(events.len() as u64 == sum.imported, || {
        format!("{} events written, {} imported", events.len(), sum.imported)
    })?;
    ensure(events.iter().all(|e| e.channel <= max), || {
        format!("an event above channel {max}")
    })
}

/// The text importer's properties on `text` under the description `head` chooses.
pub fn check_text(head: &[u8; 8], text: &[u8]) -> Result<(), String> {
    let import = text_description(head);
    let run = |t: &[u8]| {
        import
            .run(
                t,
                TEXT_SOURCE,
                Cursor::new(Vec::new()),
                "check.swcap",
                |_| {},
            )
            .map(|(sum, sink)| (sum, sink.into_inner()))
    };
    match run(text) {
        Ok((sum, bytes)) => check_finished(&sum, line_count(text), &bytes, import.tdc.max_channel),
        Err(err) => {
            let ImportError::Line { line, .. } = err else {
                return Err(format!("not a line error: {err}"));
            };
            let shown = err.to_string();
            let prefix = format!("{TEXT_SOURCE}: line {line}, field '");
            ensure(shown.starts_with(&prefix), || shown.clone())?;
            ensure((1..=line_count(text)).contains(&line), || shown.clone())?;
            let (sum, _) = run(first_lines(text, line - 1))
                .map_err(|e| format!("the lines before line {line}: {e}"))?;
            ensure((sum.total, sum.settled()) == (line - 1, line - 1), || {
                format!("the lines before line {line}:\n{sum}")
            })
        }
    }
}

/// The binary importer's properties on `file` under the layout `head` chooses (a layout the
/// importer refuses must be refused as an options error).
pub fn check_binary(head: &[u8; 11], file: &[u8]) -> Result<(), String> {
    let (layout, counter_bits, tick_ps) = binary_description(head);
    let import = match BinaryImport::new(layout, counter_bits, tick_ps) {
        Ok(i) => i,
        Err(ImportError::Options(_)) => return Ok(()),
        Err(e) => {
            return Err(format!(
                "a layout check fails with an options error, not {e}"
            ))
        }
    };
    let run = |bytes: &[u8]| {
        import
            .run(
                bytes,
                BINARY_SOURCE,
                Cursor::new(Vec::new()),
                "check.swcap",
                |_| {},
            )
            .map(|(sum, sink)| (sum, sink.into_inner()))
    };
    let rb = usize::from(layout.record_bytes);
    let whole = (file.len() / rb) as u64;
    match run(file) {
        Ok((sum, bytes)) => {
            ensure(file.len().is_multiple_of(rb), || {
                "a partial record was accepted".into()
            })?;
            check_finished(&sum, whole, &bytes, import.tdc().max_channel)
        }
        Err(err) => {
            let ImportError::PartialRecord {
                record,
                error: WordError::PartialRecord { offset, have, need },
                ..
            } = err
            else {
                return Err(format!("not a partial-record error: {err}"));
            };
            let shown = err.to_string();
            ensure(!file.len().is_multiple_of(rb), || {
                format!("whole records refused: {shown}")
            })?;
            ensure(record == whole && offset == whole * rb as u64, || {
                shown.clone()
            })?;
            ensure(
                (usize::from(have), usize::from(need)) == (file.len() % rb, rb),
                || shown.clone(),
            )?;
            let prefix = format!("{BINARY_SOURCE}: record {record}, field 'record'");
            ensure(shown.starts_with(&prefix), || shown.clone())?;
            ensure(shown.contains(&format!("byte offset {offset}")), || {
                shown.clone()
            })?;
            let (sum, _) = run(file.get(..file.len() - file.len() % rb).unwrap_or_default())
                .map_err(|e| format!("the whole records before a partial one: {e}"))?;
            ensure((sum.total, sum.settled()) == (whole, whole), || {
                format!("the whole records:\n{sum}")
            })
        }
    }
}
