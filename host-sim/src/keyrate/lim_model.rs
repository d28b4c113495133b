//! The simulation model of Lim, Curty, Walenta, Xu, Zbinden, PRA 89, 022307 (2014): their
//! detector model, their parameters, and the optimisation of q_x, p_μ1, p_μ2, μ1 and μ2 at a
//! fixed number n_X of key-basis detections, behind `slotwise keyrate --vs-distance --model
//! lim2014` and the checks against the figures stated in their text.
//!
//! Detector model (their simulation section), for intensity k and system transmittance
//! η_sys = η_Bob·η_ch, η_ch = 10^(−αL/10):
//! - D_k = 1 − (1 − 2p_dc)·e^(−η_sys·k) (a click in either of two detectors);
//! - R_k = D_k·(1 + p_ap) (detections with afterpulses);
//! - e_k = p_dc + e_mis·[1 − e^(−η_ch·k)] + p_ap·D_k/2 (error probability; the misalignment term
//!   carries η_ch as printed, see [`LimLink::mis_on_system`]).
//!
//! Detections of class k in basis b: N·p_k·q_b²·R_k, errors N·p_k·q_b²·e_k (both sides pick b
//! with q_b). The key basis is their X (our Z); N follows from the fixed n_X. ε_sec = κ·ℓ makes
//! ℓ appear on both sides of their eq. (1): it is solved by iteration from ε_sec = κ·n_X, which
//! approaches the fixed point from above because ℓ grows with ε_sec.

use super::entropy::{golden_max, h2, h2_capped};
use super::finite_lim::{lim_key, Epsilons};
use super::optimise::{from_interval, maximise, to_interval, Simplex};
use super::report::CurvePoint;
use super::{ClassCounts, Observed, X, Z};

/// Hardware and protocol constants of a Lim et al. simulation.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct LimLink {
    /// Bob's detection efficiency including his optics, η_Bob (fraction).
    pub eta_bob: f64,
    /// Dark-count probability per detector per pulse, p_dc.
    pub p_dc: f64,
    /// Afterpulse probability, p_ap.
    pub p_ap: f64,
    /// Fibre attenuation α, dB/km.
    pub alpha_db_per_km: f64,
    /// Loss outside the fibre, dB.
    pub extra_loss_db: f64,
    /// Misalignment error e_mis, fraction.
    pub e_mis: f64,
    /// Error-correction efficiency f_EC.
    pub f_ec: f64,
    /// Correctness parameter ε_cor.
    pub eps_cor: f64,
    /// κ of ε_sec = κ·ℓ (secrecy per key bit).
    pub kappa: f64,
    /// The weakest intensity μ3, held fixed (photons per pulse).
    pub mu3: f64,
    /// Misalignment term with η_sys = η_Bob·η_ch instead of the printed η_ch.
    pub mis_on_system: bool,
}

impl LimLink {
    /// The parameters of their simulations (Lim et al. 2014): η_Bob = 10 %, p_dc = 6e-7,
    /// p_ap = 4 %, α = 0.2 dB/km, e_mis = 0.5 %, f_EC = 1.16, ε_cor = 1e-15, κ = 1e-15,
    /// μ3 = 2e-4, the misalignment term as printed (η_ch).
    pub const PAPER: LimLink = LimLink {
        eta_bob: 0.10,
        p_dc: 6e-7,
        p_ap: 0.04,
        alpha_db_per_km: 0.2,
        extra_loss_db: 0.0,
        e_mis: 0.005,
        f_ec: 1.16,
        eps_cor: 1e-15,
        kappa: 1e-15,
        mu3: 2e-4,
        mis_on_system: true,
    };

    /// Channel transmittance η_ch at `l_km` (fibre and extra loss), fraction.
    pub fn eta_ch(&self, l_km: f64) -> f64 {
        10f64.powf(-(self.alpha_db_per_km * l_km + self.extra_loss_db) / 10.0)
    }

