//! CSV lines from arbitrary bytes: every error names a line and a field; nothing panics.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise_sim::csv_io::CsvReader;

fuzz_target!(|data: &[u8]| {
    let Ok(r) = CsvReader::new(data, "fuzz.csv") else {
        return;
    };
    for ev in r {
        match ev {
            Ok(_) => {}
            Err(e) => {
                assert!(e.to_string().starts_with("fuzz.csv: line "), "{e}");
                break;
            }
        }
    }
});
