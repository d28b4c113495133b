//! `slotwise keyrate`: read a summary's tallies, run an estimator, print the rate and what
//! limits it, optionally draw the rate against fibre length.

use super::finite_lim::Epsilons;
use super::lim_model::{self, LimLink};
use super::optimise::Simplex;
use super::report::{self, Estimate, Estimator, Params};
use super::{observed, plot, CAUTION};
use crate::scenario::{Scenario, DEFAULT_BENCH_PATH};
use crate::summary::Summary;
use clap::Args;
use std::path::PathBuf;

type AnyErr = Box<dyn std::error::Error>;

/// Long help of the subcommand.
pub const LONG_ABOUT: &str = "\
Read the tallies of a summary (the summary.json that `slotwise demo` or `slotwise replay --json`
writes), run a secret-key-rate estimator on them and print the key per pulse and per second with
the terms that limit it: phase error, error-correction leakage f·h(E) and the finite-size penalty.

Protocol parameters (intensities, their probabilities, p_Z, repetition rate) come from the
scenario recorded in the summary, or --scenario, and can be overridden by flags. The pulses sent
are the scenario's slots times the key-slot share (63/64 with the marker) times the share of
detections that arrived after lock and alignment; --pulses overrides.

Estimators: asymptotic (GLLP with vacuum + weak decoy bounds; Lo, Ma, Chen 2005; Ma, Qi, Zhao, Lo
2005), finite-lim (two decoys, Lim, Curty, Walenta, Xu, Zbinden 2014), one-decoy (Rusca, Boaron,
Grünenfelder, Martin, Zbinden 2018), sps (a source with given g2(0)). Default: one-decoy for two
intensity classes, finite-lim for three.

--vs-distance draws the rate against fibre length: by default for the scenario's channel model
with the run's estimator and block; with --model lim2014 for the detector model and parameters of
Lim, Curty, Walenta, Xu, Zbinden 2014 (η_Bob 10 %, p_dc 6e-7, p_ap 4 %, 0.2 dB/km, e_mis 0.5 %,
f_EC 1.16, ε_cor 1e-15, ε_sec = 1e-15·ℓ, μ3 = 2e-4), the two-decoy bound optimised at each length
over q_x, p_μ1, p_μ2, μ1, μ2 (Nelder-Mead) at fixed n_X (--n-key, default the run's n_Z).

Caution: an estimate under the stated model's assumptions, not a security certification.";

/// Options of `slotwise keyrate`.
#[derive(Args, Debug)]
pub struct KeyrateArgs {
    /// Summary JSON written by `slotwise demo` or `slotwise replay --json`.
    pub summary: PathBuf,
    /// Scenario of the link (default: the one recorded in the summary).
    #[arg(long)]
    pub scenario: Option<PathBuf>,
    /// Estimator (default: one-decoy for two intensity classes, finite-lim for three).
    #[arg(long, value_enum)]
    pub estimator: Option<Estimator>,
    /// Mean photon numbers per class, signal first (comma-separated; overrides the scenario).
    #[arg(long, value_delimiter = ',')]
    pub mu: Option<Vec<f64>>,
    /// Probability of each class (comma-separated; overrides the scenario).
    #[arg(long, value_delimiter = ',')]
    pub p_mu: Option<Vec<f64>>,
    /// Probability of the Z basis (overrides the scenario).
    #[arg(long)]
    pub p_z: Option<f64>,
    /// Repetition rate in Hz (overrides the scenario).
    #[arg(long)]
    pub rep_rate_hz: Option<f64>,
    /// Key-carrying pulses behind the tallies (default: derived from the scenario and summary).
    #[arg(long)]
    pub pulses: Option<f64>,
    /// Error-correction efficiency f_EC.
    #[arg(long, default_value_t = 1.16)]
    pub f_ec: f64,
    /// Secrecy parameter ε_sec of the finite-key bounds.
    #[arg(long, default_value_t = 1e-10)]
    pub eps_sec: f64,
    /// Correctness parameter ε_cor of the finite-key bounds.
    #[arg(long, default_value_t = 1e-15)]
    pub eps_cor: f64,
    /// g2(0) of the source, for `--estimator sps` (default: the scenario's single-photon source,
    /// else 1, the value of laser light).
    #[arg(long)]
    pub g2: Option<f64>,
    /// Draw the rate against fibre length for the scenario's hardware (.svg, or .png).
    #[arg(long)]
    pub vs_distance: Option<PathBuf>,
    /// Model of the distance curve: `scenario` (the scenario's channel model with the run's
    /// estimator and block) or `lim2014` (the detector model and parameters of Lim et al. 2014,
    /// two-decoy bound optimised over q_x, p_μ1, p_μ2, μ1, μ2 at each length for fixed n_X).
    #[arg(long, value_enum, default_value = "scenario", requires = "vs_distance")]
    pub model: CurveModel,
    /// Key-basis detections n_X held fixed along the `lim2014` curve (default: the run's n_Z).
    #[arg(long, requires = "vs_distance")]
    pub n_key: Option<f64>,
    /// Step of the distance curve, km.
    #[arg(long, default_value_t = 2.0)]
    pub step_km: f64,
    /// Write the estimate (and the curve, with --vs-distance) as JSON here.
    #[arg(long)]
    pub json: Option<PathBuf>,
}

/// Model behind `--vs-distance`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum CurveModel {
    /// The scenario's channel model, the run's estimator and block size.
    Scenario,
    /// Lim et al. 2014: their detector model and parameters, parameters optimised per length.
    Lim2014,
}

