//! Tracking-loop tests against the loop formulas (debug builds; each runs in about a second).

use super::*;
use crate::acquire::fold::ArrivalPattern;
use crate::acquire::synth::{Scenario, Stream};
use fixed::types::U32F32;

fn rice(bt: f64, zeta: f64) -> (f64, f64) {
    // Rice, App. C: θ = B_nT/(ζ + 1/(4ζ)); K1 = 4ζθ/(1 + 2ζθ + θ²); K2 = 4θ²/(1 + 2ζθ + θ²).
    let th = bt / (zeta + 1.0 / (4.0 * zeta));
    let d = 1.0 + 2.0 * zeta * th + th * th;
    (4.0 * zeta * th / d, 4.0 * th * th / d)
}

#[test]
fn gains_match_rice_appendix_c() {
    for (b_mhz, rate, z) in [
        (100_000u32, 10_000u64, 707u32),
        (1_000, 1_000_000, 707),
        (5_000_000, 100_000, 1000),
        (20, 100, 400),
    ] {
        let cfg = TrackConfig::new(TrackParams {
            damping_milli: z,
            wide_factor: 1,
            drift_steering: false,
            ..TrackParams::new(b_mhz, rate, 1 << 40)
        })
        .unwrap();
        let (k1, k2) = rice(
            f64::from(b_mhz) / 1000.0 / rate as f64,
            f64::from(z) / 1000.0,
        );
        let (g1, g2) = (cfg.k1().to_num::<f64>(), cfg.k2().to_num::<f64>());
        assert!((g1 / k1 - 1.0).abs() < 1e-6, "K1 {g1} vs {k1}");
        assert!((g2 / k2 - 1.0).abs() < 1e-4, "K2 {g2} vs {k2}");
    }
    assert_eq!(
        TrackConfig::new(TrackParams::new(2_000_000, 10_000, 1)),
        Err(TrackConfigError::TooWide)
    );
}

#[test]
fn bandwidth_rule_matches_its_formula() {
    for (r, d, s) in [
        (1_000_000u64, 20u64, 35u64),
        (10_000, 100, 35),
        (10_000, 100, 130),
        (100, 20, 35),
    ] {
        let z: f64 = 0.707;
        let kappa = 8.0 * z / (4.0 * z * z + 1.0);
        let want = (2.0 * r as f64 * (d as f64).powi(2) * 1e6
            / (kappa.powi(4) * (s as f64).powi(2)))
        .powf(0.2);
        let got = bandwidth_for_mhz(r, d, s, 707) as f64 / 1000.0;
        assert!((got / want - 1.0).abs() < 1e-3, "{got} vs {want}");
    }
    // The worked example in the module doc.
    assert_eq!(bandwidth_for_mhz(1_000_000, 20, 35, 707) / 1000, 138);
}

/// A tracker started on the true clock at slot `k0` of `stream`.
fn started(cfg: TrackConfig, stream: &Stream, k0: f64, in_window: f64, null: f64) -> Tracker {
    let t = stream.slot_time(k0);
    let nu = 2f64.powi(64) / stream.period_at(t);
    let lock = AcquiredLock {
        period_ps: U32F32::from_num(stream.period_at(t)),
        nu_q64: nu as u64,
        chirp_q128: 0,
        origin_ps: t as u64,
        anchor_t_ps: t.round() as u64,
        anchor_phase_q64: 0,
        z2_search: U32F32::ZERO,
        z2_threshold: U32F32::ZERO,
        z2_confirm: U32F32::ZERO,
        trials: 1,
        detections: 0,
        in_window: U0F32::from_num(in_window),
        null_window: U0F32::from_num(null),
        mean_r2_q64: 0,
    };
    let mut tr = Tracker::new(cfg);
    tr.start(&lock, k0 as u64, true);
    tr
}

struct Measured {
    /// Mean phase error of signal detections after settling, slots.
    mean_err: f64,
    /// Rms phase error (loop only: jitter removed by the truth), slots.
    rms_phase: f64,
    /// Rms fractional frequency error, sampled every `sample_ps`.
    rms_y: f64,
    /// Detections that lost the lock (must be none).
    lost: bool,
}

fn run(sc: Scenario, cfg: TrackConfig, seconds: f64, settle: f64, sample_ps: f64) -> Measured {
    run_from(sc, cfg, seconds, settle, sample_ps, 0.0)
}

