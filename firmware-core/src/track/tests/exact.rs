//! The fixed-point loop against the 128-bit formulas it replaced, bit for bit (update_every = 1,
//! one gear), while tracking: the comparison stops at the first holdover or set-aside channel,
//! which the reference does not model.

use super::super::snapshot::{advance, advance_limbs, nu_step_limbs};
use super::super::*;
use crate::acquire::fold::ArrivalPattern;
use proptest::prelude::*;

/// Model position with 128-bit products: the formula [`Snapshot::position`] must reproduce.
fn reference_position(s: &Snapshot, t_ps: u64) -> Option<i128> {
    let d = i128::from(t_ps) - i128::from(s.t_ps);
    if d.unsigned_abs() >= 1 << 62 {
        return None;
    }
    let hi = (s.nu_q96 >> 32) as i128;
    let lo = (s.nu_q96 & 0xFFFF_FFFF) as i128;
    s.pos_q64.checked_add(d * hi + ((d * lo) >> 32))
}

/// The per-detection update with 128-bit products and per-call constants, as the loop was first
/// written: the reference for [`Tracker::update`] with `update_every` = 1.
fn reference_update(
    tr: &mut Tracker,
    t_ps: u64,
    channel: Option<u8>,
    pat: &ChannelPattern,
) -> Located {
    if !tr.locked {
        return Located::NotLocked;
    }
    if t_ps.saturating_sub(tr.t_last_in) > tr.cfg.p.blackout_ps {
        tr.lose(LossCause::Blackout);
        return Located::NotLocked;
    }
    let Some(pos) = reference_position(&tr.model, t_ps) else {
        tr.lose(LossCause::Blackout);
        return Located::NotLocked;
    };
    if pos < 0 {
        return Located::BeforeOrigin;
    }
    let frac = pos as u64;
    let w = u64::from(tr.cfg.p.window.to_bits()) << 32;
    let (r, _) = pat.residual(frac);
    if let Some(c) = channel.and_then(|c| tr.cal.get_mut(usize::from(c))) {
        c.record(r, w);
    }
    let shift = tr.cfg.p.average_shift;
    let inside = r.unsigned_abs() <= w;
    let ind = if inside { 1i64 << 32 } else { 0 };
    tr.in_frac_q32 += (ind - tr.in_frac_q32) >> shift;
    if inside {
        tr.updates += 1;
        let r_q32 = r >> 32;
        tr.r2_q64 += (r_q32 * r_q32 - tr.r2_q64) >> shift;
        let k1 = i128::from(tr.cfg.k1);
        let dnu = (i128::from(r_q32) * tr.cfg.g2_q96 as i128) >> 32;
        tr.model = Snapshot {
            t_ps,
            pos_q64: pos - ((i128::from(r) * k1) >> 64),
            nu_q96: (tr.model.nu_q96 as i128 - dnu).max(1) as u128,
        };
        tr.t_last_in = tr.t_last_in.max(t_ps);
        if tr.in_frac_q32 >= tr.lost_below_q32 {
            tr.last_good = tr.model;
        }
    }
    if tr.in_frac_q32 < tr.lost_below_q32 {
        tr.lose(LossCause::InWindowFraction);
        return Located::NotLocked;
    }
    let max = u64::from(tr.cfg.p.max_rms.to_bits());
    if tr.r2_q64.unsigned_abs() > max * max {
        tr.lose(LossCause::ResidualRms);
        return Located::NotLocked;
    }
    Located::At(SlotPos {
        slot: (pos >> 64) as u64,
        phase: U0F32::from_bits((frac >> 32) as u32),
    })
}

/// The loop's own state: what the reference computes.
fn loop_state(tr: &Tracker) -> impl PartialEq + core::fmt::Debug + '_ {
    (
        (tr.locked, tr.model, tr.last_good, tr.t_last_in, tr.updates),
        (tr.in_frac_q32, tr.r2_q64, &tr.cal),
    )
}

/// Frequencies (Q0.96 cycles/ps) of periods from 1 ps to 2^32 ps, and the edge below 2^96.
fn nu_q96() -> impl Strategy<Value = u128> {
    prop_oneof![
        8 => (0u32..32, any::<u64>()).prop_map(|(sh, m)| (u128::from(m) << 32) >> sh),
        1 => any::<u128>().prop_map(|v| v >> 32),
        1 => Just((1u128 << 96) - 1),
    ]
}

