//! Synthetic detection streams shared by the frame-alignment tests: per-slot Bernoulli
//! detections with the marker applied, plus dark counts (see `frame_alignment.rs`).

#![allow(dead_code)]

use slotwise::frame::{MarkerSpec, MarkerState};

/// SplitMix64 (Steele, Lea, Flood, OOPSLA 2014).
pub struct Rng(pub u64);

impl Rng {
    pub fn next(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    /// Uniform in (0, 1).
    pub fn unit(&mut self) -> f64 {
        ((self.next() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    pub fn bit(&mut self) -> u8 {
        (self.next() >> 63) as u8
    }
}

/// Link seen by the aligner: per-slot probabilities of a gated detection.
#[derive(Clone, Copy, Debug)]
pub struct Link {
    /// Signal detections per key slot.
    pub p_key: f64,
    /// Marker pulses relative to key slots (signal intensity over the mean key-slot intensity).
    pub pulse_ratio: f64,
    /// Dark counts per slot inside the gates.
    pub p_dark: f64,
    /// Share of signal detections in a Z gate.
    pub p_z: f64,
    /// Z bit error rate of marker pulses.
    pub qber: f64,
    /// When false the transmitter sends no marker at all (noise-only for the aligner).
    pub marker: bool,
}

impl Link {
    /// Total per-slot detection probability `p` of key slots, 1e-7 dark per slot inside the
    /// gates, marker pulses 1.27 times the mean (signal 0.5 over a 0.395 mean photon number).
    pub fn at(p: f64) -> Self {
        Self {
            p_key: p - 1e-7,
            pulse_ratio: 1.27,
            p_dark: 1e-7,
            p_z: 0.9,
            qber: 0.02,
            marker: true,
        }
    }
}

pub struct Stream {
    rng: Rng,
    link: Link,
    spec: MarkerSpec,
    /// Absolute slot number of local slot 0.
    pub offset: u64,
    /// Next absolute slot that may hold a detection.
    next_abs: u64,
    p_max: f64,
    ln_q: f64,
}

impl Stream {
    pub fn new(link: Link, spec: MarkerSpec, offset: u64, seed: u64) -> Self {
        let p_max = link.p_key * link.pulse_ratio.max(1.0) + link.p_dark;
        Self {
            rng: Rng(seed),
            link,
            spec,
            offset,
            next_abs: offset,
            p_max,
            ln_q: (1.0 - p_max).ln(),
        }
    }

    /// Signal probability and the marker's Z bit (None: key slot, random bit) of a slot.
    fn signal(&self, abs: u64) -> (f64, Option<u8>) {
        match (self.link.marker, self.spec.state(abs)) {
            (true, Some(MarkerState::Vacuum)) => (0.0, None),
            (true, Some(MarkerState::Pulse { z_bit })) => {
                (self.link.p_key * self.link.pulse_ratio, Some(z_bit))
            }
            _ => (self.link.p_key, None),
        }
    }

    /// Next detection: (local slot, Z bit if measured in Z).
    pub fn next(&mut self) -> (u64, Option<u8>) {
        loop {
            let gap = (self.rng.unit().ln() / self.ln_q).floor() as u64;
            let abs = self.next_abs + gap;
            self.next_abs = abs + 1;
            let (p_sig, z) = self.signal(abs);
            let u = self.rng.unit() * self.p_max;
            if u >= p_sig + self.link.p_dark {
                continue;
            }
            let bit = if u < p_sig {
                if self.rng.unit() < self.link.p_z {
                    let b = z.unwrap_or_else(|| self.rng.bit());
                    Some(b ^ u8::from(self.rng.unit() < self.link.qber))
                } else {
                    None
                }
            } else if self.rng.bit() == 0 {
                Some(self.rng.bit())
            } else {
                None
            };
            return (abs - self.offset, bit);
        }
    }
}
