//! Captures written by `slotwise simulate`: events and scenario from the capture file, the
//! receiver setup the link simulator's host replay uses with its reference clock, and the
//! simulated transmitter's answers.
//!
//! The board build runs the configured `FixedClock`, which numbers every slot; the simulator's
//! reference clock excludes the public marker's slots. Both agree only when the scenario has no
//! marker, so a capture made with `marker = true` is refused here rather than compared against
//! a different numbering.

use crate::capture::Capture;
use slotwise::{Answer, OverflowPolicy, UnwrapConfig};
use slotwise_hil::Setup;
use slotwise_sim::capture::read_all;
use slotwise_sim::cli::{receiver_setup_for, ClockArgs};
use slotwise_sim::clocks::ClockMode;
use slotwise_sim::scenario::Scenario;
use slotwise_sim::setup::ReceiverSetup;
use slotwise_sim::sim::{clock_truth, TxChoices};
use std::path::Path;

/// Prior of the recovered clock's cold search, ±ppm (the simulator's default).
pub const PRIOR_PPM: u32 = 500;

/// Squashing-rule seed of the simulator's host replay: the scenario seed xor this.
const SQUASH_SEED_XOR: u64 = 0x5351_5541_5348;

/// The receiver setup of a scenario, with the scenario's true clock (`--clock reference`).
pub fn setup(s: &Scenario, source: &str) -> Result<Setup, String> {
    setup_for(s, source, false)
}

/// The receiver setup as the simulator's host replay builds it: answers handed over directly
/// (`framed = false`, checked against `--clock reference`), or over the framed link, where the
/// link endpoint decides when answers expire (`framed = true`, checked against the recovered
/// clock's setup). The period and origin are the scenario's true clock either way.
pub fn setup_for(s: &Scenario, source: &str, framed: bool) -> Result<Setup, String> {
    let gates = *ReceiverSetup::from_scenario(s)
        .map_err(|e| format!("{source}: scenario receiver: {e}"))?
        .checked
        .receiver
        .gates();
    let tdc = UnwrapConfig::new(s.tdc_bits, s.tdc_resolution_ps)
        .map_err(|e| format!("{source}: scenario field tdc_bits / tdc_resolution_ps: {e}"))?;
    let truth = clock_truth(s).map_err(|e| format!("{source}: scenario clock: {e}"))?;
    let clock = truth.fixed_clock();
    let setup = Setup {
        tdc,
        gates,
        period_ps: clock.period_ps(),
        origin_ps: truth.origin_ps_unwrapped,
        intensities: u8::try_from(s.intensities.len())
            .map_err(|_| format!("{source}: scenario field intensities: too many classes"))?,
        // As the simulator's host replay (`slotwise_sim::cli::receiver_setup_for`): 10 ms of
        // slots, or the link's decision backed by a timeout that never fires first.
        answer_timeout_slots: if framed {
            u64::MAX / 4
        } else {
            (s.rep_rate_hz * 0.01).max(1.0) as u64
        },
        overflow: OverflowPolicy::DropNewest,
        squash_seed: s.seed ^ SQUASH_SEED_XOR,
    };
    // The same receiver the simulator's own replay builds, field for field.
    let args = ClockArgs {
        clock: if framed {
            ClockMode::Recovered
        } else {
            ClockMode::Reference
        },
        prior_ppm: Some(PRIOR_PPM),
    };
    let (cfg, _) = receiver_setup_for(s, &args, framed).map_err(|e| format!("{source}: {e}"))?;
    let ours = setup
        .receiver_config()
        .map_err(|e| format!("{source}: {e}"))?;
    if ours != cfg {
        return Err(format!(
            "{source}: HIL setup differs from the simulator's receiver setup"
        ));
    }
    Ok(setup)
}

/// Read a capture of `slotwise simulate` and build the comparison input from it.
pub fn capture(path: &Path, name: &str) -> Result<Capture, String> {
    let source = path.display().to_string();
    let (header, events) = read_all(path).map_err(|e| e.to_string())?;
    let s = Scenario::from_toml_str(&header.metadata, &format!("{source}: header metadata"))
        .map_err(|e| e.to_string())?;
    if s.marker {
        return Err(format!(
            "{source}: header metadata: scenario '{}' field marker: the board's configured clock \
             numbers marker slots as key slots; make the HIL capture with `marker = false`",
            s.name
        ));
    }
    let setup = setup(&s, &source)?;
    if header.counter_bits != s.tdc_bits || header.resolution_ps != s.tdc_resolution_ps {
        return Err(format!(
            "{source}: header counter_bits/resolution_ps ({}, {}) differ from the scenario's \
             ({}, {})",
            header.counter_bits, header.resolution_ps, s.tdc_bits, s.tdc_resolution_ps
        ));
    }
    let choices = TxChoices::new(&s);
    Ok(Capture {
        name: name.to_string(),
        setup,
        events,
        // As `SimTransmitter`: basis, intensity and the bit, for every announced slot.
        answer: Box::new(move |a| {
            let c = choices.choice(a.slot);
            Answer {
                slot: a.slot,
                basis: c.basis,
                intensity: c.intensity,
                bit: Some(c.bit),
            }
        }),
    })
}

/// Bytes of `acquire.bin`.
pub const ACQUIRE_LEN: usize = 44;

/// `acquire.bin` for the acquisition run: the recovered clock's settings as the simulator's host
/// replay derives them from the scenario (`slotwise_sim::clocks::recovered_params`, prior
/// ±500 ppm).
///
/// Layout (little-endian): nominal period ps Q32.32 u64, prior ppm u32, work per call u32, loop
/// bandwidth mHz u32, signal rate per s u64, blackout ps u64, reacquisition prior ppm u32, drift
/// range of the chirp search ppb/s u32.
pub fn acquire_params(s: &Scenario) -> [u8; ACQUIRE_LEN] {
    use slotwise_sim::clocks::{recovered_params, REACQUIRE_PPM};
    let (a, t) = recovered_params(s, PRIOR_PPM);
    let mut out = [0u8; ACQUIRE_LEN];
    let fields: [&[u8]; 8] = [
        &a.nominal_period_ps.to_bits().to_le_bytes(),
        &a.prior_ppm.to_le_bytes(),
        &a.work_per_call.to_le_bytes(),
        &t.bandwidth_mhz.to_le_bytes(),
        &t.rate_per_s.to_le_bytes(),
        &t.blackout_ps.to_le_bytes(),
        &REACQUIRE_PPM.to_le_bytes(),
        &a.drift_ppb_per_s.to_le_bytes(),
    ];
    let mut at = 0;
    for f in fields {
        out[at..at + f.len()].copy_from_slice(f);
        at += f.len();
    }
    out
}

/// The scenario in a capture's header.
pub fn scenario_of(path: &Path) -> Result<Scenario, String> {
    let source = path.display().to_string();
    let (header, _) = read_all(path).map_err(|e| e.to_string())?;
    Scenario::from_toml_str(&header.metadata, &format!("{source}: header metadata"))
        .map_err(|e| e.to_string())
}
