//! The run directory of the C interface's check, and the Rust reference it is compared with.
//!
//! `hil-host station` takes a profile blob (`slotwise profile compile`, with a raw-word layout)
//! and a capture of `slotwise simulate` with the public marker on, and writes:
//!
//! - `profile.swblob`: the blob with the capture's classical-channel hint;
//! - `words.bin`: the capture's events as raw TDC records in the blob's word layout, with a
//!   rollover record wherever the narrow time field wrapped;
//! - `answers-link.bin`: the transmitter's answers frames, each after the index of the announce
//!   frame it answers (the layout of [`slotwise_hil::link`]);
//! - `frames-ref.bin`, `announce-ref.bin`: what [`Station`] wrote on the host;
//! - with `--auth` (the classical channel round-authenticated, `docs/wire-protocol.md` §9.9):
//!   `auth.bin`, the key the station starts with (16-byte hash key, u32 LE frames per round,
//!   then the pre-shared pad words), and `refill-link.bin`, the post-processing host's key-refill
//!   records, each after the u32 LE index of the pump that pushes it (pumps counted from 0).
//!
//! The key is the simulator's stand-in key supply ([`KeySupply`]) under the link model's seed,
//! as `slotwise simulate` derives it for its authenticated demo, and the transmitter is the
//! simulator's in round mode with the mirror pool of the same supply.
//!
//! **The schedule** both sides follow, so their bytes can be compared: push [`CHUNK_BYTES`] bytes
//! of words; then *pump*: drain the announce bytes (counting frames by their 0x00 delimiters),
//! push the answers records released by the rule of [`slotwise_hil::link`] (announce frame k's
//! answers once frame k + 2 was sent; after the end of input, once frame k was sent) as far as
//! the station takes them, and drain the output records. At the end: `end_input`, pump, `finish`,
//! pump. Authenticated, each pump first pushes the refill records due (live: whenever the pool
//! has [`REFILL_AT_WORDS`] words free), and `finish` takes a second call (the transmitter's last
//! round tags arrive in the pump between): `end_input`, pump, `finish`, pump, `finish`, pump.
//! `firmware-c/examples/replay.c` does exactly this in C.
//!
//! The reference runs three times and every run must write the same bytes: with the host
//! transmitter answering live, from the recorded answers, and fed events instead of raw words
//! (the ingest path reproduces the capture's events exactly).

use serde_json::{json, Value};
use slotwise::formats::{encode_frame, refill, RecordType, MAX_FRAME, MAX_PAYLOAD, MAX_RAW};
use slotwise::words::{Endian, WordFormat};
use slotwise::TdcEvent;
use slotwise_hil::blob::{ProfileBlob, MAX_BLOB_LEN};
use slotwise_hil::link::ANSWER_LAG_FRAMES;
use slotwise_hil::station::STATION_KEY_WORDS;
use slotwise_hil::{Phase, Station};
use slotwise_sim::capture::read_all;
use slotwise_sim::clocks::simulated_hint;
use slotwise_sim::link::auth::{KeySupply, PRESHARED_WORDS};
use slotwise_sim::link::tx::{HostTransmitter, TX_KEY_WORDS};
use slotwise_sim::link::LinkModel;
use slotwise_sim::scenario::Scenario;
use std::collections::VecDeque;
use std::fs;
use std::path::Path;

/// Bytes of raw words per push (the C program uses the same figure).
pub const CHUNK_BYTES: usize = 4096;

/// Announce frames per authentication round of `--auth` unless told otherwise: small, so a
/// short capture closes many rounds.
pub const ROUND_FRAMES: u32 = 8;
/// Free pad words in the station's pool at which the live run pushes a refill record.
pub const REFILL_AT_WORDS: usize = 16;

/// The key an authenticated station starts with.
struct AuthSetup {
    hash_key: [u8; 16],
    round_frames: u32,
    preshared: Vec<u8>,
}

