//! Command-line overrides of a scenario's `[alarms]` table (docs/scenario.md).

use crate::scenario::{AlarmsToml, BoundName, Scenario, ScenarioError};
use clap::Args;

const HEADING: &str = "Alarms (override the scenario's [alarms] table, docs/scenario.md)";

/// Alarm thresholds given on the command line; each replaces the scenario's `[alarms]` key.
#[derive(Args, Debug, Clone, Default)]
pub struct AlarmArgs {
    /// Raise the QBER alarm when a basis's window upper bound reaches PCT percent, 0 < PCT <= 50
    /// (alarms.qber_ceiling_pct; default 11.0028, the Shor-Preskill zero).
    #[arg(long, value_name = "PCT", help_heading = HEADING)]
    pub qber_ceiling: Option<f64>,
    /// One-sided failure probability of that bound, 1e-18 <= EPS < 0.5 (alarms.epsilon; default
    /// 1e-10); the table's Clopper-Pearson and Hoeffding columns use it too.
    #[arg(long, value_name = "EPS", help_heading = HEADING)]
    pub alarm_epsilon: Option<f64>,
    /// Bound the QBER alarm uses: wilson (score interval, z = Φ⁻¹(1 − EPS)) or hoeffding
    /// (alarms.bound; default wilson).
    #[arg(long, value_name = "KIND", value_parser = parse_bound, help_heading = HEADING)]
    pub alarm_bound: Option<BoundName>,
}

fn parse_bound(s: &str) -> Result<BoundName, String> {
    match s {
        "wilson" => Ok(BoundName::Wilson),
        "hoeffding" => Ok(BoundName::Hoeffding),
        _ => Err(format!("expected wilson or hoeffding, got {s:?}")),
    }
}

impl AlarmArgs {
    /// Write the overrides into `s` and check them; errors name the option's key.
    pub fn apply(&self, s: &mut Scenario) -> Result<(), ScenarioError> {
        self.apply_to(&mut s.alarms);
        s.alarm_config().map(|_| ()).map_err(|e| ScenarioError {
            source: "command line".into(),
            ..e
        })
    }

    /// Write the overrides into an `[alarms]` table (the caller checks the result).
    pub fn apply_to(&self, a: &mut AlarmsToml) {
        if let Some(v) = self.qber_ceiling {
            a.qber_ceiling_pct = v;
        }
        if let Some(v) = self.alarm_epsilon {
            a.epsilon = v;
        }
        if let Some(v) = self.alarm_bound {
            a.bound = v;
        }
    }
}