/// [`run`] from a start whose frequency is off by the fraction `nu_error`.
fn run_from(
    sc: Scenario,
    cfg: TrackConfig,
    seconds: f64,
    settle: f64,
    sample_ps: f64,
    nu_error: f64,
) -> Measured {
    let w = cfg.params().window.to_num::<f64>();
    let stream = Stream::new(sc.clone());
    let null = 2.0 * w;
    let inw = (1.0 - sc.noise_fraction) + sc.noise_fraction * null;
    let mut tr = started(cfg, &stream, 0.0, inw, null);
    if nu_error != 0.0 {
        tr.model.nu_q96 = (tr.model.nu_q96 as f64 * (1.0 + nu_error)) as u128;
    }
    let pat = ArrivalPattern::single(U0F32::from_num(0.5));
    let p = pat.channel(Some(0));
    let (mut n, mut s1, mut s2) = (0.0, 0.0, 0.0);
    let (mut ny, mut sy, mut next_sample) = (0.0, 0.0, sc.start_ps + settle * 1e12);
    let end = sc.start_ps + seconds * 1e12;
    for d in stream.clone() {
        let t = d.t_ps as f64;
        if t > end {
            break;
        }
        let before = *tr.model();
        let got = tr.update(d.t_ps, Some(d.channel), p);
        if !tr.is_locked() {
            return Measured {
                mean_err: 0.0,
                rms_phase: 0.0,
                rms_y: 0.0,
                lost: true,
            };
        }
        if t < sc.start_ps + settle * 1e12 {
            continue;
        }
        if let (Located::At(_), Some(k)) = (got, d.slot) {
            // The loop's own phase error at the true arrival (no jitter): model position of
            // the noiseless arrival time minus its true position k + 1/2.
            let t_true = stream.slot_time(k as f64) + 0.5 * stream.period_at(t);
            let pos = before.position(t_true.round() as u64).unwrap();
            let e = (pos as f64) / 2f64.powi(64) - (k as f64 + 0.5);
            n += 1.0;
            s1 += e;
            s2 += e * e;
        }
        if t >= next_sample {
            let nu = tr.model().nu_q96 as f64 / 2f64.powi(96);
            let y = nu * stream.period_at(t) - 1.0;
            ny += 1.0;
            sy += y * y;
            next_sample += sample_ps;
        }
    }
    let mean = s1 / n;
    Measured {
        mean_err: mean,
        rms_phase: (s2 / n - mean * mean).sqrt(),
        rms_y: (sy / ny).sqrt(),
        lost: false,
    }
}

#[test]
fn drift_ramp_lag_matches_type_two_theory() {
    // 0.1 ppm/s at 100 MHz: a = 10 slots/s². With B_n = 20 Hz, ζ = 0.707 the lag is
    // a/ω_n², ω_n = 2B_n/(ζ + 1/(4ζ)) = 37.7 rad/s → 7.0e-3 slot, early (negative).
    let mut sc = Scenario::simple(10_000.0, 37.0, 1e-3, 0.5, 21);
    sc.drift_ppm_per_s = 0.1;
    // R counts signal detections only: noise inside the window moves the loop at random but
    // carries no phase information.
    let cfg = TrackConfig::new(TrackParams {
        wide_factor: 1,
        drift_steering: false,
        ..TrackParams::new(20_000, 100_000, 1 << 40)
    })
    .unwrap();
    let m = run(sc, cfg, 1.5, 0.5, 1e10);
    assert!(!m.lost);
    let wn = 2.0 * 20.0 / (0.707 + 1.0 / (4.0 * 0.707));
    let lag = -10.0 / (wn * wn);
    eprintln!("ramp lag {:.3e} slot, predicted {lag:.3e}", m.mean_err);
    assert!(
        (m.mean_err / lag - 1.0).abs() < 0.15,
        "{} vs {lag}",
        m.mean_err
    );
}

#[test]
fn frequency_and_phase_noise_match_loop_theory_and_crb() {
    // Derived for this loop (white measurement noise σ² per detection, rate R, continuous limit):
    // σ_φ² = σ²·2B_n/R; σ_ν² = σ²·ω_n³/(4ζR) (slots/s)². The period error equals the Cramér–Rao
    // bound σ²/Σ(k − k̄)² (Kay 1993) of a window τ = (48ζ)^(1/3)/ω_n: 12σ²/(R·f²·τ³) = σ_ν²/f².
    let w = 1.0 / 32.0;
    let sc = Scenario::simple(10_000.0, -20.0, 1e-3, 0.5, 22);
    // Noise inside the window (rate 2w·R, uniform: variance w²/3) adds to the jitter, per signal
    // detection: σ² = σ_j² + 2w·w²/3.
    let r_in = 1e-3 / 1e-8;
    let sigma2 = 0.0035f64.powi(2) + 2.0 * w * w * w / 3.0;
    let b = 1000.0;
    let p = TrackParams {
        window: U0F32::from_num(w),
        wide_factor: 1,
        drift_steering: false,
        ..TrackParams::new((b * 1000.0) as u32, r_in as u64, 1 << 40)
    };
    let m = run(sc, TrackConfig::new(p).unwrap(), 1.0, 0.05, 1e10);
    assert!(!m.lost);
    let z = 0.707;
    let wn = 2.0 * b / (z + 1.0 / (4.0 * z));
    let phase = (sigma2 * 2.0 * b / r_in).sqrt();
    let y = (sigma2 * wn.powi(3) / (4.0 * z * r_in)).sqrt() / 1e8;
    let tau = (48.0 * z).powf(1.0 / 3.0) / wn;
    let crb_y = (12.0 * sigma2 / (r_in * 1e16 * tau.powi(3))).sqrt();
    eprintln!(
        "phase rms {:.3e} (theory {phase:.3e}); y rms {:.3e} (theory {y:.3e}, CRB over {:.2} ms {crb_y:.3e})",
        m.rms_phase, m.rms_y, tau * 1e3
    );
    assert!((m.rms_phase / phase - 1.0).abs() < 0.1, "phase");
    // 100 samples of y: the rms scatters by about ±7 %; the continuous limit adds a few %.
    assert!(m.rms_y / y > 0.7 && m.rms_y / y < 1.4, "frequency");
}

mod decimated;
mod exact;
