//! One capture through the core on the host, and the firmware's input files made from it.
//!
//! A [`Capture`] is all the comparison needs: the receiver setup, the TDC events, and the
//! transmitter's answer to each announcement. Captures of `slotwise simulate` come from
//! `simulated`, synthetic ones from `synth`.

use slotwise::formats::{self, AlarmEvent, KeyBlock, RecordType, Snapshot, Summary};
use slotwise::{Announcement, Answer, FrameSink, TdcEvent};
use slotwise_hil::transport::encode_event;
use slotwise_hil::{
    run, AnswerRecord, BoardFrameOut, BoardReceiver, EventSource, NoMeter, RecordingTx, Setup,
};
use std::convert::Infallible;
use std::fs;
use std::io;
use std::path::Path;

/// Answers the transmitter gives, one per announcement.
pub type AnswerFn = Box<dyn FnMut(Announcement) -> Answer>;

/// Everything one HIL comparison needs.
pub struct Capture {
    /// Name in reports.
    pub name: String,
    /// Receiver setup.
    pub setup: Setup,
    /// TDC events in arrival order.
    pub events: Vec<TdcEvent>,
    /// The transmitter's answers.
    pub answer: AnswerFn,
}

struct SliceEvents<'a> {
    events: &'a [TdcEvent],
    at: usize,
}

impl EventSource for SliceEvents<'_> {
    type Error = Infallible;
    fn read_events(&mut self, buf: &mut [TdcEvent]) -> Result<usize, Infallible> {
        let rest = self.events.get(self.at..).unwrap_or(&[]);
        let n = rest.len().min(buf.len());
        buf[..n].copy_from_slice(&rest[..n]);
        self.at += n;
        Ok(n)
    }
}

/// Frames collected in memory, delimiters included.
#[derive(Default)]
pub struct VecFrames {
    /// Every frame's bytes, back to back.
    pub bytes: Vec<u8>,
    /// Number of frames.
    pub frames: usize,
}

impl FrameSink for VecFrames {
    fn frame(&mut self, bytes: &[u8]) {
        self.bytes.extend_from_slice(bytes);
        self.frames += 1;
    }
}

/// What the host replay produced.
pub struct HostRun {
    /// Frames, back to back.
    pub frames: VecFrames,
    /// Answers given, in announcement order.
    pub answers: Vec<AnswerRecord>,
    /// The receiver's counters at the end.
    pub summary: Summary,
}

/// Run the capture through the core on the host with the shared run loop.
pub fn host_replay(capture: &mut Capture) -> io::Result<HostRun> {
    let cfg = capture.setup.receiver_config().map_err(invalid)?;
    let clock = capture.setup.clock().map_err(invalid)?;
    let mut rx = Box::new(BoardReceiver::new(cfg, clock));
    let mut answers = Vec::new();
    let mut out = Box::new(BoardFrameOut::new(VecFrames::default()));
    {
        let mut tx = RecordingTx::new(&mut capture.answer, |r| answers.push(r));
        let mut events = SliceEvents {
            events: &capture.events,
            at: 0,
        };
        let Ok(_) = run(&mut rx, &mut events, &mut tx, &mut out, &mut NoMeter);
    }
    let summary = Summary::of(&rx);
    let out = *out;
    Ok(HostRun {
        frames: out.into_sink(),
        answers,
        summary,
    })
}

fn invalid(e: impl std::fmt::Display) -> io::Error {
    io::Error::new(io::ErrorKind::InvalidInput, e.to_string())
}

/// Write `setup.bin`, `events.bin`, `answers.bin` (firmware inputs) and `frames-host.bin`.
pub fn write_inputs(dir: &Path, capture: &Capture, host: &HostRun) -> io::Result<()> {
    fs::create_dir_all(dir)?;
    let mut setup = vec![0u8; slotwise_hil::setup::MAX_SETUP_LEN];
    let n = capture.setup.encode(&mut setup).map_err(invalid)?;
    fs::write(dir.join("setup.bin"), &setup[..n])?;
    let events: Vec<u8> = capture.events.iter().flat_map(encode_event).collect();
    fs::write(dir.join("events.bin"), events)?;
    let answers: Vec<u8> = host.answers.iter().flat_map(|a| a.encode()).collect();
    fs::write(dir.join("answers.bin"), answers)?;
    fs::write(dir.join("frames-host.bin"), &host.frames.bytes)?;
    for stale in ["frames-fw.bin", "report-fw.txt"] {
        match fs::remove_file(dir.join(stale)) {
            Err(e) if e.kind() != io::ErrorKind::NotFound => return Err(e),
            _ => {}
        }
    }
    Ok(())
}

/// Split a frame stream at its 0x00 delimiters: (byte offset, frame bytes with delimiter).
pub fn split_frames(bytes: &[u8]) -> Vec<(usize, &[u8])> {
    let mut out = Vec::new();
    let mut start = 0;
    for (i, &b) in bytes.iter().enumerate() {
        if b == 0 {
            out.push((start, &bytes[start..=i]));
            start = i + 1;
        }
    }
    if start < bytes.len() {
        out.push((start, &bytes[start..]));
    }
    out
}

/// Check every frame of a stream decodes; returns the summary record. Errors name the file,
/// the frame and its byte offset.
pub fn check_stream(name: &str, bytes: &[u8]) -> Result<Summary, String> {
    let mut scratch = vec![0u8; formats::MAX_RAW + 8];
    let mut summary = None;
    for (k, (offset, f)) in split_frames(bytes).into_iter().enumerate() {
        let fr = formats::decode_frame(f, &mut scratch)
            .map_err(|e| format!("{name}: frame {k} at byte {offset}: {e}"))?;
        match fr.record {
            RecordType::KeyBlock => {
                KeyBlock::parse(fr.payload)
                    .map_err(|e| format!("{name}: key block {k} at byte {offset}: {e}"))?;
            }
            RecordType::Summary => {
                summary = Some(
                    Summary::parse(fr.payload)
                        .map_err(|e| format!("{name}: summary {k} at byte {offset}: {e}"))?,
                );
            }
            RecordType::Alarm => {
                AlarmEvent::parse(fr.payload)
                    .map_err(|e| format!("{name}: alarm record {k} at byte {offset}: {e}"))?;
            }
            RecordType::Stats => {
                Snapshot::parse(fr.payload)
                    .map_err(|e| format!("{name}: stats record {k} at byte {offset}: {e}"))?;
            }
            RecordType::RoundVerdict => {
                slotwise::formats::round::RoundVerdict::parse(fr.payload)
                    .map_err(|e| format!("{name}: round verdict {k} at byte {offset}: {e}"))?;
            }
            RecordType::Announce
            | RecordType::Answers
            | RecordType::KeyRefill
            | RecordType::RoundTag => {
                return Err(format!(
                    "{name}: frame {k} at byte {offset}: a {} record on the key-block stream",
                    fr.record
                ));
            }
        }
    }
    summary.ok_or_else(|| format!("{name}: no summary frame"))
}
