//! `slotwise profile compile`: a receiver profile as the bytes a board reads (the profile blob
//! of `slotwise_hil::blob`: setup, board settings and, optionally, the TDC's raw-word layout).
//!
//! The blob carries what the host's replay of the same profile would build: the core's receiver
//! configuration, the recovered clock's settings from `[clock]` (as `--clock recovered` replays
//! use them), the marker numbering, the link's timeouts, the monitor and the alarms.

use crate::clocks::{recovered_params_for, REACQUIRE_PPM};
use crate::profile::{Checked, Profile};
use slotwise::fixed::types::U32F32;
use slotwise::wire::LinkConfig;
use slotwise::words::{BitField, Endian, KindField, WordFormat, WordLayout};
use slotwise_hil::blob::{ProfileBlob, MAX_BLOB_LEN};
use slotwise_hil::{BoardSettings, Setup};

/// Flush age of the board's announce batches, in slots (as the host's perfect framed link).
pub const FLUSH_AGE_SLOTS: u64 = 5000;

/// The blob of a checked profile; `hint` is the classical channel's (receiver time ps,
/// transmitter slot) when known at compile time, `words` the TDC's raw-word layout.
pub fn compile(
    p: &Profile,
    c: &Checked,
    hint: Option<(u64, u64)>,
    words: Option<WordFormat>,
    source: &str,
) -> Result<Vec<u8>, String> {
    let err = |what: &str, e: &dyn std::fmt::Display| format!("{source}: {what}: {e}");
    if c.frame.is_none() {
        return Err(format!(
            "{source}: [marker]: the board's receiver numbers slots through the public marker; \
             enable it (marker.enabled = true)"
        ));
    }
    let r = &c.receiver;
    let setup = Setup {
        tdc: *r.tdc(),
        gates: *r.gates(),
        period_ps: U32F32::from_num(p.period_ps()),
        origin_ps: 0,
        intensities: r.intensities(),
        answer_timeout_slots: r.answer_timeout_slots(),
        overflow: p.sifting.overflow.policy(),
        squash_seed: p.sifting.squash_seed,
    };
    let (acquire, track) = recovered_params_for(&p.clock, p.clock.prior_ppm);
    let (hint_t_ps, hint_tx_slot) = hint.unwrap_or((0, 0));
    let board = BoardSettings {
        acquire,
        track,
        reacquire_ppm: REACQUIRE_PPM,
        hint_t_ps,
        hint_tx_slot,
        link: LinkConfig::new(r.answer_timeout_slots(), FLUSH_AGE_SLOTS)
            .map_err(|e| err("sifting.answer_timeout_ms", &e))?,
        block_ps: c.stats.block_ps(),
        dead_time_ps: c.stats.dead_time_ps(),
        alarms: c.alarms,
    };
    board.recovered_config().map_err(|e| err("[clock]", &e))?;
    let blob = ProfileBlob {
        setup,
        board,
        words,
    };
    let mut out = vec![0u8; MAX_BLOB_LEN];
    let n = blob.encode(&mut out).map_err(|e| err("blob", &e))?;
    out.truncate(n);
    let back = ProfileBlob::decode(&out).map_err(|e| err("blob read back", &e))?;
    if back != blob {
        return Err(format!("{source}: the blob does not read back as written"));
    }
    Ok(out)
}