    /// (R_k, e_k): detection and error probability per pulse of intensity `mu` at `l_km`.
    pub fn detection(&self, mu: f64, l_km: f64) -> (f64, f64) {
        let eta_ch = self.eta_ch(l_km);
        let eta_sys = self.eta_bob * eta_ch;
        let d = 1.0 - (1.0 - 2.0 * self.p_dc) * (-eta_sys * mu).exp();
        let eta_mis = if self.mis_on_system { eta_sys } else { eta_ch };
        let e = self.p_dc + self.e_mis * -(-eta_mis * mu).exp_m1() + self.p_ap * d / 2.0;
        (d * (1.0 + self.p_ap), e)
    }
}

/// The parameters Lim et al. optimise: key-basis probability and two intensities with their
/// probabilities (p_μ3 = 1 − p_μ1 − p_μ2; μ3 is the link's).
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize)]
pub struct LimChoice {
    /// Probability q_x that either side picks the key basis.
    pub q_key: f64,
    /// Probabilities p_μ1, p_μ2 of the two upper intensities.
    pub p: [f64; 2],
    /// Signal intensity μ1, photons per pulse.
    pub mu1: f64,
    /// Decoy intensity μ2, photons per pulse.
    pub mu2: f64,
}

impl LimChoice {
    /// A start for the search.
    pub const START: LimChoice = LimChoice {
        q_key: 0.8,
        p: [0.6, 0.3],
        mu1: 0.5,
        mu2: 0.15,
    };
}

/// Expected counts of the model for `c` at `l_km` with `n_key` key-basis detections.
pub fn counts(link: &LimLink, c: &LimChoice, l_km: f64, n_key: f64) -> Observed {
    let mus = [c.mu1, c.mu2, link.mu3];
    let probs = [c.p[0], c.p[1], 1.0 - c.p[0] - c.p[1]];
    let q = [c.q_key, 1.0 - c.q_key];
    let rate: f64 = mus
        .iter()
        .zip(probs)
        .map(|(&m, p)| p * link.detection(m, l_km).0)
        .sum();
    let pulses = n_key / (q[Z] * q[Z] * rate);
    let classes = mus
        .iter()
        .zip(probs)
        .map(|(&mu, prob)| {
            let (r, e) = link.detection(mu, l_km);
            let mut k = ClassCounts {
                mu,
                prob,
                ..ClassCounts::default()
            };
            for b in [Z, X] {
                k.pulses[b] = pulses * prob * q[b];
                k.detected[b][b] = k.pulses[b] * q[b] * r;
                k.errors[b] = k.pulses[b] * q[b] * e;
            }
            k
        })
        .collect();
    Observed {
        classes,
        pulses,
        p_basis_tx: q,
        pulses_per_s: 1e9,
    }
}

/// Key per pulse ℓ/N of Lim et al. eq. (1) with ε_sec = κ·ℓ (Lim et al. 2014, simulation
/// section), bits per pulse; ≤ 0 means no key. Inputs outside the protocol's range give −∞.
pub fn key_rate(link: &LimLink, c: &LimChoice, l_km: f64, n_key: f64) -> f64 {
    let o = counts(link, c, l_km, n_key);
    let len = |sec: f64| {
        let eps = Epsilons {
            sec,
            cor: link.eps_cor,
        };
        lim_key(&o, eps, link.f_ec).map_or(f64::NEG_INFINITY, |b| b.bits_per_pulse * o.pulses)
    };
    let mut l = len((link.kappa * n_key).min(0.5));
    for _ in 0..30 {
        if l <= 0.0 {
            break;
        }
        let next = len(link.kappa * l);
        let done = (l - next).abs() <= 1e-9 * l;
        l = next;
        if done {
            break;
        }
    }
    l / o.pulses
}

/// Unconstrained coordinates of a choice (logistic maps keep every point feasible:
/// 0 < q_key < 1, p_μ1, p_μ2 > 0 with p_μ1 + p_μ2 < 1, μ1 ∈ (2μ3, 1], μ3 < μ2 < μ1 − μ3).
fn to_choice(link: &LimLink, x: &[f64]) -> LimChoice {
    let p1 = to_interval(x[1], 0.0, 1.0);
    let mu1 = to_interval(x[3], 2.0 * link.mu3, 1.0);
    LimChoice {
        q_key: to_interval(x[0], 0.0, 1.0),
        p: [p1, to_interval(x[2], 0.0, 1.0 - p1)],
        mu1,
        mu2: to_interval(x[4], link.mu3, mu1 - link.mu3),
    }
}

