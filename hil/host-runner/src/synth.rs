//! Deterministic synthetic captures for the HIL check, beside the link simulator's captures: the
//! fault variant has transport faults the simulator does not model.
//!
//! An invented 100 MHz time-bin link: transmitter clock +37 ppm, three-state protocol (Z0, Z1, X+)
//! with p_Z = 0.9, signal and decoy classes (0.7 / 0.3), an arrival-time detector (channel 0)
//! and one interferometer output (channel 1, 1230 ps of cable delay), 35 ps RMS jitter, dark
//! counts, afterpulses, multi-clicks, 40 ns dead time, a 48-bit TDC at 1 ps that wraps early in
//! the run. The fault variant adds a detector blackout, reordered neighbours, an unknown channel
//! and counter values wider than the TDC.

use crate::capture::Capture;
use slotwise::fixed::types::{U0F32, U32F32};
use slotwise::{
    Announcement, Answer, Basis, Gate, GateTable, OverflowPolicy, TdcEvent, UnwrapConfig,
};
use slotwise_hil::Setup;

/// TDC counter width.
const COUNTER_BITS: u8 = 48;
/// Slot 0 starts this long before the 48-bit counter wraps, in ps.
const BEFORE_WRAP_PS: u64 = 200_000_000;
/// Delay of the interferometer output's cable, in ps.
const CH1_DELAY_PS: i64 = 1230;
/// Dead time of each detector, in ps.
const DEAD_TIME_PS: u64 = 40_000;

/// Which synthetic capture to make.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Variant {
    /// The clean bench link.
    Default,
    /// The same link with transport and detector faults.
    Fault,
}

/// splitmix64 (Steele, Lea, Flood, OOPSLA 2014): a well-mixed 64-bit hash of a counter.
fn splitmix(mut z: u64) -> u64 {
    z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Small seeded generator for the detection process (host only).
struct Rng(u64);

impl Rng {
    fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(1);
        splitmix(self.0)
    }
    fn unit(&mut self) -> f64 {
        (self.next() >> 11) as f64 / (1u64 << 53) as f64
    }
    fn chance(&mut self, p: f64) -> bool {
        self.unit() < p
    }
    fn below(&mut self, n: u64) -> u64 {
        ((u128::from(self.next()) * u128::from(n)) >> 64) as u64
    }
}

/// What the transmitter prepared in one slot: a pure function of the seed and the slot.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TxState {
    /// Basis.
    pub basis: Basis,
    /// Bit (always 0 in X: the three-state protocol sends X+ only).
    pub bit: u8,
    /// 0 = signal, 1 = decoy.
    pub intensity: u8,
    /// Whether the transmitter reveals the bit in its answer (test fraction).
    pub revealed: bool,
}

/// The transmitter's state of `slot`.
pub fn tx_state(seed: u64, slot: u64) -> TxState {
    let h = splitmix(seed ^ slot.wrapping_mul(0xD6E8_FEB8_6659_FD93));
    let basis = if (h & 0xFFFF) < 58_982 {
        Basis::Z
    } else {
        Basis::X
    };
    let bit = if basis == Basis::Z {
        ((h >> 16) & 1) as u8
    } else {
        0
    };
    let intensity = u8::from(((h >> 17) & 0xFFFF) >= 45_875);
    let revealed = basis == Basis::X || (h >> 33) & 0xF == 0;
    TxState {
        basis,
        bit,
        intensity,
        revealed,
    }
}

/// The transmitter's answer to an announcement.
pub fn answer(seed: u64, a: Announcement) -> Answer {
    let s = tx_state(seed, a.slot);
    Answer {
        slot: a.slot,
        basis: s.basis,
        intensity: s.intensity,
        bit: s.revealed.then_some(s.bit),
    }
}

fn q(x: f64) -> U0F32 {
    U0F32::from_num(x)
}

/// The receiver setup of the synthetic link.
pub fn setup() -> Setup {
    let g = |channel, a, b, basis, bit| Gate {
        channel,
        start: q(a),
        end: q(b),
        basis,
        bit,
    };
    let gates = GateTable::new(
        &[0, CH1_DELAY_PS],
        &[
            g(0, 0.15, 0.25, Basis::Z, 0),
            g(0, 0.40, 0.50, Basis::Z, 1),
            g(1, 0.15, 0.25, Basis::Z, 0),
            g(1, 0.40, 0.50, Basis::X, 0),
            g(1, 0.65, 0.75, Basis::Z, 1),
        ],
    );
    let tdc = UnwrapConfig::new(COUNTER_BITS, 1);
    let (Ok(gates), Ok(tdc)) = (gates, tdc) else {
        unreachable!("the built-in gate table and TDC are valid");
    };
    // 100 MHz nominal, transmitter clock 37 ppm fast.
    let period_ps = U32F32::from_num(10_000.0 / (1.0 + 37e-6));
    Setup {
        tdc,
        gates,
        period_ps,
        origin_ps: (1u64 << COUNTER_BITS) - BEFORE_WRAP_PS,
        intensities: 2,
        answer_timeout_slots: 1_000_000,
        overflow: OverflowPolicy::DropOldest,
        squash_seed: 0x5EED_0F5A_17ED,
    }
}

