//! Per-channel residual histograms for the delay calibration.

const BINS: usize = 32;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub(super) struct ChannelCal {
    hist: [u32; BINS],
    sum_in_q32: i64,
    n_in: u32,
    n_guard: u32,
}

impl ChannelCal {
    pub(super) const EMPTY: Self = Self {
        hist: [0; BINS],
        sum_in_q32: 0,
        n_in: 0,
        n_guard: 0,
    };

    pub(super) fn record(&mut self, r: i64, w: u64) {
        let bin = (((r as u64) ^ (1 << 63)) >> 59) as usize;
        if let Some(h) = self.hist.get_mut(bin) {
            *h = h.saturating_add(1);
        }
        if r.unsigned_abs() <= w {
            self.sum_in_q32 = self.sum_in_q32.saturating_add(r >> 32);
            self.n_in = self.n_in.saturating_add(1);
        } else if r.unsigned_abs() <= 2 * w {
            self.n_guard = self.n_guard.saturating_add(1);
        }
    }

    /// Mean residual of the channel's peak, Q0.32 slot fraction.
    pub(super) fn offset_q32(&self, w: u64) -> Option<i64> {
        let h = |b: usize| i64::from(self.hist.get(b % BINS).copied().unwrap_or(0));
        let total: i64 = (0..BINS).map(h).sum();
        if total < 64 {
            return None;
        }
        let peak = (0..BINS).max_by_key(|&b| h(b + BINS - 1) + h(b) + h(b + 1))?;
        let centre = |b: usize| ((2 * b as i64 + 1) << 26) - (1 << 31);
        let signal = i64::from(self.n_in) - i64::from(self.n_guard);
        if centre(peak).unsigned_abs() <= (w >> 32) + (1 << 26) && signal >= 16 {
            return Some(self.sum_in_q32 / signal);
        }
        // Outside the window: centroid of the three peak bins above the floor.
        let outside: i64 = (0..BINS)
            .filter(|&b| (b + BINS - peak) % BINS > 3 && (peak + BINS - b) % BINS > 3)
            .map(h)
            .sum();
        let floor = outside / (BINS as i64 - 7);
        let (mut wsum, mut xsum) = (0i64, 0i64);
        for b in [peak + BINS - 1, peak, peak + 1] {
            let wt = (h(b) - floor).max(0);
            let c = centre(b % BINS);
            // The bins are circular: keep the neighbours on the peak's side of ±1/2.
            let c = if (c - centre(peak)).abs() > 1 << 31 {
                c - c.signum() * (1 << 32)
            } else {
                c
            };
            wsum += wt;
            xsum = xsum.saturating_add(wt.saturating_mul(c));
        }
        (wsum > 0).then(|| xsum / wsum)
    }
}
