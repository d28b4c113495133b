//! Secret-key-rate estimates from a run's tallies: what the counts per (tx basis, tx bit,
//! intensity, rx basis, rx bit) mean for the key, and which term limits it.
//!
//! Estimators (each a documented function with its reference):
//! - [`asymptotic`]: GLLP rate with vacuum + weak decoy bounds (Lo, Ma, Chen, PRL 94, 230504
//!   (2005); Ma, Qi, Zhao, Lo, PRA 72, 012326 (2005), eqs. (34) and (37)); the infinite-decoy
//!   form and the standard channel model are in [`channel`];
//! - [`finite_lim`]: finite-key decoy BB84 with two decoys (Lim, Curty, Walenta, Xu, Zbinden,
//!   PRA 89, 022307 (2014));
//! - [`lim_model`]: the simulation model of Lim et al. 2014 and the search of their parameters
//!   ([`optimise`]: Nelder-Mead), behind `--vs-distance --model lim2014`;
//! - [`one_decoy`]: finite-key one-decoy bound for efficient BB84 and the three-state protocol
//!   (Rusca, Boaron, Grünenfelder, Martin, Zbinden, APL 112, 171104 (2018));
//! - [`sps`]: a sub-Poissonian source characterised by g2(0) (multi-photon bound of Waks et al.,
//!   PRA 66, 042315 (2002), rate of Gottesman, Lo, Lütkenhaus, Preskill, QIC 4, 325 (2004)).
//!
//! The key is taken from the Z basis; the X basis tests the phase error. All figures are
//! estimates under each model's assumptions, not a security certification: see [`CAUTION`].
//! f64 throughout (host only). Which published figures these reproduce, and which not, is in
//! `docs/keyrate.md`.

pub mod asymptotic;
pub mod channel;
pub mod cmd;
pub mod entropy;
pub mod finite_lim;
pub mod lim_model;
pub mod observed;
pub mod one_decoy;
pub mod optimise;
pub mod plot;
pub mod report;
pub mod sps;
#[cfg(test)]
mod tests;

pub use entropy::h2;
pub use observed::{ClassCounts, Observed};
pub use report::{estimate, Estimate, Estimator, Params};

/// The caution printed with every estimate and in `slotwise keyrate --help`.
pub const CAUTION: &str = "Caution: an estimate under the stated model's assumptions (i.i.d. \
counts, the estimator's proof setting, this project's squashing of multi-clicks), not a security \
certification.";

/// Z = 0, X = 1 (same order as `slotwise::Basis::index`).
pub const Z: usize = 0;
/// Index of the X (test) basis.
pub const X: usize = 1;

/// Terms of a key-length bound, all in bits per pulse sent.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct Terms {
    /// Lower bound on key-basis detections from vacuum pulses (s_Z,0 / N), bits per pulse.
    /// Finite-key estimators give these terms for their counts without fluctuations; the
    /// finite-size penalty holds the rest, so the terms add up to the key.
    pub vacuum: f64,
    /// Lower bound on key-basis detections from single photons (Q1 or s_Z,1 / N), per pulse.
    pub single_photon: f64,
    /// Upper bound on the single-photon phase error rate (e1 or φ_Z), fraction.
    pub phase_error: f64,
    /// The phase-error bound with its statistical fluctuation (finite-key estimators), fraction.
    pub phase_error_finite: Option<f64>,
    /// Privacy-amplification cost of the phase error, single_photon · h(phase_error), per pulse.
    pub phase_error_cost: f64,
    /// Error-correction leakage f·n_Z·h(E_Z) / N, bits per pulse.
    pub ec_leakage: f64,
    /// Key-basis QBER E_Z, fraction.
    pub qber_key: f64,
    /// ε terms of the finite-key length (6·log2(c/ε_sec) + log2(2/ε_cor)) / N, per pulse.
    pub epsilon_terms: f64,
    /// Loss from statistical fluctuations: the bound with the same counts and no fluctuation
    /// terms, minus this bound, minus the ε terms; per pulse.
    pub statistical_penalty: f64,
}

/// What an estimator returns: the key length per pulse and its terms.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct Bound {
    /// Secret key per pulse sent (negative: no key), bits.
    pub bits_per_pulse: f64,
    /// The terms it is made of.
    pub terms: Terms,
}

/// Why an estimator cannot run on the given counts.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct EstimatorError(pub String);

impl std::fmt::Display for EstimatorError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

impl std::error::Error for EstimatorError {}