/// Make one synthetic capture of `slots` slots.
pub fn capture(variant: Variant, slots: u64, name: &str) -> Capture {
    let seed: u64 = match variant {
        Variant::Default => 0x1001,
        Variant::Fault => 0x2002,
    };
    let setup = setup();
    let mut rng = Rng(seed.wrapping_mul(0x2545_F491_4F6C_DD1D));
    let period = setup.period_ps.to_bits();
    let slot_start =
        |slot: u64| setup.origin_ps + ((u128::from(slot) * u128::from(period)) >> 32) as u64;
    let period_ps = setup.period_ps.to_num::<f64>();
    // Jitter: sum of four uniforms with 35 ps RMS in total.
    let jitter = |rng: &mut Rng| -> i64 {
        let u = 35.0 * (3.0f64 / 4.0).sqrt();
        (0..4)
            .map(|_| (2.0 * rng.unit() - 1.0) * u)
            .sum::<f64>()
            .round() as i64
    };
    let mut times: Vec<(u64, u8)> = Vec::new();
    let push = |times: &mut Vec<(u64, u8)>, slot: u64, pos: f64, channel: u8, j: i64| {
        let delay = if channel == 1 { CH1_DELAY_PS } else { 0 };
        let t = slot_start(slot) as i64 + (pos * period_ps) as i64 + j + delay;
        times.push((t as u64, channel));
    };
    let blackout = match variant {
        Variant::Default => 0..0,
        Variant::Fault => slots / 3..slots / 3 + 200_000,
    };
    for slot in 0..slots {
        let s = tx_state(seed, slot);
        let p_det = if s.intensity == 0 { 0.012 } else { 0.004 };
        for ch in 0..2u8 {
            // Dark counts, 20 kHz per detector: uniform over the slot.
            if rng.chance(2e-4) {
                push(&mut times, slot, rng.unit(), ch, 0);
            }
        }
        if blackout.contains(&slot) || !rng.chance(p_det) {
            continue;
        }
        let mut clicks: Vec<(f64, u8)> = Vec::with_capacity(2);
        if rng.chance(0.9) {
            // Arrival-time detector: Z by arrival bin, X gives a random bin; 1 % misalignment.
            let mut bin = if s.basis == Basis::Z {
                s.bit
            } else {
                rng.below(2) as u8
            };
            if rng.chance(0.01) {
                bin ^= 1;
            }
            clicks.push((if bin == 0 { 0.2 } else { 0.45 }, 0));
        } else {
            // Interferometer output A: side peaks carry the arrival bin, the middle the phase.
            let r = rng.unit();
            let pos = match s.basis {
                Basis::Z if r < 0.5 => Some(if s.bit == 0 { 0.2 } else { 0.7 }),
                Basis::X if r < 0.25 => Some(0.2),
                Basis::X if r < 0.5 => Some(0.7),
                Basis::X if r < 0.99 => Some(0.45),
                _ => None,
            };
            if let Some(p) = pos {
                clicks.push((p, 1));
            }
        }
        // A second photon of a multi-photon pulse on the other detector.
        if !clicks.is_empty() && rng.chance(0.03) {
            let other = 1 - clicks[0].1;
            clicks.push((if rng.chance(0.5) { 0.2 } else { 0.45 }, other));
        }
        for (pos, ch) in clicks {
            let j = jitter(&mut rng);
            push(&mut times, slot, pos, ch, j);
            // Afterpulse 0.2 .. 5 µs later, anywhere in its slot.
            if rng.chance(0.005) {
                let later = slot + 20 + rng.below(480);
                push(&mut times, later, rng.unit(), ch, 0);
            }
        }
    }
    times.sort_unstable();
    // Non-paralysable dead time per detector.
    let mut last = [None::<u64>; 2];
    times.retain(|&(t, ch)| {
        let l = &mut last[usize::from(ch)];
        if l.is_some_and(|p| t < p + DEAD_TIME_PS) {
            return false;
        }
        *l = Some(t);
        true
    });
    let mask = (1u64 << COUNTER_BITS) - 1;
    let mut events: Vec<TdcEvent> = times
        .iter()
        .map(|&(t, channel)| TdcEvent {
            count: t & mask,
            channel,
        })
        .collect();
    if variant == Variant::Fault {
        inject_faults(&mut events, &times, &mut rng);
    }
    Capture {
        name: name.to_string(),
        setup,
        events,
        answer: Box::new(move |a| answer(seed, a)),
    }
}

/// Reordered neighbours (channel merging), an unknown channel and too-wide counter values.
fn inject_faults(events: &mut [TdcEvent], times: &[(u64, u8)], rng: &mut Rng) {
    let mut i = 1;
    while i < events.len() {
        if times[i].0 - times[i - 1].0 < 6_000 && rng.chance(0.5) {
            events.swap(i - 1, i);
            i += 2;
        } else if rng.chance(0.001) {
            events[i].channel = 5;
            i += 1;
        } else if rng.chance(0.0002) {
            events[i].count |= 1 << 60;
            i += 1;
        } else {
            i += 1;
        }
    }
}