/// The curve, its legend and a one-line description for `--vs-distance`.
fn distance_curve(
    a: &KeyrateArgs,
    s: &Scenario,
    est: &Estimate,
    p: &Params,
) -> Result<(Vec<report::CurvePoint>, plot::CurveLabels, String), AnyErr> {
    match a.model {
        CurveModel::Scenario => Ok((
            report::curve(s, est.estimator, p, est.pulses, a.step_km),
            plot::CurveLabels::channel_model(est),
            format!(
                "{} on the channel model's counts (+{} dB extra loss)",
                est.estimator.name(),
                s.extra_loss_db
            ),
        )),
        CurveModel::Lim2014 => {
            let n_key = a.n_key.unwrap_or_else(|| est.counts.n(super::Z));
            if !(n_key >= 1.0 && n_key.is_finite()) {
                return Err(format!("--n-key: must be ≥ 1, got {n_key}").into());
            }
            let link = LimLink::PAPER;
            let c = lim_model::curve(&link, n_key, a.step_km, Simplex::default());
            let labels = plot::CurveLabels {
                bound: format!("Lim et al. 2014 bound, n_X = {n_key:.1e}, optimised"),
                asymptote: "infinite decoys (Lim et al. 2014 model)".to_string(),
            };
            Ok((
                c,
                labels,
                format!("Lim et al. 2014 model, n_X = {n_key:.2e}, optimised per length"),
            ))
        }
    }
}

/// The scenario recorded in a summary, or the committed default when the summary names it.
fn recorded_scenario(v: &serde_json::Value, source: &str) -> Result<Scenario, AnyErr> {
    if let Some(text) = v.get("scenario").and_then(serde_json::Value::as_str) {
        return Ok(Scenario::from_toml_str(
            text,
            &format!("{source} (field 'scenario')"),
        )?);
    }
    let default = Scenario::default_bench();
    if v.get("name").and_then(serde_json::Value::as_str) == Some(default.name.as_str()) {
        return Ok(default);
    }
    Err(format!(
        "{source}: field 'scenario': missing, and field 'name' is not the default scenario \
         ({DEFAULT_BENCH_PATH}); give the link with --scenario FILE"
    )
    .into())
}

