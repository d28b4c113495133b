//! After the search: the line fits that refine period and phase, the confirmation batch and the
//! lock.
//!
//! The fit sums are kept per half of the span so that a chirp search can also read the
//! curvature: for residuals r = α + β·x + c2·x², the least-squares slope over each half is the
//! derivative at that half's mean abscissa, so c2 = (slope₂ − slope₁)/(2·(x̄₂ − x̄₁)) — the
//! two-segment form of a quadratic fit, needing no sums beyond the line fit's own. The chirp
//! then moves by c2·ν² and the line loses the part of c2·(x + x_c)² it had absorbed.

use super::{chirp, thresholds, AcquiredLock, Acquirer, DetectionBuffer, Fold, Step};
use super::{CHIRP_FIT_ROUNDS, EXTRA_FINAL_PASSES};
use crate::acquire::fold::ArrivalPattern;
use fixed::types::{U0F32, U32F32};

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

/// The fits, the confirmation and the lock, after the search has chosen frequency and chirp.
impl<const N: usize, const K: usize, const H: usize> Acquirer<N, K, H> {
    pub(super) fn begin_fit(&mut self, pass: u8) {
        let xc = self.position(self.t_max).map_or(0, |v| (v >> 64) / 2);
        self.step = Step::Fit {
            pass,
            cur: DetectionBuffer::<N>::cursor(self.t0),
            sums: [LsSums::default(); 2],
            xc,
        };
    }

    /// Model position of time `t` in slots (Q64.64), slot starts at integers.
    pub(super) fn position(&self, t: u64) -> Option<i128> {
        let d = i128::from(t) - i128::from(self.t0);
        let v = d.checked_mul(i128::from(self.nu))?.checked_sub(self.phi0)?;
        if self.a == 0 {
            return Some(v);
        }
        v.checked_add(chirp::slots_q64(d, self.a)?)
    }

    #[allow(clippy::too_many_arguments)]
    pub(super) fn fit_one(
        &self,
        t_ps: u64,
        channel: Option<u8>,
        sums: &mut [LsSums; 2],
        xc: i128,
        w_q64: u64,
        win: U0F32,
        pat: &ArrivalPattern,
    ) {
        let Some(v) = self.position(t_ps) else {
            return;
        };
        let p = pat.channel(channel);
        let (r, carry) = p.residual(v as u64);
        let [lo, hi] = sums;
        lo.n_all += 1;
        lo.null_q32 += p.null_fraction(win);
        if r.unsigned_abs() <= w_q64 {
            let x = (v >> 64) + i128::from(carry) - xc;
            if x < 0 { lo } else { hi }.add(x, r >> 32);
        }
    }

    /// Remove the residuals' curvature c2·(x + xc)² (x from the span's middle slot `xc`) from
    /// the line (c0, c1) and return the corrected line and chirp.
    fn uncurve(
        &self,
        halves: &[LsSums; 2],
        c0: i128,
        c1: i128,
        xc: i128,
    ) -> Option<(i128, i128, i64)> {
        let (dc1, dx) = curvature(halves)?;
        let all = halves[0].merged(&halves[1]);
        // c2 = dc1/(2·dx): slope 2·c2·xc and offset c2·(xc² + mean x²) went into the line.
        let c1 = c1.checked_sub(dc1.checked_mul(xc)? / dx)?;
        let xx = xc.checked_mul(xc)?.checked_add(all.mean_xx()?)?;
        let c0 = c0.checked_sub(dc1.checked_mul(xx)? / (2 * dx))?;
        // a·d² with d = (x + xc)/ν: the chirp error is c2·ν² (Q0.128 cycles per ps²).
        let nu = i128::from(self.nu);
        let da = (dc1.checked_mul(nu)? / (2 * dx)).checked_mul(nu)? >> 64;
        let a = i64::try_from(i128::from(self.a).checked_sub(da)?).ok()?;
        Some((c0, c1, a))
    }