/// Settings over their valid range (those refused are skipped).
fn config() -> impl Strategy<Value = Option<TrackConfig>> {
    (
        (1u32..10_000_000, 1u64..2_000_000_000_000, 100u32..=4000),
        (1u32..=1 << 30, 1u8..=16, 1u32..=u32::MAX, 1u64..1 << 44),
    )
        .prop_map(|((b, rate, z), (w, shift, max, blackout))| {
            TrackConfig::new(TrackParams {
                damping_milli: z,
                window: U0F32::from_bits(w),
                average_shift: shift,
                max_rms: U0F32::from_bits(max),
                wide_factor: 1,
                ..TrackParams::new(b, rate, blackout)
            })
            .ok()
        })
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(2000))]

    #[test]
    fn position_matches_the_128_bit_product(
        t0 in any::<u64>(),
        dt in prop_oneof![-(1i64 << 40)..(1i64 << 40), any::<i64>().prop_map(|d| d >> 1)],
        pos in any::<i128>().prop_map(|p| p >> 2),
        nu in prop_oneof![4 => nu_q96(), 1 => (1u128 << 96)..1 << 104],
    ) {
        // Beyond 2^96 both take the 128-bit product, which holds for short gaps only.
        prop_assume!(nu < 1 << 96 || dt.unsigned_abs() < 1 << 50);
        let s = Snapshot { t_ps: t0, pos_q64: pos, nu_q96: nu };
        let t = t0.wrapping_add(dt as u64);
        prop_assert_eq!(s.position(t), reference_position(&s, t));
    }

    #[test]
    fn loop_steps_match_the_128_bit_products(e in any::<i64>(), k in any::<u64>(), g in 0u128..1 << 96) {
        prop_assert_eq!(
            i128::from(mul_hi_signed(e, k)),
            (i128::from(e) * i128::from(k)) >> 64
        );
        let e_q32 = e >> 32;
        let want = (i128::from(e_q32) * g as i128) >> 32;
        prop_assert_eq!(nu_step_q96(e_q32 as i32, g), want);
        prop_assert_eq!(nu_step_limbs(e_q32 as i32, g), want);
    }

    #[test]
    fn advance_limbs_match_the_128_bit_product(dt in 0u64..1 << 62, hi in any::<u64>(), lo in any::<u32>()) {
        let exact = u128::from(dt) * u128::from(hi) + ((u128::from(dt) * u128::from(lo)) >> 32);
        let inexact = (u128::from(dt) * u128::from(lo)) as u32 != 0;
        prop_assert_eq!(advance(dt, hi, lo), (exact, inexact));
        prop_assert_eq!(advance_limbs(dt, hi, lo), (exact, inexact));
    }

    #[test]
    fn update_matches_the_reference_over_random_states(
        cfg in config(),
        state in (any::<u64>(), 0u128..1 << 100, nu_q96()),
        lock in (0i64..=1 << 32, 0i64..=10, 0i64..1 << 60),
        position in any::<u32>(),
        steps in proptest::collection::vec((0u64..1 << 36, any::<u8>(), 0u8..8), 1..40),
    ) {
        let Some(cfg) = cfg else { return Ok(()) };
        let (t0, pos, nu) = state;
        let pat = ArrivalPattern::single(U0F32::from_bits(position));
        let mut tr = Tracker::new(cfg);
        tr.locked = true;
        tr.model = Snapshot { t_ps: t0 >> 2, pos_q64: pos as i128, nu_q96: nu };
        tr.last_good = tr.model;
        tr.t_last_in = t0 >> 2;
        let (in_frac, below_tenths, r2) = lock;
        // Thresholds at, above and mostly below the running fraction.
        (tr.in_frac_q32, tr.lost_below_q32, tr.r2_q64) = (in_frac, in_frac * below_tenths / 8, r2);
        let mut old = tr.clone();
        let mut t = t0 >> 2;
        for (dt, jitter, ch) in steps {
            // Mostly forward in time, sometimes a little back (merged channels).
            t = t.wrapping_add(dt).wrapping_sub(u64::from(jitter));
            let ch = (ch < 7).then_some(ch);
            let aside = tr.counters().aside_detections;
            let got = tr.update(t, ch, pat.channel(ch));
            if tr.take_event().is_some() || tr.counters().aside_detections != aside {
                break;
            }
            let want = reference_update(&mut old, t, ch, pat.channel(ch));
            prop_assert_eq!(got, want);
            prop_assert_eq!(loop_state(&tr), loop_state(&old));
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(1000))]

    /// Through tracking, holdover and loss, from any state: no overflow or other panic (the
    /// debug build checks every operation), and a located answer only while tracking.
    #[test]
    fn update_never_panics_through_holdover(
        cfg in config(),
        state in (any::<u64>(), 0u128..1 << 100, nu_q96()),
        lock in (0i64..=1 << 32, 0i64..=10, 0i64..1 << 60),
        position in any::<u32>(),
        wide in any::<bool>(),
        steps in proptest::collection::vec((0u64..1 << 40, any::<u8>(), 0u8..8), 1..200),
    ) {
        let Some(cfg) = cfg else { return Ok(()) };
        let (t0, pos, nu) = state;
        let pat = ArrivalPattern::single(U0F32::from_bits(position));
        let mut tr = Tracker::new(cfg);
        tr.locked = true;
        tr.wide = wide;
        tr.model = Snapshot { t_ps: t0 >> 2, pos_q64: pos as i128, nu_q96: nu };
        tr.last_good = tr.model;
        tr.t_last_in = t0 >> 2;
        tr.drift.reset(t0 >> 2, nu);
        let (in_frac, below_tenths, r2) = lock;
        (tr.in_frac_q32, tr.lost_below_q32, tr.r2_q64) = (in_frac, in_frac * below_tenths / 8, r2);
        (tr.lock_in_q32, tr.lock_r2_q64) = (in_frac, r2);
        let mut t = t0 >> 2;
        for (dt, jitter, ch) in steps {
            t = t.wrapping_add(dt).wrapping_sub(u64::from(jitter));
            let ch = (ch < 7).then_some(ch);
            let got = tr.update(t, ch, pat.channel(ch));
            let _ = tr.take_event();
            if matches!(got, Located::At(_)) {
                prop_assert!(tr.is_locked() && !tr.in_holdover());
            }
            let _ = tr.predict(t);
        }
    }
}
