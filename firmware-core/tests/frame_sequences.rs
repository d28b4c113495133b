//! The marker's m-sequences against outside references: a general-purpose finite-field library
//! (`galois`) for the bits themselves, and Golomb's m-sequence properties (Shift Register
//! Sequences, 1967) computed here independently of the generator.

use slotwise::frame::{Lfsr, MarkerSpec, MarkerState, Prbs, SeqBits, PRBS7, PRBS9};

/// One period of each sequence from galois 0.4.11 `FLFSR` with feedback polynomial x^n + x^m + 1
/// and an all-ones seed; bit i is bit (i % 8) of byte i / 8. Produced by
/// `firmware-core/tests/reference/mseq_galois.py`, which also reports both polynomials primitive.
const GALOIS_PRBS7: &str = "4030144f3457be70245b7b63e9ce547f";
const GALOIS_PRBS9: &str = "e07d742648b9c5f3d9a8c4b1d5911101420c39d5b0979d28d4f29ba4fd6465068c2996fea2714df3f82e58db0d5a5f1528f57407ce25af2b12e6d0db2cdcc37f";

fn unpack(hex: &str, len: usize) -> Vec<u8> {
    let bytes: Vec<u8> = (0..hex.len() / 2)
        .map(|i| u8::from_str_radix(&hex[2 * i..2 * i + 2], 16).unwrap())
        .collect();
    (0..len).map(|i| (bytes[i / 8] >> (i % 8)) & 1).collect()
}

fn period_bits(poly: Prbs) -> Vec<u8> {
    Lfsr::new(poly).take(poly.period() as usize).collect()
}

#[test]
fn bits_match_galois() {
    for (poly, hex) in [(PRBS7, GALOIS_PRBS7), (PRBS9, GALOIS_PRBS9)] {
        let n = poly.period() as usize;
        let reference = unpack(hex, n);
        assert_eq!(period_bits(poly), reference, "degree {}", poly.degree);
        let table = SeqBits::new(poly).unwrap();
        let from_table: Vec<u8> = (0..n).map(|i| table.bit(i)).collect();
        assert_eq!(from_table, reference);
    }
}

#[test]
fn balance_and_two_valued_autocorrelation() {
    // Golomb 1967: 2^(n-1) ones per period; sum of (-1)^(s_i + s_{i+t}) is N at t = 0, -1 else.
    for poly in [PRBS7, PRBS9] {
        let s = period_bits(poly);
        let n = s.len();
        let ones = s.iter().filter(|&&b| b == 1).count();
        assert_eq!(ones, 1 << (poly.degree - 1));
        for t in 0..n {
            let c: i64 = (0..n)
                .map(|i| if s[i] == s[(i + t) % n] { 1 } else { -1 })
                .sum();
            assert_eq!(c, if t == 0 { n as i64 } else { -1 }, "shift {t}");
            // Consequence used by the false-alignment bound: at every shift t != 0 the pattern
            // (1 at i, 0 at i + t) occurs exactly (N + 1) / 4 times.
            if t != 0 {
                let ten = (0..n).filter(|&i| s[i] == 1 && s[(i + t) % n] == 0).count();
                assert_eq!(ten, n.div_ceil(4), "shift {t}");
            }
        }
    }
}

#[test]
fn every_nonzero_window_once() {
    // Golomb 1967 (window property): each nonzero n-bit window occurs once per period.
    for poly in [PRBS7, PRBS9] {
        let s = period_bits(poly);
        let n = s.len();
        let deg = usize::from(poly.degree);
        let mut seen = vec![0u32; 1 << deg];
        for i in 0..n {
            let w = (0..deg).fold(0usize, |w, k| (w << 1) | usize::from(s[(i + k) % n]));
            seen[w] += 1;
        }
        assert_eq!(seen[0], 0);
        assert!(seen[1..].iter().all(|&c| c == 1));
    }
}

#[test]
fn standard_marker_repeats_every_period() {
    let spec = MarkerSpec::standard();
    let p = spec.period_slots();
    assert_eq!(p, 64 * 127 * 511);
    // Marker state is a function of the slot modulo P, and no smaller multiple of D repeats it:
    // the (inner, outer) index pair runs through all 127 * 511 combinations (coprime periods).
    let mut seen = vec![false; 127 * 511];
    for j in 0..127 * 511u64 {
        let k = j * 64;
        assert_eq!(spec.state(k), spec.state(k + p));
        assert_eq!(spec.state(k + 1), None);
        let pair = (j % 127) * 511 + j % 511;
        assert!(!seen[pair as usize]);
        seen[pair as usize] = true;
    }
    let pulses = (0..127u64)
        .filter(|j| matches!(spec.state(j * 64), Some(MarkerState::Pulse { .. })))
        .count();
    assert_eq!(pulses, 64);
}
