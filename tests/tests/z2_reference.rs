//! The core's fixed-point acquisition statistic against an independent floating-point one.
//!
//! Reference formula: Z²_n = (2/N)·Σ_{k=1..n} [(Σ_i cos 2πkφ_i)² + (Σ_i sin 2πkφ_i)²] (Buccheri et
//! al., A&A 128, 245, 1983 [from memory]; the n = 1 case is the Rayleigh statistic of Leahy et
//! al., ApJ 266, 160, 1983). Reference implementation: numpy (float64 `cos`, `sin`, `angle`),
//! installed in a virtual environment of its own under the target directory; without python,
//! venv, pip or network the test prints "skipped: <reason>" and passes.
//!
//! The detections are the default bench link's (host simulator), delay-corrected, with phases
//! φ_i = (t_i − t_0)·ν in Q0.64 turns exactly as the acquirer forms them
//! (`slotwise::acquire::fold`), folded at the true frequency, at a wrong one, and for a short
//! batch. Three checks, each with a tolerance from the fixed-point table's resolution:
//! 1. numpy on the phases rounded to the core's table grid (1024 entries per turn, nearest): only
//!    the Q1.15 amplitude rounding differs;
//! 2. numpy on the exact phases: the table's phase step adds at most π/1024 rad per term;
//! 3. the per-channel statistic the acquirer really uses (each channel rotated by the argument of
//!    its gate pattern's k-th harmonic, harmonics a channel does not carry left out): numpy
//!    computes the rotations with `angle`, the core on its table grid.

use serde_json::Value;
use slotwise::acquire::fold::{ArrivalPattern, Fold, TABLE_BITS, TABLE_ONE};
use slotwise::fixed::types::U0F32;
use slotwise::{GateTable, UnwrapConfig, Unwrapper};
use slotwise_sim::scenario::Scenario;
use slotwise_sim::setup::ReceiverSetup;
use slotwise_sim::sim::{clock_truth, Simulator};
use std::path::{Path, PathBuf};

const SCRIPT: &str = r#"
import json, sys
import numpy as np
d = json.load(open(sys.argv[1]))
M = 1 << 64
out = []
for s in d["sets"]:
    x = [int(v) for v in s["phases"]]
    ch = s["channels"]
    plain, rotated = [], []
    for k in range(1, 5):
        xk = [(v * k) % M for v in x]
        exact = 2 * np.pi * np.array([v / float(M) for v in xk], dtype=np.float64)
        grid = 2 * np.pi * np.array([((v + (1 << 53)) >> 54) & 1023 for v in xk]) / 1024.0
        row = {}
        for name, a in (("exact", exact), ("grid", grid)):
            c, sn = np.cos(a).sum(), np.sin(a).sum()
            row[name] = float(2.0 * (c * c + sn * sn) / len(a))
            row[name + "_abs_s"] = float(np.hypot(c, sn))
        row["n"] = len(x)
        plain.append(row)
        # Per-channel rotation by arg C_k, C_k = sum_j exp(2 pi i k a_j) over the gate centres.
        z = 0j
        n = 0
        for c_id, pat in enumerate(d["patterns"]):
            if not pat["uses"][k - 1]:
                continue
            ka = np.array([(int(a) * k % M) / float(M) for a in pat["positions"]])
            rot = np.angle(np.exp(2j * np.pi * ka).sum())
            sel = np.array([j for j, c in enumerate(ch) if c == c_id], dtype=np.int64)
            if len(sel) == 0:
                continue
            z += np.exp(1j * (exact[sel] - rot)).sum()
            n += len(sel)
        rotated.append({"z": float(2.0 * abs(z) ** 2 / n) if n else 0.0, "abs_s": float(abs(z)), "n": n})
    out.append({"name": s["name"], "plain": plain, "rotated": rotated})
print(json.dumps(out))
"#;

/// Phases (Q0.64) and channels of one folded set.
struct Set {
    name: &'static str,
    phases: Vec<u64>,
    channels: Vec<u8>,
}

/// Python with numpy in `<target>/tmp/py-z2`, or why not.
fn numpy_python() -> Result<PathBuf, String> {
    slotwise_tests::python_with(
        &Path::new(env!("CARGO_TARGET_TMPDIR")).join("py-z2"),
        &["numpy"],
    )
}

