//! Transmitter records from arbitrary bytes, dense (strict and skipping damaged blocks) and
//! sparse: an error names the file; a record that reads holds no more slots than its range, and
//! asking it for any slot never panics.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise_sim::txrecord::{read_dense, read_sparse, TxRecord};

fn probe(r: &TxRecord) {
    let range = r.range();
    assert!(r.recorded() <= r.slot_count());
    for slot in [range.start, range.start.wrapping_add(1), range.end.wrapping_sub(1), range.end] {
        let _ = r.choice(slot);
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((&mode, body)) = data.split_first() else {
        return;
    };
    match mode % 3 {
        0 | 1 => match read_dense(body, "fuzz.swtx", mode % 3 == 1) {
            Err(e) => assert!(e.to_string().starts_with("fuzz.swtx"), "{e}"),
            Ok(d) => probe(&d.record),
        },
        _ => match read_sparse(body, "fuzz.swtx.csv") {
            Err(e) => assert!(e.to_string().starts_with("fuzz.swtx.csv"), "{e}"),
            Ok(r) => probe(&r),
        },
    }
});