impl AuthSetup {
    /// `auth.bin`: hash key, u32 LE frames per round, pre-shared pad words.
    fn bytes(&self) -> Vec<u8> {
        let mut b = self.hash_key.to_vec();
        b.extend_from_slice(&self.round_frames.to_le_bytes());
        b.extend_from_slice(&self.preshared);
        b
    }
}

/// Where the key refills come from.
enum Refills<'a> {
    /// None: the run is not authenticated.
    Off,
    /// From the key supply whenever the pool has room; the records are kept.
    Live(KeySupply, Vec<u8>),
    /// Recorded records, read in order.
    Recorded(&'a [u8]),
}

/// A key-refill record for the station's pool, when it has [`REFILL_AT_WORDS`] words free and
/// the supply has key left.
fn refill_for(st: &Station, supply: &KeySupply) -> Option<Vec<u8>> {
    let pool = st.link().auth()?.pool();
    if pool.room() < REFILL_AT_WORDS {
        return None;
    }
    let n = pool.room().min(refill::MAX_WORDS) as u64;
    let key = supply.words(pool.end(), n);
    if key.is_empty() {
        return None;
    }
    let mut p = vec![0u8; MAX_PAYLOAD];
    let m = refill::emit(pool.end(), &key, &mut p).ok()?;
    let (mut raw, mut out) = (vec![0u8; MAX_RAW], vec![0u8; MAX_FRAME]);
    let len = encode_frame(RecordType::KeyRefill, 0, &p[..m], &mut raw, &mut out).ok()?;
    out.truncate(len);
    Some(out)
}

/// Top the transmitter's mirror pool up from the same supply (as the simulator's link does).
fn refill_tx(tx: &mut HostTransmitter, supply: &KeySupply) {
    while let Some(a) = tx.auth() {
        let (end, room) = (a.pool().end(), a.pool().room());
        if room < refill::MAX_WORDS {
            break;
        }
        let key = supply.words(end, refill::MAX_WORDS as u64);
        if key.is_empty() || tx.refill(end, &key).is_err() {
            break;
        }
    }
}

/// The capture's events as raw records of `format`; rollover records where the time field wraps.
pub fn encode_words(events: &[TdcEvent], format: &WordFormat) -> Result<Vec<u8>, String> {
    let l = format.layout();
    let kind = l
        .kind
        .ok_or("the word layout has no kind field, so it cannot carry rollover records")?;
    let w = u32::from(l.time.width);
    let max_count = if kind.rollover_count.width == 0 {
        1
    } else {
        (1u64 << kind.rollover_count.width.min(32)) - 1
    };
    let mut out = Vec::with_capacity(events.len() * usize::from(l.record_bytes));
    let mut put = |word: u64| {
        let bytes = word.to_le_bytes();
        let rec = &bytes[..usize::from(l.record_bytes)];
        match l.endian {
            Endian::Little => out.extend_from_slice(rec),
            Endian::Big => out.extend(rec.iter().rev()),
        }
    };
    let field = |v: u64, f: slotwise::words::BitField| (v & ((1u64 << f.width) - 1)) << f.offset;
    let mut wraps = 0u64;
    for ev in events {
        let need = ev.count >> w;
        if need < wraps {
            return Err(format!(
                "event counts fall back at count {}: the capture is not in time order",
                ev.count
            ));
        }
        while wraps < need {
            let n = (need - wraps).min(max_count);
            let count = if kind.rollover_count.width == 0 { 0 } else { n };
            put(field(u64::from(kind.rollover), kind.field) | field(count, kind.rollover_count));
            wraps += n;
        }
        if ev.channel > l.max_channel {
            return Err(format!("channel {} above the layout's maximum", ev.channel));
        }
        put(field(ev.count, l.time)
            | field(u64::from(ev.channel), l.channel)
            | field(u64::from(kind.event), kind.field));
    }
    Ok(out)
}