/// The default bench link's first `n` delay-corrected detections and its true frequency, Q0.64
/// cycles per ps.
fn detections(n: usize) -> (Vec<(u64, u8)>, u64, GateTable) {
    let mut s = Scenario::default_bench();
    s.duration_s = 0.01;
    let table = *ReceiverSetup::from_scenario(&s)
        .unwrap()
        .checked
        .receiver
        .gates();
    let mut un = Unwrapper::new(UnwrapConfig::new(s.tdc_bits, s.tdc_resolution_ps).unwrap());
    let dets: Vec<(u64, u8)> = Simulator::new(&s)
        .take(n)
        .map(|e| {
            let d = un.unwrap(e.event).unwrap();
            let delay = table.delay_ps(d.channel).unwrap();
            (d.t_ps.checked_add_signed(-delay).unwrap(), d.channel)
        })
        .collect();
    let period = clock_truth(&s).unwrap().period_ps;
    let nu = (2f64.powi(64) / period).round() as u64;
    (dets, nu, table)
}

/// Phases as the acquirer forms them: (t − t_0)·ν, wrapping.
fn fold_set(name: &'static str, dets: &[(u64, u8)], nu: u64) -> Set {
    let t0 = dets[0].0;
    Set {
        name,
        phases: dets
            .iter()
            .map(|&(t, _)| t.wrapping_sub(t0).wrapping_mul(nu))
            .collect(),
        channels: dets.iter().map(|d| d.1).collect(),
    }
}

/// Core Z²_1..4 of a set, every harmonic of `pat_for(channel)`.
fn core_z2(set: &Set, pat: &ArrivalPattern, per_channel: bool) -> [f64; 4] {
    let (mut f1, mut f2, mut f3, mut f4) = (
        Fold::<1>::new(),
        Fold::<2>::new(),
        Fold::<3>::new(),
        Fold::<4>::new(),
    );
    for (&ph, &c) in set.phases.iter().zip(&set.channels) {
        let p = pat.channel(if per_channel { Some(c) } else { None });
        f1.add(ph, p);
        f2.add(ph, p);
        f3.add(ph, p);
        f4.add(ph, p);
    }
    [f1.z2(), f2.z2(), f3.z2(), f4.z2()].map(|z| z.to_num::<f64>())
}

/// Worst-case |Z'_k − Z_k| when every term exp(iθ) is replaced by one within `eta` of it:
/// |S' − S| ≤ N·η, so |2|S'|²/N − 2|S|²/N| ≤ 2η·(2|S| + N·η) [derived].
fn term_bound(abs_s: f64, n: f64, eta: f64) -> f64 {
    2.0 * eta * (2.0 * abs_s + n * eta)
}

