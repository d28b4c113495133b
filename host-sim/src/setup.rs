//! The receiver a host run builds for a scenario: gate table and TDC from the scenario's optics,
//! the sifting settings, and the clock and numbering stages (`clocks`). Below the command line,
//! so the benchmarks, the tests and the tools build receivers without going through the CLI.

use crate::clocks::{self, ClockMode, ClockStages};
use crate::scenario::Scenario;
use crate::sim;
use clap::Args;
use slotwise::{OverflowPolicy, ReceiverConfig, UnwrapConfig};

type AnyErr = Box<dyn std::error::Error>;

/// How the receiver gets its clock.
#[derive(Args, Debug, Clone)]
pub struct ClockArgs {
    /// `recovered`: find period and phase from the detections (no clock cable);
    /// `reference`: use the scenario's true clock, as a link with a distributed reference would.
    #[arg(long, value_enum, default_value_t = ClockMode::Recovered)]
    pub clock: ClockMode,
    /// Prior on the transmitter's period for recovery: nominal ± this many ppm (1..=1000).
    #[arg(long, default_value_t = 500)]
    pub prior_ppm: u32,
}

/// The receiver configuration the scenario's optics imply, with the chosen clock.
pub fn receiver_setup(
    s: &Scenario,
    clock: &ClockArgs,
) -> Result<(ReceiverConfig, ClockStages), AnyErr> {
    receiver_setup_for(s, clock, false)
}

/// As [`receiver_setup`]; with `framed`, the link endpoint decides when answers expire (its
/// timeout is the scenario's 10 ms of slots) and the receiver's own timeout only backs it up.
pub fn receiver_setup_for(
    s: &Scenario,
    clock: &ClockArgs,
    framed: bool,
) -> Result<(ReceiverConfig, ClockStages), AnyErr> {
    let (delays, gates) = sim::receiver_gates(s);
    let table = slotwise::GateTable::new(&delays, &gates)?;
    let table = if s.pnr.is_some() {
        table.with_photon_levels()
    } else {
        table
    };
    let tdc = UnwrapConfig::new(s.tdc_bits, s.tdc_resolution_ps)?;
    let timeout_slots = if framed {
        u64::MAX / 4
    } else {
        (s.rep_rate_hz * 0.01).max(1.0) as u64
    };
    let cfg = ReceiverConfig::new(
        tdc,
        table,
        s.intensities.len() as u8,
        timeout_slots,
        OverflowPolicy::DropNewest,
        s.seed ^ 0x5351_5541_5348,
    )?;
    let clock = clocks::build(s, cfg.gates(), clock.clock, clock.prior_ppm)?;
    Ok((cfg, clock))
}