fn from_choice(link: &LimLink, c: &LimChoice) -> [f64; 5] {
    [
        from_interval(c.q_key, 0.0, 1.0),
        from_interval(c.p[0], 0.0, 1.0),
        from_interval(c.p[1], 0.0, 1.0 - c.p[0]),
        from_interval(c.mu1, 2.0 * link.mu3, 1.0),
        from_interval(c.mu2, link.mu3, c.mu1 - link.mu3),
    ]
}

/// Starting points of the search: 3 key-basis probabilities × 3 splits × 3 signals × 2 decoys.
fn start_grid(link: &LimLink) -> Vec<LimChoice> {
    let mut v = Vec::with_capacity(54);
    for q_key in [0.3, 0.6, 0.9] {
        for p in [[0.2, 0.3], [0.5, 0.3], [0.8, 0.1]] {
            for mu1 in [0.3f64, 0.5, 0.8] {
                for share in [0.2, 0.4] {
                    let mu2 = (mu1 * share).max(2.0 * link.mu3);
                    v.push(LimChoice { q_key, p, mu1, mu2 });
                }
            }
        }
    }
    v
}

/// The best choice at `l_km` for `n_key` key-basis detections, by a Nelder-Mead search
/// ([`super::optimise`]) from `start`: (choice, ℓ/N in bits per pulse).
pub fn optimise(
    link: &LimLink,
    l_km: f64,
    n_key: f64,
    start: &LimChoice,
    s: Simplex,
) -> (LimChoice, f64) {
    // Without key, ℓ/N tends to 0 from below as N grows (q_key → 0), which would pull the
    // simplex away; ℓ per key-basis detection (below every positive rate) points to the key.
    let objective = |x: &[f64]| {
        let c = to_choice(link, x);
        let r = key_rate(link, &c, l_km, n_key);
        if r > 0.0 {
            r
        } else {
            r * counts(link, &c, l_km, n_key).pulses / n_key
        }
    };
    // The simplex climbs from the best of the caller's start and a coarse grid, so a start
    // without key (where the objective is flat) does not strand it.
    let grid = start_grid(link);
    let x0 = std::iter::once(from_choice(link, start))
        .chain(grid.iter().map(|c| from_choice(link, c)))
        .map(|x| (objective(&x), x))
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .map_or(from_choice(link, start), |b| b.1);
    let (x, _) = maximise(&x0, s, objective);
    let c = to_choice(link, &x);
    (c, key_rate(link, &c, l_km, n_key))
}

/// Longest fibre (km) with key for `n_key` key-basis detections at the optimised choice: steps
/// of `step_km` from 0 km, the optimum of each length starting the next search, then bisection
/// in the last step to 0.01 km. The choices along the way are returned too.
pub fn reach_km(link: &LimLink, n_key: f64, step_km: f64, s: Simplex) -> (f64, LimChoice) {
    let (mut c, r0) = optimise(link, 0.0, n_key, &LimChoice::START, s);
    if r0 <= 0.0 {
        return (0.0, c);
    }
    let mut l = 0.0;
    loop {
        let (next, r) = optimise(link, l + step_km, n_key, &c, s);
        if r <= 0.0 || l + step_km > 1000.0 {
            break;
        }
        c = next;
        l += step_km;
    }
    let (mut lo, mut hi) = (l, l + step_km);
    while hi - lo > 0.01 {
        let mid = 0.5 * (lo + hi);
        let (next, r) = optimise(link, mid, n_key, &c, s);
        if r > 0.0 {
            lo = mid;
            c = next;
        } else {
            hi = mid;
        }
    }
    (lo, c)
}

