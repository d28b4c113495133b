//! Binary exports from arbitrary bytes through the host importer: the record layout, tick and
//! counter width come from the first 11 bytes (any layout the importer accepts), the rest is the
//! file. Nothing may panic; a file that is not a whole number of records fails naming the partial
//! record and its byte offset, and the whole records before it import on their own; a finished
//! import accounts for every record in exactly one row and wrote exactly the events it counts as
//! imported.
#![no_main]

use std::io::Cursor;

use libfuzzer_sys::fuzz_target;
use slotwise::words::{BitField, Endian, KindField, WordError, WordLayout};
use slotwise_sim::capture::CaptureReader;
use slotwise_sim::import::{BinaryImport, ImportError};

const SOURCE: &str = "fuzz.bin";

fn layout(head: &[u8; 11]) -> WordLayout {
    WordLayout {
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
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((head, file)) = data.split_first_chunk::<11>() else {
        return;
    };
    let layout = layout(head);
    let counter_bits = (head[0] & 8 != 0).then_some(32 + head[10] % 33);
    let tick_ps = 1 + u32::from(head[10] >> 4);
    let import = match BinaryImport::new(layout, counter_bits, tick_ps) {
        Ok(i) => i,
        Err(ImportError::Options(_)) => return,
        Err(e) => panic!("a layout check fails with an options error, not {e}"),
    };
    let rb = usize::from(layout.record_bytes);
    let whole = (file.len() / rb) as u64;
    match import.run(file, SOURCE, Cursor::new(Vec::new()), "fuzz.swcap", |_| {}) {
        Ok((sum, sink)) => {
            assert_eq!(file.len() % rb, 0, "a partial record was accepted");
            assert_eq!(sum.total, whole);
            assert_eq!(sum.settled(), sum.total, "{sum}");
            let bytes = sink.into_inner();
            let mut r = CaptureReader::new(&bytes[..], "fuzz.swcap").expect("written capture");
            let mut block = Vec::new();
            let mut events = 0u64;
            while r.next_block(&mut block).expect("written block").is_some() {
                events += block.len() as u64;
                assert!(block.iter().all(|e| e.channel <= import.tdc().max_channel));
            }
            assert_eq!(events, sum.imported);
        }
        Err(err) => {
            let ImportError::PartialRecord {
                record,
                error: WordError::PartialRecord { offset, have, need },
                ..
            } = err
            else {
                panic!("not a partial-record error: {err}");
            };
            assert_ne!(file.len() % rb, 0);
            assert_eq!(record, whole);
            assert_eq!(offset, whole * rb as u64);
            assert_eq!(
                (usize::from(have), usize::from(need)),
                (file.len() % rb, rb)
            );
            let shown = err.to_string();
            assert!(
                shown.starts_with(&format!("{SOURCE}: record {record}, field 'record'")),
                "{shown}"
            );
            assert!(shown.contains(&format!("byte offset {offset}")), "{shown}");
            let before = &file[..file.len() - file.len() % rb];
            let (sum, _) = import
                .run(
                    before,
                    SOURCE,
                    Cursor::new(Vec::new()),
                    "fuzz.swcap",
                    |_| {},
                )
                .expect("the whole records before a partial one import");
            assert_eq!((sum.total, sum.settled()), (whole, whole));
        }
    }
});
