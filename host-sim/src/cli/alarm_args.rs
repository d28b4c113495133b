//! Command-line overrides of a scenario's `[alarms]` table (docs/scenario.md).

use crate::scenario::{BoundName, Scenario, ScenarioError};
use clap::Args;

/// Alarm thresholds given on the command line; each replaces the scenario's `[alarms]` key.
#[derive(Args, Debug, Clone, Default)]
pub struct AlarmArgs {
    /// Raise the QBER alarm when a basis's upper bound reaches PCT percent (`alarms.qber_ceiling_pct`;
    /// default 11.0028, the Shor-Preskill zero).
    #[arg(long, value_name = "PCT")]
    pub qber_ceiling: Option<f64>,
    /// One-sided ε of the QBER alarm's bound (`alarms.epsilon`; default 1e-10).
    #[arg(long, value_name = "EPS")]
    pub alarm_epsilon: Option<f64>,
    /// Bound the QBER alarm uses: wilson or hoeffding (`alarms.bound`; default wilson).
    #[arg(long, value_name = "KIND", value_parser = parse_bound)]
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
        let a = &mut s.alarms;
        if let Some(v) = self.qber_ceiling {
            a.qber_ceiling_pct = v;
        }
        if let Some(v) = self.alarm_epsilon {
            a.epsilon = v;
        }
        if let Some(v) = self.alarm_bound {
            a.bound = v;
        }
        s.alarm_config().map(|_| ()).map_err(|e| ScenarioError {
            source: "command line".into(),
            ..e
        })
    }
}