/// Check ranges of the numeric options, naming the option.
fn check_params(a: &KeyrateArgs, s: &Scenario) -> Result<Params, AnyErr> {
    let g2 = a.g2.unwrap_or_else(|| default_g2(s));
    let open01 = |name: &str, v: f64| -> Result<(), AnyErr> {
        if v > 0.0 && v < 1.0 {
            Ok(())
        } else {
            Err(format!("--{name}: must be in (0, 1), got {v}").into())
        }
    };
    open01("eps-sec", a.eps_sec)?;
    open01("eps-cor", a.eps_cor)?;
    if !(a.f_ec >= 1.0 && a.f_ec.is_finite()) {
        return Err(format!("--f-ec: must be ≥ 1, got {}", a.f_ec).into());
    }
    if !(g2 >= 0.0 && g2.is_finite()) {
        return Err(format!("--g2: must be ≥ 0, got {g2}").into());
    }
    if a.step_km.is_nan() || a.step_km <= 0.0 {
        return Err(format!("--step-km: must be > 0, got {}", a.step_km).into());
    }
    Ok(Params {
        f_ec: a.f_ec,
        eps: Epsilons {
            sec: a.eps_sec,
            cor: a.eps_cor,
        },
        g2,
    })
}

/// g2(0) of the scenario's single-photon source, else 1 (laser light).
pub fn default_g2(s: &Scenario) -> f64 {
    match s.source {
        Some(src) if src.kind == crate::sim::SourceKind::SinglePhoton => src.g2,
        _ => 1.0,
    }
}

/// Estimate from an already parsed summary (`source` names it in errors).
pub fn estimate_from_summary(
    v: &serde_json::Value,
    source: &str,
    s: &Scenario,
    pulses: Option<f64>,
    estimator: Option<Estimator>,
    p: &Params,
) -> Result<Estimate, AnyErr> {
    let tally = v
        .get("tally")
        .and_then(serde_json::Value::as_object)
        .ok_or_else(|| format!("{source}: field 'tally': missing or not an object"))?;
    let n = pulses.unwrap_or_else(|| report::pulses_from_summary(v, s));
    if !(n > 0.0 && n.is_finite()) {
        return Err(format!("{source}: no pulses behind the tallies ({n}); give --pulses").into());
    }
    let o = observed::from_tally(tally, s, n, source)?;
    let e = estimator.unwrap_or_else(|| Estimator::for_classes(o.classes.len()));
    let name = v
        .get("name")
        .and_then(serde_json::Value::as_str)
        .unwrap_or(source);
    Ok(report::estimate(name, s, o, e, p)?)
}

/// The lines `slotwise demo` prints at its end: the asymptotic estimate and the finite-key one
/// that fits the number of intensity classes, from the demo's own tallies.
pub fn demo_line(summary: &Summary, s: &Scenario) -> String {
    let v = match serde_json::to_value(summary) {
        Ok(v) => v,
        Err(e) => return format!("key rate       n/a ({e})"),
    };
    let p = Params {
        g2: default_g2(s),
        ..Params::default()
    };
    let one = |e: Option<Estimator>| match estimate_from_summary(&v, "demo", s, None, e, &p) {
        Ok(e) if e.bits_per_pulse > 0.0 => format!(
            "{}: {:.3e} bit/pulse, {:.3e} bit/s, limited by {}",
            e.estimator.name(),
            e.bits_per_pulse,
            e.bits_per_s,
            e.limited_by
        ),
        Ok(e) => format!(
            "{} (N = {:.2e}): no key, limited by {}",
            e.estimator.name(),
            e.pulses,
            e.limited_by
        ),
        Err(err) => format!("n/a ({err})"),
    };
    let classes = s.intensities.len();
    let lines = if Estimator::for_classes(classes) == Estimator::Asymptotic || classes < 2 {
        one(None)
    } else {
        format!("{}; {}", one(Some(Estimator::Asymptotic)), one(None))
    };
    format!(
        "key rate       {lines} (f {}, ε_sec {:.0e}) — an estimate, not a security \
         certification; details: slotwise keyrate",
        p.f_ec, p.eps.sec
    )
}

