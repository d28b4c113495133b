//! Run an estimator on a summary's counts, and the rate-versus-distance curve for the scenario's
//! hardware.

use super::finite_lim::{lim_key, Epsilons};
use super::observed::{self, key_slot_share};
use super::one_decoy::rusca_key;
use super::{asymptotic, sps, Bound, EstimatorError, Observed, Terms, CAUTION, X, Z};
use crate::scenario::Scenario;
use crate::sim;
use serde::Serialize;

/// Which bound to compute.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Estimator {
    /// Asymptotic decoy-state GLLP with vacuum + weak decoy bounds (Lo-Ma-Chen 2005, Ma et al.
    /// 2005).
    Asymptotic,
    /// Finite-key two-decoy BB84 (Lim et al. 2014); needs three intensity classes.
    FiniteLim,
    /// Finite-key one-decoy (Rusca et al. 2018); needs two intensity classes.
    OneDecoy,
    /// Sub-Poissonian source with the given g2(0) (GLLP with p_(n≥2) ≤ μ²g2/2).
    Sps,
}

impl Estimator {
    /// The estimator that fits the number of intensity classes (1: the g2(0) source bound,
    /// 2: one-decoy, 3: Lim et al.), else the asymptotic one.
    pub fn for_classes(n: usize) -> Self {
        match n {
            1 => Self::Sps,
            2 => Self::OneDecoy,
            3 => Self::FiniteLim,
            _ => Self::Asymptotic,
        }
    }

    /// Name as on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Self::Asymptotic => "asymptotic",
            Self::FiniteLim => "finite-lim",
            Self::OneDecoy => "one-decoy",
            Self::Sps => "sps",
        }
    }
}

/// Protocol parameters that are not in the counts.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Params {
    /// Error-correction efficiency f_EC (leakage f·h(E) per bit).
    pub f_ec: f64,
    /// Finite-key ε parameters.
    pub eps: Epsilons,
    /// g2(0) of the source, for the `sps` estimator.
    pub g2: f64,
}

impl Default for Params {
    fn default() -> Self {
        Self {
            // f = 1.16 and ε_cor = 1e-15 as in the simulations of Lim et al. 2014 (from memory);
            // ε_sec = 1e-10 (common practice).
            f_ec: 1.16,
            eps: Epsilons {
                sec: 1e-10,
                cor: 1e-15,
            },
            g2: 1.0,
        }
    }
}

/// Run one estimator on counts.
pub fn bound(e: Estimator, o: &Observed, p: &Params) -> Result<Bound, EstimatorError> {
    match e {
        Estimator::Asymptotic => asymptotic::decoy_rate(o, p.f_ec),
        Estimator::FiniteLim => lim_key(o, p.eps, p.f_ec),
        Estimator::OneDecoy => rusca_key(o, p.eps, p.f_ec),
        Estimator::Sps => sps::sps_rate(o, p.g2, p.f_ec),
    }
}

/// Infinite-decoy rate of the scenario's channel model (Lo, Ma, Chen 2005: Y1 and e1 known),
/// key from the signal class in Z: p_μ·p_Z·{Q1^Z·[1 − h(e1^X)] − f·Q_μ^Z·h(E_μ^Z)}, per pulse.
pub fn infinite_decoy(s: &Scenario, f_ec: f64) -> f64 {
    let m = sim::channel_model(s);
    let Some(sig) = m.intensities.first() else {
        return 0.0;
    };
    let eta = m.eta * m.gate_acceptance;
    let y1 = |b: usize| m.y0_basis[b] + eta * m.basis_share[b];
    let e1x = (0.5 * m.y0_basis[X] + s.misalignment * eta * m.basis_share[X]) / y1(X);
    let q1 = y1(Z) * sig.mu * (-sig.mu).exp();
    let pz = observed::tx_basis_probs(s)[Z];
    super::channel::gllp(
        sig.prob * pz,
        sig.matched_gain[Z],
        sig.qber[Z],
        q1,
        e1x,
        f_ec,
    )
}

/// One point of the rate-versus-distance curve.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CurvePoint {
    /// Fibre length, km.
    pub fiber_km: f64,
    /// The estimator on the channel model's expected counts, bits per pulse (`null`: no key).
    pub bits_per_pulse: Option<f64>,
    /// Infinite-decoy rate of the same model, bits per pulse (`null`: no key).
    pub infinite_decoy_bits_per_pulse: Option<f64>,
}

/// The curve for the scenario's hardware: fibre length from 0 km in `step_km` steps until the
/// infinite-decoy rate is gone (at most 500 km); the same block of `pulses` pulses everywhere.
pub fn curve(s: &Scenario, e: Estimator, p: &Params, pulses: f64, step_km: f64) -> Vec<CurvePoint> {
    let positive = |x: f64| (x > 0.0).then_some(x);
    let mut out = Vec::new();
    let mut l = 0.0;
    while l <= 500.0 {
        let mut sl = s.clone();
        sl.fiber_km = l;
        let inf = infinite_decoy(&sl, p.f_ec);
        let est = bound(e, &observed::expected(&sl, pulses), p)
            .ok()
            .and_then(|b| positive(b.bits_per_pulse));
        out.push(CurvePoint {
            fiber_km: l,
            bits_per_pulse: est,
            infinite_decoy_bits_per_pulse: positive(inf),
        });
        if inf <= 0.0 {
            break;
        }
        l += step_km;
    }
    out
}