/// Parse a raw-word layout: comma-separated `key=value` items, e.g.
/// `bytes=8,endian=little,time=0:32,channel=32:8,kind=40:8,event=1,rollover=2,max-channel=7`
/// (fields as `OFFSET:WIDTH` in bits; optional `count=OFFSET:WIDTH` for a rollover record's
/// wrap count). The layout is checked by the core.
pub fn parse_words(spec: &str) -> Result<WordFormat, String> {
    let mut l = WordLayout {
        record_bytes: 8,
        endian: Endian::Little,
        time: BitField::new(0, 0),
        channel: BitField::new(0, 0),
        kind: None,
        max_channel: 255,
    };
    let (mut kind, mut event, mut rollover, mut count) = (None, 0u8, 1u8, BitField::new(0, 0));
    let field = |v: &str| -> Result<BitField, String> {
        let (o, w) = v
            .split_once(':')
            .ok_or_else(|| format!("expected OFFSET:WIDTH in bits, got {v:?}"))?;
        let n = |t: &str| {
            t.trim()
                .parse::<u8>()
                .map_err(|_| format!("{t:?} is not 0..=255"))
        };
        Ok(BitField::new(n(o)?, n(w)?))
    };
    let num = |v: &str| {
        v.trim()
            .parse::<u8>()
            .map_err(|_| format!("{v:?} is not 0..=255"))
    };
    for item in spec.split(',').map(str::trim).filter(|i| !i.is_empty()) {
        let (k, v) = item
            .split_once('=')
            .ok_or_else(|| format!("--words item {item:?}: expected KEY=VALUE"))?;
        let at = |e: String| format!("--words {k}: {e}");
        match k.trim() {
            "bytes" => l.record_bytes = num(v).map_err(at)?,
            "endian" => {
                l.endian = match v.trim() {
                    "little" => Endian::Little,
                    "big" => Endian::Big,
                    other => return Err(at(format!("{other:?} is neither little nor big"))),
                }
            }
            "time" => l.time = field(v).map_err(at)?,
            "channel" => l.channel = field(v).map_err(at)?,
            "kind" => kind = Some(field(v).map_err(at)?),
            "event" => event = num(v).map_err(at)?,
            "rollover" => rollover = num(v).map_err(at)?,
            "count" => count = field(v).map_err(at)?,
            "max-channel" => l.max_channel = num(v).map_err(at)?,
            other => {
                return Err(format!(
                    "--words: unknown key {other:?} (bytes, endian, time, channel, kind, event, \
                     rollover, count, max-channel)"
                ))
            }
        }
    }
    l.kind = kind.map(|field| KindField {
        field,
        event,
        rollover,
        rollover_count: count,
    });
    WordFormat::new(l).map_err(|e| format!("--words: {e}"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scenario::Scenario;

    #[test]
    fn the_default_receiver_compiles_and_reads_back_with_its_word_layout() {
        let s = Scenario::default_bench();
        let p = Profile::from_scenario(&s);
        let c = p.check("default").unwrap();
        let w = parse_words("bytes=8,time=0:32,channel=32:8,kind=40:8,event=1,rollover=2").unwrap();
        let blob = compile(&p, &c, Some((7, 9)), Some(w), "default").unwrap();
        let back = ProfileBlob::decode(&blob).unwrap();
        assert_eq!(back.words, Some(w));
        assert_eq!((back.board.hint_t_ps, back.board.hint_tx_slot), (7, 9));
        assert_eq!(back.setup.gates, *c.receiver.gates());
        assert_eq!(back.board.alarms, c.alarms);
    }

    #[test]
    fn a_damaged_blob_is_refused_naming_the_field_and_its_offset() {
        let s = Scenario::default_bench();
        let p = Profile::from_scenario(&s);
        let c = p.check("default").unwrap();
        let mut blob = compile(&p, &c, None, None, "default").unwrap();
        let setup_len = blob.len() - slotwise_hil::board::BOARD_LEN;
        blob[setup_len] ^= 0xff;
        let e = ProfileBlob::decode(&blob).unwrap_err().to_string();
        assert!(
            e.contains("magic") && e.contains(&setup_len.to_string()),
            "{e}"
        );
    }

    #[test]
    fn word_layouts_are_checked_by_the_core() {
        assert!(parse_words("bytes=8,time=0:32,channel=16:8").is_err());
        assert!(parse_words("bytes=3,time=0:16").is_err());
        assert!(parse_words("bytes=4,time=0:24,wat=1").is_err());
    }
}
