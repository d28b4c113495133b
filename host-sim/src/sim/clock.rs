//! The transmitter's clock on the receiver's (true) time axis.
//!
//! The transmitter oscillator runs at f(t) = f_nom · (1 + (a + b·t)·10⁻⁶), with offset `a` in ppm
//! (positive = fast = shorter period) and linear drift `b` in ppm/s, `t` in seconds since slot 0.
//! Slot `k` starts when the accumulated phase ∫₀ᵗ f dt' = f_nom·((1 + a')·t + b'·t²/2) reaches `k`
//! (a' = a·10⁻⁶, b' = b·10⁻⁶). That quadratic is solved in closed form with the cancellation-free
//! root t = 2K / (c1 + √(c1² + 2 b' K)), K = k / f_nom, c1 = 1 + a' (common practice for
//! quadratics with a small leading coefficient); in f64 picoseconds the result is good to well
//! below 0.1 ps for runs up to 1000 s.

/// The transmitter clock: nominal period, offset, drift, and where slot 0 starts.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TxClock {
    /// Nominal period 1/f_nom, ps.
    nominal_period_ps: f64,
    /// 1 + offset (dimensionless).
    c1: f64,
    /// drift·10⁻⁶ per ps (fractional frequency change per picosecond).
    drift_per_ps: f64,
    /// True time at which slot 0 starts, ps.
    start_ps: f64,
}

impl TxClock {
    /// A clock of nominal rate `rep_rate_hz`, offset `offset_ppm`, drift `drift_ppm_per_s`, whose
    /// slot 0 starts at true time `start_ps`.
    pub fn new(rep_rate_hz: f64, offset_ppm: f64, drift_ppm_per_s: f64, start_ps: f64) -> Self {
        Self {
            nominal_period_ps: 1e12 / rep_rate_hz,
            c1: 1.0 + offset_ppm * 1e-6,
            drift_per_ps: drift_ppm_per_s * 1e-6 * 1e-12,
            start_ps,
        }
    }

    /// The clock a scenario describes.
    pub fn from_scenario(s: &crate::scenario::Scenario) -> Self {
        Self::new(
            s.rep_rate_hz,
            s.clock_offset_ppm,
            s.clock_drift_ppm_per_s,
            s.start_offset(),
        )
    }

    /// True time at which slot 0 starts, ps.
    pub fn start_ps(&self) -> f64 {
        self.start_ps
    }

    /// True start time of slot `k`, ps.
    pub fn slot_start_ps(&self, k: u64) -> f64 {
        let big_k = k as f64 * self.nominal_period_ps;
        let disc = self.c1 * self.c1 + 2.0 * self.drift_per_ps * big_k;
        self.start_ps + 2.0 * big_k / (self.c1 + disc.max(0.0).sqrt())
    }

    /// Instantaneous period at true time `t_ps` (since the capture start), ps.
    pub fn period_at_ps(&self, t_ps: f64) -> f64 {
        let dt = t_ps - self.start_ps;
        self.nominal_period_ps / (self.c1 + self.drift_per_ps * dt)
    }

    /// Period at the start of slot 0, ps.
    pub fn initial_period_ps(&self) -> f64 {
        self.nominal_period_ps / self.c1
    }

    /// Accumulated transmitter phase at true time `t_ps`, in slots (slot k starts at phase k).
    pub fn phase_slots(&self, t_ps: f64) -> f64 {
        let dt = t_ps - self.start_ps;
        (self.c1 * dt + 0.5 * self.drift_per_ps * dt * dt) / self.nominal_period_ps
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn offset_only_gives_a_shorter_period() {
        // +37 ppm at 100 MHz: T = 10 000 ps / 1.000037 = 9999.630014 ps.
        let c = TxClock::new(100e6, 37.0, 0.0, 1e6);
        assert!((c.initial_period_ps() - 9_999.630_013_689_5).abs() < 1e-6);
        let k = 50_000_000u64;
        let want = 1e6 + k as f64 * 1e4 / 1.000_037;
        assert!((c.slot_start_ps(k) - want).abs() < 1e-3);
        assert_eq!(c.slot_start_ps(0), 1e6);
    }

    #[test]
    fn solves_the_phase_equation_with_drift() {
        // The start of slot k must have accumulated phase k; also checked against bisection of the
        // same phase equation, independent of the closed form.
        let c = TxClock::new(100e6, 37.0, 0.02, 2e5);
        for &k in &[1u64, 1000, 12_345_678, 50_000_000, 99_999_999] {
            let t = c.slot_start_ps(k);
            let phase = c.phase_slots(t);
            // 1e-6 slot = 0.01 ps at 100 MHz.
            assert!((phase - k as f64).abs() < 1e-6, "k={k} phase={phase}");
            let (mut lo, mut hi) = (c.start_ps(), c.start_ps() + 2e12);
            for _ in 0..200 {
                let mid = 0.5 * (lo + hi);
                if c.phase_slots(mid) < k as f64 {
                    lo = mid;
                } else {
                    hi = mid;
                }
            }
            assert!((t - lo).abs() < 0.1, "k={k}: {t} vs bisection {lo}");
        }
        // Drift 0.02 ppm/s for 1 s: the period shrinks by 2e-8 relative.
        let p0 = c.period_at_ps(c.start_ps());
        let p1 = c.period_at_ps(c.start_ps() + 1e12);
        assert!(((p0 - p1) / p0 - 0.02e-6).abs() < 1e-12);
        // Lead after about 1 s over a drift-free clock: K/c1 − t = b'·t²/(2·c1) ≈ 1 slot, since
        // ½·0.02 ppm/s·(1 s)² = 1e-8 s = 10 000 ps (before the 1/c1 factors).
        let k = 100_000_000u64;
        let no_drift = TxClock::new(100e6, 37.0, 0.0, 2e5);
        let t = c.slot_start_ps(k) - c.start_ps();
        let lead_ps = no_drift.slot_start_ps(k) - c.slot_start_ps(k);
        let want = 0.02e-6 * 1e-12 * t * t / (2.0 * 1.000_037);
        assert!((lead_ps - want).abs() < 0.01, "{lead_ps} vs {want}");
        assert!((lead_ps - 1e4).abs() < 2.0, "{lead_ps}");
    }
}
