//! Scenario files from arbitrary text: an error names the file; a scenario that parses also
//! validates, serialises and parses back to itself.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise_sim::scenario::Scenario;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match Scenario::from_toml_str(text, "fuzz.toml") {
        Err(e) => assert!(e.to_string().starts_with("fuzz.toml:"), "{e}"),
        Ok(s) => {
            assert!(s.validate("fuzz.toml").is_ok());
            let back = Scenario::from_toml_str(&s.to_toml_string(), "rt").expect("round trip");
            // NaN cannot pass validation, so equality is meaningful.
            assert_eq!(back, s);
        }
    }
});
