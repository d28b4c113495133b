//! The aligner's state machine: residue counts, correlators, confirmation and the lock monitor.
//!
//! See the parent module for the method and `docs/marker.md` for the numbers.

use super::evidence::grid_passes;
use super::{AlignState, FrameConfig, FrameError, FrameStats, MarkerState, SeqBits, SlotHint};

/// Mismatch counters of one sequence against all its cyclic shifts.
#[derive(Clone, Copy, Debug)]
struct Correlator<const N: usize> {
    /// Per shift: detections that shift contradicts.
    mismatches: [u16; N],
    len: usize,
    events: u16,
    best: u16,
    best_at: u16,
    second: u16,
    /// Detections before this local slot are not counted (counting starts at a period end).
    count_from: u64,
    next_check: u64,
    period_slots: u64,
    /// Accepted shift (search) or passed target (confirmation).
    found: Option<u16>,
}

/// What a confirmation check concluded.
enum Verdict {
    Pass,
    Fail,
    Open,
}

impl<const N: usize> Correlator<N> {
    const fn new(len: usize, period_slots: u64) -> Self {
        Self {
            mismatches: [0; N],
            len,
            events: 0,
            best: 0,
            best_at: 0,
            second: 0,
            count_from: 0,
            next_check: 0,
            period_slots,
            found: None,
        }
    }

    const fn boundary_after(&self, slot: u64) -> u64 {
        (slot / self.period_slots)
            .saturating_add(1)
            .saturating_mul(self.period_slots)
    }

    fn reset(&mut self, now_slot: u64) {
        self.mismatches.iter_mut().for_each(|c| *c = 0);
        self.events = 0;
        self.best = 0;
        self.best_at = 0;
        self.second = 0;
        self.count_from = self.boundary_after(now_slot);
        self.next_check = self.count_from;
        self.found = None;
    }

    /// True once per period end passed (the counters then hold whole periods only).
    fn crossed(&mut self, slot: u64) -> bool {
        if slot < self.next_check {
            return false;
        }
        self.next_check = self.boundary_after(slot);
        true
    }

    /// Count a detection in marker bin `bin`: shift φ is contradicted when `seq[bin + φ] == v`.
    fn add(&mut self, slot: u64, bin: usize, seq: &SeqBits, v: u8) {
        if slot < self.count_from {
            return;
        }
        self.events = self.events.saturating_add(1);
        let (mut best, mut best_at, mut second) = (u16::MAX, 0u16, u16::MAX);
        let mut idx = bin;
        for (phi, c) in self.mismatches.iter_mut().take(self.len).enumerate() {
            if seq.bit(idx) == v {
                *c = c.saturating_add(1);
            }
            idx += 1;
            if idx >= self.len {
                idx = 0;
            }
            if *c < best {
                second = best;
                best = *c;
                best_at = phi as u16;
            } else if *c < second {
                second = *c;
            }
        }
        self.best = best;
        self.best_at = best_at;
        self.second = second;
    }

    fn full(&self) -> bool {
        self.events == u16::MAX
    }

    /// Search test: the lowest shift, if it beats the next lowest by `threshold_q16`.
    fn accept(&self, threshold_q16: i64) -> Option<u16> {
        if self.events == 0 {
            return None;
        }
        grid_passes(self.second, self.best, threshold_q16).then_some(self.best_at)
    }

