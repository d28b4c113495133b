//! Alarm record (type 5): one alarm raised or cleared by the live monitor.
//!
//! Payload, 20 bytes little-endian: `t_ps u64 | code u8 | detail u8 | raised u8 | reserved u8 |
//! value_ppm u32 | threshold_ppm u32` (`docs/frames.md`). The conditions themselves are decided
//! in `alarms`; this module only knows their bytes. For an ingest fault (code 5) the `value_ppm`
//! word is not a fraction but the growth of the counter the detail byte names, in that
//! counter's unit.

use super::bytes::{Reader, Writer};
use super::framing::FrameError;
use crate::gates::Basis;
use crate::ingest::IngestFault;

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
    /// A board ingest counter (overrun, FIFO full, rollover gap, malformed word) grew.
    IngestFault {
        /// The counter that grew most (on a clear: the one the raise named).
        counter: IngestFault,
    },
}

impl AlarmKind {
    /// Bit of this alarm in the active mask: 0 QBER Z, 1 QBER X, 2 lock, 3 rate, 4 saturation,
    /// 5 ingest fault.
    pub const fn bit(self) -> u8 {
        match self {
            Self::QberHigh(Basis::Z) => 1,
            Self::QberHigh(Basis::X) => 1 << 1,
            Self::LockLost => 1 << 2,
            Self::RateCollapse => 1 << 3,
            Self::Saturation { .. } => 1 << 4,
            Self::IngestFault { .. } => 1 << 5,
        }
    }

    /// Wire code and detail byte: 1 QBER (detail basis), 2 lock, 3 rate, 4 saturation (channel),
    /// 5 ingest fault (counter, [`IngestFault::code`]).
    pub const fn code(self) -> (u8, u8) {
        match self {
            Self::QberHigh(b) => (1, b as u8),
            Self::LockLost => (2, 0),
            Self::RateCollapse => (3, 0),
            Self::Saturation { channel } => (4, channel),
            Self::IngestFault { counter } => (5, counter.code()),
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
            (5, c) => match IngestFault::from_code(c) {
                Some(counter) => Some(Self::IngestFault { counter }),
                None => None,
            },
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
    /// The measured value, ppm: QBER bound, rate over its level, dead fraction (0 for the lock);
    /// for an ingest fault the counter's growth in its own unit, saturating (0 on the clear).
    pub value_ppm: u32,
    /// The threshold it was compared with, ppm (0 for the lock and the ingest fault: any growth).
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
    fn ingest_fault_layout_and_unknown_counter() {
        // docs/frames.md: code 5, detail = counter (2 = rollover_gaps), value = growth.
        let ev = AlarmEvent {
            t_ps: 7,
            kind: AlarmKind::IngestFault {
                counter: IngestFault::RolloverGaps,
            },
            raised: true,
            value_ppm: 3,
            threshold_ppm: 0,
        };
        let mut buf = [0u8; LEN];
        assert_eq!(ev.emit(&mut buf), Ok(LEN));
        assert_eq!(&buf[8..16], &[5, 2, 1, 0, 3, 0, 0, 0]);
        assert_eq!(AlarmEvent::parse(&buf), Ok(ev));
        buf[9] = 4;
        assert_eq!(
            AlarmEvent::parse(&buf),
            Err(FrameError::BadField {
                offset: 8,
                field: "code"
            })
        );
    }

    #[test]
    fn every_kind_round_trips() {
        let kinds = [
            AlarmKind::QberHigh(Basis::Z),
            AlarmKind::QberHigh(Basis::X),
            AlarmKind::LockLost,
            AlarmKind::RateCollapse,
            AlarmKind::Saturation { channel: 15 },
            AlarmKind::IngestFault {
                counter: IngestFault::OverrunWords,
            },
            AlarmKind::IngestFault {
                counter: IngestFault::MalformedWords,
            },
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
