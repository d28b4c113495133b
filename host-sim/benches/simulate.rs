//! Simulation speed of the default scenario: detections generated and wall time (release mode).
//!
//! Run with `cargo bench -p slotwise-sim --bench simulate`.

use slotwise_sim::scenario::Scenario;
use slotwise_sim::sim::{SimEvent, Simulator};
use std::time::Instant;

fn main() {
    let s = Scenario::default_bench();
    let mut sim = Simulator::new(&s);
    let mut block: Vec<SimEvent> = Vec::with_capacity(4096);
    let start = Instant::now();
    let mut n = 0u64;
    let mut checksum = 0u64;
    while sim.next_block(&mut block, 4096) > 0 {
        n += block.len() as u64;
        checksum = block
            .iter()
            .fold(checksum, |c, e| c.wrapping_add(e.event.count));
    }
    let secs = start.elapsed().as_secs_f64();
    let st = sim.stats();
    println!(
        "{}: {} slots, {} detections in {:.3} s ({:.2} M detections/s; emitted by kind {:?}, checksum {checksum:x})",
        s.name,
        st.slots,
        n,
        secs,
        n as f64 / secs / 1e6,
        st.emitted
    );
}
