//! Alarm record (type 5): one alarm raised or cleared by the live monitor.
//!
//! Payload, 20 bytes little-endian: `t_ps u64 | code u8 | detail u8 | raised u8 | reserved u8 |
//! value_ppm u32 | threshold_ppm u32` (`docs/frames.md`). The conditions themselves are decided
//! in `alarms`; this module only knows their bytes.

use super::bytes::{Reader, Writer};
use super::framing::FrameError;
use crate::gates::Basis;

/// Bytes of an [`AlarmEvent`] payload.
pub const LEN: usize = 20;

/// What an alarm is about.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AlarmKind {
    /// Upper QBER bound at or above the ceiling in one basis.
    QberHigh(Basis),
    /// The clock stopped giving slots.
    LockLost,
    /// Detection rate below the floor of its running level.
    RateCollapse,
    /// A channel's dead-time fraction at or above the threshold.
    Saturation {
        /// The worst channel.
        channel: u8,
    },
}

impl AlarmKind {
    /// Bit of this alarm in the active mask: 0 QBER Z, 1 QBER X, 2 lock, 3 rate, 4 saturation.
    pub const fn bit(self) -> u8 {
        match self {
            Self::QberHigh(Basis::Z) => 1,
            Self::QberHigh(Basis::X) => 1 << 1,
            Self::LockLost => 1 << 2,
            Self::RateCollapse => 1 << 3,
            Self::Saturation { .. } => 1 << 4,
        }
    }

    /// Wire code and detail byte: 1 QBER (detail basis), 2 lock, 3 rate, 4 saturation (channel).
    pub const fn code(self) -> (u8, u8) {
        match self {
            Self::QberHigh(b) => (1, b as u8),
            Self::LockLost => (2, 0),
            Self::RateCollapse => (3, 0),
            Self::Saturation { channel } => (4, channel),
        }
    }

    /// The kind for a wire code and detail byte.
    pub const fn from_code(code: u8, detail: u8) -> Option<Self> {
        match (code, detail) {
            (1, 0) => Some(Self::QberHigh(Basis::Z)),
            (1, 1) => Some(Self::QberHigh(Basis::X)),
            (2, _) => Some(Self::LockLost),
            (3, _) => Some(Self::RateCollapse),
            (4, c) => Some(Self::Saturation { channel: c }),
            _ => None,
        }
    }
}

/// One alarm raised or cleared: the payload of a record-type-5 frame.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct AlarmEvent {
    /// Receiver time the change was decided at, ps.
    pub t_ps: u64,
    /// What it is about.
    pub kind: AlarmKind,
    /// Raised (`true`) or cleared.
    pub raised: bool,
    /// The measured value, ppm: QBER bound, rate over its level, dead fraction (0 for the lock).
    pub value_ppm: u32,
    /// The threshold it was compared with, ppm (0 for the lock).
    pub threshold_ppm: u32,
}

impl AlarmEvent {
    /// Write the payload ([`LEN`] bytes) into `out`; returns its length.
    pub fn emit(&self, out: &mut [u8]) -> Result<usize, FrameError> {
        let dst = out
            .get_mut(..LEN)
            .ok_or(FrameError::BufferTooSmall { needed: LEN })?;
        let (code, detail) = self.kind.code();
        let mut w = Writer::new(dst);
        w.u64(self.t_ps)?;
        w.bytes(&[code, detail, u8::from(self.raised), 0])?;
        w.u32(self.value_ppm)?;
        w.u32(self.threshold_ppm)?;
        Ok(w.finish())
    }

    /// Read a payload (exactly [`LEN`] bytes); an unknown code or a `raised` byte above 1 is a
    /// [`FrameError::BadField`]. The reserved byte is not checked.
    pub fn parse(p: &[u8]) -> Result<Self, FrameError> {
        let mut r = Reader::new(p);
        let t_ps = r.u64()?;
        let [code, detail, raised, _reserved] = r.array()?;
        let value_ppm = r.u32()?;
        let threshold_ppm = r.u32()?;
        r.finish()?;
        if raised > 1 {
            return Err(FrameError::BadField {
                offset: 10,
                field: "raised",
            });
        }
        let kind = AlarmKind::from_code(code, detail).ok_or(FrameError::BadField {
            offset: 8,
            field: "code",
        })?;
        Ok(Self {
            t_ps,
            kind,
            raised: raised == 1,
            value_ppm,
            threshold_ppm,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn event_payload_round_trips() {
        let ev = AlarmEvent {
            t_ps: 0x0102_0304_0506_0708,
            kind: AlarmKind::Saturation { channel: 3 },
            raised: true,
            value_ppm: 123_456,
            threshold_ppm: 100_000,
        };
        let mut buf = [0u8; LEN];
        assert_eq!(ev.emit(&mut buf), Ok(LEN));
        assert_eq!(&buf[..12], &[8, 7, 6, 5, 4, 3, 2, 1, 4, 3, 1, 0]);
        assert_eq!(AlarmEvent::parse(&buf), Ok(ev));
        assert_eq!(
            AlarmEvent::parse(&buf[..19]),
            Err(FrameError::Truncated { offset: 19 })
        );
        assert_eq!(
            AlarmEvent::parse(&[buf.as_slice(), &[0]].concat()),
            Err(FrameError::LengthMismatch {
                declared: 20,
                actual: 21
            })
        );
        assert_eq!(
            ev.emit(&mut [0u8; 19]),
            Err(FrameError::BufferTooSmall { needed: LEN })
        );
        buf[8] = 9;
        assert!(matches!(
            AlarmEvent::parse(&buf),
            Err(FrameError::BadField { field: "code", .. })
        ));
        buf[8] = 4;
        buf[10] = 2;
        assert!(matches!(
            AlarmEvent::parse(&buf),
            Err(FrameError::BadField {
                field: "raised",
                ..
            })
        ));
    }

    #[test]
    fn every_kind_round_trips() {
        let kinds = [
            AlarmKind::QberHigh(Basis::Z),
            AlarmKind::QberHigh(Basis::X),
            AlarmKind::LockLost,
            AlarmKind::RateCollapse,
            AlarmKind::Saturation { channel: 15 },
        ];
        for (k, kind) in kinds.into_iter().enumerate() {
            let ev = AlarmEvent {
                t_ps: 1 << k,
                kind,
                raised: k % 2 == 0,
                value_ppm: k as u32,
                threshold_ppm: u32::MAX,
            };
            let mut buf = [0u8; LEN];
            assert_eq!(ev.emit(&mut buf), Ok(LEN));
            assert_eq!(AlarmEvent::parse(&buf), Ok(ev));
        }
    }
}
