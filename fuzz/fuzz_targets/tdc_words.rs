//! The binary TDC record decoder on arbitrary bytes: the format comes from the first bytes (any
//! layout `WordFormat::new` accepts), the rest is the record stream cut at arbitrary places.
//! Nothing may panic, and every record read ends in exactly one outcome counter.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::words::{BitField, Endian, KindField, WordDecoder, WordFormat, WordLayout};
use slotwise::TdcEvent;

fuzz_target!(|data: &[u8]| {
    let Some((head, rest)) = data.split_first_chunk::<10>() else {
        return;
    };
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
    let Ok(fmt) = WordFormat::new(layout) else {
        return;
    };
    let mut dec = WordDecoder::new(fmt);
    let mut out = [TdcEvent {
        count: 0,
        channel: 0,
    }; 7];
    let cut = usize::from(head[1]) % 13 + 1;
    for chunk in rest.chunks(cut) {
        let mut at = 0;
        while at < chunk.len() {
            let d = dec.decode(&chunk[at..], &mut out);
            assert!(d.events <= out.len());
            if d.consumed == 0 {
                break;
            }
            at += d.consumed;
        }
    }
    let c = *dec.counts();
    assert_eq!(c.records, c.settled());
    let _ = dec.finish();
});
