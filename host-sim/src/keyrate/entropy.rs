//! Binary entropy and the Shor-Preskill rate.

/// Binary entropy h(x) = −x·log2 x − (1 − x)·log2(1 − x), bits; 0 at x ∈ {0, 1}, and x is
/// clamped to [0, 1/2] mirrored (h(x) = h(1 − x)), so an error bound above 1/2 costs one bit.
pub fn h2(x: f64) -> f64 {
    if !x.is_finite() {
        return 1.0;
    }
    let x = x.clamp(0.0, 1.0);
    if x <= 0.0 || x >= 1.0 {
        return 0.0;
    }
    -x * x.log2() - (1.0 - x) * (1.0 - x).log2()
}

/// Phase-error cost h(e) with e capped at 1/2 (an upper bound above 1/2 means no secrecy).
pub fn h2_capped(e: f64) -> f64 {
    if !e.is_finite() || e >= 0.5 {
        1.0
    } else {
        h2(e)
    }
}

/// Shor-Preskill asymptotic key fraction of BB84 with single photons, 1 − 2h(Q), bits per
/// sifted bit (Shor & Preskill, PRL 85, 441 (2000)).
pub fn shor_preskill(q: f64) -> f64 {
    1.0 - 2.0 * h2(q)
}

/// Root of a decreasing-through-zero function on [lo, hi] by bisection (tolerance `tol`).
pub fn bisect(mut lo: f64, mut hi: f64, tol: f64, f: impl Fn(f64) -> f64) -> f64 {
    let flo = f(lo);
    for _ in 0..200 {
        if hi - lo <= tol {
            break;
        }
        let mid = 0.5 * (lo + hi);
        if (f(mid) > 0.0) == (flo > 0.0) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Maximum of a unimodal function on [lo, hi] by golden-section search: (argmax, max).
pub fn golden_max(mut lo: f64, mut hi: f64, tol: f64, f: impl Fn(f64) -> f64) -> (f64, f64) {
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let mut a = hi - g * (hi - lo);
    let mut b = lo + g * (hi - lo);
    let (mut fa, mut fb) = (f(a), f(b));
    for _ in 0..300 {
        if hi - lo <= tol {
            break;
        }
        if fa < fb {
            lo = a;
            a = b;
            fa = fb;
            b = lo + g * (hi - lo);
            fb = f(b);
        } else {
            hi = b;
            b = a;
            fb = fa;
            a = hi - g * (hi - lo);
            fa = f(a);
        }
    }
    let x = 0.5 * (lo + hi);
    (x, f(x))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shor_preskill_reference_values() {
        // Shor & Preskill, PRL 85, 441 (2000): 1 − 2h(Q) = 0 at Q = 11.0028 % (BRIEF §4 [pub]).
        let q0 = bisect(0.05, 0.2, 1e-12, shor_preskill);
        assert!((q0 - 0.110_028).abs() < 5e-7, "{q0}");
        // 1 − 2h(0.01) = 0.838414, 1 − 2h(0.03) = 0.611216, h(0.05) = 0.286397 (BRIEF §4 [der]).
        assert!((shor_preskill(0.01) - 0.838_414).abs() < 1e-6);
        assert!((shor_preskill(0.03) - 0.611_216).abs() < 1e-6);
        assert!((h2(0.05) - 0.286_397).abs() < 1e-6);
    }

    #[test]
    fn entropy_edges() {
        assert_eq!(h2(0.0), 0.0);
        assert_eq!(h2(1.0), 0.0);
        assert!((h2(0.5) - 1.0).abs() < 1e-15);
        assert_eq!(h2_capped(0.7), 1.0);
    }

    #[test]
    fn golden_section_finds_a_parabola_top() {
        let (x, y) = golden_max(0.0, 3.0, 1e-10, |x| -(x - 1.3) * (x - 1.3) + 2.0);
        assert!((x - 1.3).abs() < 1e-6 && (y - 2.0).abs() < 1e-9);
    }
}
