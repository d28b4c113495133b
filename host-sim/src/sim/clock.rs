//! The transmitter's clock on the receiver's (true) time axis.
//!
//! The transmitter oscillator runs at f(t) = f_nom · (1 + (a + b·t)·10⁻⁶), with offset `a` in ppm
//! (positive = fast = shorter period) and linear drift `b` in ppm/s, `t` in seconds since slot 0.
//! Slot `k` starts when the accumulated phase ∫₀ᵗ f dt' = f_nom·((1 + a')·t + b'·t²/2) reaches `k`
//! (a' = a·10⁻⁶, b' = b·10⁻⁶). That quadratic is solved in closed form with the cancellation-free
//! root t = 2K / (c1 + √(c1² + 2 b' K)), K = k / f_nom, c1 = 1 + a' (common practice for
//! quadratics with a small leading coefficient); in f64 picoseconds the result is good to well
//! below 0.1 ps for runs up to 1000 s.

/// One stretch of the clock between two changes (frequency steps, drift ramps, phase jumps).
#[derive(Clone, Copy, Debug, PartialEq)]
struct Segment {
    /// First slot of the stretch.
    k0: u64,
    /// True start time of slot `k0`, ps.
    t0_ps: f64,
    /// 1 + offset at `t0_ps` (dimensionless).
    c1: f64,
    /// drift·10⁻⁶ per ps (fractional frequency change per picosecond).
    drift_per_ps: f64,
}

impl Segment {
    /// True start of slot `k` (≥ `k0`), ps.
    fn slot_start_ps(&self, nominal_period_ps: f64, k: u64) -> f64 {
        let big_k = (k - self.k0) as f64 * nominal_period_ps;
        let disc = self.c1 * self.c1 + 2.0 * self.drift_per_ps * big_k;
        self.t0_ps + 2.0 * big_k / (self.c1 + disc.max(0.0).sqrt())
    }
}

/// The transmitter clock: nominal period, offset, drift, and where slot 0 starts; with faults,
/// a chain of stretches, each continuing the phase (and frequency) of the one before.
#[derive(Clone, Debug, PartialEq)]
pub struct TxClock {
    /// Nominal period 1/f_nom, ps.
    nominal_period_ps: f64,
    /// Stretches in slot order; never empty, the first starts at slot 0.
    segments: Vec<Segment>,
}

impl TxClock {
    /// A clock of nominal rate `rep_rate_hz`, offset `offset_ppm`, drift `drift_ppm_per_s`, whose
    /// slot 0 starts at true time `start_ps`.
    pub fn new(rep_rate_hz: f64, offset_ppm: f64, drift_ppm_per_s: f64, start_ps: f64) -> Self {
        Self {
            nominal_period_ps: 1e12 / rep_rate_hz,
            segments: vec![Segment {
                k0: 0,
                t0_ps: start_ps,
                c1: 1.0 + offset_ppm * 1e-6,
                drift_per_ps: drift_ppm_per_s * 1e-6 * 1e-12,
            }],
        }
    }

    /// The clock a scenario describes, faults (steps, ramps, jumps) included.
    pub fn from_scenario(s: &crate::scenario::Scenario) -> Self {
        let mut c = Self::new(
            s.rep_rate_hz,
            s.clock_offset_ppm,
            s.clock_drift_ppm_per_s,
            s.start_offset(),
        );
        for ch in s.faults.clock_changes(s.rep_rate_hz) {
            c.change_at(ch);
        }
        c
    }

    fn change_at(&mut self, ch: super::faults::ClockChange) {
        let Some(last) = self.segments.last().copied() else {
            return;
        };
        let k = ch.slot.max(last.k0);
        let t = last.slot_start_ps(self.nominal_period_ps, k);
        let c1 = last.c1 + last.drift_per_ps * (t - last.t0_ps);
        let period = self.nominal_period_ps / c1;
        let seg = Segment {
            k0: k,
            t0_ps: t + ch.jump_slots * period,
            c1: c1 + ch.step_ppm * 1e-6,
            drift_per_ps: last.drift_per_ps + ch.drift_ppm_per_s * 1e-6 * 1e-12,
        };
        if k == last.k0 {
            if let Some(l) = self.segments.last_mut() {
                *l = seg;
            }
        } else {
            self.segments.push(seg);
        }
    }

