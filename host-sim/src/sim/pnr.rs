//! Photon-number-resolving detectors built from several pixels.
//!
//! A photon reaching the detector lands on one of the `pixels` pixels, each equally likely; a live
//! pixel fires (the efficiency per pixel is already in the link's transmittance η) and then
//! recovers for `pixel_recovery_ns`, during which further photons on it are lost. The detector
//! reports one click per arrival position with a photon-number level = the number of pixels that
//! fired. With all pixels live and Poisson(λ) photons, each pixel fires independently with
//! probability 1 − e^(−λ/m), so the level is Binomial(m, 1 − e^(−λ/m)) (Poisson splitting,
//! common practice) — the check in the tests.

use super::rng::Stream;

pub use crate::scenario::specs::PnrSpec;

/// Channel bytes a capture of scenario `s` can hold: the detectors, or with photon-number
/// levels every detector at every level (`slotwise::gates::level_channel`).
pub fn capture_channel_count(s: &crate::scenario::Scenario) -> u8 {
    let detectors = super::channels(s);
    match s.pnr {
        Some(_) => {
            slotwise::gates::level_channel(detectors.saturating_sub(1), slotwise::gates::MAX_LEVEL)
                + 1
        }
        None => detectors,
    }
}

/// Pixel state of one detector: when each pixel is live again, ps.
#[derive(Clone, Debug, PartialEq)]
pub struct Pixels {
    free_at_ps: Vec<f64>,
    recovery_ps: f64,
}

impl Pixels {
    /// All pixels live.
    pub fn new(spec: &PnrSpec) -> Self {
        Self {
            free_at_ps: vec![f64::NEG_INFINITY; spec.pixels.max(1) as usize],
            recovery_ps: spec.pixel_recovery_ns * 1e3,
        }
    }

    /// `photons` photons arrive at `t_ps`: how many pixels fire (the reported level; 0 when
    /// every photon met a recovering pixel).
    pub fn fire(&mut self, photons: u32, t_ps: f64, rng: &mut Stream) -> u32 {
        let m = self.free_at_ps.len();
        // A pixel fires at most once per arrival (at most 64 pixels: one bit each).
        let mut fired_now = 0u64;
        for _ in 0..photons {
            let j = ((rng.uniform() * m as f64) as usize).min(m - 1);
            if let Some(free) = self.free_at_ps.get_mut(j) {
                if t_ps >= *free && fired_now & (1 << j) == 0 {
                    *free = t_ps + self.recovery_ps;
                    fired_now |= 1 << j;
                }
            }
        }
        fired_now.count_ones()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn binomial(m: u32, p: f64, k: u32) -> f64 {
        let c: f64 = (0..k)
            .map(|i| f64::from(m - i) / f64::from(i + 1))
            .product();
        c * p.powi(k as i32) * (1.0 - p).powi((m - k) as i32)
    }

    #[test]
    fn live_pixels_give_binomial_levels() {
        let spec = PnrSpec {
            pixels: 4,
            pixel_efficiency: 0.8,
            pixel_recovery_ns: 0.0,
        };
        let mut px = Pixels::new(&spec);
        let mut rng = Stream::new(3, 9);
        let lambda = 1.2;
        let n = 200_000;
        let mut hist = [0u32; 5];
        for i in 0..n {
            let photons = rng.poisson(lambda);
            let level = px.fire(photons, f64::from(i) * 1e6, &mut rng);
            hist[level as usize] += 1;
        }
        let p = 1.0 - (-lambda / 4.0f64).exp();
        for (k, &h) in hist.iter().enumerate() {
            let expect = f64::from(n) * binomial(4, p, k as u32);
            // Within 5 binomial standard deviations of the count.
            let sd = (expect * (1.0 - expect / f64::from(n))).sqrt();
            assert!(
                (f64::from(h) - expect).abs() < 5.0 * sd + 1.0,
                "level {k}: {h} vs {expect}"
            );
        }
    }

    #[test]
    fn a_fired_pixel_recovers() {
        let spec = PnrSpec {
            pixels: 1,
            pixel_efficiency: 0.8,
            pixel_recovery_ns: 50.0,
        };
        let mut px = Pixels::new(&spec);
        let mut rng = Stream::new(1, 1);
        assert_eq!(px.fire(3, 0.0, &mut rng), 1);
        assert_eq!(px.fire(1, 49_999.0, &mut rng), 0);
        assert_eq!(px.fire(1, 50_000.0, &mut rng), 1);
    }
}
