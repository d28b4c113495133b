//! Binary exports from arbitrary bytes through the host importer: the record layout, tick and
//! counter width come from the first 11 bytes (any layout the importer accepts), the rest is the
//! file. Nothing may panic; a file that is not a whole number of records fails naming the partial
//! record and its byte offset, and the whole records before it import on their own; a finished
//! import accounts for every record in exactly one row and wrote exactly the events it counts as
//! imported (`slotwise_sim::import::checks`).
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise_sim::import::checks::check_binary;

fuzz_target!(|data: &[u8]| {
    let Some((head, file)) = data.split_first_chunk::<11>() else {
        return;
    };
    if let Err(e) = check_binary(head, file) {
        panic!("{e}");
    }
});