/// Infinite-decoy rate of the model (Y0, Y1 and e1 known exactly, key basis chosen with
/// probability → 1, the asymptote of Lim et al.'s bound): max over μ of
/// e^(−μ)·Y0 + μ·e^(−μ)·Y1·[1 − h(e1)] − f·R_μ·h(e_μ/R_μ), with Y0 = R_0 and Y1, e1 from the
/// detector model for one photon (e^(−η·k) replaced by 1 − η); bits per pulse.
pub fn infinite_decoy_rate(link: &LimLink, l_km: f64) -> f64 {
    let eta_sys = link.eta_bob * link.eta_ch(l_km);
    let (y0, _) = link.detection(0.0, l_km);
    // One photon: D_1 = 1 − (1 − 2p_dc)(1 − η_sys); the misalignment term scales alike.
    let d1 = 1.0 - (1.0 - 2.0 * link.p_dc) * (1.0 - eta_sys);
    let eta_mis = if link.mis_on_system {
        eta_sys
    } else {
        link.eta_ch(l_km).min(1.0)
    };
    let y1 = d1 * (1.0 + link.p_ap);
    let e1 = (link.p_dc + link.e_mis * eta_mis + link.p_ap * d1 / 2.0) / y1;
    let rate = |mu: f64| {
        let (r, e) = link.detection(mu, l_km);
        (-mu).exp() * y0 + mu * (-mu).exp() * y1 * (1.0 - h2_capped(e1)) - link.f_ec * r * h2(e / r)
    };
    golden_max(1e-4, 1.5, 1e-7, rate).1
}

/// The rate-versus-distance curve of the model: the optimised bound for `n_key` key-basis
/// detections and the infinite-decoy rate, from 0 km in `step_km` steps until the infinite-decoy
/// rate is gone (at most 500 km). Each length's optimum starts the next search.
pub fn curve(link: &LimLink, n_key: f64, step_km: f64, s: Simplex) -> Vec<CurvePoint> {
    let positive = |x: f64| (x > 0.0).then_some(x);
    let mut out = Vec::new();
    let mut start = LimChoice::START;
    let mut bound_alive = true;
    let mut l = 0.0;
    while l <= 500.0 {
        let inf = infinite_decoy_rate(link, l);
        let bound = if bound_alive {
            let (c, r) = optimise(link, l, n_key, &start, s);
            start = c;
            bound_alive = r > 0.0;
            positive(r)
        } else {
            None
        };
        out.push(CurvePoint {
            fiber_km: l,
            bits_per_pulse: bound,
            infinite_decoy_bits_per_pulse: positive(inf),
        });
        if inf <= 0.0 {
            break;
        }
        l += step_km;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn curve_bound_stays_below_its_asymptote() {
        let c = curve(&LimLink::PAPER, 1e9, 50.0, Simplex::default());
        assert!(c.len() > 3, "{c:?}");
        for p in &c {
            if let (Some(b), Some(a)) = (p.bits_per_pulse, p.infinite_decoy_bits_per_pulse) {
                assert!(b < a, "{p:?}");
            }
        }
        assert!(c[0].bits_per_pulse.is_some());
    }

    #[test]
    fn counts_hold_the_fixed_key_detections() {
        let o = counts(&LimLink::PAPER, &LimChoice::START, 50.0, 1e7);
        assert!((o.n(Z) / 1e7 - 1.0).abs() < 1e-12);
        // Test-basis detections follow from (1 − q_x)²/q_x².
        assert!((o.n(X) / o.n(Z) - (0.2f64 / 0.8).powi(2)).abs() < 1e-12);
    }

    #[test]
    fn printed_misalignment_term_gives_a_five_percent_floor() {
        // With η_ch in e_k the misalignment errors per detection tend to e_mis/η_Bob = 5 % at
        // long range, against e_mis = 0.5 % with η_sys: the reason the printed form is read as
        // a misprint (Lim et al. 2014 quote e_mis = 0.5 % as the misalignment error rate).
        let printed = LimLink {
            mis_on_system: false,
            ..LimLink::PAPER
        };
        for (link, want) in [(printed, 0.05), (LimLink::PAPER, 0.005)] {
            let (r, e) = link.detection(0.5, 100.0);
            let d = r / (1.0 + link.p_ap);
            let mis = (e - link.p_dc - link.p_ap * d / 2.0) / d;
            assert!((mis / want - 1.0).abs() < 0.01, "{mis} vs {want}");
        }
    }
}
