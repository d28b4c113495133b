//! A simulated Hanbury Brown–Twiss arrangement: the source's pulses on a 50:50 beam splitter with
//! one threshold detector behind each output, and the histogram of click-time differences
//! t_B − t_A folded into peaks at multiples of the slot period.
//!
//! g2(0) is the zero-delay peak over the mean side peak, C_0 / ⟨C_j⟩ (common practice for pulsed
//! sources; e.g. Santori et al., Nature 419, 594 (2002) — from memory), with the Poisson error
//! σ = g2·sqrt(1/C_0 + 1/Σ C_j). Side peaks start beyond the dead time, where a click on one
//! detector no longer changes whether the same detector can see the next pulses.

use super::rng::Stream;
use super::Source;
use crate::scenario::Scenario;

/// What the arrangement measures and with what.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HbtSetup {
    /// The light source.
    pub source: Source,
    /// Mean photon number per pulse at the beam splitter.
    pub mu: f64,
    /// Pulses sent.
    pub pulses: u64,
    /// Pulse period, ps.
    pub period_ps: f64,
    /// Efficiency of each detector (fraction).
    pub efficiency: f64,
    /// Dark-count rate of each detector, Hz.
    pub dark_count_hz: f64,
    /// RMS timing jitter of each click, ps.
    pub jitter_ps: f64,
    /// Non-paralysable dead time of each detector, ps.
    pub dead_ps: f64,
    /// Half-width of the coincidence window around each peak, ps.
    pub window_ps: f64,
    /// Number of side peaks on each side of zero delay.
    pub side_peaks: u32,
    /// Seed of the random draws.
    pub seed: u64,
}

impl HbtSetup {
    /// The scenario's source, signal intensity and detectors, the HBT set up at the source
    /// (before the fibre), with a window of ±4σ of the jitter (at least 100 ps, at most T/4).
    pub fn from_scenario(s: &Scenario, pulses: u64) -> Self {
        let period_ps = s.period_ps();
        Self {
            source: Source::from_spec(s.source.as_ref()),
            mu: s.intensities.first().copied().unwrap_or(0.0),
            pulses,
            period_ps,
            efficiency: s.detector_efficiency,
            dark_count_hz: s.dark_count_hz,
            jitter_ps: s.jitter_ps,
            dead_ps: s.dead_time_ns * 1e3,
            window_ps: (4.0 * s.jitter_ps).clamp(100.0, period_ps / 4.0),
            side_peaks: 10,
            seed: s.seed ^ 0x4842_5400,
        }
    }
}

/// The histogram and the g2(0) it gives.
#[derive(Clone, Debug, PartialEq)]
pub struct HbtResult {
    /// Coincidences in the zero-delay peak.
    pub zero: u64,
    /// (peak index j, coincidences) of the side peaks used.
    pub side: Vec<(i64, u64)>,
    /// Clicks registered on detectors A and B.
    pub clicks: [u64; 2],
    /// Measured g2(0) = C_0 / mean side peak.
    pub g2: f64,
    /// Its Poisson standard error.
    pub sigma: f64,
}

/// Keep clicks outside the dead time after the previous registered one (times sorted).
fn apply_dead_time(t: &mut Vec<f64>, dead_ps: f64) {
    let mut last = f64::NEG_INFINITY;
    t.retain(|&x| {
        let live = x >= last + dead_ps;
        if live {
            last = x;
        }
        live
    });
}

