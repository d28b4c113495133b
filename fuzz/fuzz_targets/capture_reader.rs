//! Capture header and blocks from arbitrary bytes: the strict reader and the skipping reader
//! must return errors, never panic, and the skipping reader must always make progress.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise_sim::capture::{BlockOutcome, CaptureReader};

fuzz_target!(|data: &[u8]| {
    if let Ok(mut r) = CaptureReader::new(data, "fuzz.swcap") {
        let mut block = Vec::new();
        while let Ok(Some(info)) = r.next_block(&mut block) {
            assert_eq!(block.len(), info.events as usize);
        }
    }
    if let Ok(mut r) = CaptureReader::new(data, "fuzz.swcap") {
        let mut block = Vec::new();
        let mut last = r.offset();
        while let Ok(Some(outcome)) = r.next_block_skipping(&mut block) {
            if let BlockOutcome::Skipped(_) = outcome {
                assert!(block.is_empty());
            }
            assert!(
                r.offset() > last || r.end_verified() || r.offset() as usize >= data.len(),
                "skipping reader made no progress"
            );
            last = r.offset();
        }
    }
});