#[test]
fn z2_matches_numpy_on_simulated_detections() {
    let py = match numpy_python() {
        Ok(p) => p,
        Err(why) => {
            eprintln!("skipped: {why}");
            return;
        }
    };
    let (dets, nu, table) = detections(2048);
    let sets = [
        fold_set("true frequency, 2048 detections", &dets, nu),
        fold_set(
            "frequency 1e-4 high, 2048 detections",
            &dets,
            nu + nu / 10_000,
        ),
        fold_set("true frequency, 64 detections", &dets[..64], nu),
    ];
    let gate_pat = ArrivalPattern::from_gates(&table);
    let plain_pat = ArrivalPattern::single(U0F32::ZERO);
    let patterns: Vec<Value> = (0..3u8)
        .map(|c| {
            let p = gate_pat.channel(Some(c));
            serde_json::json!({
                "positions": p.positions().iter().map(|v| v.to_string()).collect::<Vec<_>>(),
                "uses": (1..=4).map(|k| p.uses(k)).collect::<Vec<_>>(),
            })
        })
        .collect();
    let input = serde_json::json!({
        "sets": sets.iter().map(|s| serde_json::json!({
            "name": s.name, "phases": s.phases, "channels": s.channels,
        })).collect::<Vec<_>>(),
        "patterns": patterns,
    });
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR"));
    let input_path = dir.join("z2_reference_input.json");
    std::fs::write(&input_path, input.to_string()).unwrap();
    let script_path = dir.join("z2_reference.py");
    std::fs::write(&script_path, SCRIPT).unwrap();
    let out = slotwise_tests::run_python(&py, [&script_path, &input_path]);
    let refs: Vec<Value> = serde_json::from_slice(&out).unwrap();

    // Table resolution: amplitudes are Q1.15 rounded to nearest, so cos and sin are each within
    // ε = 0.5/TABLE_ONE of the true value and a term within √2·ε; the core divides by the table's
    // own mean power, within 1/TABLE_ONE (relative) of one; Q32.32 truncation adds 2^-32 per
    // harmonic. Phases are rounded to the nearest of 2^TABLE_BITS entries: |δ| ≤ π/1024 rad.
    let eps = 0.5 / f64::from(TABLE_ONE);
    let eta_amp = 2f64.sqrt() * eps;
    let phase_step = std::f64::consts::PI / f64::from(1u32 << TABLE_BITS);
    let norm = 1.0 / f64::from(TABLE_ONE);
    let mut worst = [0f64; 3];
    for (set, r) in sets.iter().zip(&refs) {
        let plain = core_z2(set, &plain_pat, false);
        let rotated = core_z2(set, &gate_pat, true);
        let terms = r["plain"].as_array().unwrap();
        let rot_terms = r["rotated"].as_array().unwrap();
        for n in 1..=4usize {
            let sum =
                |key: &str| -> f64 { terms[..n].iter().map(|t| t[key].as_f64().unwrap()).sum() };
            let bound = |abs_key: &str, eta: f64| -> f64 {
                terms[..n]
                    .iter()
                    .map(|t| {
                        let s = t[abs_key].as_f64().unwrap();
                        term_bound(s, t["n"].as_f64().unwrap(), eta)
                    })
                    .sum()
            };
            let z = plain[n - 1];
            let slack = |zr: f64| norm * zr.max(z) + n as f64 * 2f64.powi(-32);
            // 1. Same grid phases: amplitude rounding only.
            let zg = sum("grid");
            let tol = bound("grid_abs_s", eta_amp) + slack(zg);
            assert!(
                (z - zg).abs() <= tol,
                "{} n={n}: core {z} numpy-grid {zg} ± {tol}",
                set.name
            );
            worst[0] = worst[0].max((z - zg).abs() / tol);
            // 2. Exact phases: plus the table's phase step.
            let ze = sum("exact");
            let tol = bound("exact_abs_s", phase_step + eta_amp) + slack(ze);
            assert!(
                (z - ze).abs() <= tol,
                "{} n={n}: core {z} numpy {ze} ± {tol}",
                set.name
            );
            worst[1] = worst[1].max((z - ze).abs() / tol);
            // 3. Per-channel rotation (the acquirer's statistic): the core's rotation is on the
            // table grid too, within one step 2π/1024 of numpy's angle (argmax of rounded values).
            let zr: f64 = rot_terms[..n]
                .iter()
                .map(|t| t["z"].as_f64().unwrap())
                .sum();
            let tol: f64 = rot_terms[..n]
                .iter()
                .map(|t| {
                    let (s, m) = (t["abs_s"].as_f64().unwrap(), t["n"].as_f64().unwrap());
                    if m == 0.0 {
                        0.0
                    } else {
                        term_bound(s, m, 3.0 * phase_step + eta_amp)
                    }
                })
                .sum::<f64>()
                + norm * zr.max(rotated[n - 1])
                + n as f64 * 2f64.powi(-32);
            let zc = rotated[n - 1];
            assert!(
                (zc - zr).abs() <= tol,
                "{} n={n}: core {zc} numpy {zr} ± {tol}",
                set.name
            );
            worst[2] = worst[2].max((zc - zr).abs() / tol);
            eprintln!(
                "{:<38} n={n}: core {z:>10.4} numpy grid {zg:>10.4} exact {ze:>10.4} | rotated core {zc:>10.4} numpy {zr:>10.4}",
                set.name
            );
        }
    }
    eprintln!(
        "largest |difference| / tolerance: grid {:.3}, exact {:.3}, rotated {:.3}",
        worst[0], worst[1], worst[2]
    );
}