    fn first(&self) -> Segment {
        self.segments.first().copied().unwrap_or(Segment {
            k0: 0,
            t0_ps: 0.0,
            c1: 1.0,
            drift_per_ps: 0.0,
        })
    }

    /// The stretch holding slot `k`.
    fn segment_of_slot(&self, k: u64) -> Segment {
        let i = self.segments.partition_point(|s| s.k0 <= k);
        self.segments
            .get(i.saturating_sub(1))
            .copied()
            .unwrap_or(self.first())
    }

    /// The stretch in force at true time `t_ps`.
    fn segment_at(&self, t_ps: f64) -> Segment {
        let i = self.segments.partition_point(|s| s.t0_ps <= t_ps);
        self.segments
            .get(i.saturating_sub(1))
            .copied()
            .unwrap_or(self.first())
    }

    /// True time at which slot 0 starts, ps.
    pub fn start_ps(&self) -> f64 {
        self.first().t0_ps
    }

    /// True start time of slot `k`, ps.
    pub fn slot_start_ps(&self, k: u64) -> f64 {
        self.segment_of_slot(k)
            .slot_start_ps(self.nominal_period_ps, k)
    }

    /// Instantaneous period at true time `t_ps` (since the capture start), ps.
    pub fn period_at_ps(&self, t_ps: f64) -> f64 {
        let s = self.segment_at(t_ps);
        self.nominal_period_ps / (s.c1 + s.drift_per_ps * (t_ps - s.t0_ps))
    }

    /// Period at the start of slot 0, ps.
    pub fn initial_period_ps(&self) -> f64 {
        self.nominal_period_ps / self.first().c1
    }

    /// Accumulated transmitter phase at true time `t_ps`, in slots (slot k starts at phase k).
    pub fn phase_slots(&self, t_ps: f64) -> f64 {
        let s = self.segment_at(t_ps);
        let dt = t_ps - s.t0_ps;
        s.k0 as f64 + (s.c1 * dt + 0.5 * s.drift_per_ps * dt * dt) / self.nominal_period_ps
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

    #[test]
    fn faults_keep_phase_and_change_frequency() {
        use crate::sim::faults::ClockChange;
        let base = TxClock::new(100e6, 37.0, 0.02, 1e6);
        let mut c = base.clone();
        let k = 25_000_000u64;
        c.change_at(ClockChange {
            slot: k,
            step_ppm: 2.0,
            drift_ppm_per_s: 0.0,
            jump_slots: 0.0,
        });
        // Continuous at the step, then 2 ppm shorter periods: after n slots the lead over the
        // unchanged clock is n·T·2e-6 to first order (10 000 slots: 0.2 ps per slot · 1e4 = 200 ps).
        assert_eq!(c.slot_start_ps(k), base.slot_start_ps(k));
        let n = 10_000u64;
        let lead = base.slot_start_ps(k + n) - c.slot_start_ps(k + n);
        assert!((lead - n as f64 * 1e4 * 2e-6).abs() < 0.5, "{lead}");
        let t = c.slot_start_ps(k + 1);
        let ratio = base.period_at_ps(t) / c.period_at_ps(t);
        assert!((ratio - 1.0 - 2e-6).abs() < 1e-9, "{ratio}");
        assert!((c.phase_slots(c.slot_start_ps(k + n)) - (k + n) as f64).abs() < 1e-6);
        // A jump of 0.37 slot delays every later slot by 0.37 periods.
        let mut j = base.clone();
        j.change_at(ClockChange {
            slot: k,
            step_ppm: 0.0,
            drift_ppm_per_s: 0.0,
            jump_slots: 0.37,
        });
        let d = j.slot_start_ps(k + 5) - base.slot_start_ps(k + 5);
        assert!(
            (d - 0.37 * base.period_at_ps(base.slot_start_ps(k))).abs() < 1e-3,
            "{d}"
        );
        assert_eq!(j.slot_start_ps(k - 1), base.slot_start_ps(k - 1));
    }
}
