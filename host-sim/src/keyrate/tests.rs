//! Checks of the finite-key bounds on expected counts of a detector model.

use super::finite_lim::{lim_key, lim_s0_s1, Epsilons};
use super::one_decoy::rusca_key;
use super::{ClassCounts, Observed, X, Z};

/// Detector model of the simulations in Lim et al. 2014 (their D_k, R_k, e_k; the misalignment
/// term on η_sys, see lim_model): two detectors, D_k = 1 − (1 − 2p_dc)·e^(−η·μ_k), detection
/// probability D_k·(1 + p_ap), error probability p_dc + e_mis·(1 − e^(−η·μ_k)) + p_ap·D_k/2,
/// η = η_Bob·10^(−αL/10), α = 0.2 dB/km; η_Bob = 10 %, p_dc = 6e-7, p_ap = 4 %, e_mis = 0.5 %.
/// Here with a fixed p_Z and class split, not optimised (lim_model does that).
fn lim_model(mus: &[f64], probs: &[f64], p_z: f64, l_km: f64, pulses: f64) -> Observed {
    let (eta_bob, p_dc, p_ap, e_mis) = (0.10, 6e-7, 0.04, 0.005);
    let eta = eta_bob * 10f64.powf(-0.2 * l_km / 10.0);
    let pb = [p_z, 1.0 - p_z];
    let classes = mus
        .iter()
        .zip(probs)
        .map(|(&mu, &prob)| {
            let d = 1.0 - (1.0 - 2.0 * p_dc) * (-eta * mu).exp();
            let det = d * (1.0 + p_ap);
            let err = p_dc + e_mis * -(-eta * mu).exp_m1() + p_ap * d / 2.0;
            let mut c = ClassCounts {
                mu,
                prob,
                ..ClassCounts::default()
            };
            for b in [Z, X] {
                // Both sides choose basis b with probability pb[b].
                c.pulses[b] = pulses * prob * pb[b];
                c.detected[b][b] = c.pulses[b] * pb[b] * det;
                c.errors[b] = c.pulses[b] * pb[b] * err;
            }
            c
        })
        .collect();
    Observed {
        classes,
        pulses,
        p_basis_tx: pb,
        pulses_per_s: 1e9,
    }
}

const EPS: Epsilons = Epsilons {
    sec: 1e-10,
    cor: 1e-15,
};

/// The rate with fluctuation and ε terms removed: bits + ε terms + statistical penalty.
fn no_fluct(b: &super::Bound) -> f64 {
    b.bits_per_pulse + b.terms.epsilon_terms + b.terms.statistical_penalty
}

#[test]
fn lim_single_photon_bound_is_below_the_model_truth_and_close() {
    // Property of the decoy method (Lim et al. 2014, eq. (3)): with exact counts the bound is a
    // lower bound on the true single-photon detections, tight for a weak μ3 → 0.
    let (mus, probs) = ([0.5, 0.1, 0.0], [0.8, 0.1, 0.1]);
    let o = lim_model(&mus, &probs, 0.9, 25.0, 1e12);
    let (_, s1) = lim_s0_s1(&o, Z, EPS, false).unwrap();
    let eta = 0.10 * 10f64.powf(-0.2 * 25.0 / 10.0);
    let y1 = (1.0 - (1.0 - 2.0 * 6e-7) * (1.0 - eta)) * 1.04;
    let tau1: f64 = mus.iter().zip(probs).map(|(m, p)| p * m * (-m).exp()).sum();
    let truth = 1e12 * 0.81 * tau1 * y1;
    assert!(s1 <= truth && s1 > 0.9 * truth, "{s1} vs {truth}");
}

#[test]
fn lim_finite_key_tends_to_its_asymptote() {
    // Lim et al. 2014 state that their bound converges to the asymptotic decoy rate as the block
    // grows (their Fig. 1 curves approach the asymptotic one). No value of theirs is reproduced.
    let (mus, probs) = ([0.5, 0.1, 0.0], [0.8, 0.1, 0.1]);
    let mut prev = f64::NEG_INFINITY;
    for n in [1e9, 1e10, 1e11, 1e12, 1e14] {
        let o = lim_model(&mus, &probs, 0.9, 50.0, n);
        let b = lim_key(&o, EPS, 1.16).unwrap();
        let ratio = b.bits_per_pulse / no_fluct(&b);
        println!(
            "Lim N {n:.0e}: {:.4e} bit/pulse, ratio {ratio:.4}",
            b.bits_per_pulse
        );
        assert!(ratio > prev && ratio < 1.0);
        prev = ratio;
    }
    assert!(prev > 0.98, "{prev}");
}

