//! The streaming core fed arbitrary detections: configuration from the first bytes, then 9
//! bytes per TDC event (count, channel). With a fixed clock and with the recovered clock, every
//! detection must end in exactly one counter at every step, and nothing may panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use slotwise::fixed::types::U32F32;
use slotwise::{
    Fate, FixedClock, NullSink, OverflowPolicy, Receiver, ReceiverConfig, TdcEvent, UnwrapConfig,
};
use slotwise_sim::cli::{receiver_setup, ClockArgs};
use slotwise_sim::clocks::ClockMode;
use slotwise_sim::scenario::Scenario;
use slotwise_sim::sim::SimTransmitter;

fuzz_target!(|data: &[u8]| {
    if data.len() < 8 {
        return;
    }
    let (head, body) = data.split_at(8);
    let bits = 32 + head[0] % 33;
    let events: Vec<TdcEvent> = body
        .chunks_exact(9)
        .map(|c| TdcEvent {
            count: u64::from_le_bytes(c[..8].try_into().unwrap_or_default()),
            channel: c[8] % 8,
        })
        .collect();
    let mut s = Scenario::default_bench();
    s.tdc_bits = bits;
    let tx_s = s.clone();
    // Fixed clock with a period from the header.
    let table = *slotwise_sim::setup::ReceiverSetup::from_scenario(&s)
        .expect("bench receiver")
        .checked
        .receiver
        .gates();
    let tdc = UnwrapConfig::new(bits, 1 + u32::from(head[1] % 4)).expect("valid width");
    let policy = if head[2] & 1 == 0 {
        OverflowPolicy::DropNewest
    } else {
        OverflowPolicy::DropOldest
    };
    let cfg = ReceiverConfig::new(tdc, table, 2, 1 + u64::from(head[3]), policy, 1)
        .expect("valid config");
    let period =
        U32F32::from_bits((2u64 + u64::from(u16::from_le_bytes([head[4], head[5]]))) << 32);
    if let Ok(clock) = FixedClock::new(period, u64::from(head[6])) {
        let mut rx: Receiver<FixedClock, 16> = Receiver::new(cfg, clock);
        let mut tx = SimTransmitter::new(&tx_s);
        for ev in &events {
            rx.push(*ev, &mut tx, &mut NullSink);
            assert_eq!(rx.accounting().total(), rx.detections_in());
        }
        rx.finish(&mut tx, &mut NullSink);
        assert_eq!(rx.accounting()[Fate::InFlight], 0);
        assert_eq!(rx.accounting().total(), events.len() as u64);
    }
    // The recovered clock, configured as the host does.
    let args = ClockArgs {
        clock: ClockMode::Recovered,
        prior_ppm: Some(500),
    };
    if let Ok((cfg, stages)) = receiver_setup(&s, &args) {
        let mut rx = stages.receiver::<64>(cfg);
        let mut tx = SimTransmitter::new(&tx_s);
        rx.push_block(&events, &mut tx, &mut NullSink);
        rx.finish(&mut tx, &mut NullSink);
        assert_eq!(rx.accounting().total(), events.len() as u64);
        assert_eq!(rx.accounting()[Fate::InFlight], 0);
    }
});
