//! The `link` object of the summary: frames each way, refusals by reason, what happened to every
//! announcement, and whether both sides ended with the same sifted key.

use super::auth::{AttackStats, LinkAttack};
use super::rounds::TxRoundCounters;
use super::{ChannelStats, FramedLink, LinkModel};
use serde::Serialize;
use slotwise::formats::TAG_LEN;
use slotwise::wire::{AuthCounters, Reject, RejectCounts};
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

/// One end's authentication.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AuthSide {
    /// Frames tagged and sent.
    pub frames_tagged: u64,
    /// Frames whose tag checked.
    pub frames_verified: u64,
    /// Frames refused by the tag check, by reason (nonzero only).
    pub refused: BTreeMap<&'static str, u64>,
    /// Sum of `refused`.
    pub refused_total: u64,
    /// Key bits loaded (pre-shared and refilled).
    pub key_bits_loaded: u64,
    /// Key bits spent on tags.
    pub key_bits_consumed: u64,
    /// Key bits wiped unused.
    pub key_bits_abandoned: u64,
    /// Key bits left in the pool.
    pub key_bits_left: u64,
    /// Frames not sent for want of key.
    pub starved_frames: u64,
    /// Times the low-key alarm rose.
    pub low_key_alarms: u64,
    /// Times the attack alarm rose.
    pub attack_alarms: u64,
    /// Whether the link stopped (out of key for new frames, or too many refusals).
    pub stopped: bool,
}

impl AuthSide {
    fn of(c: &AuthCounters, rejected: &RejectCounts, left: u64, stopped: bool) -> Self {
        let refused: BTreeMap<&'static str, u64> = Reject::AUTH
            .iter()
            .map(|&r| (r.name(), rejected.get(r)))
            .filter(|&(_, v)| v > 0)
            .collect();
        Self {
            frames_tagged: c.frames_tagged,
            frames_verified: c.frames_verified,
            refused_total: refused.values().sum(),
            refused,
            key_bits_loaded: c.key_bits_loaded,
            key_bits_consumed: c.key_bits_consumed,
            key_bits_abandoned: c.key_bits_abandoned,
            key_bits_left: left,
            starved_frames: c.starved_frames,
            low_key_alarms: c.low_key_alarms,
            attack_alarms: c.attack_alarms,
            stopped,
        }
    }
}

/// The adversary on the line and what it did.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct AttackSummary {
    /// The `--link-attack` mode.
    pub mode: LinkAttack,
    /// Frames it forged, replayed and held back.
    #[serde(flatten)]
    pub stats: AttackStats,
}

/// Round authentication (`docs/wire-protocol.md` §9.9): one tag per round each way.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RoundsSummary {
    /// Announce frames per round.
    pub frames_per_round: u32,
    /// Rounds the receiver closed.
    pub closed: u64,
    /// Rounds verified: their key is kept on both sides.
    pub verified: u64,
    /// Rounds failed, by reason (their key is discarded on both sides).
    pub failed: BTreeMap<&'static str, u64>,
    /// Numbers of the verified rounds (their key is kept).
    pub verified_rounds: Vec<u64>,
    /// Numbers of the failed rounds.
    pub failed_rounds: Vec<u64>,
    /// Rounds in which the receiver took a forged answer.
    pub attacked_rounds: Vec<u64>,
    /// The transmitter's side.
    pub transmitter: TxRoundCounters,
    /// Forged answers the receiver took (round mode refuses no frame: their rounds fail).
    pub forged_answers_taken: u64,
    /// Forged answers whose key was kept (in a verified round).
    pub forged_answers_kept: u64,
    /// The receiver's sifted bits discarded with failed rounds.
    pub sifted_bits_discarded: u64,
    /// The receiver's sifted bits kept (verified rounds).
    pub sifted_bits_kept: u64,
}

