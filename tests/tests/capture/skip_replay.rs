//! `slotwise replay --skip-damaged` on a simulated capture: damaged blocks are stepped over and
//! reported with the detections they held, and the rest replays to exactly the result of a
//! capture that never held those blocks. Without the option the same file fails with an error
//! naming file, byte, block and field; a CSV with a bad line fails naming file, line and field.

use slotwise::TdcEvent;
use slotwise_sim::capture::{CaptureReader, CaptureWriter};
use slotwise_sim::cli::{receiver_setup, replay_capture, run_simulated, ClockArgs, ReplayPlan};
use slotwise_sim::clocks::ClockMode;
use slotwise_sim::scenario::Scenario;
use slotwise_sim::summary::Summary;
use std::io::BufWriter;
use std::path::Path;

fn tmp(name: &str) -> std::path::PathBuf {
    std::env::temp_dir().join(format!("slotwise-skip-{}-{name}", std::process::id()))
}

fn replay(path: &Path, s: &Scenario, skip: bool) -> Result<Summary, String> {
    let clock = ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(500),
    };
    let (cfg, c) = receiver_setup(s, &clock).unwrap();
    let plan = ReplayPlan::of_scenario(s).unwrap();
    replay_capture(path, cfg, c, plan, skip, None, None, None, None).map_err(|e| e.to_string())
}

/// The parts of a summary that must not change (timings and the skip report excluded).
fn results(s: &Summary) -> String {
    format!(
        "{:?} {} {:?} {:?} {:?} {:?} {:?}",
        s.accounting,
        s.sifted_bits,
        s.tally,
        s.qber,
        s.lock.losses,
        s.lock.relocks,
        s.answer_errors
    )
}

#[test]
fn skip_damaged_reports_lost_blocks_and_leaves_the_rest_unchanged() {
    let s = Scenario {
        duration_s: 0.06,
        ..Scenario::default_bench()
    };
    let clock = ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(500),
    };
    let good = tmp("good.swcap");
    run_simulated(&s, &clock, Some(&good)).unwrap();
    // Blocks as written: offsets and events.
    let bytes = std::fs::read(&good).unwrap();
    let mut r = CaptureReader::new(&bytes[..], "good").unwrap();
    let header = r.header().clone();
    let mut blocks: Vec<(u64, Vec<TdcEvent>)> = Vec::new();
    let mut ev = Vec::new();
    while let Some(info) = r.next_block(&mut ev).unwrap() {
        blocks.push((info.byte_offset, ev.clone()));
    }
    assert!(blocks.len() > 12, "{} blocks", blocks.len());
    // Damage blocks 4 and 9: one flipped payload bit each (layout: docs/capture-format.md §4,
    // 28 bytes of block head before the payload).
    let mut bad = bytes.clone();
    for k in [4usize, 9] {
        bad[blocks[k].0 as usize + 28 + 100] ^= 0x10;
    }
    let damaged = tmp("damaged.swcap");
    std::fs::write(&damaged, &bad).unwrap();
    // The same capture without those blocks' events.
    let without = tmp("without.swcap");
    let mut w = CaptureWriter::new(
        BufWriter::new(std::fs::File::create(&without).unwrap()),
        header,
    )
    .unwrap();
    for (k, (_, events)) in blocks.iter().enumerate() {
        if k != 4 && k != 9 {
            w.push_all(events).unwrap();
        }
    }
    w.finish_seek().unwrap();

    // The error names the file, the byte of the block's CRC field, the block and the field,
    // and says which bytes the CRC covers (from the block's sync word).
    let strict = replay(&damaged, &s, false).unwrap_err();
    let name = damaged.display().to_string();
    assert!(strict.starts_with(&format!("{name}: byte ")), "{strict}");
    assert!(strict.contains("(block 4), field 'block_crc'"), "{strict}");
    assert!(
        strict.contains(&format!("over bytes from {})", blocks[4].0)),
        "{strict}"
    );

    let skipped = replay(&damaged, &s, true).unwrap();
    let reference = replay(&without, &s, false).unwrap();
    let rep = skipped.skipped.as_ref().expect("skip report");
    println!("{rep}");
    assert_eq!(rep.stretches.len(), 2, "{rep}");
    assert_eq!(rep.blocks, 2);
    assert_eq!(
        (rep.stretches[0].first_block, rep.stretches[1].first_block),
        (4, 9)
    );
    assert_eq!(rep.stretches[0].offset, blocks[4].0);
    assert!(rep.stretches[0].reason.contains("field 'block_crc'"));
    let lost = (blocks[4].1.len() + blocks[9].1.len()) as u64;
    assert_eq!(rep.detections_lost, Some(lost));
    let total: u64 = blocks.iter().map(|b| b.1.len() as u64).sum();
    assert_eq!(skipped.detections_in, total - lost);
    assert_eq!(reference.detections_in, total - lost);
    assert_eq!(results(&skipped), results(&reference));
    let text = skipped.to_string();
    assert!(
        text.contains(&format!("2 damaged stretches, 2 blocks, {lost} detections")),
        "{text}"
    );
    let json = serde_json::to_value(&skipped).unwrap();
    assert_eq!(json["skipped"]["detections_lost"], lost);
    for p in [good, damaged, without] {
        let _ = std::fs::remove_file(p);
    }
}

#[test]
fn replaying_a_csv_with_a_bad_line_names_file_line_and_field() {
    let s = Scenario::default_bench();
    let p = tmp("bad.csv");
    std::fs::write(&p, "t_ps,channel\n1000,0\n2000,1\n3000,x\n4000,0\n").unwrap();
    let e = replay(&p, &s, false).unwrap_err();
    let want = format!("{}: line 4, field 'channel'", p.display());
    assert!(e.starts_with(&want), "{e}");
    let _ = std::fs::remove_file(p);
}
