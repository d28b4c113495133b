//! The optional `[alarms]` table of a scenario: the board's alarm thresholds in operator units
//! (percent, ε), turned into a validated [`slotwise::AlarmConfig`]. Keys, ranges and defaults are
//! in `docs/scenario.md`; every default reproduces [`slotwise::AlarmConfig::DEFAULT`].

use super::{Scenario, ScenarioError};
use crate::tomlcheck::{Bound, Check, TomlError};
use serde::{Deserialize, Serialize};
use slotwise::alarms::{AlarmConfigError, BoundKind};
use slotwise::bounds::Epsilon;
use slotwise::AlarmConfig;

/// Which upper confidence bound the QBER alarm compares with its ceiling.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum BoundName {
    /// Wilson score upper bound, z = Φ⁻¹(1 − ε).
    Wilson,
    /// One-sided Hoeffding bound at ε.
    Hoeffding,
}

/// Alarm thresholds as written in a scenario's `[alarms]` table (units in the names).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct AlarmsToml {
    /// QBER ceiling on the upper bound, percent (default: the Shor-Preskill zero, 11.0028 %).
    pub qber_ceiling_pct: f64,
    /// Upper bound the QBER alarm uses (default Wilson).
    pub bound: BoundName,
    /// One-sided failure probability ε of that bound (default 1e-10).
    pub epsilon: f64,
    /// Tested bits of a basis the window needs before the QBER alarm speaks (default 1000).
    pub min_tested: u64,
    /// Intensity class whose QBER is watched, index into `intensities` (default 0, the signal).
    pub intensity: u8,
    /// Rate collapse: a block below this percentage of the running level (default 25 %).
    pub rate_floor_pct: f64,
    /// Saturation: a channel dead this percentage of a block or more (default 10 %).
    pub saturation_pct: f64,
}

impl Default for AlarmsToml {
    fn default() -> Self {
        Self {
            qber_ceiling_pct: 11.0028,
            bound: BoundName::Wilson,
            epsilon: 1e-10,
            min_tested: 1000,
            intensity: 0,
            rate_floor_pct: 25.0,
            saturation_pct: 10.0,
        }
    }
}

impl AlarmsToml {
    /// True when every key has its default (the table is then left out of written scenarios).
    pub fn is_default(&self) -> bool {
        *self == Self::default()
    }
}

/// Percent to ppm, rounded.
fn ppm(pct: f64) -> u32 {
    (pct * 1e4).round() as u32
}

impl Scenario {
    /// The board's alarm thresholds from the `[alarms]` table (defaults when it is absent).
    pub fn alarm_config(&self) -> Result<AlarmConfig, ScenarioError> {
        self.alarm_config_text(&self.name, "")
    }

    pub(super) fn alarm_config_text(
        &self,
        source: &str,
        text: &str,
    ) -> Result<AlarmConfig, ScenarioError> {
        self.alarms
            .config(self.intensities.len(), &Check { source, text })
    }
}