/// Run the arrangement.
pub fn measure(h: &HbtSetup) -> HbtResult {
    let mut rng = Stream::new(h.seed, 1);
    let mut det: [Vec<f64>; 2] = [Vec::new(), Vec::new()];
    for k in 0..h.pulses {
        let n = h.source.draw(h.mu, &mut rng);
        let mut hit = [false; 2];
        for _ in 0..n {
            let port = usize::from(rng.bit());
            if rng.bernoulli(h.efficiency) {
                hit[port] = true;
            }
        }
        for (d, clicked) in det.iter_mut().zip(hit) {
            if clicked {
                d.push(k as f64 * h.period_ps + h.jitter_ps * rng.normal());
            }
        }
    }
    let end_ps = h.pulses as f64 * h.period_ps;
    if h.dark_count_hz > 0.0 {
        let mean_ps = 1e12 / h.dark_count_hz;
        for d in det.iter_mut() {
            let mut t = rng.exponential(mean_ps);
            while t < end_ps {
                d.push(t);
                t += rng.exponential(mean_ps);
            }
        }
    }
    for d in det.iter_mut() {
        d.sort_by(f64::total_cmp);
        apply_dead_time(d, h.dead_ps);
    }
    let first = (h.dead_ps / h.period_ps).ceil() as i64 + 1;
    let last = first + i64::from(h.side_peaks) - 1;
    let span = (last as f64 + 0.5) * h.period_ps;
    let mut counts = vec![0u64; (2 * last + 1) as usize];
    let [a, b] = &det;
    let mut lo = 0usize;
    for &ta in a {
        while b.get(lo).is_some_and(|&tb| tb < ta - span) {
            lo += 1;
        }
        for &tb in b.iter().skip(lo).take_while(|&&tb| tb <= ta + span) {
            let d = tb - ta;
            let j = (d / h.period_ps).round();
            if (d - j * h.period_ps).abs() <= h.window_ps {
                if let Some(c) = counts.get_mut((j as i64 + last) as usize) {
                    *c += 1;
                }
            }
        }
    }
    let at = |j: i64| counts.get((j + last) as usize).copied().unwrap_or(0);
    let side: Vec<(i64, u64)> = (first..=last)
        .flat_map(|j| [(-j, at(-j)), (j, at(j))])
        .collect();
    let side_sum: u64 = side.iter().map(|x| x.1).sum();
    let zero = at(0);
    let mean_side = side_sum as f64 / side.len().max(1) as f64;
    let g2 = if mean_side > 0.0 {
        zero as f64 / mean_side
    } else {
        f64::NAN
    };
    let sigma = if zero > 0 && side_sum > 0 {
        g2 * (1.0 / zero as f64 + 1.0 / side_sum as f64).sqrt()
    } else if mean_side > 0.0 {
        1.0 / mean_side
    } else {
        f64::NAN
    };
    HbtResult {
        zero,
        side,
        clicks: [a.len() as u64, b.len() as u64],
        g2,
        sigma,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn committed_single_photon_scenario_measures_its_g2() {
        let s = Scenario::load(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/../scenarios/sps-80mhz-850nm-2km.toml"
        ))
        .unwrap();
        let g2 = s.source.unwrap().g2;
        let r = measure(&HbtSetup::from_scenario(&s, 2_000_000));
        println!(
            "HBT: g2 {:.4} ± {:.4} (configured {g2}), C0 {}, side {:?}",
            r.g2, r.sigma, r.zero, r.side
        );
        assert!(r.zero > 100, "{r:?}");
        assert!(
            (r.g2 - g2).abs() < 3.0 * r.sigma,
            "{} ± {} vs {g2}",
            r.g2,
            r.sigma
        );
    }

    #[test]
    fn laser_light_measures_one_and_antibunching_shows() {
        // Coherent light: g2(0) = 1 (common practice).
        let mut s = Scenario::default_bench();
        s.intensities = vec![0.3];
        s.intensity_probs = vec![1.0];
        let r = measure(&HbtSetup::from_scenario(&s, 400_000));
        assert!((r.g2 - 1.0).abs() < 3.0 * r.sigma, "{} ± {}", r.g2, r.sigma);
        // A source with g2 = 0.3 against the 3σ band of 1: clearly sub-Poissonian.
        let mut h = HbtSetup::from_scenario(&s, 400_000);
        h.source = Source::SinglePhoton { g2: 0.3 };
        let q = measure(&h);
        assert!(
            (q.g2 - 0.3).abs() < 3.0 * q.sigma && q.g2 + 3.0 * q.sigma < 1.0,
            "{q:?}"
        );
    }
}
