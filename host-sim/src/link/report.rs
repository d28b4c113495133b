//! The `link` object of the summary: frames each way, refusals by reason, what happened to every
//! announcement, and whether both sides ended with the same sifted key.

use super::{ChannelStats, FramedLink, LinkModel};
use serde::Serialize;
use slotwise::wire::RejectCounts;
use slotwise::SiftedBit;
use std::collections::BTreeMap;

fn reasons(r: &RejectCounts) -> BTreeMap<&'static str, u64> {
    r.fields().into_iter().filter(|&(_, v)| v > 0).collect()
}

/// The receiver endpoint's side.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ReceiverSide {
    /// Announce frames sent (final reports included).
    pub frames_sent: u64,
    /// Bytes sent.
    pub bytes_sent: u64,
    /// Announcements sent in frames.
    pub announcements: u64,
    /// Answers frames with a good CRC and payload.
    pub frames_received: u64,
    /// Refused frames and contents by reason (nonzero only).
    pub rejected: BTreeMap<&'static str, u64>,
    /// Sum of `rejected`.
    pub rejected_total: u64,
    /// Answers-frame sequence numbers never seen.
    pub missing_frames: u64,
    /// Answers frames that arrived behind later ones.
    pub late_frames: u64,
    /// Announce frames answered.
    pub answered_frames: u64,
    /// Answers handed to the receiver.
    pub answers_delivered: u64,
    /// Announce frames expired unanswered (lost answers, or lost announcements).
    pub expired_frames: u64,
    /// Announcements in expired frames.
    pub expired_announcements: u64,
    /// Expired frames pushed out early for room.
    pub evicted_frames: u64,
    /// Announcements that could not be sent.
    pub refused_announcements: u64,
    /// Times the final report was sent.
    pub final_reports: u64,
}

/// The host transmitter's side.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TransmitterSide {
    /// Announce frames with a good CRC and payload.
    pub frames_received: u64,
    /// Refused frames by reason (nonzero only).
    pub rejected: BTreeMap<&'static str, u64>,
    /// Sum of `rejected`.
    pub rejected_total: u64,
    /// Announcements answered.
    pub announcements: u64,
    /// Answers frames sent.
    pub frames_sent: u64,
    /// Bytes sent.
    pub bytes_sent: u64,
    /// Answered frames the receiver reported as used.
    pub confirmed_frames: u64,
    /// Answered frames the receiver reported as expired.
    pub expired_frames: u64,
    /// Answered frames whose fate never arrived (0 unless reports were lost in bulk).
    pub fate_unknown: u64,
    /// Bits of the transmitter's sifted key.
    pub key_bits: u64,
}

/// Both sifted keys compared slot by slot.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct KeyComparison {
    /// The receiver's sifted bits.
    pub receiver_bits: u64,
    /// The transmitter's sifted bits.
    pub transmitter_bits: u64,
    /// Whether both keys cover exactly the same slots.
    pub same_slots: bool,
    /// Slots in both keys whose bits differ (the errors the QBER measures).
    pub bit_differences: u64,
}

/// The summary's `link` object.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LinkSummary {
    /// The link model.
    pub model: LinkModel,
    /// RAM of the core's endpoint as the host instantiates it (64-announcement batches, 1024
    /// open announcements), bytes (`core::mem::size_of`).
    pub endpoint_ram_bytes: usize,
    /// What the model did to frames from the receiver.
    pub channel_up: ChannelStats,
    /// What the model did to frames from the transmitter.
    pub channel_down: ChannelStats,
    /// The receiver's endpoint (firmware core).
    pub receiver: ReceiverSide,
    /// The host transmitter.
    pub transmitter: TransmitterSide,
    /// Sifted keys of both sides.
    pub keys: KeyComparison,
    /// Key-block frames written to the key file.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub key_blocks_written: Option<u64>,
    /// The key file.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub key_file: Option<String>,
}

/// Compare the receiver's sifted bits with the transmitter's key.
pub fn compare(link: &FramedLink, rx_bits: &[SiftedBit]) -> KeyComparison {
    link.with_tx(|tx| {
        let key = tx.key();
        let mut same = rx_bits.len() == key.len();
        let mut diff = 0;
        for b in rx_bits {
            match key.get(&b.slot) {
                Some(k) => diff += u64::from(k.bit != b.bit),
                None => same = false,
            }
        }
        KeyComparison {
            receiver_bits: rx_bits.len() as u64,
            transmitter_bits: key.len() as u64,
            same_slots: same,
            bit_differences: diff,
        }
    })
}