/// Run `slotwise keyrate`.
pub fn run(a: &KeyrateArgs) -> Result<(), AnyErr> {
    let source = a.summary.display().to_string();
    let text = std::fs::read_to_string(&a.summary).map_err(|e| format!("{source}: {e}"))?;
    let v: serde_json::Value = serde_json::from_str(&text).map_err(|e| format!("{source}: {e}"))?;
    let mut s = match &a.scenario {
        Some(p) => Scenario::load(p)?,
        None => recorded_scenario(&v, &source)?,
    };
    if let Some(mu) = &a.mu {
        s.intensities.clone_from(mu);
    }
    if let Some(p) = &a.p_mu {
        s.intensity_probs.clone_from(p);
    }
    if let Some(pz) = a.p_z {
        s.p_z = pz;
    }
    if let Some(r) = a.rep_rate_hz {
        s.rep_rate_hz = r;
    }
    s.validate("command-line options (--mu, --p-mu, --p-z, --rep-rate-hz)")?;
    let p = check_params(a, &s)?;
    let est = estimate_from_summary(&v, &source, &s, a.pulses, a.estimator, &p)?;
    print!("{est}");
    let curve = match &a.vs_distance {
        Some(path) => {
            let (c, labels, what) = distance_curve(a, &s, &est, &p)?;
            let title = match a.model {
                CurveModel::Scenario => format!(
                    "Secret key vs fibre length — {} (+{} dB extra loss)",
                    s.name, s.extra_loss_db
                ),
                CurveModel::Lim2014 => "Secret key vs fibre length — Lim et al. 2014 model".into(),
            };
            plot::rate_vs_distance(path, &c, &est, &title, &labels)?;
            match c.iter().rev().find(|p| p.bits_per_pulse.is_some()) {
                Some(last) => println!("curve          {what}: key up to {} km", last.fiber_km),
                None => println!(
                    "curve          {what}: no key at any fibre length (N = {:.2e} pulses)",
                    est.pulses
                ),
            }
            eprintln!("wrote {}", path.display());
            Some(c)
        }
        None => None,
    };
    if let Some(j) = &a.json {
        let out = serde_json::json!({ "estimate": est, "curve": curve, "caution": CAUTION });
        std::fs::write(j, serde_json::to_string_pretty(&out)? + "\n")
            .map_err(|e| format!("{}: {e}", j.display()))?;
        eprintln!("wrote {}", j.display());
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The tallies of a 0.5 s run of the default bench scenario (from `slotwise demo`).
    const DEMO: &str = r#"{"name": "bench-100mhz-30km", "detections_in": 602862,
      "accounting": {"no_clock": 1551, "unaligned": 28223},
      "tally": {"X0/0/X0": 2554, "X0/0/X1": 18, "X0/0/Z0": 23557, "X0/0/Z1": 23727,
        "X0/1/X0": 324, "X0/1/X1": 6, "X0/1/Z0": 3118, "X0/1/Z1": 3046,
        "Z0/0/X0": 5829, "Z0/0/X1": 5881, "Z0/0/Z0": 210909, "Z0/0/Z1": 2155,
        "Z0/1/X0": 760, "Z0/1/X1": 741, "Z0/1/Z0": 27059, "Z0/1/Z1": 247,
        "Z1/0/X0": 5728, "Z1/0/X1": 5759, "Z1/0/Z0": 2229, "Z1/0/Z1": 210477,
        "Z1/1/X0": 725, "Z1/1/X1": 745, "Z1/1/Z0": 297, "Z1/1/Z1": 27359}}"#;

    #[test]
    fn demo_tallies_give_an_asymptotic_key_and_a_finite_verdict() {
        let v: serde_json::Value = serde_json::from_str(DEMO).unwrap();
        let s = recorded_scenario(&v, "demo.json").unwrap();
        let p = Params::default();
        let a = estimate_from_summary(&v, "demo.json", &s, None, Some(Estimator::Asymptotic), &p)
            .unwrap();
        // N = 5e7 slots · 63/64 · (1 − 29774/602862).
        assert!((a.pulses / (5e7 * 63.0 / 64.0 * (1.0 - 29_774.0 / 602_862.0)) - 1.0).abs() < 1e-9);
        assert!(a.bits_per_pulse > 0.0 && a.bits_per_s > 0.0);
        // Below the infinite-decoy rate of the scenario's channel model.
        assert!(a.bits_per_pulse < report::infinite_decoy(&s, p.f_ec));
        let f = estimate_from_summary(&v, "demo.json", &s, None, None, &p).unwrap();
        assert_eq!(f.estimator, Estimator::OneDecoy);
        assert!(f.bits_per_pulse < a.bits_per_pulse);
    }

    #[test]
    fn errors_name_the_file_and_field() {
        let v: serde_json::Value = serde_json::from_str(r#"{"name": "x"}"#).unwrap();
        let e = recorded_scenario(&v, "x.json").unwrap_err().to_string();
        assert!(e.contains("x.json") && e.contains("'scenario'"), "{e}");
        let s = Scenario::default_bench();
        let e = estimate_from_summary(&v, "x.json", &s, None, None, &Params::default())
            .unwrap_err()
            .to_string();
        assert!(e.contains("x.json") && e.contains("'tally'"), "{e}");
    }

    #[test]
    fn run_writes_plot_and_json_with_the_caution() {
        let dir = std::env::temp_dir().join(format!("slotwise-keyrate-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let summary = dir.join("summary.json");
        std::fs::write(&summary, DEMO).unwrap();
        let a = KeyrateArgs {
            summary,
            scenario: None,
            estimator: Some(Estimator::Asymptotic),
            mu: None,
            p_mu: None,
            p_z: None,
            rep_rate_hz: None,
            pulses: None,
            f_ec: 1.16,
            eps_sec: 1e-10,
            eps_cor: 1e-15,
            g2: None,
            vs_distance: Some(dir.join("rate.svg")),
            model: CurveModel::Scenario,
            n_key: None,
            step_km: 10.0,
            json: Some(dir.join("k.json")),
        };
        run(&a).unwrap();
        let j: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(dir.join("k.json")).unwrap()).unwrap();
        assert!(j["caution"]
            .as_str()
            .unwrap()
            .contains("not a security certification"));
        assert!(j["estimate"]["bits_per_s"].as_f64().unwrap() > 0.0);
        assert!(j["curve"].as_array().unwrap().len() > 5);
        assert!(std::fs::metadata(dir.join("rate.svg")).unwrap().len() > 1000);
        // The Lim et al. 2014 model: a curve with key at short range (n_X = 1e9, 60 km steps).
        let lim = KeyrateArgs {
            model: CurveModel::Lim2014,
            n_key: Some(1e9),
            step_km: 60.0,
            ..a
        };
        run(&lim).unwrap();
        let j: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(dir.join("k.json")).unwrap()).unwrap();
        let curve = j["curve"].as_array().unwrap();
        assert!(curve.len() >= 3 && curve[0]["bits_per_pulse"].as_f64().unwrap() > 0.0);
        let bad = KeyrateArgs {
            n_key: Some(0.0),
            ..lim
        };
        let e = run(&bad).unwrap_err().to_string();
        assert!(e.contains("--n-key"), "{e}");
        let bad = KeyrateArgs { f_ec: 0.5, ..bad };
        let e = run(&bad).unwrap_err().to_string();
        assert!(e.contains("--f-ec"), "{e}");
        std::fs::remove_dir_all(&dir).ok();
    }
}