#[test]
fn lim_finite_reach_grows_with_block_size() {
    // Lim et al. 2014: larger blocks reach further (their curves for several n_X).
    let (mus, probs) = ([0.5, 0.1, 0.0], [0.8, 0.1, 0.1]);
    // First fibre length (1 km steps) without key.
    let reach = |n: f64| {
        (0..400)
            .map(f64::from)
            .find(|&l| {
                lim_key(&lim_model(&mus, &probs, 0.9, l, n), EPS, 1.16)
                    .unwrap()
                    .bits_per_pulse
                    <= 0.0
            })
            .unwrap_or(400.0)
    };
    let (r1, r2, r3) = (reach(1e11), reach(1e12), reach(1e13));
    println!("Lim reach: N 1e11 {r1} km, 1e12 {r2} km, 1e13 {r3} km");
    assert!(r1 < r2 && r2 < r3);
}

#[test]
fn one_decoy_tends_to_the_asymptotic_rate() {
    // Rusca et al. 2018: the finite-key one-decoy rate approaches the asymptotic one-decoy rate
    // as the block grows (the fluctuation and ε terms vanish as 1/sqrt(N) and 1/N).
    // Rusca et al. 2018, (A25) on counts that grow with the block: the key per pulse grows with
    // N (their figures of rate against block size) and tends to the same bound without
    // fluctuation terms.
    let (mus, probs) = ([0.5, 0.15], [0.7, 0.3]);
    let (mut prev, mut prev_bits) = (f64::NEG_INFINITY, f64::NEG_INFINITY);
    for n in [1e9, 1e10, 1e11, 1e12, 1e14] {
        let o = lim_model(&mus, &probs, 0.9, 50.0, n);
        let b = rusca_key(&o, EPS, 1.16).unwrap();
        let ratio = b.bits_per_pulse / no_fluct(&b);
        println!(
            "one-decoy N {n:.0e}: {:.4e} bit/pulse, ratio {ratio:.4}",
            b.bits_per_pulse
        );
        assert!(ratio > prev && ratio < 1.0);
        assert!(b.bits_per_pulse > prev_bits);
        prev = ratio;
        prev_bits = b.bits_per_pulse;
    }
    assert!(prev > 0.98, "{prev}");
    // And the asymptote itself is below the infinite-decoy rate of the same model with key from
    // both intensities: Σ_k p_k·p_Z²·{Y1·μ_k·e^(−μ_k)·[1 − h(e1)]} − f·n_Z·h(E_Z)/N.
    let o = lim_model(&mus, &probs, 0.9, 50.0, 1e14);
    let b = rusca_key(&o, EPS, 1.16).unwrap();
    let eta = 0.10 * 10f64.powf(-0.2 * 50.0 / 10.0);
    let d1 = 1.0 - (1.0 - 2.0 * 6e-7) * (1.0 - eta);
    let y1 = d1 * 1.04;
    let e1 = (6e-7 + 0.005 * eta + 0.04 * d1 / 2.0) / y1;
    let tau1: f64 = mus.iter().zip(probs).map(|(m, p)| p * m * (-m).exp()).sum();
    let tau0: f64 = mus.iter().zip(probs).map(|(m, p)| p * (-m).exp()).sum();
    let y0 = 2.0 * 6e-7 * 1.04;
    let inf = 0.81 * (tau0 * y0 + tau1 * y1 * (1.0 - super::h2(e1)))
        - 1.16 * o.n(Z) / o.pulses * super::h2(o.qber(Z));
    println!(
        "one-decoy asymptote {:.4e}, infinite decoys {inf:.4e}",
        no_fluct(&b)
    );
    // A weak decoy of 0.15 and the vacuum bound from the decoy's errors leave the one-decoy
    // asymptote well below (about 0.6 of) the infinite-decoy rate here.
    assert!(no_fluct(&b) <= inf && no_fluct(&b) > 0.5 * inf);
}

#[test]
fn printed_terms_add_up_to_the_key() {
    let add = |b: &super::Bound| {
        let t = &b.terms;
        t.vacuum + t.single_photon
            - t.phase_error_cost
            - t.ec_leakage
            - t.epsilon_terms
            - t.statistical_penalty
    };
    let o2 = lim_model(&[0.5, 0.15], &[0.7, 0.3], 0.9, 30.0, 1e10);
    let o3 = lim_model(&[0.5, 0.1, 0.0], &[0.8, 0.1, 0.1], 0.9, 30.0, 1e11);
    for b in [
        rusca_key(&o2, EPS, 1.16).unwrap(),
        lim_key(&o3, EPS, 1.16).unwrap(),
        super::asymptotic::decoy_rate(&o3, 1.16).unwrap(),
    ] {
        assert!((add(&b) - b.bits_per_pulse).abs() < 1e-12, "{b:?}");
    }
}
