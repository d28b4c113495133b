//! The receiver a host run builds, from a receiver profile (`docs/receiver-profile.md`): gate
//! table, TDC and sifting settings checked by the core's constructors, and the clock and
//! numbering stages (`clocks`). A scenario's receiver is its profile
//! ([`Profile::from_scenario`]), so a simulated and a hand-described receiver take one path. Below
//! the command line, so the benchmarks, the tests and the tools build receivers without the CLI.

use crate::clocks::{self, ClockMode, ClockStages};
use crate::profile::{Checked, Profile};
use crate::scenario::Scenario;
use clap::Args;
use slotwise::ReceiverConfig;

type AnyErr = Box<dyn std::error::Error>;

/// How the receiver gets its clock.
#[derive(Args, Debug, Clone)]
pub struct ClockArgs {
    /// `recovered`: find period and phase from the detections (no clock cable);
    /// `reference`: use the reference slot grid (a scenario's true clock, or a profile's
    /// [clock.reference]), as a link with a distributed reference would.
    #[arg(long, value_enum, default_value_t = ClockMode::Recovered)]
    pub clock: ClockMode,
    /// Prior on the transmitter's period for recovery: nominal ± this many ppm (1..=1000;
    /// default: the profile's clock.prior_ppm, 500 for a scenario).
    #[arg(long)]
    pub prior_ppm: Option<u32>,
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
    let p = Profile::from_scenario(s);
    let checked = p.check(&s.name)?;
    profile_setup(&p, &checked, clock, framed)
}

/// The receiver a checked profile describes, with the chosen clock; with `framed`, as in
/// [`receiver_setup_for`].
pub fn profile_setup(
    p: &Profile,
    checked: &Checked,
    clock: &ClockArgs,
    framed: bool,
) -> Result<(ReceiverConfig, ClockStages), AnyErr> {
    let mut cfg = checked.receiver;
    if framed {
        cfg = ReceiverConfig::new(
            *cfg.tdc(),
            *cfg.gates(),
            cfg.intensities(),
            u64::MAX / 4,
            p.sifting.overflow.policy(),
            p.sifting.squash_seed,
        )?;
    }
    let prior = clock.prior_ppm.unwrap_or(p.clock.prior_ppm);
    let stages = clocks::build_for(p, checked, cfg.gates(), clock.clock, prior)?;
    Ok((cfg, stages))
}
