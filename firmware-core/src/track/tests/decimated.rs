//! The decimated loop (`update_every` > 1): gains for the longer update interval, and the
//! type-II behaviour kept in time.

use super::*;

fn cfg(bandwidth_mhz: u32, rate_per_s: u64, n: u32) -> TrackConfig {
    TrackConfig::new(TrackParams {
        update_every: n,
        wide_factor: 1,
        drift_steering: false,
        ..TrackParams::new(bandwidth_mhz, rate_per_s, 1 << 40)
    })
    .unwrap()
}

#[test]
fn gains_are_rices_for_the_update_interval() {
    for (b_mhz, rate, n) in [
        (100_000u32, 1_000_000u64, 4u32),
        (20_000, 100_000, 16),
        (1_000, 1_000, 64),
    ] {
        let c = cfg(b_mhz, rate, n);
        // Rice, App. C, with T_u' = N/R.
        let (k1, k2) = rice(
            f64::from(b_mhz) / 1000.0 * f64::from(n) / rate as f64,
            0.707,
        );
        let (g1, g2) = (c.k1().to_num::<f64>(), c.k2().to_num::<f64>());
        assert!((g1 / k1 - 1.0).abs() < 1e-6, "K1 {g1} vs {k1}");
        assert!((g2 / k2 - 1.0).abs() < 1e-4, "K2 {g2} vs {k2}");
    }
    // 100 Hz at 10⁴/s: B_n·T_u' = 0.08 for N = 8, 0.16 for N = 16.
    let p = |n| TrackParams {
        update_every: n,
        wide_factor: 1,
        drift_steering: false,
        ..TrackParams::new(100_000, 10_000, 1 << 40)
    };
    assert!(TrackConfig::new(p(8)).is_ok());
    assert_eq!(TrackConfig::new(p(16)), Err(TrackConfigError::TooWide));
    for n in [0, 3, 12, 1 << 17] {
        assert_eq!(TrackConfig::new(p(n)), Err(TrackConfigError::UpdateEvery));
    }
}

#[test]
fn the_model_moves_once_per_n_in_window_detections() {
    let sc = Scenario::simple(10_000.0, 0.0, 1e-3, 0.0, 31);
    let stream = Stream::new(sc);
    let mut tr = started(cfg(20_000, 100_000, 4), &stream, 0.0, 0.99, 0.125);
    let pat = ArrivalPattern::single(U0F32::from_num(0.5));
    let mut models = 0u64;
    let mut last = *tr.model();
    for d in stream.take(64) {
        let before = tr.updates();
        tr.update(d.t_ps, Some(d.channel), pat.channel(Some(0)));
        assert!(tr.is_locked());
        if tr.updates() > before && tr.updates().is_multiple_of(4) {
            assert_ne!(*tr.model(), last, "update {}", tr.updates());
            assert_eq!(tr.model().t_ps, d.t_ps);
            last = *tr.model();
            models += 1;
        } else {
            assert_eq!(*tr.model(), last, "moved between updates");
        }
    }
    assert_eq!(models, tr.updates() / 4);
    assert!(models >= 12);
}

#[test]
fn decimated_loop_pulls_in_a_frequency_offset_with_zero_steady_error() {
    // A type-II loop follows a frequency offset with zero phase error (Rice, App. C; common
    // practice). Start 0.1 ppm off (10 slots/s at 100 MHz): the transient peaks near
    // Δω/ω_n = 0.027 slot for B_n = 200 Hz, then the error settles to zero.
    for n in [4, 16] {
        let sc = Scenario::simple(10_000.0, 37.0, 1e-3, 0.2, 41);
        let m = run_from(sc, cfg(200_000, 100_000, n), 0.4, 0.1, 1e10, 1e-7);
        assert!(!m.lost);
        eprintln!(
            "N = {n}: mean {:.2e} slot, y rms {:.2e}",
            m.mean_err, m.rms_y
        );
        // Phase rms σ·(2B_n/R)^½ ≈ 4e-4 slot (σ ≈ 7e-3 with the window's noise), about
        // 0.3 s·2B_n = 120 independent samples: the mean's noise is about 4e-5, so 2e-4 is
        // five of it; without the integrator the lag would stay at Δf/(K1·R) ≈ 0.02.
        assert!(m.mean_err.abs() < 2e-4, "N = {n}: {}", m.mean_err);
        assert!(m.rms_y < 1e-9, "N = {n}: frequency rms {}", m.rms_y);
    }
}

#[test]
fn decimated_loop_lags_a_ramp_as_type_two_theory() {
    // As drift_ramp_lag_matches_type_two_theory: a = 10 slots/s², B_n = 20 Hz, lag a/ω_n²; the
    // update interval N/R ≤ 160 µs adds nothing visible at ω_n = 37.7 rad/s.
    for n in [4, 16] {
        let mut sc = Scenario::simple(10_000.0, 37.0, 1e-3, 0.5, 21);
        sc.drift_ppm_per_s = 0.1;
        let m = run(sc, cfg(20_000, 100_000, n), 1.5, 0.5, 1e10);
        assert!(!m.lost);
        let wn = 2.0 * 20.0 / (0.707 + 1.0 / (4.0 * 0.707));
        let lag = -10.0 / (wn * wn);
        eprintln!(
            "N = {n}: ramp lag {:.3e} slot, predicted {lag:.3e}",
            m.mean_err
        );
        assert!(
            (m.mean_err / lag - 1.0).abs() < 0.15,
            "{} vs {lag}",
            m.mean_err
        );
    }
}

#[test]
fn decimated_loop_keeps_its_noise_bandwidth() {
    // The phase noise σ²·2B_n/R of the per-detection loop (see
    // frequency_and_phase_noise_match_loop_theory_and_crb) holds for N = 4: the mean of N
    // residuals has variance σ²/N and comes N times less often.
    let w = 1.0 / 32.0;
    let sc = Scenario::simple(10_000.0, -20.0, 1e-3, 0.5, 22);
    let r_in = 1e5;
    let sigma2 = 0.0035f64.powi(2) + 2.0 * w * w * w / 3.0;
    let b = 1000.0;
    let p = TrackParams {
        window: U0F32::from_num(w),
        update_every: 4,
        wide_factor: 1,
        drift_steering: false,
        ..TrackParams::new((b * 1000.0) as u32, r_in as u64, 1 << 40)
    };
    let m = run(sc, TrackConfig::new(p).unwrap(), 1.0, 0.05, 1e10);
    assert!(!m.lost);
    let phase = (sigma2 * 2.0 * b / r_in).sqrt();
    eprintln!("N = 4: phase rms {:.3e} (theory {phase:.3e})", m.rms_phase);
    assert!((m.rms_phase / phase - 1.0).abs() < 0.15, "phase");
}
