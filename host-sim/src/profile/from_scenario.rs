//! The simulator's receiver as a profile: the simulator is one producer of profiles, and a
//! scenario replays through exactly the same receiver setup as a profile written by hand.

use super::{
    ChannelToml, ClockToml, GateToml, MarkerToml, MonitorToml, Profile, ProtocolToml,
    ReferenceToml, SiftingToml, TdcToml, DEFAULT_SQUASH_SEED,
};
use crate::scenario::{layout, Encoding, Scenario};
use crate::sim;

/// Names of the simulator's detectors, in channel order.
fn channel_name(encoding: Encoding, ch: u8) -> String {
    let names: &[&str] = match encoding {
        Encoding::TimeBin => &["arrival", "interferometer-a", "interferometer-b"],
        Encoding::Polarization => &["H", "V", "D", "A"],
    };
    names
        .get(usize::from(ch))
        .map_or_else(|| format!("ch{ch}"), |n| (*n).to_string())
}

impl ClockToml {
    /// The clock settings the simulator's receiver uses for `s` (no reference).
    pub fn of_scenario(s: &Scenario) -> Self {
        Self {
            rep_rate_hz: s.rep_rate_hz,
            prior_ppm: super::default_prior_ppm(),
            signal_rate_hz: sim::signal_rate_per_s(s),
            jitter_ps: s.jitter_ps,
            drift_ppm_per_s: s.clock_drift_ppm_per_s,
            reference: None,
        }
    }
}

impl Profile {
    /// The profile of the simulator's receiver for scenario `s`: its optics' gates, channel
    /// skews, TDC, the channel model's signal rate, and the true slot grid as the reference.
    pub fn from_scenario(s: &Scenario) -> Self {
        let w = layout::gate_half_width_ps(s) / s.period_ps();
        let gates = sim::gate_specs(s)
            .into_iter()
            .map(|g| GateToml {
                channel: g.channel,
                centre_slot: Some(g.centre),
                centre_ps: None,
                half_width_slot: Some(w),
                half_width_ps: None,
                basis: g.basis.into(),
                bit: g.bit,
            })
            .collect();
        let channels = s
            .delays_ps()
            .into_iter()
            .enumerate()
            .map(|(i, delay_ps)| ChannelToml {
                channel: i as u8,
                name: channel_name(s.encoding, i as u8),
                delay_ps,
                dead_time_ns: s.dead_time_ns,
            })
            .collect();
        let reference = sim::clock_truth(s).ok().map(|t| ReferenceToml {
            period_ps: t.period_ps,
            slot0_ps: t.origin_ps_unwrapped,
        });
        Self {
            name: s.name.clone(),
            photon_levels: s.pnr.is_some(),
            tdc: TdcToml {
                counter_bits: s.tdc_bits,
                tick_ps: s.tdc_resolution_ps,
            },
            clock: ClockToml {
                reference,
                ..ClockToml::of_scenario(s)
            },
            protocol: ProtocolToml {
                kind: s.protocol,
                p_z: Some(s.p_z),
                intensities: s.intensities.clone(),
                intensity_probs: s.intensity_probs.clone(),
            },
            channels,
            gates,
            marker: MarkerToml {
                enabled: s.marker,
                hint_error_us: Some(s.hint_error_s() * 1e6),
                ..MarkerToml::default()
            },
            sifting: SiftingToml {
                answer_timeout_slots: Some((s.rep_rate_hz * 0.01).max(1.0) as u64),
                squash_seed: s.seed ^ DEFAULT_SQUASH_SEED,
                ..SiftingToml::default()
            },
            monitor: MonitorToml {
                block_s: s.monitor_block_s(),
            },
            alarms: s.alarms.clone(),
        }
    }
}