/// The `link` object of a finished run.
pub fn link_summary(link: &FramedLink, rx_bits: &[SiftedBit]) -> LinkSummary {
    let c = link.counters();
    let (up, down) = link.channel_stats();
    let transmitter = link.with_tx(|tx| {
        let t = tx.counters();
        TransmitterSide {
            frames_received: t.frames_in,
            rejected: reasons(&t.rejected),
            rejected_total: t.rejected.total(),
            announcements: t.announcements,
            frames_sent: t.frames_out,
            bytes_sent: t.bytes_out,
            confirmed_frames: t.confirmed_frames,
            expired_frames: t.expired_frames,
            fate_unknown: t.fate_unknown,
            key_bits: tx.key().len() as u64,
        }
    });
    LinkSummary {
        model: *link.model(),
        endpoint_ram_bytes: std::mem::size_of::<super::HostEndpoint>(),
        channel_up: up,
        channel_down: down,
        receiver: ReceiverSide {
            frames_sent: c.frames_out,
            bytes_sent: c.bytes_out,
            announcements: c.announcements,
            frames_received: c.frames_in,
            rejected: reasons(&c.rejected),
            rejected_total: c.rejected.total(),
            missing_frames: c.missing_frames(),
            late_frames: c.late_frames,
            answered_frames: c.answered_frames,
            answers_delivered: c.answers_in,
            expired_frames: c.expired_frames,
            expired_announcements: c.expired_announcements,
            evicted_frames: c.evicted_frames,
            refused_announcements: c.refused_announcements,
            final_reports: link.final_reports(),
        },
        transmitter,
        keys: compare(link, rx_bits),
        key_blocks_written: None,
        key_file: None,
    }
}

impl std::fmt::Display for LinkSummary {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let m = &self.model;
        let (r, t, k) = (&self.receiver, &self.transmitter, &self.keys);
        writeln!(
            f,
            "link           framed: loss {} dup {} reorder {} corrupt {} latency {} slots",
            m.loss, m.dup, m.reorder, m.corrupt, m.latency_slots
        )?;
        writeln!(
            f,
            "  rx -> tx     {} frames ({} lost, {} duplicated, {} reordered, {} corrupted); tx refused {}",
            r.frames_sent,
            self.channel_up.lost,
            self.channel_up.duplicated,
            self.channel_up.reordered,
            self.channel_up.corrupted,
            t.rejected_total
        )?;
        writeln!(
            f,
            "  tx -> rx     {} frames ({} lost, {} duplicated, {} reordered, {} corrupted); rx refused {}",
            t.frames_sent,
            self.channel_down.lost,
            self.channel_down.duplicated,
            self.channel_down.reordered,
            self.channel_down.corrupted,
            r.rejected_total
        )?;
        let why = |m: &BTreeMap<&str, u64>| {
            m.iter()
                .map(|(k, v)| format!("{k} {v}"))
                .collect::<Vec<_>>()
                .join(", ")
        };
        if r.rejected_total > 0 {
            writeln!(f, "  rx refused   {}", why(&r.rejected))?;
        }
        if t.rejected_total > 0 {
            writeln!(f, "  tx refused   {}", why(&t.rejected))?;
        }
        writeln!(
            f,
            "  announced    {} in {} frames: {} answered, {} expired ({} frames)",
            r.announcements,
            r.frames_sent - r.final_reports,
            r.answers_delivered,
            r.expired_announcements,
            r.expired_frames
        )?;
        writeln!(
            f,
            "  sifted keys  receiver {} bits, transmitter {} bits: {}, {} bits differ",
            k.receiver_bits,
            k.transmitter_bits,
            if k.same_slots {
                "same slots"
            } else {
                "DIFFERENT slots"
            },
            k.bit_differences
        )?;
        writeln!(
            f,
            "  endpoint     {} bytes of RAM (ReceiverLink<_, _, 64, 1024>)",
            self.endpoint_ram_bytes
        )?;
        if let (Some(n), Some(p)) = (self.key_blocks_written, &self.key_file) {
            writeln!(f, "  key file     {p}: {n} key blocks")?;
        }
        Ok(())
    }
}
