//! Sums of the least-squares line fit that refines period and phase after the search.

/// Sums of a straight-line fit y = c0 + c1·x (x slots, y Q0.32 slot fractions).
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct LsSums {
    pub n: i128,
    sx: i128,
    sxx: i128,
    sy: i128,
    sxy: i128,
    pub syy: u128,
    pub n_all: u64,
    pub null_q32: u64,
}

impl LsSums {
    pub(crate) fn add(&mut self, x: i128, y: i64) {
        let y = i128::from(y);
        self.n += 1;
        self.sx = self.sx.saturating_add(x);
        self.sxx = self.sxx.saturating_add(x.saturating_mul(x));
        self.sy += y;
        self.sxy = self.sxy.saturating_add(x.saturating_mul(y));
        self.syy += y.unsigned_abs() * y.unsigned_abs();
    }

    /// Intercept at x = 0 (Q0.64 slots) and slope (Q0.64 per slot).
    pub(crate) fn solve(&self) -> Option<(i128, i128)> {
        if self.n < 3 {
            return None;
        }
        let sxx = self
            .n
            .checked_mul(self.sxx)?
            .checked_sub(self.sx.checked_mul(self.sx)?)?;
        let sxy = self
            .n
            .checked_mul(self.sxy)?
            .checked_sub(self.sx.checked_mul(self.sy)?)?;
        if sxx <= 0 {
            return None;
        }
        let c1 = sxy.checked_mul(1 << 32)? / sxx;
        let c0 = (self.sy.checked_mul(1 << 32)?).checked_sub(c1.checked_mul(self.sx)?)? / self.n;
        Some((c0, c1))
    }
}