/// Where the transmitter's answers come from.
enum Answers<'a> {
    /// The host transmitter answers each announce frame as it is drained; records are kept.
    Live(Box<HostTransmitter>, Vec<u8>),
    /// Recorded records, read in order.
    Recorded(&'a [u8]),
}

/// One run of the schedule.
struct Pump<'a> {
    st: Box<Station>,
    answers: Answers<'a>,
    /// Records (index, frame) not yet pushed, in order.
    held: VecDeque<Record>,
    /// Bytes of the first held frame already pushed.
    pushed: usize,
    partial: Vec<u8>,
    written: u32,
    ended: bool,
    announce: Vec<u8>,
    frames: Vec<u8>,
    refills: Refills<'a>,
    /// Pumps done so far.
    pumps: u32,
}

impl Pump<'_> {
    fn pump(&mut self) -> Result<(), String> {
        let at = self.pumps;
        self.pumps += 1;
        match &mut self.refills {
            Refills::Off => {}
            Refills::Live(supply, log) => {
                if let Answers::Live(tx, _) = &mut self.answers {
                    refill_tx(tx, supply);
                }
                while let Some(frame) = refill_for(&self.st, supply) {
                    self.st.push_refill(&frame).map_err(|e| e.to_string())?;
                    log.extend_from_slice(&at.to_le_bytes());
                    log.extend_from_slice(&frame);
                }
            }
            Refills::Recorded(rest) => {
                while let Some(((index, frame), tail)) = next_record(rest) {
                    if index > at {
                        break;
                    }
                    self.st.push_refill(&frame).map_err(|e| e.to_string())?;
                    *rest = tail;
                }
            }
        }
        let mut buf = [0u8; 1024];
        loop {
            let n = self.st.drain_link(&mut buf);
            if n == 0 {
                break;
            }
            self.announce.extend_from_slice(&buf[..n]);
            for &b in &buf[..n] {
                self.partial.push(b);
                if b != 0 {
                    continue;
                }
                if let Answers::Live(tx, log) = &mut self.answers {
                    for a in tx.receive(&self.partial) {
                        log.extend_from_slice(&self.written.to_le_bytes());
                        log.extend_from_slice(&a);
                        self.held.push_back((self.written, a));
                    }
                }
                self.partial.clear();
                self.written += 1;
            }
        }
        if let Answers::Recorded(rest) = &mut self.answers {
            while let Some((rec, tail)) = next_record(rest) {
                self.held.push_back(rec);
                *rest = tail;
            }
        }
        while let Some((index, frame)) = self.held.front() {
            let released =
                self.written > *index && (self.ended || self.written - index > ANSWER_LAG_FRAMES);
            if !released {
                break;
            }
            let taken = self.st.push_link(&frame[self.pushed..]);
            self.pushed += taken;
            if self.pushed < frame.len() {
                break;
            }
            self.held.pop_front();
            self.pushed = 0;
        }
        loop {
            let n = self.st.drain_frames(&mut buf);
            if n == 0 {
                break;
            }
            self.frames.extend_from_slice(&buf[..n]);
        }
        Ok(())
    }
}

/// An answers record: the announce frame's index and the answers frame through its 0x00.
type Record = (u32, Vec<u8>);

/// The next record of an answers stream, and the bytes after it.
fn next_record(bytes: &[u8]) -> Option<(Record, &[u8])> {
    let index = u32::from_le_bytes(bytes.get(..4)?.try_into().ok()?);
    let end = bytes.get(4..)?.iter().position(|&b| b == 0)? + 5;
    Some(((index, bytes[4..end].to_vec()), &bytes[end..]))
}

/// Records in a recorded stream.
fn next_records(mut bytes: &[u8]) -> usize {
    let mut n = 0;
    while let Some((_, rest)) = next_record(bytes) {
        bytes = rest;
        n += 1;
    }
    n
}

