//! The receiver a host run builds, from a receiver profile (`docs/receiver-profile.md`): gate
//! table, TDC and sifting settings checked by the core's constructors, and the clock and
//! numbering stages (`clocks`). A scenario's receiver is its profile
//! ([`Profile::from_scenario`]), so a simulated and a hand-described receiver take one path. Below
//! the command line, so the benchmarks, the tests and the tools build receivers without the CLI.

use crate::clocks::{self, ClockMode, ClockStages};
use crate::link::LinkModel;
use crate::profile::{Checked, Profile};
use crate::scenario::{AlarmsToml, Scenario};
use crate::tomlcheck::TomlError;
use clap::Args;
use slotwise::ReceiverConfig;
use std::path::Path;

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
    ReceiverSetup::from_scenario(s)?.receiver(clock, framed)
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

/// A receiver described once — its profile and what the core's constructors made of it — from
/// which a host run builds the core, the clock and numbering stages, the monitor and the link.
#[derive(Clone, Debug)]
pub struct ReceiverSetup {
    /// The profile.
    pub profile: Profile,
    /// The core's configurations it gives.
    pub checked: Checked,
}

impl ReceiverSetup {
    /// The simulator's receiver for scenario `s` ([`Profile::from_scenario`]).
    pub fn from_scenario(s: &Scenario) -> Result<Self, TomlError> {
        let profile = Profile::from_scenario(s);
        let checked = profile.check(&s.name)?;
        Ok(Self { profile, checked })
    }

    /// The receiver a profile file describes.
    pub fn load(path: &Path) -> Result<Self, TomlError> {
        let (profile, checked) = Profile::load(path)?;
        Ok(Self { profile, checked })
    }

    /// The same receiver with other alarm thresholds (errors name `source`).
    pub fn with_alarms(mut self, alarms: AlarmsToml, source: &str) -> Result<Self, TomlError> {
        self.profile.alarms = alarms;
        self.checked = self.profile.check(source)?;
        Ok(self)
    }

    /// The core's configuration and the clock stages (see [`profile_setup`]).
    pub fn receiver(
        &self,
        clock: &ClockArgs,
        framed: bool,
    ) -> Result<(ReceiverConfig, ClockStages), AnyErr> {
        profile_setup(&self.profile, &self.checked, clock, framed)
    }

    /// Length of one live-statistics block, s.
    pub fn block_s(&self) -> f64 {
        self.profile.monitor.block_s
    }

    /// A perfect framed link for this receiver: its answer timeout, faults seeded by `seed`.
    pub fn link_base(&self, seed: u64) -> LinkModel {
        LinkModel::perfect_for(self.checked.receiver.answer_timeout_slots(), seed)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_recovered_clock_without_a_marker_says_what_to_do() {
        let mut s = Scenario::default_bench();
        s.marker = false;
        let recovered = ClockArgs {
            clock: ClockMode::Recovered,
            prior_ppm: None,
        };
        let e = ReceiverSetup::from_scenario(&s)
            .unwrap()
            .receiver(&recovered, false)
            .err()
            .unwrap()
            .to_string();
        assert!(
            e.contains("[marker] enabled = true") && e.contains("--clock reference"),
            "{e}"
        );
    }
}
