//! Text exports from arbitrary bytes: the import description (delimiter, header, columns, unit,
//! tick, channel map, comment prefix, counter width) comes from the first 8 bytes, the rest is
//! the export. Nothing may panic; an error names the file, its line and a field, and every line
//! before it imports on its own; a finished import accounts for every line in exactly one row
//! and wrote exactly the events it counts as imported.
#![no_main]

use std::io::Cursor;

use libfuzzer_sys::fuzz_target;
use slotwise_sim::capture::CaptureReader;
use slotwise_sim::import::{
    CaptureTdc, ChannelMap, Column, Delimiter, ImportError, TextImport, TimeUnit,
};

const SOURCE: &str = "fuzz.txt";

fn description(head: &[u8; 8]) -> TextImport {
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

/// Lines as the importer reads them: each ends at `\n`, a last one may lack it.
fn line_count(text: &[u8]) -> u64 {
    let ends = text.iter().filter(|b| **b == b'\n').count() as u64;
    ends + u64::from(text.last().is_some_and(|b| *b != b'\n'))
}

/// The first `n` lines of `text`, with their line ends.
fn first_lines(text: &[u8], n: u64) -> &[u8] {
    let end = text
        .iter()
        .enumerate()
        .filter(|(_, b)| **b == b'\n')
        .nth(n.saturating_sub(1) as usize)
        .map_or(text.len(), |(i, _)| i + 1);
    if n == 0 {
        &[]
    } else {
        &text[..end]
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((head, text)) = data.split_first_chunk::<8>() else {
        return;
    };
    let import = description(head);
    let sink = Cursor::new(Vec::new());
    match import.run(text, SOURCE, sink, "fuzz.swcap", |_| {}) {
        Ok((sum, sink)) => {
            assert_eq!(sum.total, line_count(text));
            assert_eq!(sum.settled(), sum.total, "{sum}");
            let bytes = sink.into_inner();
            let mut r = CaptureReader::new(&bytes[..], "fuzz.swcap").expect("written capture");
            let mut block = Vec::new();
            let mut events = 0u64;
            while r.next_block(&mut block).expect("written block").is_some() {
                events += block.len() as u64;
                assert!(block.iter().all(|e| e.channel <= import.tdc.max_channel));
            }
            assert_eq!(events, sum.imported);
        }
        Err(err) => {
            let ImportError::Line { line, .. } = err else {
                panic!("not a line error: {err}");
            };
            let shown = err.to_string();
            assert!(
                shown.starts_with(&format!("{SOURCE}: line {line}, field '")),
                "{shown}"
            );
            assert!((1..=line_count(text)).contains(&line), "{shown}");
            let before = first_lines(text, line - 1);
            let (sum, _) = import
                .run(
                    before,
                    SOURCE,
                    Cursor::new(Vec::new()),
                    "fuzz.swcap",
                    |_| {},
                )
                .expect("the lines before a failing line import");
            assert_eq!((sum.total, sum.settled()), (line - 1, line - 1));
        }
    }
});
