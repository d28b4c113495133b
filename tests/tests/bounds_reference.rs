//! Confidence bounds against scipy: the host's exact Clopper-Pearson interval, the board's
//! fixed-point Wilson score interval and its z constant.
//!
//! Reference implementation: scipy (`scipy.stats.binomtest(k, n).proportion_ci(level,
//! method=...)` for the exact and Wilson intervals, `scipy.stats.beta.ppf` for the beta quantiles
//! directly, `scipy.stats.norm.isf` for z), installed in a virtual environment of its own under
//! the target directory; without python, venv, pip or network the test prints "skipped: <reason>"
//! and passes.

use serde_json::Value;
use slotwise::bounds::{wilson_ppm, Z_ONE_SIDED_1E_10_Q16};
use slotwise_sim::stats::clopper_pearson;
use std::path::Path;

const SCRIPT: &str = r#"
import json, sys
from scipy.stats import binomtest, beta, norm
eps = 1e-10
rows = []
for k, n in json.loads(sys.argv[1]):
    r = binomtest(k, n)
    cp95 = r.proportion_ci(confidence_level=0.95, method="exact")
    cpe = r.proportion_ci(confidence_level=1 - 2 * eps, method="exact")
    wil = r.proportion_ci(confidence_level=1 - 2 * eps, method="wilson")
    lo = 0.0 if k == 0 else float(beta.ppf(eps, k, n - k + 1))
    hi = 1.0 if k == n else float(beta.ppf(1 - eps, k + 1, n - k))
    rows.append({"k": k, "n": n, "cp95": [cp95.low, cp95.high], "cp_eps": [cpe.low, cpe.high],
                 "beta_eps": [lo, hi], "wilson_eps": [wil.low, wil.high]})
print(json.dumps({"z": float(norm.isf(eps)), "rows": rows}))
"#;

const CASES: &[(u64, u64)] = &[
    (7, 50),
    (0, 30),
    (30, 30),
    (1, 1000),
    (30, 1000),
    (110, 1000),
    (4928, 480_732),
    (3, 2902),
    (500, 1000),
];

fn close(a: f64, b: f64, rel: f64, abs: f64) -> bool {
    (a - b).abs() <= abs + rel * b.abs()
}

#[test]
fn clopper_pearson_and_wilson_against_scipy() {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join("py-scipy");
    let py = match slotwise_tests::python_with(&dir, &["scipy"]) {
        Ok(p) => p,
        Err(why) => {
            println!("skipped: {why}");
            return;
        }
    };
    let cases = serde_json::to_string(CASES).unwrap();
    let out = slotwise_tests::run_python(&py, ["-c", SCRIPT, &cases]);
    let v: Value = serde_json::from_slice(&out).unwrap();
    // z of the board's Wilson bound: scipy norm.isf(1e-10), to the Q16.16 grid.
    let z = v["z"].as_f64().unwrap();
    assert!(
        (f64::from(Z_ONE_SIDED_1E_10_Q16) / 65536.0 - z).abs() <= 0.5 / 65536.0,
        "{z}"
    );
    let pair = |r: &Value, key: &str| {
        let a = r[key].as_array().unwrap();
        (a[0].as_f64().unwrap(), a[1].as_f64().unwrap())
    };
    for r in v["rows"].as_array().unwrap() {
        let (k, n) = (r["k"].as_u64().unwrap(), r["n"].as_u64().unwrap());
        // The host's exact interval: scipy binomtest(k, n).proportion_ci(), 95 % and 1 − 2e-10,
        // and beta.ppf at the same tails.
        for (key, alpha) in [("cp95", 0.05), ("cp_eps", 2e-10), ("beta_eps", 2e-10)] {
            let (lo, hi) = clopper_pearson(k, n, alpha);
            let (slo, shi) = pair(r, key);
            assert!(
                close(lo, slo, 1e-7, 1e-12),
                "{k}/{n} {key} low {lo} scipy {slo}"
            );
            assert!(
                close(hi, shi, 1e-7, 1e-12),
                "{k}/{n} {key} high {hi} scipy {shi}"
            );
        }
        // The board's Wilson interval: scipy's method="wilson" at 1 − 2e-10 (z = isf(1e-10)),
        // rounded outward to ppm; allow 2 ppm for z on the Q16.16 grid.
        let (lo, hi) = wilson_ppm(k, n, Z_ONE_SIDED_1E_10_Q16);
        let (slo, shi) = pair(r, "wilson_eps");
        assert!(
            (f64::from(lo) - slo * 1e6).abs() <= 2.0,
            "{k}/{n} wilson low {lo} scipy {slo}"
        );
        assert!(
            (f64::from(hi) - shi * 1e6).abs() <= 2.0,
            "{k}/{n} wilson high {hi} scipy {shi}"
        );
    }
}
