//! Receiver profiles from arbitrary text: an error names the file; a profile that parses also
//! checks without its text, serialises and parses back to itself with the same configurations.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise_sim::profile::Profile;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match Profile::from_toml_str(text, "fuzz.toml") {
        Err(e) => assert!(e.to_string().starts_with("fuzz.toml:"), "{e}"),
        Ok((p, checked)) => {
            assert_eq!(p.check("fuzz.toml").as_ref(), Ok(&checked));
            let (back, again) = Profile::from_toml_str(&p.to_toml_string(), "rt").expect("round trip");
            // NaN cannot pass the checks, so equality is meaningful.
            assert_eq!(back, p);
            assert_eq!(again, checked);
        }
    }
});