/// The summary's `link.auth` object: Wegman-Carter tags on every frame (mode `frame`) or one
/// per round (mode `round`), both ways.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct AuthSummary {
    /// `frame` (a tag on every frame) or `round` (one tag per round over the outcome).
    pub mode: &'static str,
    /// Round mode's figures.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rounds: Option<RoundsSummary>,
    /// The tag: hash, length and pad.
    pub scheme: &'static str,
    /// Bits per tag (one-time-pad bits consumed per tagged frame).
    pub tag_bits: u32,
    /// The receiver's end (the board's pool).
    pub receiver: AuthSide,
    /// The transmitter's end (the mirror pool).
    pub transmitter: AuthSide,
    /// Forged frames or answers either end accepted (answers the receiver took that the
    /// transmitter never gave, plus announce frames the transmitter took that the receiver never
    /// sent).
    pub forgeries_accepted: u64,
    /// Key-refill frames the board took.
    pub refill_frames: u64,
    /// Shared key bits gone (consumed or abandoned, counted once, on the board) per sifted bit
    /// kept.
    pub key_bits_per_sifted_bit: f64,
    /// The adversary on the line and what it did.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub attack: Option<AttackSummary>,
}

/// The summary's `link` object.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LinkSummary {
    /// The link model.
    pub model: LinkModel,
    /// RAM of the core's endpoint as the host instantiates it (batches of up to 512
    /// announcements, 1024 open announcements, 512 pad words), bytes (`core::mem::size_of`).
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
    /// Authentication of the frames (`None` on an unauthenticated link).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub auth: Option<AuthSummary>,
    /// Forged answers the receiver accepted (counted on unauthenticated links too).
    pub forgeries_accepted: u64,
    /// Key-block frames written to the key file.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub key_blocks_written: Option<u64>,
    /// The key file.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub key_file: Option<String>,
}