    /// Confirmation test of a fixed `target` shift.
    fn judge(&self, target: u16, confirm_q16: i64, search_q16: i64) -> Verdict {
        if self.events == 0 {
            return Verdict::Open;
        }
        let own = self
            .mismatches
            .get(usize::from(target))
            .copied()
            .unwrap_or(u16::MAX);
        let rival = if self.best_at == target {
            self.second
        } else {
            self.best
        };
        if grid_passes(rival, own, confirm_q16) {
            Verdict::Pass
        } else if self.best_at != target && self.accept(search_q16).is_some() {
            Verdict::Fail
        } else {
            Verdict::Open
        }
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Phase {
    Search,
    Confirm {
        residue: u16,
        inner: u16,
        outer: u16,
        offset_mod_period: u64,
    },
    Locked {
        residue: u16,
        offset_mod_period: u64,
        offset: Option<i64>,
    },
    Misaligned {
        offset_mod_period: u64,
    },
}

/// Frame aligner with room for `D` residues (marker spacing), `N1` inner shifts and `N2` outer
/// shifts; memory is fixed by these (see [`StandardAligner`] for the standard marker).
#[derive(Clone, Debug)]
pub struct FrameAligner<const D: usize, const N1: usize, const N2: usize> {
    cfg: FrameConfig,
    /// Detections per local residue (slot mod D), during search and confirmation.
    residues: [u32; D],
    since_rescan: u32,
    candidate: Option<u16>,
    inner: Correlator<N1>,
    outer: Correlator<N2>,
    phase: Phase,
    hint: Option<SlotHint>,
    cusum_inner_q16: i64,
    cusum_outer_q16: i64,
    last_slot: u64,
    stats: FrameStats,
}

/// The aligner sized for the standard marker: D = 64, PRBS7 inner, PRBS9 outer.
pub type StandardAligner = FrameAligner<64, 127, 511>;

// The standard aligner's whole state stays within 2 KiB on every target this builds for.
const _: () = assert!(core::mem::size_of::<StandardAligner>() <= 2048);

impl<const D: usize, const N1: usize, const N2: usize> FrameAligner<D, N1, N2> {
    /// An aligner at the start of the search; fails if the capacities are below the marker's.
    pub const fn new(cfg: FrameConfig) -> Result<Self, FrameError> {
        let spec = cfg.spec();
        let d = spec.spacing() as usize;
        if d > D {
            return Err(FrameError::Capacity("D", d));
        }
        let n1 = spec.inner_period() as usize;
        if n1 > N1 {
            return Err(FrameError::Capacity("N1", n1));
        }
        let n2 = if spec.has_outer() {
            spec.outer_period() as usize
        } else {
            0
        };
        if n2 > N2 {
            return Err(FrameError::Capacity("N2", n2));
        }
        Ok(Self {
            residues: [0; D],
            since_rescan: 0,
            candidate: None,
            inner: Correlator::new(n1, spec.spacing() * spec.inner_period()),
            outer: Correlator::new(n2, spec.spacing() * spec.outer_period()),
            phase: Phase::Search,
            hint: None,
            cusum_inner_q16: 0,
            cusum_outer_q16: 0,
            last_slot: 0,
            stats: FrameStats::new(),
            cfg,
        })
    }

    /// The configuration in use.
    pub const fn config(&self) -> &FrameConfig {
        &self.cfg
    }

    /// Work and marker counters.
    pub const fn stats(&self) -> &FrameStats {
        &self.stats
    }

    /// The hint in use, if one was given.
    pub const fn hint(&self) -> Option<SlotHint> {
        self.hint
    }

    /// Where the aligner stands.
    pub fn state(&self) -> AlignState {
        match self.phase {
            Phase::Search => AlignState::Searching {
                candidate_residue: self.candidate,
                inner_shift: self.inner.found,
                outer_shift: self.outer.found,
            },
            Phase::Confirm {
                offset_mod_period, ..
            } => AlignState::Confirming { offset_mod_period },
            Phase::Locked {
                offset: Some(offset),
                ..
            } => AlignState::Aligned { offset },
            Phase::Locked {
                offset_mod_period,
                offset: None,
                ..
            } => AlignState::AwaitingHint { offset_mod_period },
            Phase::Misaligned { offset_mod_period } => AlignState::Misaligned { offset_mod_period },
        }
    }

    /// The absolute slot number of local slot `local_slot`, once [`AlignState::Aligned`].
    pub fn to_absolute(&self, local_slot: u64) -> Option<u64> {
        match self.phase {
            Phase::Locked {
                offset: Some(off), ..
            } => u64::try_from(i128::from(local_slot) + i128::from(off)).ok(),
            _ => None,
        }
    }

    /// Whether local slot `local_slot` is a marker slot, once the offset modulo P is confirmed.
    pub fn is_marker_local(&self, local_slot: u64) -> Option<bool> {
        match self.phase {
            Phase::Locked { residue, .. } => Some(self.local_residue(local_slot) == residue),
            _ => None,
        }
    }

    /// Take a coarse hint (used at lock; later hints that disagree are counted and ignored).
    pub fn set_hint(&mut self, hint: SlotHint) {
        let Phase::Locked {
            residue,
            offset_mod_period,
            offset,
        } = self.phase
        else {
            self.hint = Some(hint);
            return;
        };
        let resolved = resolve(hint, offset_mod_period, self.cfg.spec.period_slots());
        match (offset, resolved) {
            (None, Some(_)) => {
                self.hint = Some(hint);
                self.phase = Phase::Locked {
                    residue,
                    offset_mod_period,
                    offset: resolved,
                };
            }
            (Some(cur), Some(new)) if cur == new => self.hint = Some(hint),
            _ => self.stats.hint_conflicts += 1,
        }
    }

    /// Take an offset known by construction (`absolute = local + offset`), skipping the search;
    /// the lock monitor still checks it against the marker.
    pub fn assume_offset(&mut self, offset: i64) {
        let spec = &self.cfg.spec;
        let p = i128::from(spec.period_slots());
        let offset_mod_period = i128::from(offset).rem_euclid(p) as u64;
        let d = spec.spacing();
        self.phase = Phase::Locked {
            residue: ((d - offset_mod_period % d) % d) as u16,
            offset_mod_period,
            offset: Some(offset),
        };
        self.stats.locked_after = Some(self.stats.observed);
        self.cusum_inner_q16 = 0;
        self.cusum_outer_q16 = 0;
    }

    /// Start a new search (after [`AlignState::Misaligned`]); the hint is kept.
    pub fn restart(&mut self) {
        self.residues.iter_mut().for_each(|c| *c = 0);
        self.since_rescan = 0;
        self.candidate = None;
        self.inner.reset(self.last_slot);
        self.outer.reset(self.last_slot);
        self.phase = Phase::Search;
        self.cusum_inner_q16 = 0;
        self.cusum_outer_q16 = 0;
    }

    /// Take one detection: its slot on the receiver's numbering and, for a Z-basis gate, its bit.
    /// Call it for every gated detection, in (nearly) increasing slot order; if the local
    /// numbering restarts (clock re-acquired), call [`Self::restart`] first.
    pub fn observe(&mut self, local_slot: u64, z_bit: Option<u8>) {
        self.stats.observed += 1;
        self.last_slot = self.last_slot.max(local_slot);
        let bit = match z_bit {
            Some(b @ 0..=1) => Some(b),
            Some(_) => {
                self.stats.invalid_bits += 1;
                None
            }
            None => None,
        };
        match self.phase {
            Phase::Search => self.search(local_slot, bit),
            Phase::Confirm {
                residue,
                inner,
                outer,
                offset_mod_period,
            } => self.confirm(local_slot, bit, residue, (inner, outer), offset_mod_period),
            Phase::Locked {
                residue,
                offset_mod_period,
                ..
            } => self.monitor(local_slot, bit, residue, offset_mod_period),
            Phase::Misaligned { .. } => {}
        }
    }

    fn local_residue(&self, slot: u64) -> u16 {
        (slot & (self.cfg.spec.spacing() - 1)) as u16
    }

    /// Count the detection's residue; every D detections re-pick the candidate. True when the
    /// candidate changed.
    fn count_residue(&mut self, slot: u64) -> bool {
        let d = self.cfg.spec.spacing() as usize;
        let mut halve = false;
        let r = usize::from(self.local_residue(slot));
        if let Some(c) = self.residues.get_mut(r) {
            *c += 1;
            halve = *c >= 1 << 31;
        }
        if halve {
            self.residues.iter_mut().for_each(|c| *c /= 2);
        }
        self.since_rescan += 1;
        if (self.since_rescan as usize) < d {
            return false;
        }
        self.since_rescan = 0;
        let (mut min, mut at) = (u32::MAX, 0u16);
        for (i, &c) in self.residues.iter().take(d).enumerate() {
            if c < min {
                min = c;
                at = i as u16;
            }
        }
        match self.candidate {
            None => {
                self.candidate = Some(at);
                true
            }
            Some(cur) if cur != at => {
                let c = self.residues.get(usize::from(cur)).copied().unwrap_or(0);
                // Hysteresis of about two standard deviations of the candidate's count.
                let margin = 2 * super::evidence::isqrt(u64::from(c)) + 2;
                if u64::from(c.saturating_sub(min)) > margin {
                    self.candidate = Some(at);
                    self.stats.candidate_switches += 1;
                    true
                } else {
                    false
                }
            }
            Some(_) => false,
        }
    }

    fn reset_correlators(&mut self, slot: u64) {
        self.inner.reset(slot);
        self.outer.reset(slot);
    }

    /// Count a detection on the marker residue into the correlators still open.
    fn add_marker_event(&mut self, slot: u64, bit: Option<u8>, residue: u16) {
        if self.local_residue(slot) != residue {
            return;
        }
        let spec = &self.cfg.spec;
        let j = slot >> spec.spacing_log2;
        if self.inner.found.is_none() {
            let bin = (j % spec.inner_period()) as usize;
            self.inner.add(slot, bin, &spec.inner, 0);
        }
        if let (Some(b), Some(seq), None) = (bit, spec.outer.as_ref(), self.outer.found) {
            let bin = (j % spec.outer_period()) as usize;
            self.outer.add(slot, bin, seq, 1 - b);
        }
    }

    fn search(&mut self, slot: u64, bit: Option<u8>) {
        if self.count_residue(slot) {
            self.reset_correlators(slot);
        }
        let Some(residue) = self.candidate else {
            return;
        };
        let has_outer = self.cfg.spec.has_outer();
        if self.inner.found.is_none() && self.inner.crossed(slot) {
            let t = self.cfg.search_threshold_q16(self.cfg.spec.inner_period());
            self.inner.found = self.inner.accept(t);
        }
        if has_outer && self.outer.found.is_none() && self.outer.crossed(slot) {
            let t = self.cfg.search_threshold_q16(self.cfg.spec.outer_period());
            self.outer.found = self.outer.accept(t);
        }
        let outer = if has_outer { self.outer.found } else { Some(0) };
        if let (Some(inner), Some(outer)) = (self.inner.found, outer) {
            self.begin_confirm(slot, residue, inner, outer);
            return;
        }
        self.add_marker_event(slot, bit, residue);
        if self.inner.full() || self.outer.full() {
            self.stats.search_restarts += 1;
            self.reset_correlators(slot);
        }
    }

    fn begin_confirm(&mut self, slot: u64, residue: u16, inner: u16, outer: u16) {
        let spec = &self.cfg.spec;
        let q = spec.combine(u64::from(inner), u64::from(outer));
        let p = spec.period_slots();
        // absolute = D·(local marker index + q) and local = D·index + residue.
        let offset_mod_period = (spec.spacing() * q + p - u64::from(residue)) % p;
        self.reset_correlators(slot);
        self.phase = Phase::Confirm {
            residue,
            inner,
            outer,
            offset_mod_period,
        };
    }

    fn fail(&mut self, slot: u64) {
        self.stats.confirm_failures += 1;
        self.reset_correlators(slot);
        self.phase = Phase::Search;
    }

    fn confirm(
        &mut self,
        slot: u64,
        bit: Option<u8>,
        residue: u16,
        (inner, outer): (u16, u16),
        offset_mod_period: u64,
    ) {
        if self.count_residue(slot) && self.candidate != Some(residue) {
            return self.fail(slot);
        }
        let cq = self.cfg.confirm_threshold_q16();
        let has_outer = self.cfg.spec.has_outer();
        if self.inner.found.is_none() && self.inner.crossed(slot) {
            let sq = self.cfg.search_threshold_q16(self.cfg.spec.inner_period());
            match self.inner.judge(inner, cq, sq) {
                Verdict::Pass => self.inner.found = Some(inner),
                Verdict::Fail => return self.fail(slot),
                Verdict::Open => {}
            }
        }
        if has_outer && self.outer.found.is_none() && self.outer.crossed(slot) {
            let sq = self.cfg.search_threshold_q16(self.cfg.spec.outer_period());
            match self.outer.judge(outer, cq, sq) {
                Verdict::Pass => self.outer.found = Some(outer),
                Verdict::Fail => return self.fail(slot),
                Verdict::Open => {}
            }
        }
        if self.inner.found.is_some() && (!has_outer || self.outer.found.is_some()) {
            self.phase = Phase::Locked {
                residue,
                offset_mod_period,
                offset: self
                    .hint
                    .and_then(|h| resolve(h, offset_mod_period, self.cfg.spec.period_slots())),
            };
            self.stats.locked_after = Some(self.stats.observed);
            self.cusum_inner_q16 = 0;
            self.cusum_outer_q16 = 0;
            return;
        }
        self.add_marker_event(slot, bit, residue);
        if self.inner.full() || self.outer.full() {
            self.fail(slot);
        }
    }

    fn monitor(&mut self, slot: u64, bit: Option<u8>, residue: u16, offset_mod_period: u64) {
        if self.local_residue(slot) != residue {
            return;
        }
        let spec = &self.cfg.spec;
        let p = spec.period_slots();
        let w = self.cfg.weights;
        match spec.state((slot % p + offset_mod_period) % p) {
            Some(MarkerState::Vacuum) => {
                self.stats.marker_vacuum += 1;
                self.cusum_inner_q16 += w.loss_q16;
            }
            Some(MarkerState::Pulse { z_bit }) => {
                self.stats.marker_pulse += 1;
                self.cusum_inner_q16 = (self.cusum_inner_q16 - w.gain_q16).max(0);
                if let (Some(b), true) = (bit, spec.has_outer()) {
                    self.stats.marker_bits += 1;
                    if b == z_bit {
                        self.cusum_outer_q16 = (self.cusum_outer_q16 - w.gain_q16).max(0);
                    } else {
                        self.stats.marker_bit_errors += 1;
                        self.cusum_outer_q16 += w.loss_q16;
                    }
                }
            }
            None => {}
        }
        let limit = self.cfg.monitor_threshold_q16();
        if self.cusum_inner_q16 >= limit || self.cusum_outer_q16 >= limit {
            self.stats.misalignments += 1;
            self.phase = Phase::Misaligned { offset_mod_period };
        }
    }
}

/// The offset ≡ `offset_mod_period` (mod `period`) nearest to the hint's tx − local.
fn resolve(hint: SlotHint, offset_mod_period: u64, period: u64) -> Option<i64> {
    let approx = i128::from(hint.tx_slot) - i128::from(hint.local_slot);
    let p = i128::from(period);
    let mut d = (i128::from(offset_mod_period) - approx).rem_euclid(p);
    if d > p / 2 {
        d -= p;
    }
    i64::try_from(approx + d).ok()
}

#[cfg(test)]
mod tests {
    use super::super::{evidence::ONE_BIT_Q16, PRBS7};
    use super::*;

    struct Rng(u64);
    impl Rng {
        /// SplitMix64 (Steele, Lea, Flood, OOPSLA 2014).
        fn next(&mut self) -> u64 {
            self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.0;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }
    }

    /// Share of attempts in which a correlator fed `periods` periods of marker slots accepts a
    /// shift: a detection with probability 1/2 in every marker slot (`signal` false), or in the
    /// pulsed slots of shift 5 only (`signal` true); also whether every acceptance was shift 5.
    fn acceptance(search_bits: i64, signal: bool, attempts: u64, periods: u64) -> (f64, bool) {
        let seq = SeqBits::new(PRBS7).unwrap();
        let thr = (search_bits + 7 + 2) * ONE_BIT_Q16;
        let mut rng = Rng(search_bits as u64 + 1);
        let (mut accepted, mut right) = (0, true);
        for _ in 0..attempts {
            let mut c = Correlator::<127>::new(127, 64 * 127);
            c.reset(0);
            'attempt: for j in 127..127 * periods {
                let slot = 64 * j;
                if c.crossed(slot) {
                    if let Some(phi) = c.accept(thr) {
                        accepted += 1;
                        right &= phi == 5;
                        break 'attempt;
                    }
                }
                let on = seq.bit(((j + 5) % 127) as usize) == 1;
                if (!signal || on) && rng.next() >> 63 == 1 {
                    c.add(slot, (j % 127) as usize, &seq, 0);
                }
            }
        }
        (accepted as f64 / attempts as f64, right)
    }

    #[test]
    fn pair_likelihood_ratio_obeys_ville() {
        // Under noise (every marker slot alike) the likelihood ratio of shift 0 against shift 1,
        // sampled at period ends, is a non-negative supermartingale starting at 1; Ville's
        // inequality bounds the chance that it ever reaches 2^t by 2^-t. Step sizes of the
        // 3/8 alternative are small, so the bound is nearly attained: the check is tight.
        let seq = SeqBits::new(PRBS7).unwrap();
        let w = super::super::evidence::GRID[3];
        let mut rng = Rng(7);
        for t in [2i64, 4] {
            let (attempts, mut crossed) = (2_000, 0);
            for _ in 0..attempts {
                let (mut u, mut d) = (0i64, 0i64);
                for j in 0..127 * 60u64 {
                    if j % 127 == 0 && w.gain_q16 * u - w.loss_q16 * d >= t * ONE_BIT_Q16 {
                        crossed += 1;
                        break;
                    }
                    if rng.next() >> 62 != 0 {
                        continue;
                    }
                    let m = (j % 127) as usize;
                    match (seq.bit(m), seq.bit(m + 1)) {
                        (1, 0) => u += 1,
                        (0, 1) => d += 1,
                        _ => {}
                    }
                }
            }
            let rate = f64::from(crossed) / f64::from(attempts);
            let bound = 0.5f64.powi(t as i32);
            println!("t = {t} bits: crossed {rate}, bound {bound}");
            // Binomial slack of three standard deviations over 2000 attempts.
            assert!(
                rate <= bound + 3.0 * (bound / 2000.0).sqrt(),
                "{rate} > {bound}"
            );
            assert!(rate > bound / 16.0, "bound far from tight: {rate}");
        }
    }

    #[test]
    fn search_accepts_the_right_shift_with_a_marker() {
        let (rate, right) = acceptance(10, true, 50, 30);
        assert!(rate == 1.0 && right, "{rate} {right}");
    }
}
