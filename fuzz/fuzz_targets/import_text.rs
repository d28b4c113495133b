//! Text exports from arbitrary bytes: the import description (delimiter, header, columns, unit,
//! tick, channel map, comment prefix, counter width) comes from the first 8 bytes, the rest is
//! the export. Nothing may panic; an error names the file, its line and a field, and every line
//! before it imports on its own; a finished import accounts for every line in exactly one row
//! and wrote exactly the events it counts as imported (`slotwise_sim::import::checks`).
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise_sim::import::checks::check_text;

fuzz_target!(|data: &[u8]| {
    let Some((head, text)) = data.split_first_chunk::<8>() else {
        return;
    };
    if let Err(e) = check_text(head, text) {
        panic!("{e}");
    }
});
