//! Sums of the least-squares line fit that refines period and phase after the search, kept per
//! half of the span so that a chirp search can also read the curvature: for residuals
//! r = α + β·x + c2·x², the least-squares slope over each half is the derivative at that half's
//! mean abscissa, so c2 = (slope₂ − slope₁)/(2·(x̄₂ − x̄₁)) — the two-segment form of a
//! quadratic fit, needing no sums beyond the line fit's own.

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

    /// Both halves' sums together.
    pub(crate) fn merged(&self, o: &Self) -> Self {
        Self {
            n: self.n + o.n,
            sx: self.sx.saturating_add(o.sx),
            sxx: self.sxx.saturating_add(o.sxx),
            sy: self.sy + o.sy,
            sxy: self.sxy.saturating_add(o.sxy),
            syy: self.syy + o.syy,
            n_all: self.n_all + o.n_all,
            null_q32: self.null_q32 + o.null_q32,
        }
    }

    /// Mean of x² (slots²).
    pub(crate) fn mean_xx(&self) -> Option<i128> {
        self.sxx.checked_div(self.n)
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

/// Curvature of the residuals from the two halves' slopes: (slope₂ − slope₁ in Q0.64 per slot,
/// x̄₂ − x̄₁ in slots), or `None` when either half cannot be solved.
pub(crate) fn curvature(halves: &[LsSums; 2]) -> Option<(i128, i128)> {
    let [a, b] = halves;
    let (_, s0) = a.solve()?;
    let (_, s1) = b.solve()?;
    let dx = b.sx.checked_div(b.n)? - a.sx.checked_div(a.n)?;
    (dx > 0).then_some((s1 - s0, dx))
}