/// Turn the middle record into an unknown kind and drop the last rollover record; returns the
/// events lost (the one turned malformed).
fn damage(words: &mut Vec<u8>, format: &WordFormat) -> Result<u64, String> {
    let l = format.layout();
    let n = usize::from(l.record_bytes);
    let kind = l.kind.ok_or("no kind field")?;
    let kind_of = |rec: &[u8]| {
        let mut b = [0u8; 8];
        b[..n].copy_from_slice(rec);
        let w = match l.endian {
            Endian::Little => u64::from_le_bytes(b),
            Endian::Big => u64::from_be_bytes(b) >> (64 - 8 * n),
        };
        (w >> kind.field.offset) & ((1 << kind.field.width) - 1)
    };
    let unknown = (0..1u64 << kind.field.width)
        .find(|&k| k != u64::from(kind.event) && k != u64::from(kind.rollover))
        .ok_or("the kind field has no spare value")?;
    let records = words.len() / n;
    let mid = (records / 2..records)
        .find(|&i| kind_of(&words[i * n..(i + 1) * n]) == u64::from(kind.event))
        .ok_or("no event record after the middle")?;
    for bit in 0..kind.field.width {
        let at = usize::from(kind.field.offset + bit);
        let byte = match l.endian {
            Endian::Little => mid * n + at / 8,
            Endian::Big => mid * n + n - 1 - at / 8,
        };
        let mask = 1u8 << (at % 8);
        if (unknown >> bit) & 1 == 1 {
            words[byte] |= mask;
        } else {
            words[byte] &= !mask;
        }
    }
    let last_rollover = (0..records)
        .rev()
        .find(|&i| kind_of(&words[i * n..(i + 1) * n]) == u64::from(kind.rollover))
        .ok_or("no rollover record to lose")?;
    words.drain(last_rollover * n..(last_rollover + 1) * n);
    Ok(1)
}

/// A record stream without its last frame, and that frame's summary.
fn split_summary(frames: &[u8]) -> Result<(&[u8], slotwise::Summary), String> {
    let body_end = frames
        .get(..frames.len().saturating_sub(1))
        .and_then(|f| f.iter().rposition(|&b| b == 0))
        .map_or(0, |i| i + 1);
    let last = &frames[body_end..frames.len().saturating_sub(1)];
    let mut scratch = vec![0u8; slotwise::formats::MAX_RAW + 8];
    let f = slotwise::formats::decode_frame(last, &mut scratch).map_err(|e| e.to_string())?;
    let s = slotwise::Summary::parse(f.payload).map_err(|e| e.to_string())?;
    Ok((&frames[..body_end], s))
}

/// What one run wrote.
struct Run {
    frames: Vec<u8>,
    announce: Vec<u8>,
    records: Vec<u8>,
    counts: slotwise_hil::StationCounts,
    summary: slotwise::Summary,
    /// Detections taken in after each push (where the schedule pumped).
    cuts: Vec<u64>,
    /// The refill records pushed (live runs).
    refills: Vec<u8>,
}

