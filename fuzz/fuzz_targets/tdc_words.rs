//! The binary TDC record decoder on arbitrary bytes: the format comes from the first 11 bytes (any
//! layout `WordFormat::new` accepts), the rest is the record stream cut at arbitrary places.
//! Nothing may panic, and every record read ends in exactly one outcome counter.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::words::{WordDecoder, WordFormat};
use slotwise_sim::import::checks::binary_description;
use slotwise::TdcEvent;

fuzz_target!(|data: &[u8]| {
    let Some((head, rest)) = data.split_first_chunk::<11>() else {
        return;
    };
    // The same layouts the importer's checks explore (the 11th byte picks only its tick).
    let (layout, _, _) = binary_description(head);
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