/// Everything `slotwise keyrate` reports.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Estimate {
    /// Run the counts come from.
    pub run: String,
    /// Estimator used.
    pub estimator: Estimator,
    /// Secret key per pulse sent, bits (negative: no key).
    pub bits_per_pulse: f64,
    /// Secret key rate, bits per second (0 when negative per pulse).
    pub bits_per_s: f64,
    /// Secret bits in this run's block (0 when negative).
    pub secret_bits: f64,
    /// Key-carrying pulses N the counts were gathered over.
    pub pulses: f64,
    /// The terms of the bound.
    pub terms: Terms,
    /// Which cost is largest: "phase error", "error correction" or "finite size".
    pub limited_by: &'static str,
    /// Parameters used.
    pub params: Params,
    /// Counts per class as read.
    pub counts: Observed,
    /// Fibre length of the measured operating point, km.
    pub fiber_km: f64,
    /// The caution that comes with every estimate.
    pub caution: &'static str,
}

/// The largest of the three costs, named.
pub fn limiting(t: &Terms) -> &'static str {
    let finite = t.epsilon_terms + t.statistical_penalty;
    let costs = [
        ("phase error", t.phase_error_cost),
        ("error correction", t.ec_leakage),
        ("finite size", finite),
    ];
    costs
        .iter()
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .map_or("none", |c| c.0)
}

/// Estimate the key of counts `o` from run `run` on scenario `s`.
pub fn estimate(
    run: &str,
    s: &Scenario,
    o: Observed,
    e: Estimator,
    p: &Params,
) -> Result<Estimate, EstimatorError> {
    let b = bound(e, &o, p)?;
    let pos = b.bits_per_pulse.max(0.0);
    Ok(Estimate {
        run: run.to_string(),
        estimator: e,
        bits_per_pulse: b.bits_per_pulse,
        bits_per_s: pos * o.pulses_per_s,
        secret_bits: pos * o.pulses,
        pulses: o.pulses,
        limited_by: limiting(&b.terms),
        terms: b.terms,
        params: *p,
        counts: o,
        fiber_km: s.fiber_km,
        caution: CAUTION,
    })
}

/// Key-carrying pulses behind a summary's tallies: the scenario's slots × the key-slot share ×
/// the share of detections that arrived after the clock locked and the numbering aligned (read
/// from the accounting; the detection rate is taken as constant over the run).
pub fn pulses_from_summary(summary: &serde_json::Value, s: &Scenario) -> f64 {
    let acc = |k: &str| {
        summary
            .get("accounting")
            .and_then(|a| a.get(k))
            .and_then(serde_json::Value::as_u64)
            .unwrap_or(0) as f64
    };
    let det = summary
        .get("detections_in")
        .and_then(serde_json::Value::as_u64)
        .unwrap_or(0) as f64;
    let covered = if det > 0.0 {
        1.0 - (acc("no_clock") + acc("unaligned")) / det
    } else {
        1.0
    };
    s.slots() as f64 * key_slot_share(s) * covered
}

fn sci(x: f64) -> String {
    format!("{x:.3e}")
}

impl std::fmt::Display for Estimate {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let t = &self.terms;
        writeln!(f, "key rate       {} ({})", self.run, self.estimator.name())?;
        writeln!(
            f,
            "counts         N = {} key pulses; n_Z = {:.0}, E_Z = {:.3} %; n_X = {:.0}, E_X = {:.3} %",
            sci(self.pulses),
            self.counts.n(Z),
            100.0 * self.counts.qber(Z),
            self.counts.n(X),
            100.0 * self.counts.qber(X)
        )?;
        writeln!(
            f,
            "secret key     {} bit/pulse, {} bit/s, {:.0} bits in this block{}",
            sci(self.bits_per_pulse),
            sci(self.bits_per_s),
            self.secret_bits,
            if self.bits_per_pulse <= 0.0 {
                "  (no key)"
            } else {
                ""
            }
        )?;
        writeln!(f, "terms (bit/pulse):")?;
        writeln!(f, "  vacuum detections       +{}", sci(t.vacuum))?;
        writeln!(f, "  single-photon bound     +{}", sci(t.single_photon))?;
        let phase = if t.phase_error.is_finite() {
            format!("phase error bound {:.3} %", 100.0 * t.phase_error)
        } else {
            "no phase-error bound: too few test-basis counts".to_string()
        };
        writeln!(
            f,
            "  phase error cost        -{}   ({phase})",
            sci(t.phase_error_cost),
        )?;
        writeln!(
            f,
            "  error correction f·h(E) -{}   (f = {}, E_Z = {:.3} %)",
            sci(t.ec_leakage),
            self.params.f_ec,
            100.0 * t.qber_key
        )?;
        let phi = match t.phase_error_finite {
            Some(p) if p.is_finite() => {
                format!("; phase error bound with fluctuations {:.3} %", 100.0 * p)
            }
            Some(_) => "; no phase-error bound with fluctuations".to_string(),
            None => String::new(),
        };
        writeln!(
            f,
            "  finite size             -{}   (ε terms {}, fluctuations {}{phi})",
            sci(t.epsilon_terms + t.statistical_penalty),
            sci(t.epsilon_terms),
            sci(t.statistical_penalty)
        )?;
        writeln!(f, "limited by     {}", self.limited_by)?;
        writeln!(f, "{}", self.caution)
    }
}