/// Compare the receiver's sifted bits (those it keeps: in round mode, the verified rounds')
/// with the transmitter's key.
pub fn compare(link: &FramedLink, rx_bits: &[SiftedBit]) -> KeyComparison {
    let kept: Vec<&SiftedBit> = rx_bits.iter().filter(|b| link.keeps_slot(b.slot)).collect();
    link.with_tx(|tx| {
        let key = tx.key();
        let mut same = kept.len() == key.len();
        let mut diff = 0;
        for b in &kept {
            match key.get(&b.slot) {
                Some(k) => diff += u64::from(k.bit != b.bit),
                None => same = false,
            }
        }
        KeyComparison {
            receiver_bits: kept.len() as u64,
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
    let keys = compare(link, rx_bits);
    let (frx, ftx) = link.forgeries_accepted();
    let auth = link.endpoint().auth().map(|ra| {
        let stopped = ra.stopped() || ra.starved();
        let rx = AuthSide::of(ra.counters(), &c.rejected, ra.key_bits_left(), stopped);
        let tx = link.with_tx(|tx| {
            tx.auth().map(|ta| {
                AuthSide::of(
                    ta.counters(),
                    &tx.counters().rejected,
                    ta.key_bits_left(),
                    ta.stopped() || ta.starved(),
                )
            })
        });
        let tx = tx.unwrap_or_else(|| {
            AuthSide::of(&AuthCounters::default(), &RejectCounts::new(), 0, false)
        });
        // Both pools hold the same key: count the board's, where each pad word goes once.
        let gone = rx.key_bits_consumed + rx.key_bits_abandoned;
        let rounds = link.endpoint().rounds().map(|l| {
            let rc = l.counters();
            let failed: BTreeMap<&'static str, u64> = [
                ("bad_tag", rc.failed_bad_tag),
                ("no_tag", rc.failed_no_tag),
                ("no_key", rc.failed_no_key),
            ]
            .into_iter()
            .filter(|&(_, v)| v > 0)
            .collect();
            RoundsSummary {
                frames_per_round: l.frames_per_round(),
                closed: rc.closed,
                verified: rc.verified,
                failed,
                verified_rounds: link
                    .verdicts()
                    .filter(|v| v.kept)
                    .map(|v| v.round)
                    .collect(),
                failed_rounds: link
                    .verdicts()
                    .filter(|v| !v.kept)
                    .map(|v| v.round)
                    .collect(),
                attacked_rounds: link.attacked_rounds(),
                transmitter: link
                    .with_tx(|tx| tx.rounds().map(|r| r.counters()).unwrap_or_default()),
                forged_answers_taken: frx,
                forged_answers_kept: link.forged_answers_kept(),
                sifted_bits_discarded: rx_bits.len() as u64 - keys.receiver_bits,
                sifted_bits_kept: keys.receiver_bits,
            }
        });
        AuthSummary {
            mode: if rounds.is_some() { "round" } else { "frame" },
            rounds,
            scheme: "POLYVAL (RFC 8452) over GF(2^128), truncated, one-time padded (Wegman-Carter)",
            tag_bits: (TAG_LEN * 8) as u32,
            key_bits_per_sifted_bit: gone as f64 / keys.receiver_bits.max(1) as f64,
            receiver: rx,
            transmitter: tx,
            forgeries_accepted: if link.endpoint().rounds().is_some() {
                link.forged_answers_kept() + ftx
            } else {
                frx + ftx
            },
            refill_frames: link.refill_frames(),
            attack: link
                .attack_stats()
                .map(|(mode, stats)| AttackSummary { mode, stats }),
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
        keys,
        auth,
        forgeries_accepted: frx + ftx,
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
        match &self.auth {
            Some(a) => write_auth(f, a)?,
            None => writeln!(
                f,
                "auth           OFF: frames carry no tag; {} forged answers accepted",
                self.forgeries_accepted
            )?,
        }
        writeln!(
            f,
            "  endpoint     {} bytes of RAM (ReceiverLink<_, _, 512, 1024, 512>)",
            self.endpoint_ram_bytes
        )?;
        if let (Some(n), Some(p)) = (self.key_blocks_written, &self.key_file) {
            writeln!(f, "  key file     {p}: {n} key blocks")?;
        }
        Ok(())
    }
}

fn write_auth(f: &mut std::fmt::Formatter<'_>, a: &AuthSummary) -> std::fmt::Result {
    let (r, t) = (&a.receiver, &a.transmitter);
    let alarm = |s: &AuthSide| {
        let mut v = Vec::new();
        if s.stopped {
            v.push("STOPPED".to_string());
        }
        if s.attack_alarms > 0 {
            v.push(format!("ATTACK ALARM x{}", s.attack_alarms));
        }
        if s.low_key_alarms > 0 {
            v.push(format!("low-key alarm x{}", s.low_key_alarms));
        }
        if v.is_empty() {
            "no alarm".to_string()
        } else {
            v.join(", ")
        }
    };
    match &a.rounds {
        None => writeln!(
            f,
            "auth           {}-bit Wegman-Carter tags on every frame (POLYVAL + one-time pad): {} \
             forgeries accepted; key {:.2} % of the sifted bits",
            a.tag_bits,
            a.forgeries_accepted,
            100.0 * a.key_bits_per_sifted_bit
        )?,
        Some(rs) => {
            writeln!(
                f,
                "auth           one {}-bit Wegman-Carter tag per round of {} frames each way \
                 (POLYVAL outcome + one-time pad): rounds {} verified, {} failed; {} forged \
                 answers kept; {}",
                a.tag_bits,
                rs.frames_per_round,
                rs.verified,
                rs.failed.values().sum::<u64>(),
                a.forgeries_accepted,
                if rs.sifted_bits_kept > 0 {
                    format!(
                        "key {:.3} % of the kept sifted bits",
                        100.0 * a.key_bits_per_sifted_bit
                    )
                } else {
                    "no key kept".to_string()
                }
            )?;
            if !rs.failed_rounds.is_empty() {
                let why = rs
                    .failed
                    .iter()
                    .map(|(k, v)| format!("{k} {v}"))
                    .collect::<Vec<_>>()
                    .join(", ");
                writeln!(
                    f,
                    "  rounds       FAILED {:?} ({why}): {} sifted bits discarded; forged answers: \
                     {} taken, {} kept",
                    rs.failed_rounds,
                    rs.sifted_bits_discarded,
                    rs.forged_answers_taken,
                    rs.forged_answers_kept
                )?;
            }
        }
    }
    for (name, s) in [("rx", r), ("tx", t)] {
        let why = s
            .refused
            .iter()
            .map(|(k, v)| format!("{k} {v}"))
            .collect::<Vec<_>>()
            .join(", ");
        writeln!(
            f,
            "  {name} auth      tagged {}, verified {}, refused {}{}; key bits: {} used, {} wiped \
             unused, {} left; {}",
            s.frames_tagged,
            s.frames_verified,
            s.refused_total,
            if why.is_empty() {
                String::new()
            } else {
                format!(" ({why})")
            },
            s.key_bits_consumed,
            s.key_bits_abandoned,
            s.key_bits_left,
            alarm(s)
        )?;
    }
    if let Some(AttackSummary {
        mode: attack,
        stats: st,
    }) = &a.attack
    {
        writeln!(
            f,
            "  adversary    {attack:?}: {} frames forged, {} replayed, {} held back",
            st.forged, st.replayed, st.delayed
        )?;
    }
    Ok(())
}
