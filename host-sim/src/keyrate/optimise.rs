//! A small derivative-free maximiser for the key-rate parameter searches: the downhill simplex
//! of Nelder and Mead (Computer Journal 7, 308 (1965)) with the usual coefficients (reflection 1,
//! expansion 2, contraction 1/2, shrink 1/2), written here for a handful of unconstrained
//! coordinates. Callers map their bounded parameters onto the real line (logistic maps), so
//! every point the simplex visits is feasible.

/// Settings of a Nelder-Mead search.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Simplex {
    /// Edge of the starting simplex, in the caller's unconstrained coordinates.
    pub step: f64,
    /// Most objective evaluations per restart.
    pub max_evals: usize,
    /// Stop when the spread of the simplex's values falls below this (absolute, objective units).
    pub f_tol: f64,
    /// Restarts from the best point with a fresh simplex (a restart undoes a collapsed simplex).
    pub restarts: usize,
}

impl Default for Simplex {
    fn default() -> Self {
        Self {
            step: 0.5,
            max_evals: 600,
            f_tol: 0.0,
            restarts: 2,
        }
    }
}

/// Maximise `f` from `x0`: (argmax, max). Non-finite values count as −∞.
pub fn maximise(x0: &[f64], s: Simplex, f: impl Fn(&[f64]) -> f64) -> (Vec<f64>, f64) {
    let g = |x: &[f64]| {
        let v = f(x);
        if v.is_finite() {
            v
        } else {
            f64::NEG_INFINITY
        }
    };
    let mut best = (x0.to_vec(), g(x0));
    for _ in 0..=s.restarts {
        best = run(&best.0, s, &g);
    }
    best
}

/// One Nelder-Mead run from `x0`.
fn run(x0: &[f64], s: Simplex, f: &impl Fn(&[f64]) -> f64) -> (Vec<f64>, f64) {
    let n = x0.len();
    let mut pts: Vec<(Vec<f64>, f64)> = Vec::with_capacity(n + 1);
    pts.push((x0.to_vec(), f(x0)));
    for i in 0..n {
        let mut x = x0.to_vec();
        x[i] += s.step;
        let v = f(&x);
        pts.push((x, v));
    }
    let mut evals = n + 1;
    let along = |c: &[f64], w: &[f64], t: f64| -> Vec<f64> {
        c.iter().zip(w).map(|(ci, wi)| ci + t * (wi - ci)).collect()
    };
    while evals < s.max_evals {
        // Best first.
        pts.sort_by(|a, b| b.1.total_cmp(&a.1));
        let spread = pts[0].1 - pts[n].1;
        if spread.is_finite() && spread <= s.f_tol {
            break;
        }
        let centroid: Vec<f64> = (0..n)
            .map(|j| pts[..n].iter().map(|p| p.0[j]).sum::<f64>() / n as f64)
            .collect();
        let worst = pts[n].clone();
        let xr = along(&centroid, &worst.0, -1.0);
        let fr = f(&xr);
        evals += 1;
        if fr > pts[0].1 {
            let xe = along(&centroid, &worst.0, -2.0);
            let fe = f(&xe);
            evals += 1;
            pts[n] = if fe > fr { (xe, fe) } else { (xr, fr) };
        } else if fr > pts[n - 1].1 {
            pts[n] = (xr, fr);
        } else {
            // Contract towards the better of the worst point and its reflection.
            let (t, fref) = if fr > worst.1 {
                (-0.5, fr)
            } else {
                (0.5, worst.1)
            };
            let xc = along(&centroid, &worst.0, t);
            let fc = f(&xc);
            evals += 1;
            if fc > fref {
                pts[n] = (xc, fc);
            } else {
                let b = pts[0].0.clone();
                for p in pts.iter_mut().skip(1) {
                    p.0 = along(&b, &p.0, 0.5);
                    p.1 = f(&p.0);
                }
                evals += n;
            }
        }
    }
    pts.sort_by(|a, b| b.1.total_cmp(&a.1));
    pts.swap_remove(0)
}

/// Logistic map of the real line onto (lo, hi).
pub fn to_interval(x: f64, lo: f64, hi: f64) -> f64 {
    lo + (hi - lo) / (1.0 + (-x).exp())
}

/// Inverse of [`to_interval`] for a value strictly inside (lo, hi).
pub fn from_interval(v: f64, lo: f64, hi: f64) -> f64 {
    let t = (v - lo) / (hi - lo);
    (t / (1.0 - t)).ln()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_the_top_of_a_tilted_quadratic_and_of_rosenbrock() {
        let (x, v) = maximise(&[0.0, 0.0, 0.0], Simplex::default(), |x| {
            -(x[0] - 1.0).powi(2) - 2.0 * (x[1] + 0.5).powi(2) - (x[2] - x[0]).powi(2) + 3.0
        });
        assert!(
            (x[0] - 1.0).abs() < 1e-3 && (x[1] + 0.5).abs() < 1e-3,
            "{x:?}"
        );
        assert!((v - 3.0).abs() < 1e-6);
        // Rosenbrock's valley (maximum 0 at (1, 1)), the classic test of a simplex search.
        let s = Simplex {
            max_evals: 2000,
            restarts: 3,
            ..Simplex::default()
        };
        let (x, _) = maximise(&[-1.2, 1.0], s, |x| {
            -(100.0 * (x[1] - x[0] * x[0]).powi(2) + (1.0 - x[0]).powi(2))
        });
        assert!(
            (x[0] - 1.0).abs() < 1e-3 && (x[1] - 1.0).abs() < 1e-3,
            "{x:?}"
        );
    }

    #[test]
    fn interval_maps_invert() {
        for v in [0.01, 0.3, 0.99] {
            let x = from_interval(v, 0.0, 1.0);
            assert!((to_interval(x, 0.0, 1.0) - v).abs() < 1e-12);
        }
    }
}