impl AlarmsToml {
    /// The board's thresholds for a receiver of `intensities` classes, checked through
    /// [`AlarmConfig::new`]; errors name the key as `alarms.<key>`, placed by `c`.
    pub fn config(&self, intensities: usize, c: &Check) -> Result<AlarmConfig, TomlError> {
        let a = self;
        let err = |key: &str, m: String| c.err(&format!("alarms.{key}"), m);
        let range =
            |key: &str, v: f64, lo: Bound, hi: Bound| c.range(&format!("alarms.{key}"), v, lo, hi);
        range(
            "qber_ceiling_pct",
            a.qber_ceiling_pct,
            Bound::Open(0.0),
            Bound::Closed(50.0),
        )?;
        range("epsilon", a.epsilon, Bound::Closed(1e-18), Bound::Open(0.5))?;
        range(
            "rate_floor_pct",
            a.rate_floor_pct,
            Bound::Open(0.0),
            Bound::Open(100.0),
        )?;
        range(
            "saturation_pct",
            a.saturation_pct,
            Bound::Open(0.0),
            Bound::Closed(100.0),
        )?;
        if usize::from(a.intensity) >= intensities {
            return Err(err(
                "intensity",
                format!(
                    "class {} does not exist ({intensities} intensities)",
                    a.intensity
                ),
            ));
        }
        let bound = match a.bound {
            BoundName::Wilson => BoundKind::Wilson {
                z_q16: (crate::normal::normal_isf(a.epsilon) * 65536.0).round() as u32,
            },
            BoundName::Hoeffding => BoundKind::Hoeffding(
                Epsilon::one_in((1.0 / a.epsilon).round() as u64)
                    .map_err(|e| err("epsilon", e.to_string()))?,
            ),
        };
        AlarmConfig::new(
            ppm(a.qber_ceiling_pct),
            bound,
            a.min_tested,
            a.intensity,
            ppm(a.rate_floor_pct),
            ppm(a.saturation_pct),
        )
        .map_err(|e| {
            let key = match e {
                AlarmConfigError::Ceiling(_) => "qber_ceiling_pct",
                AlarmConfigError::MinTested => "min_tested",
                AlarmConfigError::Intensity(_) => "intensity",
                AlarmConfigError::RateFloor(_) => "rate_floor_pct",
                AlarmConfigError::Saturation(_) => "saturation_pct",
                AlarmConfigError::Bound(_) => "epsilon",
            };
            err(key, e.to_string())
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scenario::DEFAULT_BENCH_TOML;

    #[test]
    fn defaults_are_the_boards_defaults() {
        let s = Scenario::default_bench();
        assert!(s.alarms.is_default());
        assert_eq!(s.alarm_config().unwrap(), AlarmConfig::DEFAULT);
    }

    #[test]
    fn table_sets_the_thresholds() {
        let text = format!(
            "{DEFAULT_BENCH_TOML}\n[alarms]\nqber_ceiling_pct = 2.5\nbound = \"hoeffding\"\n\
             epsilon = 1e-6\nmin_tested = 200\nintensity = 1\n"
        );
        let s = Scenario::from_toml_str(&text, "a.toml").unwrap();
        let a = s.alarm_config().unwrap();
        assert_eq!(a.qber_ceiling_ppm(), 25_000);
        assert_eq!(a.min_tested(), 200);
        assert_eq!(a.intensity(), 1);
        match a.bound() {
            BoundKind::Hoeffding(e) => assert_eq!(e.inverse(), 1_000_000),
            other => panic!("{other:?}"),
        }
        // Written back, the table survives (the capture header stores this text).
        let back = Scenario::from_toml_str(&s.to_toml_string(), "rt").unwrap();
        assert_eq!(back, s);
    }

    #[test]
    fn bad_values_name_the_key_and_line() {
        let cases = [
            ("qber_ceiling_pct = 60.0", "alarms.qber_ceiling_pct"),
            ("epsilon = 0.7", "alarms.epsilon"),
            ("min_tested = 0", "alarms.min_tested"),
            ("intensity = 2", "alarms.intensity"),
            ("rate_floor_pct = 100.0", "alarms.rate_floor_pct"),
            ("saturation_pct = 0.0", "alarms.saturation_pct"),
        ];
        for (line, key) in cases {
            let text = format!("{DEFAULT_BENCH_TOML}\n[alarms]\n{line}\n");
            let e = Scenario::from_toml_str(&text, "b.toml").unwrap_err();
            assert_eq!(e.key.as_deref(), Some(key), "{e}");
            assert_eq!(e.line, Some(text.lines().count()), "{e}");
        }
        let text = format!("{DEFAULT_BENCH_TOML}\n[alarms]\nceiling = 3\n");
        let e = Scenario::from_toml_str(&text, "c.toml").unwrap_err();
        assert!(e.message.contains("unknown field"), "{e}");
    }
}