fn run(
    blob: &[u8],
    input: Input<'_>,
    answers: Answers<'_>,
    auth: Option<(&AuthSetup, Refills<'_>)>,
) -> Result<Run, String> {
    let mut st = Box::new(Station::new(blob).map_err(|e| e.to_string())?);
    let refills = match auth {
        Some((a, r)) => {
            st.authenticate(a.hash_key, &a.preshared, a.round_frames)
                .map_err(|e| e.to_string())?;
            r
        }
        None => Refills::Off,
    };
    let mut p = Pump {
        st,
        answers,
        held: VecDeque::new(),
        pushed: 0,
        partial: Vec::new(),
        written: 0,
        ended: false,
        announce: Vec::new(),
        frames: Vec::new(),
        refills,
        pumps: 0,
    };
    let mut cuts = Vec::new();
    match input {
        Input::Words(w) => {
            for chunk in w.chunks(CHUNK_BYTES) {
                p.st.push_words(chunk).map_err(|e| e.to_string())?;
                p.pump()?;
                cuts.push(p.st.counts().totals.detections);
            }
        }
        Input::Events(ev, at) => {
            let mut from = 0;
            for &to in at {
                let chunk = ev
                    .get(from as usize..to as usize)
                    .ok_or("cut past the events")?;
                p.st.push_events(chunk).map_err(|e| e.to_string())?;
                p.pump()?;
                from = to;
            }
        }
    }
    p.st.end_input().map_err(|e| e.to_string())?;
    p.ended = true;
    p.pump()?;
    p.st.finish().map_err(|e| e.to_string())?;
    p.pump()?;
    if p.st.phase() == Phase::Closing {
        p.st.finish().map_err(|e| e.to_string())?;
        p.pump()?;
    }
    let records = match p.answers {
        Answers::Live(_, log) => log,
        Answers::Recorded(_) => Vec::new(),
    };
    let refills = match p.refills {
        Refills::Live(_, log) => log,
        _ => Vec::new(),
    };
    Ok(Run {
        frames: p.frames,
        announce: p.announce,
        records,
        counts: p.st.counts(),
        summary: p.st.summary(),
        cuts,
        refills,
    })
}

enum Input<'a> {
    Words(&'a [u8]),
    /// Events, pushed in pieces ending at these counts (the words run's pump points).
    Events(&'a [TdcEvent], &'a [u64]),
}

/// Make the run directory and the reference; returns the reference's summary line.
///
/// With `faults`, the raw words are damaged the way a TDC link goes wrong: the record at the
/// middle becomes one of an unknown kind (malformed), and the last rollover record is lost (the
/// counter falls back: a rollover gap). The events path is then not compared (the events differ).
///
/// With `auth_rounds` (`--auth`), the classical channel is round-authenticated with rounds of
/// that many announce frames, and every round must verify.
pub fn prepare(
    profile: &Path,
    capture: &Path,
    out: &Path,
    faults: bool,
    auth_rounds: Option<u32>,
) -> Result<Value, String> {
    let source = capture.display().to_string();
    let blob = fs::read(profile).map_err(|e| format!("{}: {e}", profile.display()))?;
    let mut p = ProfileBlob::decode(&blob).map_err(|e| format!("{}: {e}", profile.display()))?;
    let format = p.words.ok_or_else(|| {
        format!(
            "{}: the profile has no raw-word layout (slotwise profile compile --words ...)",
            profile.display()
        )
    })?;
    let (header, events) = read_all(capture).map_err(|e| e.to_string())?;
    let s = Scenario::from_toml_str(&header.metadata, &format!("{source}: header metadata"))
        .map_err(|e| e.to_string())?;
    (p.board.hint_t_ps, p.board.hint_tx_slot) =
        simulated_hint(&s).map_err(|e| format!("{source}: {e}"))?;
    let mut b = vec![0u8; MAX_BLOB_LEN];
    let n = p.encode(&mut b).map_err(|e| e.to_string())?;
    b.truncate(n);
    let mut words = encode_words(&events, &format)?;
    let damaged = if faults {
        damage(&mut words, &format)?
    } else {
        0
    };
    let model = LinkModel::perfect(&s);
    let supply = KeySupply::new(model.seed, model.auth_key_words);
    let auth = auth_rounds.map(|round_frames| AuthSetup {
        hash_key: supply.hash_key(),
        round_frames,
        preshared: supply.words(0, PRESHARED_WORDS.min(STATION_KEY_WORDS as u64)),
    });
    let mut tx = HostTransmitter::new(&s, model.test_fraction);
    if let Some(a) = &auth {
        tx = tx.with_round_auth(Box::new(supply.end::<TX_KEY_WORDS>()?), a.round_frames)?;
    }
    let live = run(
        &b,
        Input::Words(&words),
        Answers::Live(Box::new(tx), Vec::new()),
        auth.as_ref()
            .map(|a| (a, Refills::Live(supply, Vec::new()))),
    )?;
    let recorded = || auth.as_ref().map(|a| (a, Refills::Recorded(&live.refills)));
    let again = run(
        &b,
        Input::Words(&words),
        Answers::Recorded(&live.records),
        recorded(),
    )?;
    let evs = run(
        &b,
        Input::Events(&events, &live.cuts),
        Answers::Recorded(&live.records),
        recorded(),
    )?;
    if again.frames != live.frames || again.announce != live.announce {
        return Err(format!(
            "{source}: the station fed recorded answers wrote other bytes than with the \
             transmitter answering live"
        ));
    }
    // Fed events, the ingest stage counts no blocks: the summaries differ there and only there.
    let (ev_body, ev_sum) = split_summary(&evs.frames)?;
    let (w_body, w_sum) = split_summary(&live.frames)?;
    let differ = ev_body != w_body
        || ev_sum.with_ingest(w_sum.ingest) != w_sum
        || evs.announce != live.announce;
    if !faults && differ {
        return Err(format!(
            "{source}: the station fed events wrote other bytes than fed the same events as raw \
             words"
        ));
    }
    let acc = &live.summary.accounting;
    if acc.total() != live.summary.detections_in
        || live.summary.detections_in + damaged != events.len() as u64
    {
        return Err(format!(
            "{source}: accounting sums to {} for {} detections of {} events",
            acc.total(),
            live.summary.detections_in,
            events.len()
        ));
    }
    let a = live.counts.auth.unwrap_or_default();
    if auth.is_some() && (a.rounds.verified == 0 || a.rounds.failed() > 0) {
        return Err(format!(
            "{source}: authenticated, {} rounds verified and {} failed: every round must verify",
            a.rounds.verified,
            a.rounds.failed()
        ));
    }
    fs::create_dir_all(out).map_err(|e| format!("{}: {e}", out.display()))?;
    let auth_bin = auth.as_ref().map(AuthSetup::bytes);
    let mut files = vec![
        ("profile.swblob", &b),
        ("words.bin", &words),
        ("answers-link.bin", &live.records),
        ("frames-ref.bin", &live.frames),
        ("announce-ref.bin", &live.announce),
    ];
    if let Some(k) = &auth_bin {
        files.push(("auth.bin", k));
        files.push(("refill-link.bin", &live.refills));
    } else {
        // A directory used before for an authenticated run must not authenticate the C replay.
        for name in ["auth.bin", "refill-link.bin"] {
            let _ = fs::remove_file(out.join(name));
        }
    }
    for (name, bytes) in files {
        let path = out.join(name);
        fs::write(&path, bytes).map_err(|e| format!("{}: {e}", path.display()))?;
    }
    let c = &live.counts;
    Ok(json!({
        "capture": source,
        "detections": live.summary.detections_in,
        "sifted_bits": live.summary.sifted_bits,
        "words_bytes": words.len(),
        "frames_out": c.frames_out,
        "frames_dropped": c.frames_dropped,
        "link_in_refused_bytes": c.link_in_refused_bytes,
        "rollover_gaps": c.ingest.rollover_gaps,
        "malformed_words": c.ingest.malformed_words,
        "station_bytes": std::mem::size_of::<Station>(),
        "authenticated": auth.is_some(),
        "round_frames": auth_rounds,
        "rounds_kept": a.rounds.verified,
        "rounds_discarded": a.rounds.failed(),
        "verdict_frames": c.totals.verdict_frames,
        "refill_records": next_records(&live.refills),
        "key_bits_loaded": a.counters.key_bits_loaded,
        "key_bits_consumed": a.counters.key_bits_consumed,
        "key_bits_left": a.key_bits_left,
        "attack_alarm": a.attack_alarm,
        "low_key_alarm": a.low_key_alarm,
    }))
}