    pub(super) fn finish_fit(&mut self, pass: u8, halves: &[LsSums; 2], xc: i128) {
        let sums = &halves[0].merged(&halves[1]);
        let Some((mut c0, mut c1)) = sums.solve() else {
            self.stats.fit_failed += 1;
            self.reset_collect();
            return;
        };
        // The chirp is refined wherever the allowance could bend the residuals by about 1/18
        // turn once confirmation extrapolates to 1.5 spans.
        let mut new_a = self.a;
        if self.chirp.fit_curvature {
            if let Some((u0, u1, a)) = self.uncurve(halves, c0, c1, xc) {
                (c0, c1, new_a) = (u0, u1, a);
            }
        }
        let nu = i128::from(self.nu);
        let new_nu = nu.checked_mul(c1).map_or(-1, |v| nu - (v >> 64));
        let phi = self.phi0;
        let new_phi = phi
            .checked_sub(phi.checked_mul(c1).map_or(0, |v| v >> 64))
            .and_then(|v| v.checked_add(c0))
            .and_then(|v| v.checked_sub(c1.checked_mul(xc)?));
        let (Ok(new_nu), Some(new_phi)) = (u64::try_from(new_nu), new_phi) else {
            self.stats.fit_failed += 1;
            self.reset_collect();
            return;
        };
        self.nu = new_nu;
        self.phi0 = new_phi;
        self.a = new_a;
        match pass {
            // A chirp error bends the residuals out of the window at the span's ends, so the
            // curvature seen by one pass is clipped: repeat both search-batch passes.
            0 | 1 if self.chirp.fit_curvature && self.fit_rounds < CHIRP_FIT_ROUNDS => {
                self.fit_rounds += 1;
                self.begin_fit(pass);
            }
            0 => {
                self.fit_rounds = 0;
                self.begin_fit(1);
            }
            1 => {
                self.confirm = Fold::new();
                self.n_confirm = 0;
                self.step = Step::Confirm;
            }
            // In-window noise is uniform around the current model, so one pass corrects only
            // part of the previous error: repeat the final fit until it has converged.
            p if p < 2 + EXTRA_FINAL_PASSES => self.begin_fit(p + 1),
            _ => self.build_lock(sums),
        }
    }

    pub(super) fn decide_confirmation(&mut self) {
        let z = self.confirm.z2();
        let thr = thresholds::confirm_threshold(H).unwrap_or(U32F32::MAX);
        let predicted = self.confirm.matched(self.phi0 as u64);
        let (_, best) = self.confirm.best_offset();
        self.z2_confirm = z;
        if z >= thr && predicted.saturating_mul(2) >= best {
            self.begin_fit(2);
        } else {
            self.stats.confirm_failed += 1;
            self.reset_collect();
        }
    }

    fn build_lock(&mut self, sums: &LsSums) {
        let Some(v) = self.position(self.t_max) else {
            self.stats.fit_failed += 1;
            self.reset_collect();
            return;
        };
        let frac = v as u64;
        // The frequency at the anchor: ν + 2a·(t − t0).
        let dt = i128::from(self.t_max) - i128::from(self.t0);
        let nu = chirp::nu_change_q64(dt, self.a)
            .and_then(|d| u64::try_from(i128::from(self.nu) + d).ok())
            .unwrap_or(self.nu);
        let period_bits = (1u128 << 96) / u128::from(nu.max(1));
        let into_slot_ps = ((u128::from(frac) * period_bits) >> 96) as u64;
        let n_all = sums.n_all.max(1);
        let n_in = u64::try_from(sums.n).unwrap_or(0);
        self.lock = Some(AcquiredLock {
            period_ps: U32F32::from_bits(u64::try_from(period_bits).unwrap_or(u64::MAX)),
            nu_q64: nu,
            chirp_q128: self.a,
            origin_ps: self.t_max.saturating_sub(into_slot_ps),
            anchor_t_ps: self.t_max,
            anchor_phase_q64: frac,
            z2_search: self.z2_search,
            z2_threshold: self.z2_threshold,
            z2_confirm: self.z2_confirm,
            trials: thresholds::search_trials(self.points, self.chirp.points()),
            detections: self.buf.len() as u32,
            in_window: U0F32::from_bits(((n_in << 32) / n_all).min(u64::from(u32::MAX)) as u32),
            null_window: U0F32::from_bits((sums.null_q32 / n_all).min(u64::from(u32::MAX)) as u32),
            mean_r2_q64: u64::try_from(sums.syy / u128::from(n_in.max(1))).unwrap_or(u64::MAX),
        });
        self.step = Step::Done;
    }
}
