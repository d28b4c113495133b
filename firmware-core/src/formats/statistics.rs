//! Statistics record (type 6): the live monitor's window at the end of one block.
//!
//! Payload, 228 bytes little-endian: `t_ps u64 | blocks_closed u64 | window_ps u64 | locked_ps u64
//! | window_blocks u8 | channels u8 | active u8 | reserved u8 | (errors u32, tested u32) per
//! [basis][intensity] | upper_ppm u32 × 2 | detections u32 × 16 | off_gate u32 × 16 |
//! gated_slots u32 | multi_click_slots u32` (`docs/frames.md`). The monitor that fills it is
//! `stats`.

use super::bytes::{Reader, Writer};
use super::framing::FrameError;
use crate::gates::{MAX_CHANNELS, MAX_INTENSITIES};

/// Bytes of a [`Snapshot`] payload.
pub const LEN: usize = 228;

/// The window's statistics at the end of one block: the payload of a record-type-6 frame.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Snapshot {
    /// End of the block just closed, ps of receiver time.
    pub t_ps: u64,
    /// Blocks closed since start.
    pub blocks_closed: u64,
    /// Receiver time the window covers, ps.
    pub window_ps: u64,
    /// Time locked within the window, ps.
    pub locked_ps: u64,
    /// Closed blocks in the window.
    pub window_blocks: u8,
    /// Channels described (entries of `detections` and `off_gate` that mean something).
    pub channels: u8,
    /// Active alarms as a bit mask ([`AlarmKind::bit`](super::alarm::AlarmKind::bit)).
    pub active: u8,
    /// Window (errors, tested) per `[basis][intensity]`, saturating at u32::MAX.
    pub tested: [[(u32, u32); MAX_INTENSITIES]; 2],
    /// Upper confidence bound of the alarm's intensity class per basis, ppm (u32::MAX: no data).
    pub upper_ppm: [u32; 2],
    /// Window detections per channel.
    pub detections: [u32; MAX_CHANNELS],
    /// Window detections outside every gate, per channel.
    pub off_gate: [u32; MAX_CHANNELS],
    /// Window slots with a gated detection.
    pub gated_slots: u32,
    /// Window slots with two or more gated detections.
    pub multi_click_slots: u32,
}

impl Snapshot {
    /// Write the payload ([`LEN`] bytes) into `out`; returns its length.
    pub fn emit(&self, out: &mut [u8]) -> Result<usize, FrameError> {
        let dst = out
            .get_mut(..LEN)
            .ok_or(FrameError::BufferTooSmall { needed: LEN })?;
        let mut w = Writer::new(dst);
        w.u64(self.t_ps)?;
        w.u64(self.blocks_closed)?;
        w.u64(self.window_ps)?;
        w.u64(self.locked_ps)?;
        w.bytes(&[self.window_blocks, self.channels, self.active, 0])?;
        for &(e, n) in self.tested.iter().flatten() {
            w.u32(e)?;
            w.u32(n)?;
        }
        for &v in self
            .upper_ppm
            .iter()
            .chain(&self.detections)
            .chain(&self.off_gate)
            .chain([&self.gated_slots, &self.multi_click_slots])
        {
            w.u32(v)?;
        }
        Ok(w.finish())
    }

    /// Read a payload (exactly [`LEN`] bytes); the reserved byte is not checked.
    pub fn parse(p: &[u8]) -> Result<Self, FrameError> {
        let mut r = Reader::new(p);
        let mut s = Self {
            t_ps: r.u64()?,
            blocks_closed: r.u64()?,
            window_ps: r.u64()?,
            locked_ps: r.u64()?,
            window_blocks: r.u8()?,
            channels: r.u8()?,
            active: r.u8()?,
            ..Self::default()
        };
        r.u8()?;
        for cell in s.tested.iter_mut().flatten() {
            *cell = (r.u32()?, r.u32()?);
        }
        for v in s
            .upper_ppm
            .iter_mut()
            .chain(&mut s.detections)
            .chain(&mut s.off_gate)
        {
            *v = r.u32()?;
        }
        s.gated_slots = r.u32()?;
        s.multi_click_slots = r.u32()?;
        r.finish()?;
        Ok(s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_and_layout() {
        let mut s = Snapshot {
            t_ps: 0x0102_0304_0506_0708,
            blocks_closed: 9,
            window_ps: 10,
            locked_ps: 11,
            window_blocks: 8,
            channels: 4,
            active: 0b1_0001,
            gated_slots: 0xAABB_CCDD,
            multi_click_slots: 7,
            ..Snapshot::default()
        };
        s.tested[1][2] = (3, 40);
        s.upper_ppm = [u32::MAX, 12];
        s.detections[15] = 99;
        s.off_gate[0] = 5;
        let mut buf = [0u8; LEN];
        assert_eq!(s.emit(&mut buf), Ok(LEN));
        // 4 u64, 4 bytes, 12 pairs, 2 bounds, 2 × 16 channels, 2 slot counts.
        assert_eq!(
            LEN,
            4 * 8 + 4 + 2 * MAX_INTENSITIES * 2 * 4 + 4 * (2 + 2 * MAX_CHANNELS + 2)
        );
        assert_eq!(&buf[32..36], &[8, 4, 0b1_0001, 0]);
        // tested[1][2] is pair 5 of the 6, after the 36 fixed bytes.
        assert_eq!(&buf[36 + 5 * 8..36 + 6 * 8], &[3, 0, 0, 0, 40, 0, 0, 0]);
        assert_eq!(&buf[LEN - 8..LEN - 4], &[0xDD, 0xCC, 0xBB, 0xAA]);
        assert_eq!(Snapshot::parse(&buf), Ok(s));
        assert_eq!(
            Snapshot::parse(&buf[..LEN - 1]),
            Err(FrameError::Truncated { offset: LEN - 1 })
        );
        assert_eq!(
            Snapshot::parse(&[buf.as_slice(), &[0]].concat()),
            Err(FrameError::LengthMismatch {
                declared: LEN as u16,
                actual: LEN + 1
            })
        );
        assert_eq!(
            s.emit(&mut [0u8; LEN - 1]),
            Err(FrameError::BufferTooSmall { needed: LEN })
        );
    }
}
